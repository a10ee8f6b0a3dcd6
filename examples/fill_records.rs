//! Fills a decision store with demo decisions for the report and export benchmarks: N invented
//! applications of the demo lender, decided by a model, recorded in groups of 10,000; and the
//! synthetic group-membership CSV for the same application ids (demo data only).
//!
//!   cargo run --release --example fill_records -- STORE ROWS MODEL GROUPS_CSV

use plumbline::records::{self, Record};
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let [_, store, rows, model, groups_out] = args.as_slice() else {
        eprintln!("usage: fill_records STORE ROWS MODEL GROUPS_CSV");
        std::process::exit(2);
    };
    let rows: usize = rows.parse().expect("ROWS is a number");
    let model =
        plumbline::LoadedModel::from_path(std::path::Path::new(model)).expect("the model loads");
    let store = records::open(store).expect("the store opens");
    let started = Instant::now();
    let (csv, groups) = plumbline::train::demo_data::applications_csv(rows, 2026);
    std::fs::write(groups_out, groups).expect("groups written");
    let data = plumbline::train::dataset::read_csv(&csv, &model.schema, "defaulted")
        .expect("demo data reads");
    let mut group = Vec::with_capacity(10_000);
    for (i, applicant) in data.applicants.into_iter().enumerate() {
        let request = serde_json::json!({"application_id": format!("FH-DEMO-{:07}", i + 1), "applicant": applicant});
        let d = plumbline::decide_request(&model, &request).expect("demo applicants decide");
        let response = serde_json::to_string(&d).expect("serialises");
        let canonical = plumbline::artifact::canonical_json(&request);
        let now = records::now();
        group.push(Record {
            decision_id: records::ids::new_decision_id(),
            application_id: d.application_id.clone(),
            idempotency_key: None,
            received_at: now.clone(),
            decided_at: now,
            model_id: d.model.id.clone(),
            model_version: d.model.version.clone(),
            model_sha256: d.model.sha256.clone(),
            plumbline_version: plumbline::VERSION.into(),
            request_sha256: plumbline::artifact::sha256_hex(canonical.as_bytes()),
            outcome: d.outcome,
            probability: d.probability_of_default,
            score: d.score,
            request: canonical,
            response,
            requested_by: "fill-records".into(),
            final_action: None,
        });
        if group.len() == 10_000 {
            store.insert_group(&group).expect("written");
            group.clear();
        }
    }
    if !group.is_empty() {
        store.insert_group(&group).expect("written");
    }
    eprintln!(
        "recorded {rows} decisions in {:.1} s into {}",
        started.elapsed().as_secs_f64(),
        store.describe()
    );
}
