//! `plumbline evaluate`: a model against labelled data, for people (table) or programs (JSON).

use super::{load, EXIT_BAD_INPUT};
use crate::evaluate::stability;
use std::fmt::Write;
use std::path::Path;

pub fn run(
    model: &Path,
    data: &Path,
    target: Option<&str>,
    costs: (f64, f64),
    (json, html): (bool, Option<&Path>),
) -> i32 {
    if !(costs.0.is_finite() && costs.1.is_finite() && costs.0 >= 0.0 && costs.1 >= 0.0) {
        eprintln!("error: costs must be finite and not negative");
        return EXIT_BAD_INPUT;
    }
    let model = match load(model) {
        Ok(m) => m,
        Err(code) => return code,
    };
    let text = match std::fs::read_to_string(data) {
        Ok(t) => t,
        Err(e) => {
            eprintln!("error: cannot read {}: {e}", data.display());
            return EXIT_BAD_INPUT;
        }
    };
    // The outcome column the model was built with, unless the caller names another.
    let recorded = (model.provenance.as_ref())
        .and_then(|p| p.get("target"))
        .and_then(|t| t.as_str())
        .map(str::to_string);
    let target = target
        .map(str::to_string)
        .or(recorded)
        .unwrap_or_else(|| "defaulted".to_string());
    let set = match crate::train::dataset::read_csv(&text, &model.schema, &target) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let n = set.columns.len();
    let (mut p, mut scores) = (Vec::with_capacity(n), Vec::with_capacity(n));
    let bar = super::progress::Bar::counting("scoring", n as u64);
    for x in &set.columns {
        let (pd, log_odds) = model.scorer.probability_and_log_odds(model.scorer.raw(x));
        p.push(pd);
        scores.push(model.policy.scaling.score(log_odds) as f64);
        bar.inc(1);
    }
    drop(bar);
    let Some(r) = crate::evaluate::report(
        &p,
        &set.defaulted,
        model.policy.approve_below,
        model.policy.decline_at_or_above,
        costs.0,
        costs.1,
    ) else {
        eprintln!("error: the data holds one outcome class only; nothing to evaluate");
        return EXIT_BAD_INPUT;
    };
    let shifts = match &model.stability {
        Some(dev) => stability::compare_all(dev, &set.applicants, &scores),
        None => Vec::new(),
    };
    if let Some(path) = html {
        let curve = crate::evaluate::curves::roc(&p, &set.defaulted).unwrap_or_default();
        let title = format!(
            "Validation: {} version {} on {}",
            model.identity.model_id,
            model.identity.version,
            data.display()
        );
        let page = crate::evaluate::html::page(&title, &r, &curve, &shifts);
        if let Err(e) = std::fs::write(path, page) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return super::EXIT_FAILURE;
        }
    }
    if json {
        #[derive(serde::Serialize)]
        struct Out<'a> {
            #[serde(flatten)]
            report: &'a crate::evaluate::Report,
            /// Population stability against the artifact's development bins.
            stability: &'a [stability::Shift],
        }
        let out = Out {
            report: &r,
            stability: &shifts,
        };
        return super::print_pretty(&out).map_or_else(|code| code, |()| 0);
    }
    let mut s = String::new();
    let _ = writeln!(
        s,
        "model {} version {} ({})",
        model.identity.model_id, model.identity.version, model.sha256
    );
    let _ = writeln!(s, "rows {}, default rate {:.4}", r.rows, r.base_rate);
    let _ = writeln!(
        s,
        "AUC {:.4}   Gini {:.4}   KS {:.4}   Brier {:.4}   log loss {:.4}",
        r.auc, r.gini, r.ks, r.brier, r.log_loss
    );
    let _ = writeln!(
        s,
        "\ncalibration by decile of predicted PD\n  {:>6} {:>14} {:>14}",
        "rows", "mean predicted", "observed rate"
    );
    for b in &r.calibration {
        let _ = writeln!(
            s,
            "  {:>6} {:>14.4} {:>14.4}",
            b.rows, b.mean_predicted, b.observed_rate
        );
    }
    let _ = writeln!(
        s,
        "\ncosts: missed default {}, lost good customer {}",
        r.cost_missed_default, r.cost_lost_good
    );
    let _ = writeln!(
        s,
        "  {:<22} {:>7} {:>8} {:>9} {:>8} {:>8} {:>9} {:>9} {:>10}",
        "",
        "PD <",
        "approved",
        "accuracy",
        "caught",
        "missed",
        "lost good",
        "kept good",
        "cost/app"
    );
    for (name, c) in [
        ("model approve cutoff", &r.at_approve_cutoff),
        ("model decline cutoff", &r.at_decline_cutoff),
        ("cost-optimal", &r.cost_optimal),
    ] {
        let _ = writeln!(
            s,
            "  {:<22} {:>7.4} {:>8.4} {:>9.4} {:>8} {:>8} {:>9} {:>9} {:>10.4}",
            name,
            c.cutoff,
            c.approval_rate,
            c.accuracy,
            c.caught_defaults,
            c.missed_defaults,
            c.lost_goods,
            c.approved_goods,
            c.expected_cost_per_application
        );
    }
    match &model.stability {
        None => {
            let _ = writeln!(s, "\nstability: the artifact carries no development bins");
        }
        Some(dev) => {
            let _ = writeln!(
                s,
                "\npopulation stability index against the {} ({} rows); bands are common practice",
                dev.label, dev.rows
            );
            for shift in &shifts {
                let _ = writeln!(
                    s,
                    "  {:<30} {:>8.4}  {}",
                    shift.name, shift.psi, shift.reading
                );
            }
        }
    }
    let _ = writeln!(s, "\naccuracy of approving everyone: {:.4} (a low default rate makes accuracy look good; rank by AUC/KS and choose cutoffs by cost)", r.accuracy_approve_everyone);
    let _ = writeln!(
        s,
        "Model output is decision support; validate with your model-risk function before use."
    );
    print!("{s}");
    0
}
