//! Counters and latency histograms in the Prometheus text exposition format (version 0.0.4),
//! kept by hand: a few maps behind mutexes are all this needs.

use std::collections::BTreeMap;
use std::fmt::Write;
use std::sync::Mutex;

/// Upper bounds of the latency buckets, in seconds.
const BUCKETS: [f64; 12] = [
    0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5,
];

#[derive(Default)]
struct Latency {
    count: u64,
    sum: f64,
    /// Non-cumulative counts per bucket; the last entry is +Inf.
    buckets: [u64; BUCKETS.len() + 1],
}

#[derive(Default)]
pub struct Metrics {
    /// (route pattern, method, status) -> latency
    requests: Mutex<BTreeMap<(String, String, u16), Latency>>,
    /// (model id, version, outcome) -> count
    decisions: Mutex<BTreeMap<(String, String, &'static str), u64>>,
    /// (model id, version, distribution) -> the PSI of the latest stability report, set when a
    /// report is computed (on demand), never on a scrape.
    stability: Mutex<BTreeMap<(String, String, String), f64>>,
}

/// A label value as the text format writes it (backslash, quote and newline escaped).
fn label(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

/// Methods counted by name; any other is counted as `other`, so a client cannot grow the label
/// set (and the exposition) by inventing method names.
const METHODS: [&str; 7] = ["GET", "POST", "HEAD", "PUT", "DELETE", "PATCH", "OPTIONS"];

impl Metrics {
    /// One request: `route` is the matched route pattern (or `unmatched`), never the raw path.
    pub fn observe_request(&self, route: &str, method: &str, status: u16, seconds: f64) {
        let method = METHODS
            .iter()
            .find(|m| **m == method)
            .copied()
            .unwrap_or("other");
        let mut map = self.requests.lock().unwrap_or_else(|e| e.into_inner());
        let l = map
            .entry((route.to_string(), method.to_string(), status))
            .or_default();
        l.count += 1;
        l.sum += seconds;
        let i = BUCKETS
            .iter()
            .position(|&b| seconds <= b)
            .unwrap_or(BUCKETS.len());
        l.buckets[i] += 1;
    }

    pub fn observe_decision(&self, model: &str, version: &str, outcome: &'static str) {
        let mut map = self.decisions.lock().unwrap_or_else(|e| e.into_inner());
        *map.entry((model.to_string(), version.to_string(), outcome))
            .or_default() += 1;
    }

    /// The latest stability report's PSI per distribution, for the gauges.
    pub fn observe_stability(&self, model: &str, version: &str, psi: &[(String, f64)]) {
        let mut map = self.stability.lock().unwrap_or_else(|e| e.into_inner());
        for (name, value) in psi {
            map.insert(
                (model.to_string(), version.to_string(), name.clone()),
                *value,
            );
        }
    }

    pub fn render(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(
            s,
            "# HELP plumbline_http_requests_total HTTP requests by route, method and status."
        );
        let _ = writeln!(s, "# TYPE plumbline_http_requests_total counter");
        let requests = self.requests.lock().unwrap_or_else(|e| e.into_inner());
        for ((route, method, status), l) in requests.iter() {
            let _ = writeln!(s, "plumbline_http_requests_total{{route=\"{route}\",method=\"{method}\",status=\"{status}\"}} {}", l.count);
        }
        let _ = writeln!(
            s,
            "# HELP plumbline_http_request_duration_seconds Time from request to response."
        );
        let _ = writeln!(
            s,
            "# TYPE plumbline_http_request_duration_seconds histogram"
        );
        for ((route, method, status), l) in requests.iter() {
            let labels = format!("route=\"{route}\",method=\"{method}\",status=\"{status}\"");
            let mut cumulative = 0;
            for (i, b) in BUCKETS.iter().enumerate() {
                cumulative += l.buckets[i];
                let _ = writeln!(s, "plumbline_http_request_duration_seconds_bucket{{{labels},le=\"{b}\"}} {cumulative}");
            }
            cumulative += l.buckets[BUCKETS.len()];
            let _ = writeln!(s, "plumbline_http_request_duration_seconds_bucket{{{labels},le=\"+Inf\"}} {cumulative}");
            let _ = writeln!(
                s,
                "plumbline_http_request_duration_seconds_sum{{{labels}}} {}",
                l.sum
            );
            let _ = writeln!(
                s,
                "plumbline_http_request_duration_seconds_count{{{labels}}} {}",
                l.count
            );
        }
        drop(requests);
        let _ = writeln!(
            s,
            "# HELP plumbline_decisions_total Decisions made, by model and outcome."
        );
        let _ = writeln!(s, "# TYPE plumbline_decisions_total counter");
        for ((model, version, outcome), n) in self
            .decisions
            .lock()
            .unwrap_or_else(|e| e.into_inner())
            .iter()
        {
            let _ = writeln!(s, "plumbline_decisions_total{{model=\"{model}\",version=\"{version}\",outcome=\"{outcome}\"}} {n}");
        }
        let _ = writeln!(s, "# HELP plumbline_stability_psi Population stability index of the score and of each field, from the latest stability report per model (GET /v1/monitoring/stability computes it).");
        let _ = writeln!(s, "# TYPE plumbline_stability_psi gauge");
        for ((model, version, name), v) in (self.stability.lock())
            .unwrap_or_else(|e| e.into_inner())
            .iter()
        {
            let (m, ver, n) = (label(model), label(version), label(name));
            let _ = writeln!(s, "plumbline_stability_psi{{model=\"{m}\",version=\"{ver}\",distribution=\"{n}\"}} {v}");
        }
        s
    }
}

/// The recorder's group commits: commits and the decision records they held (records / commits
/// is the mean group; a sync is paid per commit).
pub fn render_recorder(s: &mut String, commits: u64, records: u64) {
    let _ = writeln!(
        s,
        "# HELP plumbline_record_commits_total Group commits of decision records."
    );
    let _ = writeln!(s, "# TYPE plumbline_record_commits_total counter");
    let _ = writeln!(s, "plumbline_record_commits_total {commits}");
    let _ = writeln!(
        s,
        "# HELP plumbline_records_committed_total Decision records those commits handled (a repeated idempotency key's answer from its stored record included)."
    );
    let _ = writeln!(s, "# TYPE plumbline_records_committed_total counter");
    let _ = writeln!(s, "plumbline_records_committed_total {records}");
}
