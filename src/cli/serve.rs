//! `plumbline serve` and `plumbline hash-key`.

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::api::{Auth, Keys, Limits, Role, ServeConfig, StartError};
use clap::Args;
use std::io::Read;
use std::path::PathBuf;
use std::time::Duration;

#[derive(Debug, Args)]
pub struct ServeArgs {
    /// Address to listen on.
    #[arg(long, env = "PLUMBLINE_ADDR", default_value = "127.0.0.1:8080")]
    addr: std::net::SocketAddr,
    /// Model artifact; repeat for several. The first is the champion.
    #[arg(
        long = "model",
        env = "PLUMBLINE_MODELS",
        value_delimiter = ',',
        default_value = "models/fernhill-logistic.json"
    )]
    models: Vec<PathBuf>,
    /// API key file: `[{"name": ..., "role": "scoring|review|underwriting|admin", "sha256": ...}]`
    /// (see `plumbline hash-key`). PLUMBLINE_KEYS may hold the same JSON instead.
    #[arg(long, env = "PLUMBLINE_KEYS_FILE")]
    keys: Option<PathBuf>,
    /// Turn authentication off. For local trials only; announced loudly at start.
    #[arg(long)]
    no_auth: bool,
    /// Largest body of POST /v1/decisions, in bytes.
    #[arg(long, default_value_t = 64 * 1024)]
    max_body_bytes: usize,
    /// Largest body of POST /v1/decisions/batch, in bytes.
    #[arg(long, default_value_t = 8 * 1024 * 1024)]
    max_batch_body_bytes: usize,
    /// Most items in one batch.
    #[arg(long, default_value_t = 1_000)]
    max_batch_items: usize,
    /// Largest group-membership upload of POST /v1/fairness/reports, in bytes.
    #[arg(long, default_value_t = 64 * 1024 * 1024)]
    max_upload_bytes: usize,
    /// Time for a request body to arrive, in milliseconds.
    #[arg(long, default_value_t = 5_000)]
    body_timeout_ms: u64,
    /// Time for a decision to be committed to the store, in milliseconds; after it the decision
    /// is not given (503) and nothing of it is recorded.
    #[arg(long, default_value_t = 10_000)]
    commit_timeout_ms: u64,
    /// Longest the recorder holds a commit for decisions still being decided, in microseconds
    /// (0: never), so that under load one sync serves several decisions.
    #[arg(long, default_value_t = 1_000)]
    commit_gather_us: u64,
    /// Most fairness reports and record exports running at once; more get 429 with
    /// Retry-After.
    #[arg(long, default_value_t = 2)]
    max_reports: usize,
    /// Worker threads (default: one per core).
    #[arg(long)]
    workers: Option<usize>,
    /// Where decisions are recorded: `sqlite:PATH` (embedded, the default) or
    /// `postgres://USER@HOST:PORT/DB` (shared by several replicas).
    #[arg(
        long,
        env = "PLUMBLINE_STORE",
        default_value = "sqlite:plumbline-data/records.sqlite3"
    )]
    store: String,
    /// A bearer key that `/metrics` then requires (PLUMBLINE_METRICS_KEY); without it the
    /// metrics are open, like the health probes.
    #[arg(long, env = "PLUMBLINE_METRICS_KEY", hide_env_values = true)]
    metrics_key: Option<String>,
    /// Terminate TLS here with this certificate chain (PEM; the server's certificate first).
    /// Without it the service speaks plain HTTP, for a TLS-terminating proxy in front.
    #[arg(long, requires = "tls_key")]
    tls_cert: Option<PathBuf>,
    /// The private key of --tls-cert (PEM: PKCS#8, PKCS#1 or SEC1).
    #[arg(long, requires = "tls_cert")]
    tls_key: Option<PathBuf>,
    /// Record nothing (benchmarks and trials only: decisions could not be recovered later).
    #[arg(long, conflicts_with = "store")]
    no_store: bool,
}

fn keys(args: &ServeArgs) -> Result<Auth, StartError> {
    if args.no_auth {
        // Without keys anyone who reaches the port decides and reads records: only this machine.
        if !args.addr.ip().is_loopback() {
            return Err(StartError::OpenOffLoopback(args.addr.ip()));
        }
        return Ok(Auth(None));
    }
    let text = match (&args.keys, std::env::var("PLUMBLINE_KEYS")) {
        (Some(path), _) => {
            std::fs::read_to_string(path).map_err(|source| StartError::KeyFileUnreadable {
                path: path.clone(),
                source,
            })?
        }
        (None, Ok(text)) => text,
        (None, Err(_)) => return Err(StartError::NoKeys),
    };
    let keys = Keys::from_json(&text)?;
    if keys.is_empty() {
        return Err(StartError::EmptyKeyFile);
    }
    Ok(Auth(Some(keys)))
}

fn check_limits(args: &ServeArgs) -> Result<(), StartError> {
    let rules = [
        (
            args.max_body_bytes >= 1024 && args.max_body_bytes <= 16 << 20,
            "--max-body-bytes must be 1 KiB to 16 MiB",
        ),
        (
            args.max_batch_body_bytes >= 1024 && args.max_batch_body_bytes <= 256 << 20,
            "--max-batch-body-bytes must be 1 KiB to 256 MiB",
        ),
        (
            args.max_upload_bytes >= 1024 && args.max_upload_bytes <= 1 << 30,
            "--max-upload-bytes must be 1 KiB to 1 GiB",
        ),
        (
            (1..=100_000).contains(&args.max_batch_items),
            "--max-batch-items must be 1 to 100000",
        ),
        (
            (10..=600_000).contains(&args.body_timeout_ms),
            "--body-timeout-ms must be 10 to 600000",
        ),
        (
            (100..=600_000).contains(&args.commit_timeout_ms),
            "--commit-timeout-ms must be 100 to 600000",
        ),
        (
            args.commit_gather_us <= 100_000,
            "--commit-gather-us must be 0 to 100000",
        ),
        (
            args.commit_gather_us <= args.commit_timeout_ms.saturating_mul(100),
            "--commit-gather-us must be at most a tenth of --commit-timeout-ms",
        ),
        (
            (1..=64).contains(&args.max_reports),
            "--max-reports must be 1 to 64",
        ),
        (
            args.workers.is_none_or(|w| (1..=256).contains(&w)),
            "--workers must be 1 to 256",
        ),
    ];
    match rules.iter().find(|(ok, _)| !ok) {
        Some((_, msg)) => Err(StartError::Limit(msg)),
        None => Ok(()),
    }
}

pub fn run(args: ServeArgs) -> i32 {
    let filter = tracing_subscriber::EnvFilter::try_from_env("PLUMBLINE_LOG")
        .unwrap_or_else(|_| "info".into());
    let _ = tracing_subscriber::fmt()
        .json()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .try_init();
    match start(args) {
        Ok(()) => 0,
        Err(e) => {
            eprintln!("error: {e}");
            e.exit_code()
        }
    }
}

/// Checks the flags and key file, then runs the service until it is stopped.
fn start(args: ServeArgs) -> Result<(), StartError> {
    check_limits(&args)?;
    let auth = keys(&args)?;
    if args.no_store {
        let banner = "RECORDS ARE OFF (--no-store): decisions are given but not recorded, so no notice or examiner can recover them";
        tracing::warn!("{banner}");
        eprintln!("\n*** WARNING: {banner} ***\n");
    }
    let config = ServeConfig {
        store: (!args.no_store).then(|| args.store.clone()),
        metrics_key: args.metrics_key.clone(),
        tls: args.tls_cert.clone().zip(args.tls_key.clone()),
        addr: args.addr,
        models: args.models,
        auth,
        limits: Limits {
            max_body_bytes: args.max_body_bytes,
            max_batch_body_bytes: args.max_batch_body_bytes,
            max_upload_bytes: args.max_upload_bytes,
            max_batch_items: args.max_batch_items,
            body_timeout: Duration::from_millis(args.body_timeout_ms),
            commit_timeout: Duration::from_millis(args.commit_timeout_ms),
            commit_gather: Duration::from_micros(args.commit_gather_us),
            max_reports: args.max_reports,
            ..Limits::default()
        },
        workers: args
            .workers
            .unwrap_or_else(|| std::thread::available_parallelism().map_or(2, |n| n.get())),
    };
    crate::api::serve(config)
}

pub fn hash_key(name: &str, role: Role) -> i32 {
    let mut key = String::new();
    if std::io::stdin().read_to_string(&mut key).is_err() {
        return EXIT_FAILURE;
    }
    let key = key.trim();
    if key.len() < 16 {
        eprintln!("error: a key must be at least 16 characters");
        return EXIT_BAD_INPUT;
    }
    let entry = serde_json::json!({"name": name, "role": role.name(), "sha256": crate::api::auth::key_digest_hex(key)});
    println!("{entry}");
    0
}
