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
    let found = |id: &str| -> Result<crate::records::Record, (i32, String)> {
        store.get(id).map_err(failed)?.ok_or_else(|| {
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
            write(&(found(decision_id)?.view().map_err(failed)? + "\n"))
        }
        RecordsCommand::AdverseAction { decision_id } => {
            match notice::adverse_action(&found(decision_id)?) {
                Ok(n) => write(&(serde_json::to_string_pretty(&n).unwrap_or_default() + "\n")),
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
            let views: Vec<serde_json::Value> = (page.records.iter())
                .map(|r| {
                    serde_json::from_str(&r.view()?)
                        .map_err(|e| crate::records::StoreError::Failed(e.to_string()))
                })
                .collect::<Result<_, _>>()
                .map_err(failed)?;
            let body = serde_json::json!({"decisions": views, "next_cursor": page.next.map(|c| c.encode())});
            write(&(serde_json::to_string_pretty(&body).unwrap_or_default() + "\n"))
        }
        RecordsCommand::Export { filters, format } => {
            let format =
                Format::parse(format).ok_or_else(|| bad("--format must be jsonl or csv".into()))?;
            let q = query(filters).map_err(bad)?;
            write(format.header().unwrap_or_default())?;
            let mut problem = None;
            let bar = super::progress::Bar::new();
            crate::progress::Progress::stage(&bar, "exporting decisions", None);
            store
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
            problem.map_or(Ok(()), Err)
        }
    };
    result?;
    // An export cut short by a full disk or a closed pipe must not exit 0.
    out.flush()
        .map_err(|e| (EXIT_FAILURE, format!("cannot write the output: {e}")))
}
