//! `plumbline records`: the compliance look-ups of the service, on a store directly (the
//! embedded SQLite file by default, or a PostgreSQL URL).

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::records::{export::Format, notice, Store};
use clap::{Args, Subcommand};
use std::io::Write;

#[derive(Debug, Args)]
pub struct RecordsArgs {
    /// The store: `sqlite:PATH` or `postgres://...` (as `serve --store`).
    #[arg(
        long,
        env = "PLUMBLINE_STORE",
        default_value = "sqlite:plumbline-data/records.sqlite3",
        global = true
    )]
    store: String,
    #[command(subcommand)]
    command: RecordsCommand,
}

/// Filters shared by search and export.
#[derive(Debug, Args)]
pub struct Filters {
    #[arg(long)]
    application_id: Option<String>,
    /// Inclusive: RFC 3339 UTC time or a date.
    #[arg(long)]
    from: Option<String>,
    /// Exclusive time, or a date (that whole day included).
    #[arg(long)]
    to: Option<String>,
    /// approve, refer or decline.
    #[arg(long)]
    outcome: Option<String>,
    #[arg(long)]
    model_id: Option<String>,
    #[arg(long)]
    model_version: Option<String>,
    /// pending (referred, none recorded), recorded, approve, decline or withdrawn.
    #[arg(long)]
    final_action: Option<String>,
    /// Continue after this cursor (a search's next_cursor).
    #[arg(long)]
    cursor: Option<String>,
}

#[derive(Debug, Subcommand)]
pub enum RecordsCommand {
    /// One decision exactly as recorded (JSON).
    Get { decision_id: String },
    /// The adverse-action content of a decision, read from its record (JSON).
    AdverseAction { decision_id: String },
    /// A page of decisions matching the filters, oldest first (JSON with next_cursor).
    Search {
        #[command(flatten)]
        filters: Filters,
        #[arg(long, default_value_t = 100)]
        limit: usize,
    },
    /// Every matching decision as JSON lines (full records) or CSV (summaries), streamed.
    Export {
        #[command(flatten)]
        filters: Filters,
        /// jsonl or csv.
        #[arg(long, default_value = "jsonl")]
        format: String,
    },
    /// The access log: who read which records, when, how many (JSON, oldest first).
    Access {
        /// Inclusive: RFC 3339 UTC time or a date.
        #[arg(long)]
        from: Option<String>,
        /// Exclusive time, or a date (that whole day included).
        #[arg(long)]
        to: Option<String>,
        #[arg(long, default_value_t = 100)]
        limit: usize,
    },
}

impl Filters {
    /// The filters as a query string, for the access log.
    fn described(&self) -> String {
        let given = [
            ("application_id", &self.application_id),
            ("from", &self.from),
            ("to", &self.to),
            ("outcome", &self.outcome),
            ("model_id", &self.model_id),
            ("model_version", &self.model_version),
            ("final_action", &self.final_action),
            ("cursor", &self.cursor),
        ];
        (given.iter())
            .filter_map(|(k, v)| v.as_ref().map(|v| format!("{k}={v}")))
            .collect::<Vec<_>>()
            .join("&")
    }
}

/// Who works on the store from the command line: `local:` and the operating-system user.
pub(super) fn local_caller() -> String {
    let user = std::env::var("USER")
        .or_else(|_| std::env::var("USERNAME"))
        .unwrap_or_else(|_| "unknown".into());
    format!("local:{user}")
}

/// A read of the records from the command line, for the access log: the operating-system
/// user, as the service logs a key's name.
pub(super) fn access(action: &str, target: &str, records: Option<i64>) -> crate::records::Access {
    crate::records::Access {
        access_id: crate::records::ids::new_decision_id(),
        at: crate::records::now(),
        caller: local_caller(),
        role: "command-line".into(),
        action: action.into(),
        target: target.into(),
        records,
        request_id: String::new(),
    }
}

fn query(f: &Filters) -> Result<crate::records::Query, String> {
    let get = |name: &str| -> Option<&str> {
        match name {
            "application_id" => f.application_id.as_deref(),
            "from" => f.from.as_deref(),
            "to" => f.to.as_deref(),
            "outcome" => f.outcome.as_deref(),
            "model_id" => f.model_id.as_deref(),
            "model_version" => f.model_version.as_deref(),
            "final_action" => f.final_action.as_deref(),
            "cursor" => f.cursor.as_deref(),
            _ => None,
        }
    };
    crate::records::parse_query(get).map_err(|e| {
        format!(
            "--{}: {} [{}]",
            e.param.replace('_', "-"),
            e.message,
            e.rule
        )
    })
}

pub fn run(args: RecordsArgs) -> i32 {
    let store = match crate::records::open_existing(&args.store) {
        Ok(s) => s,
        Err(e) => {
            eprintln!(
                "error: store {}: {e}",
                crate::records::redacted(&args.store)
            );
            return EXIT_FAILURE;
        }
    };
    match run_on(store.as_ref(), &args.command) {
        Ok(()) => 0,
        Err((code, message)) => {
            eprintln!("error: {message}");
            code
        }
    }
}

fn run_on(store: &dyn Store, command: &RecordsCommand) -> Result<(), (i32, String)> {
    let bad = |m: String| (EXIT_BAD_INPUT, m);
    let failed = |e: crate::records::StoreError| (EXIT_FAILURE, e.to_string());
    // Every read is logged before it is shown, as the service does.
    let log = |action: &str, target: &str, records: Option<i64>| {
        store
            .log_access(&access(action, target, records))
            .map_err(failed)
    };
    let found = |id: &str, action: &str| -> Result<crate::records::Record, (i32, String)> {
        let record = store.get(id).map_err(failed)?;
        log(action, id, Some(i64::from(record.is_some())))?;
        record.ok_or_else(|| {
            bad(format!(
                "no decision {id} is recorded in {}",
                store.describe()
            ))
        })
    };
    let mut out = std::io::BufWriter::new(std::io::stdout().lock());
    let mut write = |text: &str| {
        out.write_all(text.as_bytes())
            .map_err(|e| (EXIT_FAILURE, e.to_string()))
    };
    let result = match command {
        RecordsCommand::Get { decision_id } => {
            write(&(found(decision_id, "get")?.view().map_err(failed)? + "\n"))
        }
        RecordsCommand::AdverseAction { decision_id } => {
            match notice::adverse_action(&found(decision_id, "adverse_action")?) {
                Ok(n) => write(&super::pretty(&n)?),
                Err(notice::NoNotice::Approved) => Err(bad(format!(
                    "decision {decision_id} was an approval; no adverse action was taken"
                ))),
                Err(notice::NoNotice::ApprovedOnReview) => Err(bad(format!(
                    "decision {decision_id} was referred and approved by an underwriter; no adverse action was taken"
                ))),
                Err(notice::NoNotice::Withdrawn) => Err(bad(format!(
                    "decision {decision_id} was referred and the applicant withdrew; no notice of action taken is owed"
                ))),
                Err(notice::NoNotice::Damaged(e)) => Err(failed(e)),
            }
        }
        RecordsCommand::Search { filters, limit } => {
            if !(1..=crate::records::MAX_PAGE).contains(limit) {
                return Err(bad(format!(
                    "--limit must be 1 to {}",
                    crate::records::MAX_PAGE
                )));
            }
            let page = store
                .search(&query(filters).map_err(bad)?, *limit)
                .map_err(failed)?;
            log(
                "search",
                &filters.described(),
                Some(page.records.len() as i64),
            )?;
            let views: Vec<serde_json::Value> = (page.records.iter())
                .map(|r| {
                    serde_json::from_str(&r.view()?)
                        .map_err(|e| crate::records::StoreError::Failed(e.to_string()))
                })
                .collect::<Result<_, _>>()
                .map_err(failed)?;
            let body = serde_json::json!({"decisions": views, "next_cursor": page.next.map(|c| c.encode())});
            write(&super::pretty(&body)?)
        }
        RecordsCommand::Export { filters, format } => {
            let format =
                Format::parse(format).ok_or_else(|| bad("--format must be jsonl or csv".into()))?;
            let q = query(filters).map_err(bad)?;
            log("export_started", &filters.described(), None)?;
            write(format.header().unwrap_or_default())?;
            let mut problem = None;
            let bar = super::progress::Bar::new();
            crate::progress::Progress::stage(&bar, "exporting decisions", None);
            let sent = store
                .export(
                    &q,
                    &mut |r| match format.line(r).map_err(failed).and_then(|l| write(&l)) {
                        Ok(()) => {
                            bar.inc(1);
                            true
                        }
                        Err(e) => {
                            problem = Some(e);
                            false
                        }
                    },
                )
                .map_err(failed)?;
            log("export", &filters.described(), Some(sent as i64))?;
            problem.map_or(Ok(()), Err)
        }
        RecordsCommand::Access { from, to, limit } => {
            if !(1..=crate::records::MAX_PAGE).contains(limit) {
                return Err(bad(format!(
                    "--limit must be 1 to {}",
                    crate::records::MAX_PAGE
                )));
            }
            let time = |v: &Option<String>, end: bool, name: &str, default: &str| match v {
                None => Ok(default.to_string()),
                Some(v) => crate::records::normalise_time(v, end).map_err(|_| {
                    bad(format!(
                        "--{name}: {v:?} is not an RFC 3339 UTC time or a date"
                    ))
                }),
            };
            // "~" sorts after every stored time: no upper bound.
            let (from, to) = (time(from, false, "from", "")?, time(to, true, "to", "~")?);
            let entries = store.access_log(&from, &to, None, *limit).map_err(failed)?;
            log(
                "access_log",
                &format!("from={from}&to={to}"),
                Some(entries.len() as i64),
            )?;
            write(&super::pretty(&serde_json::json!({"entries": entries}))?)
        }
    };
    result?;
    // An export cut short by a full disk or a closed pipe must not exit 0.
    out.flush()
        .map_err(|e| (EXIT_FAILURE, format!("cannot write the output: {e}")))
}
