//! `plumbline outcomes load`: observed outcomes from a file into the store, as
//! `POST /v1/outcomes` loads them, with the same per-row accounting.

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::outcomes::{self, Format, LoadError, LoadSummary};
use clap::{Args, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct OutcomesArgs {
    #[command(subcommand)]
    command: OutcomesCommand,
}

#[derive(Debug, Subcommand)]
pub enum OutcomesCommand {
    /// Load a file of `application_id, defaulted (0/1), observed_at` rows: CSV with a header,
    /// a JSON array of objects, or JSON lines. One outcome per application, never updated;
    /// loading the same file again is safe. Exit 2 when any row was not stored for a fault of
    /// its own (bad, conflicting, or of an unknown application).
    Load {
        /// The file (`-` for standard input).
        file: PathBuf,
        /// The store: `sqlite:PATH` or `postgres://...` (as `serve --store`).
        #[arg(
            long,
            env = "PLUMBLINE_STORE",
            default_value = "sqlite:plumbline-data/records.sqlite3"
        )]
        store: String,
        /// The file's format (default: by its extension, `.csv`, `.json`, `.jsonl`/`.ndjson`).
        #[arg(long, value_enum)]
        format: Option<Format>,
        /// Print the summary as JSON.
        #[arg(long)]
        json: bool,
    },
}

pub fn run(args: OutcomesArgs) -> i32 {
    match args.command {
        OutcomesCommand::Load {
            file,
            store,
            format,
            json,
        } => load(&file, &store, format, json),
    }
}

fn format_of(file: &std::path::Path) -> Option<Format> {
    match file.extension()?.to_str()?.to_ascii_lowercase().as_str() {
        "csv" => Some(Format::Csv),
        "json" => Some(Format::Json),
        "jsonl" | "ndjson" => Some(Format::JsonLines),
        _ => None,
    }
}

fn print_summary(s: &LoadSummary) {
    println!(
        "{} rows: {} stored, {} duplicates, {} conflicts, {} unknown applications, {} bad rows",
        s.rows, s.stored, s.duplicates, s.conflicts, s.unknown_applications, s.bad_rows
    );
    if !s.ignored_columns.is_empty() {
        println!("  columns not read: {}", s.ignored_columns.join(", "));
    }
    for r in &s.not_loaded {
        let what = match (&r.application_id, &r.field) {
            (Some(id), Some(f)) => format!("{id}, {f}"),
            (Some(id), None) => id.clone(),
            (None, Some(f)) => f.clone(),
            (None, None) => String::new(),
        };
        println!("  row {}: {what}: {} [{}]", r.row, r.message, r.rule);
    }
    if s.more_not_named > 0 {
        println!("  and {} more rows not stored", s.more_not_named);
    }
}

fn load(file: &std::path::Path, store_at: &str, format: Option<Format>, json: bool) -> i32 {
    let stdin = file.as_os_str() == "-";
    let Some(format) = format.or_else(|| format_of(file)) else {
        eprintln!("error: --format: cannot tell the format of {} from its name; give csv, json or json-lines", file.display());
        return EXIT_BAD_INPUT;
    };
    let mut reader: Box<dyn std::io::Read> = if stdin {
        Box::new(std::io::stdin().lock())
    } else {
        match std::fs::File::open(file) {
            Ok(f) => Box::new(f),
            Err(e) => {
                eprintln!("error: {}: {e}", file.display());
                return EXIT_BAD_INPUT;
            }
        }
    };
    let store = match crate::records::open_existing(store_at) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: store {}: {e}", crate::records::redacted(store_at));
            return EXIT_FAILURE;
        }
    };
    let bar = super::progress::Bar::new();
    crate::progress::Progress::stage(&bar, "loading outcomes", None);
    let mut shown = 0;
    let loaded = outcomes::load(
        &mut reader,
        format,
        &*store,
        &super::records::local_caller(),
        &mut |s| {
            crate::progress::Progress::advance(&bar, s.rows - shown);
            shown = s.rows;
        },
    );
    drop(bar);
    // Every load that wrote anything is in the access log, whether it ended well or not.
    let stored = match &loaded {
        Ok(s) => s.stored,
        Err(LoadError::Syntax { so_far, .. } | LoadError::Store { so_far, .. }) => so_far.stored,
        Err(LoadError::Header { .. }) => 0,
    };
    if loaded.is_ok() || stored > 0 {
        let target = format!("rows from {}", file.display());
        let entry = super::records::access("outcomes_loaded", &target, Some(stored as i64));
        if let Err(e) = store.log_access(&entry) {
            eprintln!("error: store {}: {e}", store.describe());
            return EXIT_FAILURE;
        }
    }
    let summary = match loaded {
        Ok(s) => s,
        Err(LoadError::Header { rule, message }) => {
            eprintln!("error: {}: {message} [{rule}]", file.display());
            return EXIT_BAD_INPUT;
        }
        Err(LoadError::Syntax {
            row,
            message,
            so_far,
        }) => {
            print_summary(&so_far);
            eprintln!("error: {}: row {row} {message}; the rows before it are kept as counted above, and loading the file again is safe", file.display());
            return EXIT_BAD_INPUT;
        }
        Err(LoadError::Store { error, so_far }) => {
            print_summary(&so_far);
            eprintln!("error: store {}: {error}; the rows counted above are kept, and loading the file again is safe", store.describe());
            return EXIT_FAILURE;
        }
    };
    if json {
        if let Err(code) = super::print_pretty(&summary) {
            return code;
        }
    } else {
        print_summary(&summary);
    }
    if summary.bad_rows + summary.conflicts + summary.unknown_applications > 0 {
        EXIT_BAD_INPUT
    } else {
        0
    }
}
