//! `plumbline train`, `draft-spec` and `demo-data`: from a CSV of past applications to an
//! artifact, or to a first spec to edit; and the demo lender's invented data.

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::train::spec::ModelKind;

pub fn train(
    data: &std::path::Path,
    spec: &std::path::Path,
    out: &std::path::Path,
    folds: usize,
    seed: u64,
) -> i32 {
    let read = |p: &std::path::Path| {
        std::fs::read_to_string(p).map_err(|e| format!("cannot read {}: {e}", p.display()))
    };
    let (csv, spec_text) = match (read(data), read(spec)) {
        (Ok(a), Ok(b)) => (a, b),
        (Err(e), _) | (_, Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let spec: crate::train::build::TrainingSpec = match serde_json::from_str(&spec_text) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: spec {}: {e}", spec.display());
            return EXIT_BAD_INPUT;
        }
    };
    let bar = super::progress::Bar::new();
    let trained = crate::train::build::train_with(&spec, &csv, folds, seed, &bar);
    drop(bar);
    match trained {
        Ok((artifact, report)) => {
            if let Err(e) = std::fs::write(out, artifact) {
                eprintln!("error: cannot write {}: {e}", out.display());
                return EXIT_FAILURE;
            }
            let mean = report.cv_auc.iter().sum::<f64>() / report.cv_auc.len() as f64;
            eprintln!(
                "trained on {} rows, base rate {:.4}; {}-fold CV AUC {:.4} (folds {:?})",
                report.rows,
                report.base_rate,
                report.cv_auc.len(),
                mean,
                report
                    .cv_auc
                    .iter()
                    .map(|a| format!("{a:.4}"))
                    .collect::<Vec<_>>()
            );
            if let Some(fit) = &report.fit {
                eprintln!(
                    "{:<32} {:>14} {:>12}",
                    "column", "coefficient", "std. error"
                );
                let names = std::iter::once("(intercept)".to_string())
                    .chain(report.columns.iter().cloned());
                for ((n, b), se) in names.zip(&fit.coefficients).zip(&fit.std_errors) {
                    eprintln!("{n:<32} {b:>14.6e} {se:>12.4e}");
                }
            }
            for note in &report.notes {
                eprintln!("note: {note}");
            }
            eprintln!("wrote {}", out.display());
            0
        }
        Err(e) => {
            eprintln!("error: {e}\nnothing was written");
            EXIT_BAD_INPUT
        }
    }
}

pub fn demo_data(
    rows: usize,
    seed: u64,
    out: &std::path::Path,
    groups: Option<&std::path::Path>,
    requests: Option<&std::path::Path>,
) -> i32 {
    if rows == 0 || rows > 10_000_000 {
        eprintln!("error: --rows must be 1 to 10000000");
        return EXIT_BAD_INPUT;
    }
    let bar = super::progress::Bar::new();
    let (apps, group_csv) = crate::train::demo_data::applications_csv_with(rows, seed, &bar);
    drop(bar);
    let request_lines = requests.map(|_| crate::train::demo_data::requests_jsonl(&apps));
    let mut writes = vec![(out, apps)];
    if let (Some(r), Some(lines)) = (requests, request_lines) {
        writes.push((r, lines));
    }
    if let Some(g) = groups {
        writes.push((g, group_csv));
    }
    for (path, text) in writes {
        if let Err(e) = std::fs::write(path, text) {
            eprintln!("error: cannot write {}: {e}", path.display());
            return EXIT_FAILURE;
        }
    }
    eprintln!(
        "wrote {rows} invented applications (seed {seed}) to {}",
        out.display()
    );
    0
}

pub fn draft_spec(data: &std::path::Path, target: &str, kind: ModelKind) -> i32 {
    let csv = match std::fs::read_to_string(data) {
        Ok(t) => t,
        Err(e) => {
            eprintln!("error: cannot read {}: {e}", data.display());
            return EXIT_BAD_INPUT;
        }
    };
    let stem = data.file_stem().and_then(|s| s.to_str()).unwrap_or("model");
    let id: String = (stem.chars())
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' {
                c
            } else {
                '-'
            }
        })
        .take(64)
        .collect();
    match crate::train::draft::draft(&csv, target, &id, kind) {
        Ok((mut spec, notes)) => {
            for note in notes {
                eprintln!("note: {note}");
            }
            if kind == ModelKind::Forest {
                spec["forest"] =
                    serde_json::json!({"trees": 100, "max_depth": 8, "min_samples_leaf": 20});
            }
            if let Err(code) = super::print_pretty(&spec) {
                return code;
            }
            eprintln!(
                "draft printed: check every kind, range, level and missing-value policy; rewrite each \"{}\" text; set the cutoffs and scaling the product's policy gives; then run train",
                crate::train::draft::DRAFT_MARK
            );
            0
        }
        Err(e) => {
            eprintln!("error: {e}");
            EXIT_BAD_INPUT
        }
    }
}
