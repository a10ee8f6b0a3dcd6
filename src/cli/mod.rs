//! The command line: a thin shell over the library. Exit status 0 on success, 2 for bad input
//! (artifact or applicant), 1 for anything else (I/O).

mod backtest;
mod evaluate;
mod fairness;
mod import;
mod inspect;
mod monitor;
mod outcomes;
mod progress;
mod records;
mod replay;
mod score;
mod serve;
mod train;

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
        /// Explain against this reference population (`all_applicants` or
        /// `near_approve_cutoff`) instead of the artifact's primary one, for review; it must be
        /// the primary or the artifact's alternate.
        #[arg(long, value_enum)]
        reference: Option<crate::artifact::spec::Population>,
    },
    /// Run the decision service (HTTP): by default the bundled demo model on 127.0.0.1:8080;
    /// needs --keys FILE (or PLUMBLINE_KEYS), or --no-auth for a local trial.
    Serve(serve::ServeArgs),
    /// Write invented applications of the demo lender (CSV), and optionally synthetic
    /// group-membership probabilities for the fairness demo. Demo data only.
    DemoData {
        #[arg(long, default_value_t = 10_000)]
        rows: usize,
        #[arg(long, default_value_t = 2026)]
        seed: u64,
        /// Applications CSV.
        #[arg(long)]
        out: PathBuf,
        /// Group-membership probabilities CSV (never model inputs).
        #[arg(long)]
        groups_out: Option<PathBuf>,
        /// The same applications as decision requests (JSON lines) for `score` or the service.
        #[arg(long)]
        requests_out: Option<PathBuf>,
    },
    /// Print a first training spec inferred from a CSV (kinds, ranges, levels, missing values,
    /// placeholder reasons and cutoffs) to edit before `train`; writes nothing.
    DraftSpec {
        /// CSV of past applications with an outcome column.
        #[arg(long)]
        data: PathBuf,
        /// Outcome column (1 = defaulted, 0 = repaid).
        #[arg(long, default_value = "defaulted")]
        target: String,
        /// The kind of model the spec is for.
        #[arg(long, value_enum, default_value_t = crate::train::spec::ModelKind::Logistic)]
        kind: crate::train::spec::ModelKind,
    },
    /// Fit a logistic model or a random forest from a CSV of past applications and a training
    /// spec; writes the artifact only if it validates.
    Train {
        /// CSV with a header naming every field of the spec and the target column.
        #[arg(long)]
        data: PathBuf,
        /// Training spec (fields, reasons, policy, reference population, penalty).
        #[arg(long)]
        spec: PathBuf,
        /// Where to write the artifact.
        #[arg(long)]
        out: PathBuf,
        #[arg(long, default_value_t = 5)]
        folds: usize,
        #[arg(long, default_value_t = 2026)]
        seed: u64,
    },
    /// Bring in a model built elsewhere: an ONNX file (trees and logistic models from
    /// scikit-learn, LightGBM or XGBoost read into our structures; neural networks and SVMs kept
    /// as graphs) read against a training spec and a reference CSV; writes the artifact only if
    /// it validates. An imported model needs its own model-risk review.
    Import {
        /// ONNX model file.
        model: PathBuf,
        /// Training spec (as `draft-spec` writes it); its input columns are the spec's encoded
        /// columns in the order listed. Training-only settings (kind, l2, forest) are ignored.
        #[arg(long)]
        spec: PathBuf,
        /// CSV of development or training rows with the spec's fields and target column: node
        /// covers, reference populations, stability bins and a first measure come from it.
        #[arg(long)]
        reference: PathBuf,
        /// Where to write the artifact.
        #[arg(long)]
        out: PathBuf,
        /// How reference rows weigh in tree node covers.
        #[arg(long, value_enum, default_value_t = crate::import::Covers::Rows)]
        covers: crate::import::Covers,
        /// Graph models: CSV of explanation background rows (the spec's fields; the target
        /// column may be absent). Default: a seeded sample of the reference rows, stratified by
        /// outcome, at most 256.
        #[arg(long)]
        background: Option<PathBuf>,
        /// Graph models: when exact Shapley enumeration is over the per-decision budget,
        /// estimate contributions from seeded permutations (each decision reports standard errors).
        #[arg(long)]
        approximate: bool,
    },
    /// Measure a model on labelled data: AUC, KS, Gini, Brier, log loss, calibration by decile,
    /// outcomes and expected cost at the model's cutoffs and at the cost-optimal cutoff.
    Evaluate {
        #[arg(long)]
        model: PathBuf,
        /// CSV with the model's fields and the outcome column.
        #[arg(long)]
        data: PathBuf,
        /// Outcome column (1 = defaulted, 0 = repaid); by default the one the model was trained
        /// or imported with (its provenance), else `defaulted`.
        #[arg(long)]
        target: Option<String>,
        /// Cost of approving an application that defaults.
        #[arg(long, default_value_t = 5.0)]
        cost_missed_default: f64,
        /// Cost of declining an application that would have repaid.
        #[arg(long, default_value_t = 1.0)]
        cost_lost_good: f64,
        /// Print JSON instead of a table.
        #[arg(long)]
        json: bool,
        /// Also write the validation pictures (ROC, KS, calibration by decile, stability) as a
        /// printable HTML page.
        #[arg(long)]
        html: Option<PathBuf>,
    },
    /// Look up, search and export recorded decisions (the service's compliance look-ups, on the
    /// store directly).
    Records(records::RecordsArgs),
    /// Ongoing monitoring over the recorded decisions: population stability of the score and
    /// every field against the artifact's development bins, back-testing against observed
    /// outcomes, reason trends.
    Monitor(monitor::MonitorArgs),
    /// Observed outcomes (which applications went on to default), loaded for back-testing.
    Outcomes(outcomes::OutcomesArgs),
    /// Decide recorded requests again with a model file or a running service and compare with
    /// what was given: unchanged, probability-only, reason changes, decision flips. Exit 3 when
    /// anything moved beyond tolerance.
    Replay(replay::ReplayArgs),
    /// Fair-lending screening from files: approval rates, adverse impact ratios, significance and
    /// a cutoff sweep per group, from a records export and a group-membership upload.
    Fairness(fairness::FairnessArgs),
    /// Print the key-file entry for an API key read from stdin (its SHA-256; the key itself is
    /// never stored).
    HashKey {
        /// Name of the key's holder, e.g. `los-production`.
        #[arg(long)]
        name: String,
        /// What the key may do.
        #[arg(long, value_enum)]
        role: crate::api::Role,
    },
}

/// Exit status for bad input ([`crate::exit::BAD_INPUT`]).
pub const EXIT_BAD_INPUT: i32 = crate::exit::BAD_INPUT;
/// Exit status for other failures ([`crate::exit::FAILURE`]).
pub const EXIT_FAILURE: i32 = crate::exit::FAILURE;

/// Runs a parsed command; returns the process exit status.
pub fn run(cli: Cli) -> i32 {
    match cli.command {
        Command::Inspect { model, json } => inspect::run(&model, json),
        Command::Score {
            model,
            input,
            reference,
        } => score::run(&model, input.as_deref(), reference),
        Command::Serve(args) => serve::run(args),
        Command::Records(args) => records::run(args),
        Command::Monitor(args) => monitor::run(args),
        Command::Outcomes(args) => outcomes::run(args),
        Command::Fairness(args) => fairness::run(args),
        Command::Replay(args) => replay::run(args),
        Command::HashKey { name, role } => serve::hash_key(&name, role),
        Command::Evaluate {
            model,
            data,
            target,
            cost_missed_default,
            cost_lost_good,
            json,
            html,
        } => evaluate::run(
            &model,
            &data,
            target.as_deref(),
            (cost_missed_default, cost_lost_good),
            (json, html.as_deref()),
        ),
        Command::Train {
            data,
            spec,
            out,
            folds,
            seed,
        } => train::train(&data, &spec, &out, folds, seed),
        Command::Import {
            model,
            spec,
            reference,
            out,
            covers,
            background,
            approximate,
        } => import::run(import::Args {
            model: &model,
            spec: &spec,
            reference: &reference,
            out: &out,
            covers,
            background: background.as_deref(),
            approximate,
        }),
        Command::DraftSpec { data, target, kind } => train::draft_spec(&data, &target, kind),
        Command::DemoData {
            rows,
            seed,
            out,
            groups_out,
            requests_out,
        } => train::demo_data(
            rows,
            seed,
            &out,
            groups_out.as_deref(),
            requests_out.as_deref(),
        ),
    }
}

/// `value` as pretty JSON and a newline. A value that cannot be written is a failure with its
/// cause (exit 1), never empty output that exits 0.
fn pretty<T: serde::Serialize>(value: &T) -> Result<String, (i32, String)> {
    (serde_json::to_string_pretty(value).map(|text| text + "\n")).map_err(|e| {
        (
            EXIT_FAILURE,
            format!("cannot write the output as JSON: {e}"),
        )
    })
}

/// Prints `value` as pretty JSON on stdout; on failure prints why and gives the exit status.
fn print_pretty<T: serde::Serialize>(value: &T) -> Result<(), i32> {
    match pretty(value) {
        Ok(text) => {
            print!("{text}");
            Ok(())
        }
        Err((code, message)) => {
            eprintln!("error: {message}");
            Err(code)
        }
    }
}

fn load(path: &std::path::Path) -> Result<crate::LoadedModel, i32> {
    crate::LoadedModel::from_path(path).map_err(|e| {
        eprintln!("error: model {}: {e}", path.display());
        EXIT_BAD_INPUT
    })
}
