//! The command line: a thin shell over the library. Exit status 0 on success, 2 for bad input
//! (artifact or applicant), 1 for anything else (I/O).

mod inspect;
mod score;
mod serve;

use clap::{Parser, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(
    name = "plumbline",
    version,
    about = "Credit-decision engine: score, explain, decide. Output is decision support, not a credit decision by itself."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Show what a model artifact holds: fields, encoding, trees, cutoffs, reasons, digest.
    Inspect {
        /// Model artifact (JSON).
        model: PathBuf,
        /// Print a JSON summary instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Decide applications: one JSON request, or several (JSON lines), from a file or stdin.
    Score {
        /// Model artifact (JSON).
        #[arg(long)]
        model: PathBuf,
        /// Requests `{"application_id": ..., "applicant": {...}}`; `-` or absent reads stdin.
        input: Option<PathBuf>,
    },
    /// Run the decision service (HTTP): by default the bundled demo model on 127.0.0.1:8080;
    /// needs --keys FILE (or PLUMBLINE_KEYS), or --no-auth for a local trial.
    Serve(serve::ServeArgs),
    /// Print the key-file entry for an API key read from stdin (its SHA-256; the key itself is
    /// never stored).
    HashKey {
        /// Name of the key's holder, e.g. `los-production`.
        #[arg(long)]
        name: String,
        /// scoring, review or admin.
        #[arg(long)]
        role: String,
    },
}

/// Exit status for bad input.
pub const EXIT_BAD_INPUT: i32 = 2;
/// Exit status for other failures.
pub const EXIT_FAILURE: i32 = 1;

/// Runs a parsed command; returns the process exit status.
pub fn run(cli: Cli) -> i32 {
    match cli.command {
        Command::Inspect { model, json } => inspect::run(&model, json),
        Command::Score { model, input } => score::run(&model, input.as_deref()),
        Command::Serve(args) => serve::run(args),
        Command::HashKey { name, role } => serve::hash_key(&name, &role),
    }
}

fn load(path: &std::path::Path) -> Result<crate::LoadedModel, i32> {
    crate::LoadedModel::from_path(path).map_err(|e| {
        eprintln!("error: model {}: {e}", path.display());
        EXIT_BAD_INPUT
    })
}
