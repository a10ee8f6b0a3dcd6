//! `plumbline monitor`: ongoing monitoring over a store's recorded decisions, on the command
//! line (the service's `GET /v1/monitoring/...` gives the same reports).

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::monitor::{html, StabilityTally};
use clap::{Args, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct MonitorArgs {
    /// The store: `sqlite:PATH` or `postgres://...` (as `serve --store`).
    #[arg(
        long,
        env = "PLUMBLINE_STORE",
        default_value = "sqlite:plumbline-data/records.sqlite3",
        global = true
    )]
    store: String,
    #[command(subcommand)]
    command: MonitorCommand,
}

#[derive(Debug, Subcommand)]
pub enum MonitorCommand {
    /// Population stability of the score and of every field over the decisions of one model
    /// (its id and version) in a range, against the artifact's development bins.
    Stability {
        /// The model artifact whose decisions are read (its development bins are the
        /// baseline).
        #[arg(long)]
        model: PathBuf,
        /// Decided at or after (RFC 3339 UTC time or a date).
        #[arg(long)]
        from: Option<String>,
        /// Decided before (a date includes that whole day).
        #[arg(long)]
        to: Option<String>,
        /// Print the report as JSON instead of a table.
        #[arg(long)]
        json: bool,
        /// Also write the report as a printable HTML page with charts.
        #[arg(long)]
        html: Option<PathBuf>,
    },
}

pub fn run(args: MonitorArgs) -> i32 {
    let MonitorCommand::Stability {
        model,
        from,
        to,
        json,
        html: html_out,
    } = &args.command;
    let model = match super::load(model) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let Some(dev) = &model.stability else {
        eprintln!("error: --model: {} version {} carries no development bins (`stability`); train or import it with this release to get them", model.identity.model_id, model.identity.version);
        return EXIT_BAD_INPUT;
    };
    let (id, version) = (&model.identity.model_id, &model.identity.version);
    let get = |name: &str| match name {
        "from" => from.as_deref(),
        "to" => to.as_deref(),
        "model_id" => Some(id.as_str()),
        "model_version" => Some(version.as_str()),
        _ => None,
    };
    let query = match crate::records::parse_query(get) {
        Ok(q) => q,
        Err(e) => {
            eprintln!("error: --{}: {} [{}]", e.param, e.message, e.rule);
            return EXIT_BAD_INPUT;
        }
    };
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
    let mut tally = StabilityTally::new(dev);
    let target = format!("stability model_id={id} model_version={version}");
    let read = store.export(&query, &mut |r| {
        tally.add_record(r);
        true
    });
    let logged = read.and_then(|n| {
        let entry = super::records::access("stability", &target, Some(n as i64));
        store.log_access(&entry)
    });
    if let Err(e) = logged {
        eprintln!("error: store {}: {e}", store.describe());
        return EXIT_FAILURE;
    }
    let report = tally.finish((id, version), (query.from.clone(), query.to.clone()));
    if let Some(path) = html_out {
        if let Err(e) = std::fs::write(path, html::page(&report)) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    if *json {
        return super::print_pretty(&report).map_or_else(|code| code, |()| 0);
    }
    println!(
        "population stability: {} version {}, {} decisions against {} ({} rows)",
        report.model_id,
        report.model_version,
        report.decisions,
        report.development,
        report.development_rows
    );
    println!(
        "  {:<30} {:>8} {:<7} {:>12} {:>12}",
        "distribution", "PSI", "band", "missing dev", "missing now"
    );
    for d in &report.distributions {
        println!(
            "  {:<30} {:>8.4} {:<7} {:>11.1}% {:>11.1}%",
            d.name,
            d.psi,
            d.band,
            100.0 * d.missing_development,
            100.0 * d.missing_now
        );
    }
    if report.unreadable > 0 {
        println!(
            "  records whose request could not be read: {}",
            report.unreadable
        );
    }
    println!("\nBands (common practice): below 0.10 stable, 0.10 to 0.25 watch, above 0.25 act.");
    println!("{}", report.caution);
    0
}
