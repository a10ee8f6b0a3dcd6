//! What training leaves for reviewers beyond the fit: both reference populations of Regulation B
//! comment 9(b)(2)-5, development-sample stability bins (and PSI against later data), stated
//! risk directions, and a draft spec inferred from a CSV. Invented demo data throughout.

use plumbline::artifact::spec::Population;
use plumbline::train::build::{train, TrainingSpec};
use plumbline::train::demo_data::applications_csv;
use plumbline::train::spec::ModelKind;
use plumbline::LoadedModel;
use serde_json::Value;
use std::process::Command;

fn spec(path: &str) -> TrainingSpec {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn logistic_on(csv: &str) -> LoadedModel {
    let (text, _) = train(&spec("models/fernhill-logistic.train.json"), csv, 3, 5).unwrap();
    LoadedModel::from_slice(text.as_bytes()).unwrap()
}

#[test]
fn both_reference_populations_are_carried_and_each_adds_up() {
    let (csv, _) = applications_csv(6_000, 31);
    let model = logistic_on(&csv);
    assert_eq!(model.reference.population, Population::NearApproveCutoff);
    let all = model
        .explained_against(Population::AllApplicants)
        .expect("the alternate population is carried");
    assert!(all.alternate.is_none());
    // For a linear model the log-odds at the mean row is the mean of the rows' log-odds, so the
    // all-applicants base value must equal the average fitted log-odds of the training rows.
    let data = plumbline::train::dataset::read_csv(&csv, &model.schema, "defaulted").unwrap();
    let mean_log_odds = data
        .columns
        .iter()
        .map(|x| model.scorer.raw(x))
        .sum::<f64>()
        / data.columns.len() as f64;
    let base = all.explainer.base_value();
    assert!(
        (base - mean_log_odds).abs() < 1e-9,
        "{base} vs {mean_log_odds}"
    );
    // Applicants just inside the cutoff are less risky than the average applicant.
    assert!(model.explainer.base_value() < base);
    let request: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap(),
    )
    .unwrap();
    for m in [&model, &all] {
        let d = plumbline::decide_request(m, &request).unwrap();
        let sum: f64 = d.contributions.fields.iter().map(|f| f.contribution).sum();
        let log_odds = (d.probability_of_default / (1.0 - d.probability_of_default)).ln();
        assert!((d.contributions.base_value + sum - log_odds).abs() < 1e-9);
        assert!(!d.reasons.is_empty(), "a decline gives reasons");
    }
    // A forest carries the near-cutoff applicants as an interventional background sample.
    let mut forest = spec("models/fernhill-forest.train.json");
    forest.forest = Some(plumbline::train::forest::ForestParams {
        trees: 6,
        max_depth: 5,
        min_samples_leaf: 20,
    });
    let (text, _) = train(&forest, &csv, 3, 5).unwrap();
    let forest = LoadedModel::from_slice(text.as_bytes()).unwrap();
    let near = forest
        .explained_against(Population::NearApproveCutoff)
        .unwrap();
    assert!(!near.background.is_empty() && near.background.len() <= 200);
}

fn evaluate(model: &std::path::Path, csv: &str, name: &str) -> Value {
    let dir = std::env::temp_dir().join(format!("plumbline-psi-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let data = dir.join(name);
    std::fs::write(&data, csv).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(["evaluate", "--json", "--model"])
        .arg(model)
        .arg("--data")
        .arg(&data)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

fn psi_of(report: &Value, name: &str) -> f64 {
    report["stability"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["name"] == name)
        .unwrap_or_else(|| panic!("no stability entry for {name}"))["psi"]
        .as_f64()
        .unwrap()
}

/// Every value of one CSV column multiplied by `factor` (rounded to whole dollars).
fn scaled(csv: &str, column: &str, factor: f64) -> String {
    let mut lines = csv.lines();
    let header = lines.next().unwrap();
    let at = header.split(',').position(|h| h == column).unwrap();
    let mut out = vec![header.to_string()];
    for line in lines {
        let mut cells: Vec<String> = line.split(',').map(String::from).collect();
        let v: f64 = cells[at].parse().unwrap();
        cells[at] = format!("{}", (v * factor).round());
        out.push(cells.join(","));
    }
    out.join("\n") + "\n"
}

#[test]
fn stability_bins_describe_the_training_data_and_psi_flags_a_shift() {
    let (csv, _) = applications_csv(6_000, 32);
    let (text, _) = train(&spec("models/fernhill-logistic.train.json"), &csv, 3, 5).unwrap();
    let model = LoadedModel::from_slice(text.as_bytes()).unwrap();
    let st = model
        .stability
        .as_ref()
        .expect("training writes stability bins");
    assert_eq!(st.rows, 6_000);
    let income = &st.fields["annual_income"];
    assert_eq!(income.shares.len(), income.edges.len() + 1);
    assert!(
        income.shares.iter().all(|&s| (0.08..0.12).contains(&s)),
        "deciles: {:?}",
        income.shares
    );
    // The generator leaves revolving utilisation missing for 6% of applicants (models/README.md).
    let util = &st.fields["revolving_utilization"];
    assert!((0.045..0.075).contains(&util.missing), "{}", util.missing);
    assert_eq!(st.fields["housing"].levels.len(), 4);

    let dir = std::env::temp_dir().join(format!("plumbline-psi-model-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("model.json");
    std::fs::write(&path, &text).unwrap();
    // The development data against itself: identical shares, PSI exactly 0.
    let same = evaluate(&path, &csv, "same.csv");
    for s in same["stability"].as_array().unwrap() {
        assert_eq!(s["psi"], 0.0, "{}", s["name"]);
    }
    // A fresh sample of the same process: stable (PSI < 0.10, common practice).
    let (fresh, _) = applications_csv(6_000, 33);
    let fresh = evaluate(&path, &fresh, "fresh.csv");
    for s in fresh["stability"].as_array().unwrap() {
        assert!(s["psi"].as_f64().unwrap() < 0.10, "{s}");
    }
    // Incomes halved: the income distribution and the score move (PSI >= 0.25, common practice).
    let shifted = evaluate(&path, &scaled(&csv, "annual_income", 0.5), "shifted.csv");
    assert!(psi_of(&shifted, "annual_income") >= 0.25);
    assert!(psi_of(&shifted, "score") > psi_of(&fresh, "score"));
    assert!(
        psi_of(&shifted, "debt_to_income") < 1e-12,
        "other fields unchanged"
    );
}

#[test]
fn a_slope_against_the_stated_risk_direction_is_refused() {
    let (csv, _) = applications_csv(4_000, 34);
    let mut s = spec("models/fernhill-logistic.train.json");
    let f = s
        .features
        .iter_mut()
        .find(|f| f.name == "inquiries_6m")
        .unwrap();
    f.monotone = Some(plumbline::artifact::spec::Monotone::Decreasing);
    let err = train(&s, &csv, 3, 5).unwrap_err().to_string();
    assert!(
        err.contains("$.model.coefficients.inquiries_6m") && err.contains("[monotone]"),
        "{err}"
    );
}

#[test]
fn a_draft_spec_is_inferred_and_refused_until_its_texts_are_written() {
    let (csv, _) = applications_csv(3_000, 35);
    let (draft, notes) =
        plumbline::train::draft::draft(&csv, "defaulted", "draft-model", ModelKind::Logistic)
            .unwrap();
    assert!(
        notes.iter().any(|n| n.contains("left out application_id")),
        "{notes:?}"
    );
    let field = |name: &str| {
        draft["features"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["name"] == name)
            .unwrap()
            .clone()
    };
    assert_eq!(
        field("annual_income")["kind"],
        "count",
        "whole dollars, never negative"
    );
    assert_eq!(field("debt_to_income")["kind"], "number");
    assert_eq!(field("delinquencies_24m")["kind"], "count");
    assert_eq!(
        field("revolving_utilization")["missing"]["policy"],
        "impute"
    );
    assert_eq!(field("requested_amount")["missing"]["policy"], "reject");
    let housing = field("housing");
    assert_eq!(housing["kind"], "category");
    assert_eq!(housing["levels"].as_array().unwrap().len(), 4);
    assert_eq!(
        housing["base_level"], housing["levels"][0],
        "most frequent level first"
    );
    assert!(draft["features"]
        .as_array()
        .unwrap()
        .iter()
        .all(|f| f["name"] != "defaulted"));

    let as_spec: TrainingSpec = serde_json::from_value(draft.clone()).unwrap();
    let err = train(&as_spec, &csv, 3, 5).unwrap_err().to_string();
    assert!(
        err.contains("DRAFT:") && err.contains("description") && err.contains("score_provider"),
        "{err}"
    );

    let mut edited = draft;
    edited["description"] = "Test model from an inferred draft".into();
    edited["score_provider"] = "A test lender".into();
    for r in edited["reasons"].as_array_mut().unwrap() {
        let code = r["code"].as_str().unwrap().to_lowercase();
        r["text"] = format!("The applicant's {code} compared with approved applicants").into();
    }
    let edited: TrainingSpec = serde_json::from_value(edited).unwrap();
    let (text, _) = train(&edited, &csv, 3, 5).unwrap();
    LoadedModel::from_slice(text.as_bytes()).unwrap();
}
