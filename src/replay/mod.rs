//! QA replay: recorded requests decided again by another model (or service), each compared with
//! the recorded response. Used to show what a challenger changes against the champion's records
//! before it goes live.
//!
//! Comparison, most severe first: the outcome (a decision flip), the reasons (set or order),
//! the probability beyond a tolerance or the score (probability-only change), else unchanged.
//! A request the new side refuses is an error, also a change.

mod junit;

pub use junit::junit_xml;

use serde::Serialize;
use serde_json::Value;
use std::collections::BTreeMap;

/// One recorded request and the response given for it.
#[derive(Debug, Clone)]
pub struct Case {
    /// Where it came from (file name, or decision id of a records export).
    pub name: String,
    pub request: Value,
    pub response: Value,
}

/// How one replayed decision compares.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Change {
    Unchanged,
    ProbabilityOnly,
    Reasons,
    DecisionFlip,
    Error,
}

impl Change {
    /// As written in JSON and JUnit.
    pub fn name(self) -> &'static str {
        match self {
            Change::Unchanged => "unchanged",
            Change::ProbabilityOnly => "probability_only",
            Change::Reasons => "reasons",
            Change::DecisionFlip => "decision_flip",
            Change::Error => "error",
        }
    }
}

#[derive(Debug, Clone, Serialize)]
pub struct Compared {
    pub name: String,
    pub application_id: String,
    pub change: Change,
    pub outcome: (String, String),
    pub probability: (f64, f64),
    pub score: (i64, i64),
    pub reasons: (Vec<String>, Vec<String>),
    /// Set for `error`: why the new side refused the request.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

impl Compared {
    pub fn probability_delta(&self) -> f64 {
        self.probability.1 - self.probability.0
    }

    /// One line for people.
    pub fn describe(&self) -> String {
        match self.change {
            Change::Error => format!(
                "the new side refused it: {}",
                self.error.as_deref().unwrap_or("")
            ),
            Change::DecisionFlip => format!("{} -> {}", self.outcome.0, self.outcome.1),
            Change::Reasons => format!(
                "reasons {} -> {}",
                self.reasons.0.join(","),
                self.reasons.1.join(",")
            ),
            Change::ProbabilityOnly => format!(
                "probability {:.6} -> {:.6}, score {} -> {}",
                self.probability.0, self.probability.1, self.score.0, self.score.1
            ),
            Change::Unchanged => "unchanged".into(),
        }
    }
}

fn codes(response: &Value) -> Vec<String> {
    (response["reasons"].as_array())
        .map(|a| {
            a.iter()
                .filter_map(|r| r["code"].as_str().map(String::from))
                .collect()
        })
        .unwrap_or_default()
}

fn text(v: &Value) -> String {
    v.as_str().unwrap_or_default().to_string()
}

/// Compares a recorded response with a new one (`Err`: the new side's refusal).
pub fn compare(case: &Case, new: Result<Value, String>, tolerance: f64) -> Compared {
    let old = &case.response;
    let (new, error) = match new {
        Ok(v) => (v, None),
        Err(e) => (Value::Null, Some(e)),
    };
    let pair = |key: &str| (text(&old[key]), text(&new[key]));
    let p = (
        old["probability_of_default"].as_f64().unwrap_or(f64::NAN),
        new["probability_of_default"].as_f64().unwrap_or(f64::NAN),
    );
    let score = (
        old["score"].as_i64().unwrap_or(0),
        new["score"].as_i64().unwrap_or(0),
    );
    let reasons = (codes(old), codes(&new));
    let outcome = pair("outcome");
    let change = if error.is_some() {
        Change::Error
    } else if outcome.0 != outcome.1 {
        Change::DecisionFlip
    } else if reasons.0 != reasons.1 {
        Change::Reasons
    } else if (p.1 - p.0).abs() > tolerance || p.1.is_nan() || p.0.is_nan() || score.0 != score.1 {
        Change::ProbabilityOnly
    } else {
        Change::Unchanged
    };
    Compared {
        name: case.name.clone(),
        application_id: text(&case.request["application_id"]),
        change,
        outcome,
        probability: p,
        score,
        reasons,
        error,
    }
}

/// The whole comparison, for the summary, JSON and JUnit outputs.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    pub against: String,
    pub tolerance: f64,
    pub compared: usize,
    pub unchanged: usize,
    pub probability_only: usize,
    pub reason_changes: usize,
    /// Of the reason changes, how many keep the same set in another order.
    pub reason_order_only: usize,
    pub decision_flips: usize,
    pub errors: usize,
    /// Recorded outcome -> new outcome -> count (flips and non-flips).
    pub swap_set: BTreeMap<String, BTreeMap<String, usize>>,
    /// The largest probability movers among the changed cases, largest first.
    pub largest_movers: Vec<Compared>,
    /// Every case that changed, in source order.
    pub changes: Vec<Compared>,
}

/// Movers listed in a report.
pub const MOVERS: usize = 10;

impl Report {
    pub fn new(against: &str, tolerance: f64, results: Vec<Compared>) -> Report {
        let count = |c: Change| results.iter().filter(|r| r.change == c).count();
        let mut swap_set: BTreeMap<String, BTreeMap<String, usize>> = BTreeMap::new();
        for r in results.iter().filter(|r| r.change != Change::Error) {
            *swap_set
                .entry(r.outcome.0.clone())
                .or_default()
                .entry(r.outcome.1.clone())
                .or_default() += 1;
        }
        let moved = |r: &&Compared| !matches!(r.change, Change::Error | Change::Unchanged);
        let mut movers: Vec<Compared> = results.iter().filter(moved).cloned().collect();
        movers.sort_by(|a, b| {
            b.probability_delta()
                .abs()
                .total_cmp(&a.probability_delta().abs())
        });
        movers.truncate(MOVERS);
        let reason_order_only = (results.iter())
            .filter(|r| r.change == Change::Reasons)
            .filter(|r| {
                let (mut a, mut b) = r.reasons.clone();
                a.sort();
                b.sort();
                a == b
            })
            .count();
        Report {
            against: against.to_string(),
            tolerance,
            compared: results.len(),
            unchanged: count(Change::Unchanged),
            probability_only: count(Change::ProbabilityOnly),
            reason_changes: count(Change::Reasons),
            reason_order_only,
            decision_flips: count(Change::DecisionFlip),
            errors: count(Change::Error),
            swap_set,
            largest_movers: movers,
            changes: results
                .into_iter()
                .filter(|r| r.change != Change::Unchanged)
                .collect(),
        }
    }

    /// Whether anything moved beyond tolerance.
    pub fn changed(&self) -> bool {
        self.unchanged != self.compared
    }

    /// A readable summary.
    pub fn summary(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        let _ = writeln!(
            s,
            "replayed {} recorded decisions against {} (probability tolerance {:e})",
            self.compared, self.against, self.tolerance
        );
        for (label, n) in [
            ("unchanged", self.unchanged),
            ("probability or score only", self.probability_only),
            ("reasons changed", self.reason_changes),
            ("decision flips", self.decision_flips),
            ("refused by the new side", self.errors),
        ] {
            let _ = writeln!(s, "  {label:<28} {n:>8}");
        }
        if self.reason_changes > 0 {
            let _ = writeln!(
                s,
                "  (of the reason changes, {} reorder the same reasons)",
                self.reason_order_only
            );
        }
        let outcomes = ["approve", "refer", "decline"];
        let _ = writeln!(
            s,
            "\nswap set (rows: recorded outcome, columns: new outcome)\n  {:<10}{:>10}{:>10}{:>10}",
            "", outcomes[0], outcomes[1], outcomes[2]
        );
        for from in outcomes {
            let row = self.swap_set.get(from);
            let cell = |to: &str| row.and_then(|r| r.get(to)).copied().unwrap_or(0);
            let _ = writeln!(
                s,
                "  {from:<10}{:>10}{:>10}{:>10}",
                cell("approve"),
                cell("refer"),
                cell("decline")
            );
        }
        if !self.largest_movers.is_empty() {
            let _ = writeln!(s, "\nlargest probability movers");
            for m in &self.largest_movers {
                let _ = writeln!(
                    s,
                    "  {:<24} {:+.6}  {}",
                    m.application_id,
                    m.probability_delta(),
                    m.describe()
                );
            }
        }
        let _ = writeln!(s, "\nDecision support for QA and model-risk review; a model change still needs its own validation and approval.");
        s
    }
}
