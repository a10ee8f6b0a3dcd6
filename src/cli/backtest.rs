//! `plumbline monitor outcomes`: back-testing on the command line (the service's
//! `GET /v1/monitoring/outcomes` gives the same report).

use super::monitor::{read_model, Range};
use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::monitor::calibration::BandCheck;
use crate::monitor::{backtest_html, BackTestTally};

fn print_bands(heading: &str, bands: &[BandCheck]) {
    if bands.is_empty() {
        return;
    }
    println!("\n{heading}");
    println!(
        "  {:<24} {:>9} {:>8} {:>9} {:>9} {:>19} {:>10}  rating",
        "band", "decisions", "defaults", "expected", "observed", "95% interval", "binomial p"
    );
    for b in bands {
        let interval = b.interval.map_or(String::new(), |[lo, hi]| {
            format!("{:.2}%-{:.2}%", 100.0 * lo, 100.0 * hi)
        });
        let p = b.binomial_p.map_or(String::new(), |p| format!("{p:.4}"));
        println!(
            "  {:<24} {:>9} {:>8} {:>8.2}% {:>8.2}% {:>19} {:>10}  {}",
            b.label,
            b.decisions,
            b.defaults,
            100.0 * b.expected_rate,
            100.0 * b.observed_rate,
            interval,
            p,
            b.rating.replace('_', " ")
        );
    }
}

pub fn run(
    store_at: &str,
    model: &std::path::Path,
    range: Range<'_>,
    json: bool,
    html_out: Option<&std::path::Path>,
) -> i32 {
    let model = match super::load(model) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let (id, version) = (&model.identity.model_id, &model.identity.version);
    let scaling = model.policy.scaling;
    let mut tally = BackTestTally::new(scaling.points, scaling.pdo);
    let (query, store) = match read_model(
        store_at,
        (id, Some(version)),
        range,
        "back_test",
        &mut |store, query| {
            store.with_outcomes(query, &mut |d| {
                tally.add(d);
                true
            })
        },
    ) {
        Ok(read) => read,
        Err(code) => return code,
    };
    let (report, curve) = tally.finish((id, version), (query.from.clone(), query.to.clone()));
    if report.decisions == 0 {
        eprintln!("error: no decision of {id} version {version} is recorded in {} in the range asked for; widen --from/--to, or check the model", store.describe());
        return EXIT_BAD_INPUT;
    }
    if let Some(path) = html_out {
        if let Err(e) = std::fs::write(path, backtest_html::page(&report, &curve)) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    if json {
        return super::print_pretty(&report).map_or_else(|code| code, |()| 0);
    }
    println!(
        "back-test: {id} version {version}, {} decisions, {} with an observed outcome, {} defaulted",
        report.decisions, report.with_outcome, report.defaults
    );
    if report.observed_before_decision > 0 {
        println!(
            "  outcomes observed before their decision, left out: {}",
            report.observed_before_decision
        );
    }
    match &report.discrimination {
        Some(d) => println!(
            "  AUC {:.4}  Gini {:.4}  KS {:.4} (at probability {:.4})",
            d.auc, d.gini, d.ks, d.ks_threshold
        ),
        None => println!(
            "  AUC, Gini, KS: not rated (fewer than {} defaulters or non-defaulters)",
            report.rules.min_defaults
        ),
    }
    if let Some(b) = report.brier {
        println!("  Brier score {b:.4}");
    }
    print_bands("By score band", &report.by_score_band);
    print_bands("By probability decile", &report.by_decile);
    print_bands(
        "By months from decision to observation",
        &report.by_months_since_decision,
    );
    println!("\nBy decision outcome");
    for o in &report.by_outcome {
        let rate = |r: Option<f64>| r.map_or("-".to_string(), |r| format!("{:.2}%", 100.0 * r));
        println!(
            "  {:<18} {:>9} decisions {:>9} with outcome {:>8} defaults  expected {:>7}  observed {:>7}",
            o.outcome,
            o.decisions,
            o.with_outcome,
            o.defaults,
            rate(o.expected_rate),
            rate(o.observed_rate)
        );
    }
    println!(
        "\nA band with fewer than {} defaults observed and expected is not rated; the binomial test is one-sided at {} (common practice).",
        report.rules.min_defaults, report.rules.alpha
    );
    println!("{}", report.caution);
    0
}
