//! `plumbline monitor`: ongoing monitoring over a store's recorded decisions, on the command
//! line (the service's `GET /v1/monitoring/...` gives the same reports).

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::monitor::{html, Period, StabilityTally, TrendTally};
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
    /// Back-testing: the recorded probabilities of one model (its id and version) in a range
    /// against the observed outcomes loaded with `plumbline outcomes load`.
    Outcomes {
        /// The model artifact whose decisions are read (its score scale sets the bands).
        #[arg(long)]
        model: PathBuf,
        /// Decided at or after (RFC 3339 UTC time or a date).
        #[arg(long)]
        from: Option<String>,
        /// Decided before (a date includes that whole day).
        #[arg(long)]
        to: Option<String>,
        /// Print the report as JSON instead of tables.
        #[arg(long)]
        json: bool,
        /// Also write the report as a printable HTML page with charts.
        #[arg(long)]
        html: Option<PathBuf>,
    },
    /// How often each reason code was a principal reason among declines and referrals, by
    /// week or month and model version, with the change against the previous period.
    Reasons {
        #[arg(long)]
        model_id: String,
        /// One version only (default: every version, each with its own periods).
        #[arg(long)]
        model_version: Option<String>,
        /// Decided at or after (RFC 3339 UTC time or a date).
        #[arg(long)]
        from: Option<String>,
        /// Decided before (a date includes that whole day).
        #[arg(long)]
        to: Option<String>,
        #[arg(long, value_enum, default_value_t = Period::Month)]
        period: Period,
        /// Print JSON instead of a table.
        #[arg(long, conflicts_with = "csv")]
        json: bool,
        /// Print CSV lines instead of a table.
        #[arg(long)]
        csv: bool,
        /// Also write the report as a printable HTML page with a chart per code.
        #[arg(long)]
        html: Option<PathBuf>,
    },
}

pub fn run(args: MonitorArgs) -> i32 {
    match &args.command {
        MonitorCommand::Stability {
            model,
            from,
            to,
            json,
            html,
        } => stability(&args.store, model, (from, to), *json, html.as_deref()),
        MonitorCommand::Outcomes {
            model,
            from,
            to,
            json,
            html,
        } => super::backtest::run(&args.store, model, (from, to), *json, html.as_deref()),
        MonitorCommand::Reasons {
            model_id,
            model_version,
            from,
            to,
            period,
            json,
            csv,
            html,
        } => reasons(
            &args.store,
            (model_id, model_version.as_deref()),
            (from, to),
            *period,
            (*json, *csv),
            html.as_deref(),
        ),
    }
}

pub(super) type Range<'a> = (&'a Option<String>, &'a Option<String>);

fn stability(
    store_at: &str,
    model: &std::path::Path,
    (from, to): Range<'_>,
    json: bool,
    html_out: Option<&std::path::Path>,
) -> i32 {
    let model = match super::load(model) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let Some(dev) = &model.stability else {
        eprintln!("error: --model: {} version {} carries no development bins (`stability`); train or import it with this release to get them", model.identity.model_id, model.identity.version);
        return EXIT_BAD_INPUT;
    };
    let (id, version) = (&model.identity.model_id, &model.identity.version);
    let mut tally = StabilityTally::new(dev);
    let (query, store) = match read_model_records(
        store_at,
        (id, Some(version)),
        (from, to),
        "stability",
        &mut |r| tally.add_record(r),
    ) {
        Ok(read) => read,
        Err(code) => return code,
    };
    let report = tally.finish((id, version), (query.from.clone(), query.to.clone()));
    if report.decisions == 0 {
        eprintln!("error: no decision of {id} version {version} is recorded in {} in the range asked for (every share would be zero); widen --from/--to, or check the model", store.describe());
        return EXIT_BAD_INPUT;
    }
    if let Some(path) = html_out {
        if let Err(e) = std::fs::write(path, html::page(&report)) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    if json {
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

/// Streams the records of one model (and version, if given) in a range to `sink`, then writes
/// the read to the store's access log, as the service does: the query and the store, or the
/// exit status after printing why.
fn read_model_records(
    store_at: &str,
    model: (&str, Option<&str>),
    range: Range<'_>,
    action: &str,
    sink: &mut dyn FnMut(&crate::records::Record),
) -> Result<
    (
        crate::records::Query,
        std::sync::Arc<dyn crate::records::Store>,
    ),
    i32,
> {
    read_model(store_at, model, range, action, &mut |store, query| {
        store.export(query, &mut |r| {
            sink(r);
            true
        })
    })
}

/// Runs `read` (how many records it read) over the query of one model in a range, then writes
/// the read to the access log.
pub(super) fn read_model(
    store_at: &str,
    (id, version): (&str, Option<&str>),
    (from, to): Range<'_>,
    action: &str,
    read: &mut dyn FnMut(
        &dyn crate::records::Store,
        &crate::records::Query,
    ) -> Result<u64, crate::records::StoreError>,
) -> Result<
    (
        crate::records::Query,
        std::sync::Arc<dyn crate::records::Store>,
    ),
    i32,
> {
    let get = |name: &str| match name {
        "from" => from.as_deref(),
        "to" => to.as_deref(),
        "model_id" => Some(id),
        "model_version" => version,
        _ => None,
    };
    let query = crate::records::parse_query(get).map_err(|e| {
        let flag = e.param.replace('_', "-");
        eprintln!("error: --{flag}: {} [{}]", e.message, e.rule);
        EXIT_BAD_INPUT
    })?;
    let store = crate::records::open_existing(store_at).map_err(|e| {
        eprintln!("error: store {}: {e}", crate::records::redacted(store_at));
        EXIT_FAILURE
    })?;
    let target = format!(
        "{action} model_id={id} model_version={} from={} to={}",
        version.unwrap_or(""),
        from.as_deref().unwrap_or(""),
        to.as_deref().unwrap_or("")
    );
    let read = read(&*store, &query);
    let logged = read
        .and_then(|n| store.log_access(&super::records::access(action, &target, Some(n as i64))));
    if let Err(e) = logged {
        eprintln!("error: store {}: {e}", store.describe());
        return Err(EXIT_FAILURE);
    }
    Ok((query, store))
}

fn reasons(
    store_at: &str,
    (id, version): (&str, Option<&str>),
    (from, to): Range<'_>,
    period: Period,
    (json, csv): (bool, bool),
    html_out: Option<&std::path::Path>,
) -> i32 {
    let mut tally = TrendTally::new(period);
    let (query, _) = match read_model_records(
        store_at,
        (id, version),
        (from, to),
        "reason_trends",
        &mut |r| tally.add_record(r),
    ) {
        Ok(read) => read,
        Err(code) => return code,
    };
    let report = tally.finish(id, (query.from.clone(), query.to.clone()));
    if let Some(path) = html_out {
        if let Err(e) = std::fs::write(path, html::trends_page(&report)) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    if json {
        return super::print_pretty(&report).map_or_else(|code| code, |()| 0);
    }
    if csv {
        print!("{}", report.csv());
        return 0;
    }
    println!("reason trends: {id} by {}", period.name());
    for p in &report.periods {
        println!(
            "  {} version {}: {} declines, {} referrals",
            p.period, p.model_version, p.declines, p.referrals
        );
        for r in &p.reasons {
            let change = r
                .change
                .map_or(String::new(), |c| format!(" ({:+.1} pt)", 100.0 * c));
            println!(
                "    {:<12} {:>6} {:>6.1}%{change}",
                r.code,
                r.count,
                100.0 * r.share
            );
        }
    }
    0
}
