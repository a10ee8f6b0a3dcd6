//! ONNX import checked against onnxruntime and the libraries that trained the models.
//!
//! Fixture: tests/reference/fixtures/onnx/, written by tests/reference/make_onnx.py with the
//! versions recorded in its expected.json `libraries` (scikit-learn 1.9.1, LightGBM 4.7.0,
//! XGBoost 3.2.0, shap 0.51.0, skl2onnx 1.20.0, onnxmltools 1.16.0, onnxruntime 1.31.1 when
//! written; CI regenerates it from PyPI and fails on any difference).
//!
//! - Probabilities: onnxruntime's, to [`PROBABILITY_TOLERANCE`]. onnxruntime sums leaf weights and
//!   linear terms in float32 and returns float32, so it is itself about one float32 step from the
//!   exact sum of the stored weights, which plumbline computes in float64.
//! - Branches: rows at, and one float32 (or float64) step either side of, every threshold of the
//!   first trees of four models (BRANCH_LEQ, BRANCH_LT with missing values, through a Scaler, on a
//!   float64 input). A wrong branch moves the output by a whole leaf, far beyond the tolerance.
//! - Contributions: the exporting library's own exact values (shap TreeExplainer path-dependent,
//!   LightGBM pred_contrib, XGBoost pred_contribs, shap LinearExplainer) to 1e-6, the leaf weights
//!   and coefficients being float32 in the file and float64 in the library.

use plumbline::import::{import, Covers, ImportError, ImportOptions};
use plumbline::LoadedModel;
use serde_json::Value;
use std::path::{Path, PathBuf};

const DIR: &str = "tests/reference/fixtures/onnx";
/// Largest |plumbline - onnxruntime| accepted for a probability of a tree or logistic model:
/// onnxruntime's own float32 rounding (1.1e-7 measured; a float32 step near 0.5 is 6e-8).
const PROBABILITY_TOLERANCE: f64 = 2e-7;
/// The same for graph models (networks, SVMs), whose layers both runtimes compute in float32
/// in their own order, and whose SVM kernel plumbline sums in float64 (1.9e-7 measured).
const GRAPH_PROBABILITY_TOLERANCE: f64 = 1e-6;
/// Contributions and base values against the exporting library.
const CONTRIBUTION_TOLERANCE: f64 = 1e-6;

fn path(name: &str) -> PathBuf {
    Path::new(DIR).join(name)
}

fn fixture() -> Value {
    serde_json::from_slice(&std::fs::read(path("expected.json")).unwrap()).unwrap()
}

fn run(case: &Value) -> Result<String, ImportError> {
    let s = |k: &str| case[k].as_str().unwrap();
    let covers = match case["covers"].as_str().unwrap_or("rows") {
        "hessian" => Covers::Hessian,
        _ => Covers::Rows,
    };
    let background =
        (case["background"].as_str()).map(|b| std::fs::read_to_string(path(b)).unwrap());
    import(
        &std::fs::read(path(s("model"))).unwrap(),
        &std::fs::read_to_string(path(s("spec"))).unwrap(),
        &std::fs::read_to_string(path(s("reference"))).unwrap(),
        &ImportOptions {
            covers,
            background,
            approximate: false,
        },
    )
    .map(|(text, _)| text)
}

fn imported(case: &Value) -> LoadedModel {
    let name = case["name"].as_str().unwrap();
    let text = run(case).unwrap_or_else(|e| panic!("{name}: {e}"));
    LoadedModel::from_slice(text.as_bytes()).unwrap()
}

fn encode(model: &LoadedModel, applicant: &Value) -> Vec<f64> {
    model
        .schema
        .check_and_encode(applicant, "")
        .unwrap()
        .columns
}

fn probability(model: &LoadedModel, x: &[f64]) -> f64 {
    let raw = model.scorer.raw(x);
    model.scorer.probability_and_log_odds(raw).0
}

#[test]
fn probabilities_match_onnxruntime_at_and_beside_every_threshold() {
    let f = fixture();
    let mut checked = 0;
    let mut worst = 0.0f64;
    for group in ["cases", "edges"] {
        for case in f[group].as_array().unwrap() {
            let name = case["name"].as_str().unwrap();
            let model = imported(case);
            let mut case_worst = 0.0f64;
            for (r, row) in case["rows"].as_array().unwrap().iter().enumerate() {
                let p = probability(&model, &encode(&model, &row["applicant"]));
                let want = row["onnxruntime"].as_f64().unwrap();
                let d = (p - want).abs();
                worst = worst.max(d);
                case_worst = case_worst.max(d);
                let tolerance = if case["background"].is_string() {
                    GRAPH_PROBABILITY_TOLERANCE
                } else {
                    PROBABILITY_TOLERANCE
                };
                assert!(
                    d <= tolerance,
                    "{group} {name} row {r}: {p} vs onnxruntime {want} ({})",
                    row["applicant"]
                );
                checked += 1;
            }
            eprintln!("{group} {name}: largest difference from onnxruntime {case_worst:e}");
        }
    }
    assert!(checked > 1500, "only {checked} rows checked");
    eprintln!("{checked} rows, largest difference from onnxruntime {worst:e}");
}

#[test]
fn contributions_match_the_exporting_libraries() {
    let f = fixture();
    let cases = f["cases"].as_array().unwrap();
    assert!(cases.len() >= 13);
    for case in cases {
        let name = case["name"].as_str().unwrap();
        let source = case["contribution_source"].as_str().unwrap();
        let model = imported(case);
        let mut worst = 0.0f64;
        assert_eq!(
            plumbline::explain::space_name(model.scorer.space()),
            case["space"].as_str().unwrap(),
            "{name}"
        );
        for (r, row) in case["rows"].as_array().unwrap().iter().enumerate() {
            let x = encode(&model, &row["applicant"]);
            let (base, phi) = plumbline::explain::explain(&model.explainer, &x);
            let output = model.scorer.raw(&x);
            assert!(
                plumbline::explain::is_additive(base, &phi, output),
                "{name} row {r}: not additive"
            );
            let want_base = row["base_value"].as_f64().unwrap();
            assert!(
                (base - want_base).abs() <= CONTRIBUTION_TOLERANCE,
                "{name} ({source}) row {r}: base value {base} vs {want_base}"
            );
            let want: Vec<f64> = (row["contributions"].as_array().unwrap().iter())
                .map(|v| v.as_f64().unwrap())
                .collect();
            for (j, (got, want)) in phi.iter().zip(&want).enumerate() {
                worst = worst.max((got - want).abs());
                assert!(
                    (got - want).abs() <= CONTRIBUTION_TOLERANCE,
                    "{name} ({source}) row {r} column {j}: {got} vs {want}"
                );
            }
        }
        eprintln!("{name}: largest difference from {source}: {worst:e}");
    }
}

#[test]
fn refusals_name_the_node_or_attribute_and_the_reason() {
    let f = fixture();
    let refusals = f["refusals"].as_array().unwrap();
    assert!(refusals.len() >= 12);
    for case in refusals {
        let name = case["name"].as_str().unwrap();
        let err = std::panic::catch_unwind(|| run(case))
            .unwrap_or_else(|_| panic!("{name}: import panicked"))
            .expect_err(name)
            .to_string();
        for word in case["expect"].as_array().unwrap() {
            let word = word.as_str().unwrap();
            assert!(err.contains(word), "{name}: {err:?} does not say {word:?}");
        }
    }
}

#[test]
fn reimport_is_byte_identical_and_decides_identically() {
    let f = fixture();
    for case in f["cases"].as_array().unwrap().iter().take(4) {
        let name = case["name"].as_str().unwrap();
        let (a, b) = (run(case).unwrap(), run(case).unwrap());
        assert_eq!(a, b, "{name}: two imports differ");
        let (ma, mb) = (
            LoadedModel::from_slice(a.as_bytes()).unwrap(),
            LoadedModel::from_slice(b.as_bytes()).unwrap(),
        );
        for row in case["rows"].as_array().unwrap().iter().take(5) {
            let request =
                serde_json::json!({"application_id": "FX-1", "applicant": row["applicant"]});
            let da =
                serde_json::to_string(&plumbline::decide_request(&ma, &request).unwrap()).unwrap();
            let db =
                serde_json::to_string(&plumbline::decide_request(&mb, &request).unwrap()).unwrap();
            assert_eq!(da, db, "{name}");
        }
    }
}

#[test]
fn provenance_records_the_source_file() {
    let f = fixture();
    let case = &f["cases"][0];
    let model = imported(case);
    let bytes = std::fs::read(path(case["model"].as_str().unwrap())).unwrap();
    let p = model.provenance.as_ref().unwrap();
    assert_eq!(p["onnx"]["sha256"], plumbline::artifact::sha256_hex(&bytes));
    assert_eq!(p["onnx"]["producer_name"], "skl2onnx");
    assert_eq!(p["onnx"]["producer_version"], f["libraries"]["skl2onnx"]);
    assert_eq!(p["onnx"]["graph_name"], "ONNX(RandomForestClassifier)");
    assert!(p["onnx"]["opsets"]
        .as_array()
        .unwrap()
        .iter()
        .any(|o| o["domain"] == "ai.onnx.ml"));
    assert_eq!(p["ignored_spec_settings"], serde_json::json!(["kind"]));
    assert!(model.identity.producer.contains("import (skl2onnx"));
}

/// The Shapley computation on a function whose answer is known in closed form: for a linear f,
/// the interventional value of field i is beta_i * (x_i - mean of the background's x_i).
#[test]
fn shapley_values_of_a_linear_graph_are_its_terms() {
    use plumbline::explain::shapley::{Mode, ShapleyExplainer};
    let f = fixture();
    let lg = &f["linear_graph"];
    let bytes = std::fs::read(path(lg["model"].as_str().unwrap())).unwrap();
    let (proto, _) = plumbline::onnx::decode(&bytes).unwrap();
    let graph = std::sync::Arc::new(plumbline::model::graph::compile(&proto).unwrap());
    let w: Vec<f64> = (lg["weights"].as_array().unwrap().iter())
        .map(|v| v.as_f64().unwrap())
        .collect();
    let csv = std::fs::read_to_string(path("background.csv")).unwrap();
    let background: Vec<Vec<f64>> = (csv.lines().skip(1))
        .map(|l| l.split(',').map(|c| c.parse().unwrap()).collect())
        .collect();
    let groups = (0..w.len()).map(|j| j..j + 1).collect();
    let explainer = ShapleyExplainer::new(graph.clone(), &background, groups, Mode::Exact).unwrap();
    // The background rows are float32 values, so the closed form's mean is exact here.
    let mean: Vec<f64> = (0..w.len())
        .map(|j| background.iter().map(|b| b[j]).sum::<f64>() / background.len() as f64)
        .collect();
    for row in f["cases"][0]["rows"].as_array().unwrap().iter().take(10) {
        let x: Vec<f64> = (0..w.len())
            .map(|j| row["applicant"][format!("x{j}")].as_f64().unwrap())
            .collect();
        let mut phi = vec![0.0; w.len()];
        explainer.explain_into(&x, &mut phi, &mut Vec::new());
        for j in 0..w.len() {
            let want = w[j] * (x[j] - mean[j]);
            assert!(
                (phi[j] - want).abs() <= 1e-6,
                "field {j}: {} vs {want}",
                phi[j]
            );
        }
        let total = explainer.base_value() + phi.iter().sum::<f64>();
        assert!((total - graph.probability(&x)).abs() <= 1e-12);
    }
}

/// Sampled estimates: additive exactly, each within a few standard errors of the exact value,
/// and the decision says they are estimated.
#[test]
fn sampled_estimates_are_additive_and_close_to_exact() {
    let f = fixture();
    let case = (f["cases"].as_array().unwrap().iter())
        .find(|c| c["name"] == "mlp_relu")
        .unwrap();
    let text = run(case).unwrap();
    let exact = LoadedModel::from_slice(text.as_bytes()).unwrap();
    let mut artifact: Value = serde_json::from_str(&text).unwrap();
    artifact["explanation"]["method"] = "shapley_sampled".into();
    artifact["explanation"]["samples"] = 64.into();
    artifact["explanation"]["seed"] = 7.into();
    let sampled = LoadedModel::from_value(&artifact).unwrap();
    for row in case["rows"].as_array().unwrap().iter().take(5) {
        let request = serde_json::json!({"application_id": "FX-S", "applicant": row["applicant"]});
        let d = plumbline::decide_request(&sampled, &request).unwrap();
        let e = plumbline::decide_request(&exact, &request).unwrap();
        let c = &d.contributions;
        let sum: f64 = c.fields.iter().map(|f| f.contribution).sum();
        assert!((c.base_value + sum - c.output).abs() <= 1e-9);
        assert_eq!(c.output, e.contributions.output);
        assert!(c.estimate.is_some() && e.contributions.estimate.is_none());
        for (s, x) in c.fields.iter().zip(&e.contributions.fields) {
            let se = s.standard_error.unwrap();
            assert!(se > 0.0 && x.standard_error.is_none());
            assert!(
                (s.contribution - x.contribution).abs() <= 5.0 * se + 1e-6,
                "{}: {} vs exact {} (se {se})",
                s.field,
                s.contribution,
                x.contribution
            );
        }
        let json = serde_json::to_value(&d).unwrap();
        assert_eq!(json["contributions"]["method"], "shapley_sampled");
        assert_eq!(json["contributions"]["estimate"]["permutations"], 64);
        assert!(json["contributions"]["fields"][0]["standard_error"].is_number());
    }
}

/// The shortcuts (a network's first layer walked in Gray-code order, an RBF kernel factored over
/// fields) give the values of evaluating every hybrid row in full.
#[test]
fn shortcuts_agree_with_full_evaluation() {
    let f = fixture();
    for name in ["mlp_relu", "svm_rbf"] {
        let case = (f["cases"].as_array().unwrap().iter())
            .find(|c| c["name"] == name)
            .unwrap();
        let model = imported(case);
        let plumbline::explain::Explainer::Shapley(fast) = &model.explainer else {
            panic!("{name}: not a Shapley explainer")
        };
        let full = fast.clone().without_shortcuts();
        for row in case["rows"].as_array().unwrap().iter().take(5) {
            let x = encode(&model, &row["applicant"]);
            let (mut a, mut b) = (vec![0.0; x.len()], vec![0.0; x.len()]);
            fast.explain_into(&x, &mut a, &mut Vec::new());
            full.explain_into(&x, &mut b, &mut Vec::new());
            for (j, (a, b)) in a.iter().zip(&b).enumerate() {
                assert!((a - b).abs() <= 1e-7, "{name} column {j}: {a} vs {b}");
            }
        }
    }
}
