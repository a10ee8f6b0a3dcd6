//! TreeSHAP against reference libraries, on models converted into our artifact format.
//!
//! Fixture: tests/reference/fixtures/expected.json, written by tests/reference/make_fixtures.py
//! with the library versions recorded in its `libraries` field (LightGBM 4.7.0,
//! scikit-learn 1.9.1, shap 0.51.0 at the time of writing; CI regenerates it from PyPI and fails
//! on any difference). Each case names its source, e.g. "LightGBM 4.7.0
//! Booster.predict(X, pred_contrib=True)"; we match each to 1e-9 unless the case states a looser
//! tolerance with its reason (shap's interventional C code works in 32-bit floats).

use plumbline::explain::{Explainer, InterventionalExplainer, PathExplainer};
use plumbline::model::Scorer;
use plumbline::LoadedModel;
use serde_json::Value;
use std::path::Path;

const DIR: &str = "tests/reference/fixtures";

fn explainer_for(model: &LoadedModel, method: &str) -> Explainer {
    let Scorer::Trees(ensemble) = &model.scorer else {
        panic!("reference models are tree ensembles")
    };
    match method {
        "tree_cover_weighted" => Explainer::PathDependent(PathExplainer::new(ensemble)),
        "tree_interventional" => {
            let background = &model.background;
            Explainer::Interventional(InterventionalExplainer::new(ensemble, background))
        }
        other => panic!("unknown method {other}"),
    }
}

#[test]
fn contributions_match_reference_libraries() {
    let fixture: Value =
        serde_json::from_slice(&std::fs::read(Path::new(DIR).join("expected.json")).unwrap())
            .unwrap();
    let cases = fixture["cases"].as_array().unwrap();
    assert!(cases.len() >= 5, "fixture holds too few cases");
    let mut checked = 0;
    for case in cases {
        let name = case["name"].as_str().unwrap();
        let source = case["source"].as_str().unwrap();
        let tolerance = case["tolerance"].as_f64().unwrap_or(1e-9).max(1e-9);
        let model =
            LoadedModel::from_path(&Path::new(DIR).join(case["artifact"].as_str().unwrap()))
                .unwrap();
        let explainer = explainer_for(&model, case["method"].as_str().unwrap());
        assert_eq!(
            plumbline::explain::space_name(model.scorer.space()),
            case["space"].as_str().unwrap(),
            "{name}"
        );
        let base_want = case["rows"][0]["base_value"].as_f64().unwrap();
        assert!(
            (explainer.base_value() - base_want).abs() <= tolerance,
            "{name} ({source}): base value {} vs {base_want}",
            explainer.base_value()
        );
        for (r, row) in case["rows"].as_array().unwrap().iter().enumerate() {
            let x = model
                .schema
                .check_and_encode(&row["applicant"], "applicant")
                .unwrap()
                .columns;
            let output = model.scorer.raw(&x);
            let want_output = row["output"].as_f64().unwrap();
            assert!(
                (output - want_output).abs() <= 1e-9,
                "{name} row {r}: model output {output} vs {want_output} ({source})"
            );
            let mut got = vec![0.0; x.len()];
            explainer.explain_into(&x, &mut got);
            for (c, want) in row["contributions"].as_array().unwrap().iter().enumerate() {
                let want = want.as_f64().unwrap();
                assert!(
                    (got[c] - want).abs() <= tolerance,
                    "{name} row {r} column {c}: {} vs {want} from {source} (tolerance {tolerance})",
                    got[c]
                );
            }
            checked += 1;
        }
    }
    assert!(checked >= 150, "only {checked} rows checked");
}
