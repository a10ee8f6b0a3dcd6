//! Fuzzing on stable Rust with proptest: hostile input at every parser that takes it from
//! outside — model artifacts, decision envelopes, membership uploads (CSV and JSON), cursors and
//! records query strings. The property is always the same: an answer (a value or an error that
//! names a field), never a panic. Runs are bounded here (`FUZZ_CASES`, default below); the
//! longer run is `bench/fuzz.sh`. A finding is fixed and kept below as a named regression case.

use crate::common;
use plumbline::fairness::membership;
use plumbline::records::{self, Cursor};
use plumbline::LoadedModel;
use proptest::prelude::*;
use serde_json::{json, Value};
use std::sync::OnceLock;

/// Cases per property: `FUZZ_CASES` from the environment, or `default`.
fn cases(default: u32) -> u32 {
    (std::env::var("FUZZ_CASES").ok())
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// Any JSON value, leaning towards the edges: huge and tiny numbers, long and odd strings,
/// nesting.
fn json_value() -> impl Strategy<Value = Value> {
    let leaf = prop_oneof![
        Just(Value::Null),
        any::<bool>().prop_map(Value::Bool),
        any::<i64>().prop_map(|i| json!(i)),
        any::<u64>().prop_map(|u| json!(u)),
        any::<f64>().prop_filter_map("JSON numbers are finite", |f| {
            serde_json::Number::from_f64(f).map(Value::Number)
        }),
        prop_oneof![
            Just(1e308),
            Just(-1e308),
            Just(5e-324),
            Just(0.0),
            Just(-0.0)
        ]
        .prop_map(|f| json!(f)),
        ".{0,24}".prop_map(Value::String),
        "[0-9T:.Z+-]{0,30}".prop_map(Value::String),
    ];
    leaf.prop_recursive(4, 48, 6, |inner| {
        prop_oneof![
            prop::collection::vec(inner.clone(), 0..6).prop_map(Value::Array),
            prop::collection::btree_map("[a-z_]{0,12}", inner, 0..6)
                .prop_map(|m| Value::Object(m.into_iter().collect())),
        ]
    })
}

/// Every node of `v` (depth first), counted.
fn count_nodes(v: &Value) -> usize {
    1 + match v {
        Value::Array(a) => a.iter().map(count_nodes).sum(),
        Value::Object(o) => o.values().map(count_nodes).sum(),
        _ => 0,
    }
}

/// Replaces node number `at` (depth first, modulo the count) with `with`; `None` deletes it
/// from its parent instead (the root is then replaced by null).
fn mutate(v: &mut Value, at: usize, with: Option<Value>) {
    fn walk(v: &mut Value, at: &mut usize, with: &mut Option<Option<Value>>) -> bool {
        if *at == 0 {
            *v = with.take().flatten().unwrap_or(Value::Null);
            return true;
        }
        *at -= 1;
        match v {
            Value::Array(a) => {
                for i in 0..a.len() {
                    if *at == 0 && with.as_ref().is_some_and(Option::is_none) {
                        a.remove(i);
                        return true;
                    }
                    if walk(&mut a[i], at, with) {
                        return true;
                    }
                }
            }
            Value::Object(o) => {
                let keys: Vec<String> = o.keys().cloned().collect();
                for k in keys {
                    if *at == 0 && with.as_ref().is_some_and(Option::is_none) {
                        o.remove(&k);
                        return true;
                    }
                    if walk(o.get_mut(&k).unwrap(), at, with) {
                        return true;
                    }
                }
            }
            _ => {}
        }
        false
    }
    let mut at = at % count_nodes(v);
    walk(v, &mut at, &mut Some(with));
}

fn demo_artifact(name: &str) -> &'static Value {
    static LOGISTIC: OnceLock<Value> = OnceLock::new();
    static FOREST: OnceLock<Value> = OnceLock::new();
    let cell = if name == "logistic" {
        &LOGISTIC
    } else {
        &FOREST
    };
    cell.get_or_init(|| {
        let path = format!("models/fernhill-{name}.json");
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
    })
}

fn demo_model() -> &'static LoadedModel {
    static MODEL: OnceLock<LoadedModel> = OnceLock::new();
    MODEL.get_or_init(|| {
        LoadedModel::from_path(std::path::Path::new("models/fernhill-logistic.json")).unwrap()
    })
}

/// The demo's recorded decision requests (the bodies of its POST /v1/decisions pairs).
fn demo_requests() -> &'static [Value] {
    static REQUESTS: OnceLock<Vec<Value>> = OnceLock::new();
    REQUESTS.get_or_init(|| {
        let mut out = Vec::new();
        let mut files: Vec<_> = std::fs::read_dir("demo-requests")
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| p.extension().is_some_and(|x| x == "json"))
            .collect();
        files.sort();
        for f in files {
            let pair: Value = serde_json::from_str(&std::fs::read_to_string(f).unwrap()).unwrap();
            if pair["request"]["body"].is_object() {
                out.push(pair["request"]["body"].clone());
            }
        }
        out
    })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: cases(96), ..ProptestConfig::default() })]

    /// A demo artifact with one to three nodes replaced or deleted loads or is refused by JSON path; one
    /// that loads decides a recorded request or refuses it, never panics.
    #[test]
    fn a_mutated_artifact_loads_or_is_refused(forest in any::<bool>(), changes in prop::collection::vec((any::<usize>(), prop::option::of(json_value())), 1..4), req in any::<prop::sample::Index>()) {
        let mut doc = demo_artifact(if forest { "forest" } else { "logistic" }).clone();
        for (at, with) in changes {
            mutate(&mut doc, at, with);
        }
        if let Ok(model) = LoadedModel::from_value(&doc) {
            let request = req.get(demo_requests());
            let _ = plumbline::decide_request(&model, request);
        }
    }

    /// Raw bytes, and a demo artifact's text cut or with one byte changed, are refused cleanly.
    #[test]
    fn artifact_bytes_are_parsed_or_refused(bytes in prop::collection::vec(any::<u8>(), 0..256), cut in any::<prop::sample::Index>(), flip in any::<(prop::sample::Index, u8)>()) {
        let _ = LoadedModel::from_slice(&bytes);
        let text = serde_json::to_vec(demo_artifact("logistic")).unwrap();
        let _ = LoadedModel::from_slice(&text[..cut.index(text.len())]);
        let mut changed = text.clone();
        let i = flip.0.index(changed.len());
        changed[i] = flip.1;
        let _ = LoadedModel::from_slice(&changed);
    }

    /// Any JSON as a decision request, and recorded requests with one node replaced or deleted:
    /// a decision or field errors, each naming a field and a rule.
    #[test]
    fn any_envelope_is_decided_or_refused_by_field(body in json_value(), req in any::<prop::sample::Index>(), at in any::<usize>(), with in prop::option::of(json_value())) {
        for request in [body, {
            let mut r = req.get(demo_requests()).clone();
            mutate(&mut r, at, with);
            r
        }] {
            if let Err(e) = plumbline::decide_request(demo_model(), &request) {
                prop_assert!(!e.errors.is_empty());
                prop_assert!(e.errors.iter().all(|f| !f.rule.is_empty()));
            }
        }
    }

    /// Applicant objects keyed by the model's own field names with edge values.
    #[test]
    fn edge_values_on_real_fields_are_decided_or_refused(values in prop::collection::vec(json_value(), 10)) {
        let names = ["requested_amount", "annual_income", "debt_to_income", "revolving_utilization", "months_since_oldest_account", "delinquencies_24m", "inquiries_6m", "months_with_employer", "housing", "loan_purpose"];
        let applicant: serde_json::Map<String, Value> = names.iter().map(|n| n.to_string()).zip(values).collect();
        let request = json!({"application_id": "FH-FUZZ-1", "applicant": applicant});
        if let Ok(d) = plumbline::decide_request(demo_model(), &request) {
            prop_assert!(d.probability_of_default.is_finite());
        }
    }

    /// Membership uploads: any text as CSV, any JSON and any bytes as the JSON form, and valid
    /// uploads with one node changed.
    #[test]
    fn membership_uploads_are_read_or_refused(text in "(?s).{0,200}", rows in prop::collection::vec(("[A-Z0-9-]{0,8}", "[a-z ]{0,4}", "[0-9.e-]{0,6}"), 0..8), body in json_value(), bytes in prop::collection::vec(any::<u8>(), 0..128), at in any::<usize>(), with in prop::option::of(json_value())) {
        let _ = membership::from_csv(&text, "d", membership::SUM_TOLERANCE);
        let mut csv = String::from("application_id,a,b\n");
        for (id, g, p) in &rows {
            csv.push_str(&format!("{id},{p},{g}\n"));
        }
        let _ = membership::from_csv(&csv, "d", membership::SUM_TOLERANCE);
        let _ = membership::from_json(body.to_string().as_bytes(), membership::SUM_TOLERANCE);
        let _ = membership::from_json(&bytes[..], membership::SUM_TOLERANCE);
        let mut valid = json!({"dimensions": [{"name": "g", "rows": [
            {"application_id": "FH-1", "group": "a"},
            {"application_id": "FH-2", "probabilities": {"a": 0.5, "b": 0.5}}]}]});
        mutate(&mut valid, at, with);
        let _ = membership::from_json(valid.to_string().as_bytes(), membership::SUM_TOLERANCE);
    }

    /// Cursors: any token is decoded or refused; every cursor this build makes comes back equal.
    #[test]
    fn cursors_round_trip_and_junk_is_refused(token in ".{0,300}", hex in "[0-9a-f]{0,300}", seconds in 0i64..253_402_300_799, nanos in 0u32..1_000_000_000) {
        let _ = Cursor::decode(&token);
        let _ = Cursor::decode(&hex);
        let at = time::OffsetDateTime::from_unix_timestamp(seconds).unwrap().replace_nanosecond(nanos).unwrap();
        let decided_at = records::normalise_time(&at.format(&time::format_description::well_known::Rfc3339).unwrap(), false).unwrap();
        let cursor = Cursor { decided_at, decision_id: plumbline::records::ids::new_decision_id() };
        prop_assert_eq!(Cursor::decode(&cursor.encode()), Some(cursor));
    }

    /// Records query strings as the service reads them: decoded, then checked parameter by
    /// parameter (times of any year, cursors, limits, outcomes).
    #[test]
    fn records_query_strings_are_read_or_refused(pairs in prop::collection::vec((prop_oneof![Just("from"), Just("to"), Just("limit"), Just("cursor"), Just("outcome"), Just("final_action"), Just("model_id"), Just("application_id")], prop_oneof![".{0,30}", "[0-9]{1,5}-[0-9]{2}-[0-9]{2}(T[0-9]{2}:[0-9]{2}:[0-9]{2}(\\.[0-9]{1,12})?(Z|[+-][0-9]{2}:[0-9]{2}))?", "-?[0-9]{1,25}"]), 0..6), raw in ".{0,80}") {
        let mut q = form_urlencoded::Serializer::new(String::new());
        for (k, v) in &pairs {
            q.append_pair(k, v);
        }
        for text in [q.finish(), raw] {
            let params: std::collections::HashMap<String, String> = form_urlencoded::parse(text.as_bytes()).into_owned().collect();
            let _ = records::parse_query(|name| params.get(name).map(String::as_str));
        }
    }
}

/// The same query strings through the running service: 200 or a 400 naming the parameter,
/// never a dropped connection or a 500.
#[test]
fn records_query_strings_over_http_get_an_answer() {
    let server = common::server::TestServer::demo();
    let mut runner = proptest::test_runner::TestRunner::new(ProptestConfig {
        cases: cases(48),
        ..ProptestConfig::default()
    });
    let strategy = prop::collection::vec(("[a-z_]{1,14}", ".{0,24}"), 0..5);
    runner
        .run(&strategy, |pairs| {
            let mut q = form_urlencoded::Serializer::new(String::new());
            for (k, v) in &pairs {
                q.append_pair(k, v);
            }
            let url = server.url(&format!("/v1/decisions?{}", q.finish()));
            let (status, _, body) =
                common::server::send("GET", &url, Some(common::server::REVIEW), None, None);
            prop_assert!(status == 200 || status == 400, "{url}: {status} {body}");
            Ok(())
        })
        .unwrap();
}
