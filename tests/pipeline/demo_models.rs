//! The shipped trained demo models are what models/rebuild-demo.sh makes: regenerate the demo
//! data, train both specs, and compare every byte (deterministic training).

use plumbline::train::build::{train, TrainingSpec};
use plumbline::train::demo_data::applications_csv;

fn rebuilt(spec: &str) -> String {
    let spec: TrainingSpec = serde_json::from_str(&std::fs::read_to_string(spec).unwrap()).unwrap();
    let (csv, _) = applications_csv(20_000, 2026);
    train(&spec, &csv, 5, 2026).unwrap().0
}

fn digest(text: &str) -> String {
    plumbline::artifact::sha256_hex(text.as_bytes())
}

#[test]
fn trained_logistic_rebuilds_byte_for_byte() {
    let shipped = std::fs::read_to_string("models/fernhill-logistic-trained.json").unwrap();
    assert_eq!(
        digest(&rebuilt("models/fernhill-logistic.train.json")),
        digest(&shipped),
        "run models/rebuild-demo.sh and review"
    );
}

#[test]
fn forest_rebuilds_byte_for_byte() {
    let shipped = std::fs::read_to_string("models/fernhill-forest.json").unwrap();
    assert_eq!(
        digest(&rebuilt("models/fernhill-forest.train.json")),
        digest(&shipped),
        "run models/rebuild-demo.sh and review"
    );
    // And it is a working model: a decision explained in probability space, additive.
    let model = plumbline::LoadedModel::from_slice(shipped.as_bytes()).unwrap();
    let req: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap(),
    )
    .unwrap();
    let d = plumbline::decide_request(&model, &req).unwrap();
    assert_eq!(
        serde_json::to_value(d.contributions.space).unwrap(),
        "probability"
    );
    assert_eq!(d.outcome.name(), "decline");
}
