//! Fills a decision store with demo decisions for the report and export benchmarks: N invented
//! applications of the demo lender, decided by a model over the past 18 months, recorded in
//! groups of 10,000; the synthetic group-membership CSV for the same application ids; and,
//! when asked, an outcomes CSV for back-testing: each approved or referred application's
//! invented default flag, observed 6 to 17 months after its decision, where that time has
//! passed (declined applicants are not observed). Demo data only.
//!
//!   cargo run --release --example fill_records -- STORE ROWS MODEL GROUPS_CSV [OUTCOMES_CSV [every]]
//!
//! With `every` (for the monitoring benchmark), every decision gets an outcome, observed when the
//! months have passed or else today.

use plumbline::records::{self, Record};
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let (store, rows, model, groups_out, outcomes_out, every) = match args.as_slice() {
        [_, s, r, m, g] => (s, r, m, g, None, false),
        [_, s, r, m, g, o] => (s, r, m, g, Some(o), false),
        [_, s, r, m, g, o, e] if e == "every" => (s, r, m, g, Some(o), true),
        _ => {
            eprintln!("usage: fill_records STORE ROWS MODEL GROUPS_CSV [OUTCOMES_CSV [every]]");
            std::process::exit(2);
        }
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
    let mut outcomes = String::from("application_id,defaulted,observed_at\n");
    let end = time::OffsetDateTime::now_utc();
    let span = time::Duration::days(548);
    let stored = time::macros::format_description!(
        "[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:6]Z"
    );
    let day = time::macros::format_description!("[year]-[month]-[day]");
    for (i, applicant) in data.applicants.into_iter().enumerate() {
        let request = serde_json::json!({"application_id": format!("FH-DEMO-{:07}", i + 1), "applicant": applicant});
        let d = plumbline::decide_request(&model, &request).expect("demo applicants decide");
        let response = serde_json::to_string(&d).expect("serialises");
        let canonical = plumbline::artifact::canonical_json(&request);
        // Spread evenly over the past 18 months, oldest first.
        let decided = end - span * (1.0 - i as f64 / rows as f64);
        let now = decided.format(&stored).expect("a time this century");
        let observed = decided + time::Duration::days(183 + (i as i64 * 7919) % 335);
        let seen = d.outcome != plumbline::policy::Outcome::Decline && observed < end;
        if outcomes_out.is_some() && (seen || every) {
            let flag = u8::from(data.defaulted[i]);
            let at = observed.min(end).format(&day).expect("a date this century");
            outcomes.push_str(&format!("{},{flag},{at}\n", d.application_id));
        }
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
    if let Some(path) = outcomes_out {
        std::fs::write(path, outcomes).expect("outcomes written");
    }
    eprintln!(
        "recorded {rows} decisions in {:.1} s into {}",
        started.elapsed().as_secs_f64(),
        store.describe()
    );
}
