//! `plumbline train` on the demo lender's invented data: a valid, deterministic artifact, and
//! clear errors naming row and column for bad data, with nothing written.

use plumbline::train::build::{train_logistic, TrainingSpec};
use plumbline::train::demo_data::applications_csv;
use std::process::Command;

fn spec() -> TrainingSpec {
    serde_json::from_str(&std::fs::read_to_string("models/fernhill-logistic.train.json").unwrap())
        .unwrap()
}

#[test]
fn trains_a_valid_deterministic_artifact() {
    let (csv, _) = applications_csv(6_000, 11);
    let (a, report) = train_logistic(&spec(), &csv, 5, 7).unwrap();
    let (b, _) = train_logistic(&spec(), &csv, 5, 7).unwrap();
    assert_eq!(a, b, "same data, spec and seed give the same bytes");
    let model = plumbline::LoadedModel::from_slice(a.as_bytes()).unwrap();
    let prov = model.provenance.as_ref().unwrap();
    assert_eq!(prov["rows"], 6_000);
    assert_eq!(prov["folds"], 5);
    assert_eq!(
        prov["data_sha256"],
        plumbline::artifact::sha256_hex(csv.as_bytes()).as_str()
    );
    // The generating process is mostly but not wholly linear (interaction, thresholds): a
    // logistic fit separates well, not perfectly. Invented data, so only a sanity range.
    let auc = prov["cv_auc_mean"].as_f64().unwrap();
    assert!((0.65..0.85).contains(&auc), "CV AUC {auc}");
    assert_eq!(report.cv_auc.len(), 5);
    // The fitted signs follow the process: more delinquencies and utilisation, more risk.
    let col = |n: &str| report.columns.iter().position(|c| c == n).unwrap() + 1;
    assert!(report.fit.as_ref().unwrap().coefficients[col("delinquencies_24m")] > 0.0);
    assert!(report.fit.as_ref().unwrap().coefficients[col("revolving_utilization")] > 0.0);
    assert!(report.fit.as_ref().unwrap().coefficients[col("annual_income")] < 0.0);
}

/// The same rows with every outcome (the last cell) set to 0: one class only.
fn all_repaid(csv: &str) -> String {
    let lines: Vec<String> = csv
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                l.to_string()
            } else {
                format!("{}0", &l[..l.len() - 1])
            }
        })
        .collect();
    lines.join("\n")
}

fn corrupt(csv: &str, row: usize, column: &str, value: &str) -> String {
    let mut lines: Vec<String> = csv.lines().map(String::from).collect();
    let c = lines[0].split(',').position(|h| h == column).unwrap();
    let mut cells: Vec<String> = lines[row].split(',').map(String::from).collect();
    cells[c] = value.to_string();
    lines[row] = cells.join(",");
    lines.join("\n") + "\n"
}

#[test]
fn bad_data_is_named_by_row_and_column_and_nothing_is_written() {
    let (csv, _) = applications_csv(800, 3);
    let cases = [
        (
            corrupt(&csv, 5, "annual_income", "lots"),
            "row 5, column annual_income",
        ),
        (
            corrupt(&csv, 9, "housing", "castle"),
            "row 9, column housing",
        ),
        (
            corrupt(&csv, 3, "defaulted", "maybe"),
            "row 3, column defaulted",
        ),
        (
            csv.replace(",debt_to_income,", ",dti,"),
            "no column \"debt_to_income\"",
        ),
        (all_repaid(&csv), "one class"),
        (
            {
                let lines: Vec<String> = csv.lines().map(String::from).collect();
                let c = lines[0]
                    .split(',')
                    .position(|h| h == "inquiries_6m")
                    .unwrap();
                lines
                    .iter()
                    .enumerate()
                    .map(|(i, l)| {
                        if i == 0 {
                            l.clone()
                        } else {
                            let mut v: Vec<&str> = l.split(',').collect();
                            v[c] = "2";
                            v.join(",")
                        }
                    })
                    .collect::<Vec<_>>()
                    .join("\n")
            },
            "inquiries_6m is constant",
        ),
    ];
    let dir = std::env::temp_dir().join(format!("plumbline-train-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    for (i, (data, want)) in cases.iter().enumerate() {
        let data_path = dir.join(format!("data{i}.csv"));
        let out = dir.join(format!("model{i}.json"));
        std::fs::write(&data_path, data).unwrap();
        let run = Command::new(env!("CARGO_BIN_EXE_plumbline"))
            .args([
                "train",
                "--data",
                data_path.to_str().unwrap(),
                "--spec",
                "models/fernhill-logistic.train.json",
                "--out",
                out.to_str().unwrap(),
            ])
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&run.stderr);
        assert_eq!(run.status.code(), Some(2), "case {i}: {err}");
        assert!(err.contains(want), "case {i}: expected {want:?} in {err}");
        assert!(!out.exists(), "case {i}: an artifact was written");
    }
}

/// A forest: smartcore fits, we re-count covers and leaf rates on the training rows. Then the
/// path-dependent base value is exactly the training default rate (every row passes through every
/// tree), the artifact validates (covers add up at every split), and rebuilding is byte-identical.
#[test]
fn trains_a_forest_with_recounted_covers() {
    let mut spec: TrainingSpec = serde_json::from_str(
        &std::fs::read_to_string("models/fernhill-forest.train.json").unwrap(),
    )
    .unwrap();
    spec.forest = Some(plumbline::train::forest::ForestParams {
        trees: 8,
        max_depth: 5,
        min_samples_leaf: 20,
    });
    let (csv, _) = applications_csv(3_000, 5);
    let (a, report) = train_logistic_or_forest(&spec, &csv);
    let (b, _) = train_logistic_or_forest(&spec, &csv);
    assert_eq!(a, b, "rebuilds are byte-identical");
    let model = plumbline::LoadedModel::from_slice(a.as_bytes()).unwrap();
    assert!(
        (model.explainer.base_value() - report.base_rate).abs() < 1e-12,
        "base value {} vs base rate {}",
        model.explainer.base_value(),
        report.base_rate
    );
    let auc = model.provenance.as_ref().unwrap()["cv_auc_mean"]
        .as_f64()
        .unwrap();
    assert!((0.6..0.85).contains(&auc), "CV AUC {auc}");
    let req: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap(),
    )
    .unwrap();
    let d = plumbline::decide_request(&model, &req).unwrap();
    let total = d.contributions.base_value
        + d.contributions
            .fields
            .iter()
            .map(|f| f.contribution)
            .sum::<f64>();
    assert!((total - d.probability_of_default).abs() < 1e-12);
}

fn train_logistic_or_forest(
    spec: &TrainingSpec,
    csv: &str,
) -> (String, plumbline::train::build::TrainReport) {
    plumbline::train::build::train(spec, csv, 3, 9).unwrap()
}

#[test]
fn evaluate_reports_discrimination_calibration_and_costs() {
    let dir = std::env::temp_dir().join(format!("plumbline-eval-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let (csv, _) = applications_csv(2_000, 21);
    let data = dir.join("holdout.csv");
    std::fs::write(&data, &csv).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "evaluate",
            "--model",
            "models/fernhill-logistic.json",
            "--data",
            data.to_str().unwrap(),
            "--json",
            "--html",
            dir.join("validation.html").to_str().unwrap(),
        ])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let r: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(r["rows"], 2_000);
    // The pictures: ROC (its area the report's AUC, as drawn from the same curve), KS and
    // calibration, on a script-free page.
    let page = std::fs::read_to_string(dir.join("validation.html")).unwrap();
    let area = format!("ROC curve (area {:.4})", r["auc"].as_f64().unwrap());
    assert!(page.contains(&area), "{area}");
    assert!(page.contains(&format!(
        "KS: the largest gap ({:.4})",
        r["ks"].as_f64().unwrap()
    )));
    assert_eq!(page.matches("<svg").count(), 3);
    assert!(!page.contains("<script"));
    assert_eq!(r["calibration"].as_array().unwrap().len(), 10);
    let auc = r["auc"].as_f64().unwrap();
    assert!((r["gini"].as_f64().unwrap() - (2.0 * auc - 1.0)).abs() < 1e-12);
    assert!(
        (r["accuracy_approve_everyone"].as_f64().unwrap()
            - (1.0 - r["base_rate"].as_f64().unwrap()))
        .abs()
            < 1e-12
    );
    let opt = r["cost_optimal"]["expected_cost_per_application"]
        .as_f64()
        .unwrap();
    assert!(
        opt <= r["at_approve_cutoff"]["expected_cost_per_application"]
            .as_f64()
            .unwrap()
            + 1e-12
    );
    // One outcome class only: nothing to evaluate, said clearly.
    let one = all_repaid(&csv);
    std::fs::write(&data, one).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "evaluate",
            "--model",
            "models/fernhill-logistic.json",
            "--data",
            data.to_str().unwrap(),
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("one outcome class"));
}

/// `evaluate` reads the outcome column the model was trained with (recorded in provenance),
/// so a model trained on another column name needs no `--target`.
#[test]
fn evaluate_reads_the_trained_target_column() {
    let dir = std::env::temp_dir().join(format!("plumbline-target-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let (csv, _) = applications_csv(3_000, 5);
    let csv = csv.replacen(",defaulted\n", ",went_bad\n", 1);
    let mut spec: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("models/fernhill-logistic.train.json").unwrap(),
    )
    .unwrap();
    spec["target"] = "went_bad".into();
    let (data, spec_path, model) = (
        dir.join("data.csv"),
        dir.join("spec.json"),
        dir.join("m.json"),
    );
    std::fs::write(&data, &csv).unwrap();
    std::fs::write(&spec_path, spec.to_string()).unwrap();
    let bin = env!("CARGO_BIN_EXE_plumbline");
    let p = |s: &std::path::Path| s.display().to_string();
    let out = Command::new(bin)
        .args([
            "train",
            "--data",
            &p(&data),
            "--spec",
            &p(&spec_path),
            "--out",
            &p(&model),
        ])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let out = Command::new(bin)
        .args([
            "evaluate",
            "--model",
            &p(&model),
            "--data",
            &p(&data),
            "--json",
        ])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // Naming another column still wins, and is checked.
    let out = Command::new(bin)
        .args([
            "evaluate",
            "--model",
            &p(&model),
            "--data",
            &p(&data),
            "--target",
            "defaulted",
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no target column \"defaulted\""));
    let _ = std::fs::remove_dir_all(&dir);
}

/// A training CSV saved by a spreadsheet (byte-order mark, CRLF, a quoted cell) reads like the
/// plain one.
#[test]
fn spreadsheet_csv_trains_like_plain_csv() {
    let (csv, _) = applications_csv(2_000, 3);
    let mut lines: Vec<String> = csv.lines().map(String::from).collect();
    lines[1] = lines[1]
        .replacen("FH-DEMO-", "\"FH-DEMO-", 1)
        .replacen(',', "\",", 1);
    let saved = format!("\u{feff}{}\r\n", lines.join("\r\n"));
    let (a, _) = train_logistic(&spec(), &csv, 3, 1).unwrap();
    let (b, _) = train_logistic(&spec(), &saved, 3, 1).unwrap();
    let strip = |t: &str| {
        let mut v: serde_json::Value = serde_json::from_str(t).unwrap();
        v["provenance"]["data_sha256"] = serde_json::Value::Null;
        v
    };
    assert_eq!(strip(&a), strip(&b));
}
