//! Replays every recorded request in demo-requests/ against the real service on a loopback port
//! and compares status, content type and body exactly. `PLUMBLINE_BLESS=1` records the current
//! responses instead (review the diff before committing).

use crate::common::server::{key_for, send, TestServer};
use serde_json::Value;

#[test]
fn recorded_pairs_replay_exactly() {
    let server = TestServer::demo();
    let bless = std::env::var_os("PLUMBLINE_BLESS").is_some();
    let mut files: Vec<_> = std::fs::read_dir("demo-requests")
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "json"))
        .collect();
    files.sort();
    assert!(files.len() >= 25, "at least 25 recorded pairs");
    let mut statuses = std::collections::BTreeSet::new();
    for path in files {
        let mut pair: Value =
            serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        let req = &pair["request"];
        let body = match (&req["body"], &req["body_text"]) {
            (Value::Null, Value::String(text)) => Some(text.clone()),
            (Value::Null, _) => None,
            (v, _) => Some(serde_json::to_string(v).unwrap()),
        };
        let (status, content_type, text) = send(
            req["method"].as_str().unwrap(),
            &server.url(req["path"].as_str().unwrap()),
            key_for(req["key"].as_str()),
            req["content_type"].as_str(),
            body.as_deref(),
        );
        let mut body = serde_json::from_str::<Value>(&text).unwrap_or(Value::String(text.clone()));
        mask_record_refs(&mut body);
        let got = serde_json::json!({
            "status": status,
            "content_type": content_type,
            "body": body,
        });
        if bless {
            pair["response"] = got;
            std::fs::write(&path, serde_json::to_string_pretty(&pair).unwrap() + "\n").unwrap();
            continue;
        }
        assert_eq!(got, pair["response"], "{} differs", path.display());
        statuses.insert(status);
    }
    if !bless {
        for s in [200, 400, 401, 403, 404, 413, 415, 422] {
            assert!(statuses.contains(&s), "no recorded pair answers {s}");
        }
    }
}

/// What differs on every run: each decision's record id and time, wherever they appear (the
/// store is fresh per run).
const VARIES: &str = "(varies per decision)";

fn mask_record_refs(v: &mut Value) {
    match v {
        Value::Object(map) => {
            if let Some(Value::Object(r)) = map.get_mut("record") {
                for key in ["decision_id", "decided_at"] {
                    if r.contains_key(key) {
                        r.insert(key.into(), VARIES.into());
                    }
                }
            }
            map.values_mut().for_each(mask_record_refs);
        }
        Value::Array(items) => items.iter_mut().for_each(mask_record_refs),
        // A decision id quoted in a message (e.g. an idempotency conflict) varies too.
        Value::String(text) => {
            let mut i = 0;
            while i + 36 <= text.len() {
                match text.get(i..i + 36) {
                    Some(w) if plumbline::records::ids::is_decision_id(w) => {
                        text.replace_range(i..i + 36, "(decision id)");
                        i += "(decision id)".len();
                    }
                    _ => i += 1,
                }
            }
        }
        _ => {}
    }
}
