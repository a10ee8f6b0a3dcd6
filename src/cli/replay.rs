//! `plumbline replay`: recorded requests decided again by a model file or a running service,
//! compared with what was given. Exit 0 when nothing moved beyond tolerance, 3 when something did.

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::replay::{compare, junit_xml, Case, Report};
use clap::Args;
use serde_json::Value;
use std::path::{Path, PathBuf};

/// Exit status when a replay finds changes beyond tolerance.
pub const EXIT_CHANGED: i32 = crate::exit::CHANGED;

#[derive(Debug, Args)]
pub struct ReplayArgs {
    /// A folder of recorded pairs (like demo-requests/) or a records export (JSON lines).
    source: PathBuf,
    /// A model artifact, or the base URL of a running service (http://HOST:PORT, or
    /// https://HOST:PORT: the certificate must name the host and lead to a trusted root).
    #[arg(long)]
    against: String,
    /// Trusted roots for an https service (PEM), e.g. the lender's internal CA; without it the
    /// Mozilla set.
    #[arg(long)]
    ca_cert: Option<PathBuf>,
    /// Largest probability difference still counted as unchanged.
    #[arg(long, default_value_t = 1e-9)]
    tolerance: f64,
    /// Also write a JUnit XML report here.
    #[arg(long)]
    junit: Option<PathBuf>,
    /// Print the report as JSON instead of a summary.
    #[arg(long)]
    json: bool,
    /// Environment variable holding the scoring key for --against URL.
    #[arg(long, default_value = "PLUMBLINE_API_KEY")]
    key_env: String,
}

/// Decisions from a folder of pairs (POST /v1/decisions answered 200) or an export file.
fn load_cases(source: &Path) -> Result<Vec<Case>, String> {
    let read = |p: &Path| {
        std::fs::read_to_string(p).map_err(|e| format!("cannot read {}: {e}", p.display()))
    };
    if source.is_dir() {
        let mut files: Vec<PathBuf> = std::fs::read_dir(source)
            .map_err(|e| format!("cannot read {}: {e}", source.display()))?
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| p.extension().is_some_and(|x| x == "json"))
            .collect();
        files.sort();
        let mut cases = Vec::new();
        for f in files {
            let pair: Value = serde_json::from_str(&read(&f)?)
                .map_err(|e| format!("{}: not JSON: {e}", f.display()))?;
            let (req, resp) = (&pair["request"], &pair["response"]);
            if req["method"] == "POST" && req["path"] == "/v1/decisions" && resp["status"] == 200 {
                cases.push(Case {
                    name: f
                        .file_stem()
                        .map(|s| s.to_string_lossy().into_owned())
                        .unwrap_or_default(),
                    request: req["body"].clone(),
                    response: resp["body"].clone(),
                });
            }
        }
        return Ok(cases);
    }
    read(source)?
        .lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(n, line)| {
            let r: Value = serde_json::from_str(line)
                .map_err(|e| format!("{} line {}: not JSON: {e}", source.display(), n + 1))?;
            if !r["request"].is_object() || !r["response"].is_object() {
                return Err(format!(
                    "{} line {}: not a decision record (needs request and response)",
                    source.display(),
                    n + 1
                ));
            }
            Ok(Case {
                name: r["decision_id"]
                    .as_str()
                    .map(String::from)
                    .unwrap_or_else(|| format!("line {}", n + 1)),
                request: r["request"].clone(),
                response: r["response"].clone(),
            })
        })
        .collect()
}

enum Against {
    Model(Box<crate::LoadedModel>),
    Service {
        url: String,
        key: Option<String>,
        agent: ureq::Agent,
    },
}

/// Cases decided together against a model.
const BLOCK: usize = 256;

impl Against {
    /// Each case decided again, in order.
    fn decide_block(&self, cases: &[Case]) -> Vec<Result<Value, String>> {
        let Against::Model(m) = self else {
            return cases.iter().map(|c| self.decide(&c.request)).collect();
        };
        let requests: Vec<Value> = (cases.iter())
            .map(|c| {
                let mut request = c.request.clone();
                if let Some(o) = request.as_object_mut() {
                    o.remove("model");
                }
                request
            })
            .collect();
        (crate::decide::decide_requests(m, &requests).into_iter())
            .map(|d| {
                d.map_err(|e| e.to_string())
                    .and_then(|d| serde_json::to_value(d).map_err(|e| e.to_string()))
            })
            .collect()
    }

    fn decide(&self, request: &Value) -> Result<Value, String> {
        // The new side's own model decides: a selector naming the recorded model would refuse
        // (a file) or bypass (a service) the challenger.
        let mut request = request.clone();
        if let Some(o) = request.as_object_mut() {
            o.remove("model");
        }
        let request = &request;
        match self {
            Against::Model(m) => crate::decide_request(m, request)
                .map_err(|e| e.to_string())
                .and_then(|d| serde_json::to_value(d).map_err(|e| e.to_string())),
            Against::Service { url, key, agent } => {
                // A retry key would fetch the stored response instead of a new decision.
                let mut body = request.clone();
                if let Some(o) = body.as_object_mut() {
                    o.remove("idempotency_key");
                }
                let mut call = (agent.post(&format!("{url}/v1/decisions")))
                    .set("Content-Type", "application/json");
                if let Some(k) = key {
                    call = call.set("Authorization", &format!("Bearer {k}"));
                }
                match call.send_string(&body.to_string()) {
                    Ok(r) => r
                        .into_string()
                        .map_err(|e| e.to_string())
                        .and_then(|t| serde_json::from_str(&t).map_err(|e| e.to_string())),
                    Err(ureq::Error::Status(code, r)) => Err(format!(
                        "HTTP {code}: {}",
                        r.into_string().unwrap_or_default()
                    )),
                    Err(e) => Err(e.to_string()),
                }
            }
        }
    }
}

/// Most time to connect to a service, and to send or read one decision.
const CONNECT_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(5);
const CALL_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(30);

/// The HTTP client for `--against URL`: bounded waits, and for https the full certificate
/// check (chain to a trusted root, host name) against `ca_cert` or the Mozilla roots.
fn service_agent(ca_cert: Option<&Path>) -> Result<ureq::Agent, String> {
    let roots = crate::tls::roots(ca_cert)?;
    let tls = crate::tls::client_config(roots, crate::tls::Check::ChainAndName)?;
    Ok(ureq::AgentBuilder::new()
        .timeout_connect(CONNECT_TIMEOUT)
        .timeout_read(CALL_TIMEOUT)
        .timeout_write(CALL_TIMEOUT)
        .tls_config(std::sync::Arc::new(tls))
        .build())
}

pub fn run(args: ReplayArgs) -> i32 {
    if !(args.tolerance.is_finite() && args.tolerance >= 0.0) {
        eprintln!("error: --tolerance must be a finite number, 0 or more");
        return EXIT_BAD_INPUT;
    }
    let cases = match load_cases(&args.source) {
        Ok(c) if c.is_empty() => {
            eprintln!(
                "error: {} holds no recorded decisions",
                args.source.display()
            );
            return EXIT_BAD_INPUT;
        }
        Ok(c) => c,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let against = if args.against.starts_with("http://") || args.against.starts_with("https://") {
        match service_agent(args.ca_cert.as_deref()) {
            Ok(agent) => Against::Service {
                url: args.against.trim_end_matches('/').to_string(),
                key: std::env::var(&args.key_env).ok(),
                agent,
            },
            Err(e) => {
                eprintln!("error: {e}");
                return EXIT_BAD_INPUT;
            }
        }
    } else {
        match super::load(Path::new(&args.against)) {
            Ok(m) => Against::Model(Box::new(m)),
            Err(code) => return code,
        }
    };
    let bar = super::progress::Bar::counting("deciding again", cases.len() as u64);
    let mut results = Vec::with_capacity(cases.len());
    // A model decides a block at a time (a tree ensemble explains a block's applicants per
    // pass over each tree; each answer is the one the request gets alone); a service is asked
    // one case at a time, so progress moves with each answer.
    let block_size = if matches!(against, Against::Model(_)) {
        BLOCK
    } else {
        1
    };
    for block in cases.chunks(block_size) {
        let answers = against.decide_block(block);
        bar.inc(block.len() as u64);
        results.extend((block.iter().zip(answers)).map(|(c, a)| compare(c, a, args.tolerance)));
    }
    drop(bar);
    let names: Vec<(String, String)> = results
        .iter()
        .map(|r| (r.name.clone(), r.application_id.clone()))
        .collect();
    let report = Report::new(&args.against, args.tolerance, results);
    if let Some(path) = &args.junit {
        if let Err(e) = std::fs::write(path, junit_xml(&report, &names)) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    if args.json {
        if let Err(code) = super::print_pretty(&report) {
            return code;
        }
    } else {
        print!("{}", report.summary());
    }
    if report.changed() {
        EXIT_CHANGED
    } else {
        0
    }
}
