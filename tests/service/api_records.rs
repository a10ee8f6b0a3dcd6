//! Decision records through the service: every decision is retrievable byte for byte,
//! adverse-action content comes from the record, retries are idempotent, searches page with
//! cursors and exports stream JSON lines or CSV. Run on SQLite and on PostgreSQL.

use crate::common::server::{demo_auth, send, TestServer, REVIEW, SCORING};
use crate::common::stores;
use plumbline::api::Limits;
use serde_json::{json, Value};
use std::path::PathBuf;

const JSON: Option<&str> = Some("application/json");

fn request(id: &str, key: Option<&str>, dti: f64) -> String {
    let mut r = json!({
        "application_id": id,
        "applicant": {"requested_amount": 18000, "annual_income": 31000, "debt_to_income": dti,
            "revolving_utilization": 88, "months_since_oldest_account": 14, "delinquencies_24m": 2,
            "inquiries_6m": 5, "months_with_employer": 4, "housing": "rent", "loan_purpose": "other"}
    });
    if let Some(k) = key {
        r["idempotency_key"] = k.into();
    }
    r.to_string()
}

fn approvable(id: &str) -> String {
    json!({"application_id": id, "applicant": {"requested_amount": 12000, "annual_income": 85000,
        "debt_to_income": 14.5, "revolving_utilization": 22, "months_since_oldest_account": 190,
        "delinquencies_24m": 0, "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage",
        "loan_purpose": "home_improvement"}})
    .to_string()
}

fn post(server: &TestServer, body: &str) -> (u16, String, Option<String>) {
    let r = ureq::post(&server.url("/v1/decisions"))
        .set("Authorization", &format!("Bearer {SCORING}"))
        .set("Content-Type", "application/json")
        .send_string(body);
    let r = match r {
        Ok(r) => r,
        Err(ureq::Error::Status(_, r)) => r,
        Err(e) => panic!("{e}"),
    };
    let replayed = r.header("x-response-from-record").map(String::from);
    (r.status(), r.into_string().unwrap(), replayed)
}

fn review(server: &TestServer, path: &str) -> (u16, String, String) {
    send("GET", &server.url(path), Some(REVIEW), None, None)
}

fn suite(store: Option<String>) {
    let server = match store {
        Some(s) => TestServer::start_with(
            vec![PathBuf::from("models/fernhill-logistic.json")],
            demo_auth(),
            Limits::default(),
            Some(s),
        ),
        None => TestServer::demo(),
    };
    // A decline, retrievable byte for byte.
    let (status, body, _) = post(&server, &request("FH-REC-1", None, 41.0));
    assert_eq!(status, 200);
    let decision: Value = serde_json::from_str(&body).unwrap();
    let id = decision["record"]["decision_id"]
        .as_str()
        .unwrap()
        .to_string();
    let (status, ct, text) = review(&server, &format!("/v1/decisions/{id}"));
    assert_eq!((status, ct.as_str()), (200, "application/json"));
    let raw: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(raw["response"], decision);
    assert!(
        text.contains(&format!("\"response\":{body}")),
        "stored bytes are the sent bytes"
    );
    assert_eq!(raw["model"]["sha256"], decision["model"]["sha256"]);
    assert_eq!(raw["request"]["application_id"], "FH-REC-1");

    // Adverse-action content: the reasons as given, in order, with the score and date.
    let (status, _, text) = review(&server, &format!("/v1/decisions/{id}/adverse-action"));
    assert_eq!(status, 200);
    let notice: Value = serde_json::from_str(&text).unwrap();
    let given: Vec<&Value> = decision["reasons"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| &r["code"])
        .collect();
    let noticed: Vec<&Value> = notice["principal_reasons"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| &r["code"])
        .collect();
    assert_eq!(given, noticed);
    assert_eq!(notice["credit_score"]["score"], decision["score"]);
    assert_eq!(
        notice["decision_date"].as_str().unwrap(),
        &decision["record"]["decided_at"].as_str().unwrap()[..10]
    );
    assert_eq!(notice["model"]["version"], "0.1.0");
    assert!(notice["caution"].as_str().unwrap().contains("Regulation B"));

    // An approval has no adverse action.
    let (_, body, _) = post(&server, &approvable("FH-REC-2"));
    let approved: Value = serde_json::from_str(&body).unwrap();
    assert_eq!(approved["outcome"], "approve");
    let (status, _, _) = review(
        &server,
        &format!(
            "/v1/decisions/{}/adverse-action",
            approved["record"]["decision_id"].as_str().unwrap()
        ),
    );
    assert_eq!(status, 409);

    // Idempotency: the same key and body gives the stored bytes, marked, writing nothing; the
    // same key with another body is a 409 naming the key.
    let first = post(&server, &request("FH-REC-3", Some("retry-3"), 30.0));
    let again = post(&server, &request("FH-REC-3", Some("retry-3"), 30.0));
    assert_eq!((first.0, again.0), (200, 200));
    assert_eq!(first.1, again.1, "the stored response, byte for byte");
    assert_eq!((first.2, again.2.as_deref()), (None, Some("true")));
    let other = post(&server, &request("FH-REC-3", Some("retry-3"), 31.0));
    assert_eq!(other.0, 409);
    assert!(other.1.contains("retry-3"));
    // The key is looked up first: a different body that is also invalid is still the conflict.
    let invalid = post(&server, &request("FH-REC-3", Some("retry-3"), -5.0));
    assert_eq!(invalid.0, 409, "{}", invalid.1);
    let (_, _, text) = review(&server, "/v1/decisions?application_id=FH-REC-3");
    assert_eq!(
        serde_json::from_str::<Value>(&text).unwrap()["decisions"]
            .as_array()
            .unwrap()
            .len(),
        1
    );

    // A batch is recorded too, one record per decided item.
    let batch = json!({"items": [serde_json::from_str::<Value>(&request("FH-REC-B", None, 20.0)).unwrap(), {"application_id": "FH-REC-B"}]});
    let (status, _, text) = send(
        "POST",
        &server.url("/v1/decisions/batch"),
        Some(SCORING),
        JSON,
        Some(&batch.to_string()),
    );
    assert_eq!(status, 200);
    let b: Value = serde_json::from_str(&text).unwrap();
    let bid = b["results"][0]["decision"]["record"]["decision_id"]
        .as_str()
        .unwrap();
    assert_eq!(review(&server, &format!("/v1/decisions/{bid}")).0, 200);
    assert_eq!(b["results"][1]["status"], 422);

    // Search pages by cursor, oldest first, without gaps or repeats.
    for n in 0..12 {
        assert_eq!(
            post(
                &server,
                &request(&format!("FH-PAGE-{n}"), None, 20.0 + n as f64)
            )
            .0,
            200
        );
    }
    let mut seen = Vec::new();
    let mut path = "/v1/decisions?limit=5".to_string();
    loop {
        let (status, _, text) = review(&server, &path);
        assert_eq!(status, 200, "{text}");
        let page: Value = serde_json::from_str(&text).unwrap();
        seen.extend(
            page["decisions"]
                .as_array()
                .unwrap()
                .iter()
                .map(|d| d["decision_id"].as_str().unwrap().to_string()),
        );
        match page["next_cursor"].as_str() {
            Some(c) => path = format!("/v1/decisions?limit=5&cursor={c}"),
            None => break,
        }
    }
    let total = seen.len();
    assert_eq!(total, 16, "2 + 1 + 1 + 12 decisions recorded");
    assert_eq!(
        seen.iter().collect::<std::collections::BTreeSet<_>>().len(),
        total
    );
    let (_, _, text) = review(&server, "/v1/decisions?outcome=approve");
    let approves: Value = serde_json::from_str(&text).unwrap();
    assert!(approves["decisions"]
        .as_array()
        .unwrap()
        .iter()
        .all(|d| d["outcome"] == "approve"));

    // Export: JSON lines of full records, CSV of summaries; both streamed.
    let (status, ct, text) = review(&server, "/v1/decisions/export?from=2000-01-01");
    assert_eq!((status, ct.as_str()), (200, "application/x-ndjson"));
    let lines: Vec<Value> = text
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert_eq!(lines.len(), total);
    assert!(lines.iter().any(|l| l["response"] == decision));
    let (status, ct, text) = review(&server, "/v1/decisions/export?format=csv&outcome=decline");
    assert_eq!((status, ct.as_str()), (200, "text/csv; charset=utf-8"));
    let mut rows = text.lines();
    assert!(rows
        .next()
        .unwrap()
        .starts_with("decision_id,application_id,"));
    assert!(rows.all(|r| r.contains(",decline,")));

    // Bad look-ups: unknown id 404, malformed cursor 400, reversed range 400, bad limit 400.
    assert_eq!(
        review(
            &server,
            "/v1/decisions/019ad7c2-3f10-7a4b-9c2e-5d6f7a8b9c0d"
        )
        .0,
        404
    );
    assert_eq!(review(&server, "/v1/decisions/not-an-id").0, 404);
    assert_eq!(review(&server, "/v1/decisions?cursor=abcd").0, 400);
    assert_eq!(
        review(&server, "/v1/decisions?from=2026-12-02&to=2026-12-01").0,
        400
    );
    assert_eq!(
        review(&server, "/v1/decisions/export?from=yesterday").0,
        400
    );
    assert_eq!(review(&server, "/v1/decisions?limit=0").0, 400);
    assert_eq!(review(&server, "/v1/decisions/export?format=xml").0, 400);
    // Times that cannot be held are a 400 naming the parameter, not a dropped connection: the
    // day after 9999-12-31 has a five-digit year.
    for path in [
        "/v1/decisions?to=9999-12-31",
        "/v1/decisions/export?to=9999-12-31",
        "/v1/decisions?from=2026-02-30",
        "/v1/decisions?from=2026-12-01T09:30:00%2B01:00",
    ] {
        let (status, _, text) = review(&server, path);
        assert!(
            status == 400 && text.contains("\"field\":\""),
            "{path}: {status} {text}"
        );
    }
    let (status, _, text) = review(&server, "/v1/decisions?to=9999-12-31");
    assert!(status == 400 && text.contains("time_range"), "{text}");
    assert_eq!(review(&server, "/v1/decisions?from=9999-12-31").0, 200);
}

#[test]
fn records_over_http_on_sqlite() {
    suite(None);
}

#[test]
fn records_over_http_on_postgres() {
    let Some(db) = stores::postgres() else { return };
    suite(Some(db.url.clone()));
}

#[test]
fn records_off_is_said_plainly() {
    let server = TestServer::start_with(
        vec![PathBuf::from("models/fernhill-logistic.json")],
        demo_auth(),
        Limits::default(),
        None,
    );
    let (status, body, _) = post(&server, &approvable("FH-OFF-1"));
    assert_eq!(status, 200);
    assert!(!body.contains("\"record\""));
    let (status, _, text) = review(&server, "/v1/decisions");
    assert_eq!(status, 404);
    assert!(text.contains("records-off"));
}

#[test]
fn records_command_line_reads_the_embedded_store() {
    let server = TestServer::demo();
    let (_, body, _) = post(&server, &request("FH-CLI-1", None, 41.0));
    let id = serde_json::from_str::<Value>(&body).unwrap()["record"]["decision_id"]
        .as_str()
        .unwrap()
        .to_string();
    let store = server.store.clone().unwrap();
    let run = |args: &[&str]| {
        std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
            .arg("records")
            .args(args)
            .args(["--store", &store])
            .output()
            .unwrap()
    };
    let got = run(&["get", &id]);
    assert!(
        got.status.success(),
        "{}",
        String::from_utf8_lossy(&got.stderr)
    );
    assert!(String::from_utf8(got.stdout)
        .unwrap()
        .contains(&format!("\"response\":{body}")));
    let notice: Value = serde_json::from_slice(&run(&["adverse-action", &id]).stdout).unwrap();
    assert_eq!(notice["decision_id"], id.as_str());
    let page: Value =
        serde_json::from_slice(&run(&["search", "--application-id", "FH-CLI-1"]).stdout).unwrap();
    assert_eq!(page["decisions"].as_array().unwrap().len(), 1);
    let csv = String::from_utf8(run(&["export", "--format", "csv"]).stdout).unwrap();
    assert_eq!(csv.lines().count(), 2, "header and one row");
    let bad = run(&["search", "--from", "2026-12-03", "--to", "2026-12-01"]);
    assert_eq!(bad.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&bad.stderr).contains("--to"));
    assert_eq!(
        run(&["get", "019ad7c2-3f10-7a4b-9c2e-5d6f7a8b9c0d"])
            .status
            .code(),
        Some(2)
    );
}

/// The adverse-action content as FCRA 15 U.S.C. 1681g(f)(1) and Regulation B 12 CFR 1002.9 read
/// (content as read; wording is the lender's): the recorded inquiry pair
/// (demo-requests/12-decline-inquiry-extra.json) decided through the service. Principal reasons
/// and score key factors are two lists: the inquiries factor added beyond the four-reason limit
/// is a key factor (1681g(f)(9)), not a principal reason; the disclosure states the score (A),
/// its range (B), the key factors (C), the date (D) and who provided it (E). A referral is not a
/// final action.
#[test]
fn adverse_action_content_as_the_law_reads_it() {
    let server = TestServer::demo();
    let pair: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/12-decline-inquiry-extra.json").unwrap(),
    )
    .unwrap();
    let (status, body, _) = post(&server, &pair["request"]["body"].to_string());
    assert_eq!(status, 200, "{body}");
    let decision: Value = serde_json::from_str(&body).unwrap();
    let sources: Vec<&str> = (decision["reasons"].as_array().unwrap().iter())
        .map(|r| r["source"].as_str().unwrap())
        .collect();
    assert_eq!(
        sources.last(),
        Some(&"inquiry_extra"),
        "the pair holds the extra factor"
    );
    let id = decision["record"]["decision_id"].as_str().unwrap();
    let (status, _, text) = review(&server, &format!("/v1/decisions/{id}/adverse-action"));
    assert_eq!(status, 200, "{text}");
    let n: Value = serde_json::from_str(&text).unwrap();
    let codes = |v: &Value| -> Vec<String> {
        (v.as_array().unwrap().iter())
            .map(|r| r["code"].as_str().unwrap().to_string())
            .collect()
    };
    let given = codes(&decision["reasons"]);
    // Principal reasons: every reason but the extra inquiries factor, in order.
    assert_eq!(codes(&n["principal_reasons"]), given[..given.len() - 1]);
    // Key factors: the model's factors in order, the inquiries factor included.
    assert_eq!(codes(&n["credit_score"]["key_factors"]), given);
    assert_eq!(
        n["credit_score"]["key_factors"].as_array().unwrap().len(),
        5
    );
    let cs = &n["credit_score"];
    assert_eq!(cs["score"], decision["score"]);
    assert_eq!(cs["range"], serde_json::json!({"min": 200, "max": 900}));
    assert_eq!(
        cs["date"].as_str().unwrap(),
        &decision["record"]["decided_at"].as_str().unwrap()[..10]
    );
    assert!(cs["provided_by"].as_str().unwrap().contains("Fernhill"));
    assert_eq!(n["final_action"], true);

    // A referral (the amount rule): content is provisional, not a final action, and its rule
    // reason is a principal reason but not a score factor.
    let refer: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/03-refer-amount-rule.json").unwrap(),
    )
    .unwrap();
    let (_, body, _) = post(&server, &refer["request"]["body"].to_string());
    let decision: Value = serde_json::from_str(&body).unwrap();
    assert_eq!(decision["outcome"], "refer");
    let id = decision["record"]["decision_id"].as_str().unwrap();
    let (_, _, text) = review(&server, &format!("/v1/decisions/{id}/adverse-action"));
    let n: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(n["final_action"], false);
    assert!(n["action_note"]
        .as_str()
        .unwrap()
        .contains("not a final action"));
    let principal = codes(&n["principal_reasons"]);
    assert_eq!(principal[0], "AMT_LIMIT");
    assert!(!codes(&n["credit_score"]["key_factors"]).contains(&"AMT_LIMIT".to_string()));
    // A rule reason takes a principal reason's place, never a key factor's: with a refer rule
    // and five adverse model factors, the key factors are the four largest and then the
    // inquiries factor (1681g(f)(1)(C): at most four; (9): inquiries beyond them).
    let body = json!({"application_id": "FH-KEY-1", "applicant": {"requested_amount": 45000,
        "annual_income": 60000, "debt_to_income": 41, "revolving_utilization": 88,
        "months_since_oldest_account": 14, "delinquencies_24m": 1, "inquiries_6m": 2,
        "months_with_employer": 4, "housing": "rent", "loan_purpose": "other"}});
    let (status, text, _) = post(&server, &body.to_string());
    assert_eq!(status, 200, "{text}");
    let d: Value = serde_json::from_str(&text).unwrap();
    let id = d["record"]["decision_id"].as_str().unwrap();
    let (_, _, text) = review(&server, &format!("/v1/decisions/{id}/adverse-action"));
    let key = serde_json::from_str::<Value>(&text).unwrap()["credit_score"]["key_factors"].clone();
    let key_codes = codes(&key);
    assert_eq!(key_codes.len(), 5, "{key_codes:?}");
    assert_eq!(key_codes.last().map(String::as_str), Some("INQ"));
    let mut adverse: Vec<(String, f64)> = (d["score_factors"].as_array().unwrap().iter())
        .map(|f| {
            (
                f["code"].as_str().unwrap().into(),
                f["contribution"].as_f64().unwrap(),
            )
        })
        .collect();
    adverse.truncate(4);
    assert!(
        adverse.windows(2).all(|w| w[0].1 >= w[1].1),
        "largest first: {adverse:?}"
    );
    assert!(!key_codes.contains(&"AMT_LIMIT".to_string()));

    // Each list is ranked within itself, as a notice numbers it.
    for list in [&n["principal_reasons"], &n["credit_score"]["key_factors"]] {
        let ranks: Vec<u64> = (list.as_array().unwrap().iter())
            .map(|r| r["rank"].as_u64().unwrap())
            .collect();
        assert_eq!(ranks, (1..=ranks.len() as u64).collect::<Vec<_>>());
    }
}

/// Final actions on referrals (12 CFR 1002.9(a): the underwriter's decision is the action taken),
/// recorded append-only beside the decision, on both stores.
fn final_actions(store: Option<String>) {
    use crate::common::server::UNDERWRITING;
    let server = match store {
        Some(s) => TestServer::start_with(
            vec![PathBuf::from("models/fernhill-logistic.json")],
            demo_auth(),
            Limits::default(),
            Some(s),
        ),
        None => TestServer::demo(),
    };
    let refer: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/03-refer-amount-rule.json").unwrap(),
    )
    .unwrap();
    let mut body = refer["request"]["body"].clone();
    body["application_id"] = "FH-FINAL-1".into();
    let (status, text, _) = post(&server, &body.to_string());
    assert_eq!(status, 200, "{text}");
    let referral: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(referral["outcome"], "refer");
    let id = referral["record"]["decision_id"]
        .as_str()
        .unwrap()
        .to_string();
    let path = format!("/v1/decisions/{id}/final-action");
    let act = |key: &str, body: &Value| {
        send(
            "POST",
            &server.url(&path),
            Some(key),
            JSON,
            Some(&body.to_string()),
        )
    };

    // Pending before: the search finds the referral as awaiting a final action.
    let (_, _, page) = review(
        &server,
        "/v1/decisions?final_action=pending&application_id=FH-FINAL-1",
    );
    let page: Value = serde_json::from_str(&page).unwrap();
    assert_eq!(page["decisions"].as_array().unwrap().len(), 1);

    // Who may record it, and what a final action must hold.
    let decline =
        json!({"action": "decline", "reasons": ["MR_DOCS", "AMT"], "note": "pay slips missing"});
    assert_eq!(act(SCORING, &decline).0, 403);
    assert_eq!(act(REVIEW, &decline).0, 403);
    let (s, _, e) = act(UNDERWRITING, &json!({"action": "decline", "reasons": []}));
    assert!(
        s == 422 && e.contains("\"field\":\"reasons\"") && e.contains("required"),
        "{e}"
    );
    let (s, _, e) = act(
        UNDERWRITING,
        &json!({"action": "decline", "reasons": ["NOPE"]}),
    );
    assert!(
        s == 422 && e.contains("reasons[0]") && e.contains("reason_table"),
        "{e}"
    );
    let (s, _, e) = act(
        UNDERWRITING,
        &json!({"action": "approve", "reasons": ["AMT"]}),
    );
    assert!(
        s == 422 && e.contains("only a decline gives reasons"),
        "{e}"
    );
    let (s, _, e) = act(UNDERWRITING, &json!({"action": "maybe"}));
    assert!(s == 422 && e.contains("\"field\":\"action\""), "{e}");
    // A refer rule's code is why the application was referred, not a reason to decline it.
    let (s, _, e) = act(
        UNDERWRITING,
        &json!({"action": "decline", "reasons": ["AMT_LIMIT"]}),
    );
    assert!(s == 422 && e.contains("refer_rule"), "{e}");
    // Every fault at once, each named with its rule.
    let (s, _, e) = act(
        UNDERWRITING,
        &json!({"action": "decline", "reasons": ["NOPE", "AMT", "AMT", 7], "note": "x".repeat(2001),
            "idempotency_key": "", "colour": "red"}),
    );
    let p: Value = serde_json::from_str(&e).unwrap();
    let faults: Vec<(String, String)> = (p["errors"].as_array().unwrap().iter())
        .map(|f| {
            (
                f["field"].as_str().unwrap().into(),
                f["rule"].as_str().unwrap().into(),
            )
        })
        .collect();
    for expected in [
        ("colour", "unknown"),
        ("reasons[2]", "unique"),
        ("reasons[3]", "type"),
        ("note", "max_length"),
        ("idempotency_key", "pattern"),
    ] {
        assert!(
            faults.contains(&(expected.0.into(), expected.1.into())),
            "{expected:?} missing from {faults:?}"
        );
    }
    assert_eq!(s, 422);
    let (s, _, e) = act(UNDERWRITING, &json!({}));
    assert!(
        s == 422 && e.contains("\"field\":\"action\",\"rule\":\"required\""),
        "{e}"
    );
    let (s, _, e) = act(UNDERWRITING, &json!(["decline", ["MR_DOCS"]]));
    assert!(
        s == 422 && e.contains("\"field\":\"body\",\"rule\":\"type\""),
        "{e}"
    );
    let (s, _, e) = act(
        UNDERWRITING,
        &json!({"action": "decline", "reasons": ["MR_DOCS", "MR_CAPACITY", "MR_HISTORY", "AMT", "EMP"]}),
    );
    assert!(s == 422 && e.contains("max_reasons"), "{e}");
    // The underwriter's work queue.
    let (s, _, page) = send(
        "GET",
        &server.url("/v1/decisions?final_action=pending&application_id=FH-FINAL-1"),
        Some(UNDERWRITING),
        None,
        None,
    );
    assert_eq!(s, 200, "{page}");

    // Recorded once, by the key's name, with the reasons' texts; a repeat is the stored answer.
    let (s, _, text) = act(UNDERWRITING, &decline);
    assert_eq!(s, 201, "{text}");
    let given: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(given["final_action"]["decided_by"], "demo-underwriting");
    assert_eq!(given["final_action"]["reasons"][0]["source"], "review");
    assert!(given["final_action"]["reasons"][0]["text"]
        .as_str()
        .unwrap()
        .contains("verified"));
    let (s, _, again) = act(UNDERWRITING, &decline);
    assert_eq!((s, again.as_str()), (200, text.as_str()));
    // The same content written differently is the same final action.
    let mut spelled_out = decline.clone();
    spelled_out["idempotency_key"] = "los-req-77".into();
    let (s, _, again) = act(UNDERWRITING, &spelled_out);
    assert_eq!((s, again.as_str()), (200, text.as_str()));
    let (s, _, e) = act(UNDERWRITING, &json!({"action": "approve"}));
    assert!(s == 409 && e.contains("final-action-recorded"), "{e}");

    // The record shows it; the original decision is untouched.
    let (_, _, rec) = review(&server, &format!("/v1/decisions/{id}"));
    let rec: Value = serde_json::from_str(&rec).unwrap();
    assert_eq!(rec["final_action"]["action"], "decline");
    assert_eq!(rec["response"], referral);
    assert_eq!(
        send(
            "GET",
            &server.url(&format!("/v1/decisions/{id}")),
            Some(UNDERWRITING),
            None,
            None
        )
        .0,
        200
    );

    // The notice follows the final action: its reasons and date, a final action.
    let (_, _, n) = review(&server, &format!("/v1/decisions/{id}/adverse-action"));
    let n: Value = serde_json::from_str(&n).unwrap();
    assert_eq!(n["final_action"], true);
    assert_eq!(n["outcome"], "decline");
    let codes: Vec<&str> = (n["principal_reasons"].as_array().unwrap().iter())
        .map(|r| r["code"].as_str().unwrap())
        .collect();
    assert_eq!(codes, ["MR_DOCS", "AMT"]);
    assert_eq!(n["decided_at"], given["final_action"]["decided_at"]);
    assert_eq!(
        n["credit_score"]["score"], referral["score"],
        "the score disclosure is the decision's"
    );

    // Search and export see it.
    let (_, _, page) = review(&server, "/v1/decisions?final_action=decline");
    let page: Value = serde_json::from_str(&page).unwrap();
    let hit = (page["decisions"].as_array().unwrap().iter())
        .find(|d| d["decision_id"] == id.as_str())
        .expect("the declined referral is found");
    assert_eq!(hit["final_action"]["action"], "decline");
    assert_eq!(hit["final_action"]["decided_by"], "demo-underwriting");
    let (_, _, page) = review(
        &server,
        "/v1/decisions?final_action=pending&application_id=FH-FINAL-1",
    );
    assert_eq!(
        serde_json::from_str::<Value>(&page).unwrap()["decisions"]
            .as_array()
            .unwrap()
            .len(),
        0
    );
    let (_, _, csv) = review(
        &server,
        "/v1/decisions/export?format=csv&final_action=recorded",
    );
    assert!(csv
        .lines()
        .next()
        .unwrap()
        .ends_with(",final_action,final_action_at,final_action_by,final_reason_codes"));
    assert!(
        csv.contains(",decline,") && csv.contains(",demo-underwriting,MR_DOCS;AMT"),
        "{csv}"
    );
    assert_eq!(review(&server, "/v1/decisions?final_action=soon").0, 400);

    // Only referrals take one; unknown decisions are 404.
    let (_, text, _) = post(&server, &approvable("FH-FINAL-2"));
    let approved: Value = serde_json::from_str(&text).unwrap();
    let other = format!(
        "/v1/decisions/{}/final-action",
        approved["record"]["decision_id"].as_str().unwrap()
    );
    let (s, _, e) = send(
        "POST",
        &server.url(&other),
        Some(UNDERWRITING),
        JSON,
        Some(&json!({"action": "approve"}).to_string()),
    );
    assert!(s == 409 && e.contains("not-a-referral"), "{e}");
    let missing = "/v1/decisions/00000000-0000-7000-8000-000000000000/final-action";
    assert_eq!(
        send(
            "POST",
            &server.url(missing),
            Some(UNDERWRITING),
            JSON,
            Some("{\"action\":\"approve\"}")
        )
        .0,
        404
    );
}

#[test]
fn final_actions_on_sqlite() {
    final_actions(None);
}

#[test]
fn final_actions_on_postgres() {
    let Some(db) = stores::postgres() else { return };
    final_actions(Some(db.url.clone()));
}

/// An approval or a withdrawal needs no reason table, so referrals can be closed after their
/// model was unloaded; a decline needs the model's reasons and says so.
#[test]
fn referrals_close_after_their_model_is_gone() {
    use crate::common::server::UNDERWRITING;
    let (location, _dir) = stores::sqlite();
    let first = TestServer::start_with(
        vec![PathBuf::from("models/fernhill-logistic.json")],
        demo_auth(),
        Limits::default(),
        Some(location.clone()),
    );
    let refer: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/03-refer-amount-rule.json").unwrap(),
    )
    .unwrap();
    let mut ids = Vec::new();
    for n in 0..2 {
        let mut body = refer["request"]["body"].clone();
        body["application_id"] = format!("FH-GONE-{n}").into();
        let (status, text, _) = post(&first, &body.to_string());
        assert_eq!(status, 200, "{text}");
        let d: Value = serde_json::from_str(&text).unwrap();
        ids.push(d["record"]["decision_id"].as_str().unwrap().to_string());
    }
    first.stop();
    let second = TestServer::start_with(
        vec![PathBuf::from("models/fernhill-forest.json")],
        demo_auth(),
        Limits::default(),
        Some(location),
    );
    let act = |id: &str, body: Value| {
        send(
            "POST",
            &second.url(&format!("/v1/decisions/{id}/final-action")),
            Some(UNDERWRITING),
            JSON,
            Some(&body.to_string()),
        )
    };
    let (s, _, text) = act(&ids[0], json!({"action": "approve"}));
    assert_eq!(s, 201, "{text}");
    let (s, _, e) = act(&ids[1], json!({"action": "decline", "reasons": ["AMT"]}));
    assert!(s == 409 && e.contains("model-not-loaded"), "{e}");
    let (s, _, text) = act(&ids[1], json!({"action": "withdrawn"}));
    assert_eq!(s, 201, "{text}");
}

/// Every read of the records is in the access log (who, what, which filter, how many, the
/// request id), readable by admin keys only; idempotency keys are the caller's own, so another
/// key's retry of the same key is a decision of its own, never a 409 showing the first.
fn access_and_keys(store: Option<String>) {
    use crate::common::server::ADMIN;
    let server = match store {
        Some(s) => TestServer::start_with(
            vec![PathBuf::from("models/fernhill-logistic.json")],
            demo_auth(),
            Limits::default(),
            Some(s),
        ),
        None => TestServer::demo(),
    };
    let (status, text, _) = post(&server, &request("FH-ACCESS-1", Some("shared-key-1"), 30.0));
    assert_eq!(status, 200, "{text}");
    let first: Value = serde_json::from_str(&text).unwrap();
    let id = first["record"]["decision_id"].as_str().unwrap();
    // The admin key decides with the same idempotency key and a different body: its own.
    let (status, _, text) = send(
        "POST",
        &server.url("/v1/decisions"),
        Some(ADMIN),
        JSON,
        Some(&request("FH-ACCESS-2", Some("shared-key-1"), 20.0)),
    );
    assert_eq!(status, 200, "{text}");
    let second: Value = serde_json::from_str(&text).unwrap();
    assert_ne!(
        second["record"]["decision_id"],
        first["record"]["decision_id"]
    );
    let (_, _, rec) = review(&server, &format!("/v1/decisions/{id}"));
    assert_eq!(
        serde_json::from_str::<Value>(&rec).unwrap()["requested_by"],
        "demo-scoring"
    );

    // Reads, then the log.
    let (s, _, _) = send(
        "GET",
        &server.url("/v1/decisions?application_id=FH-ACCESS-1"),
        Some(REVIEW),
        None,
        None,
    );
    assert_eq!(s, 200);
    assert_eq!(
        review(&server, "/v1/decisions/export?application_id=FH-ACCESS-1").0,
        200
    );
    assert_eq!(review(&server, "/v1/admin/access").0, 403);
    let (s, _, log) = send(
        "GET",
        &server.url("/v1/admin/access"),
        Some(ADMIN),
        None,
        None,
    );
    assert_eq!(s, 200, "{log}");
    let log: Value = serde_json::from_str(&log).unwrap();
    let entries = log["entries"].as_array().unwrap();
    let seen: Vec<(&str, &str, Option<i64>)> = (entries.iter())
        .map(|e| {
            (
                e["action"].as_str().unwrap(),
                e["target"].as_str().unwrap(),
                e["records"].as_i64(),
            )
        })
        .collect();
    for expected in [
        ("get", id, Some(1)),
        ("search", "application_id=FH-ACCESS-1", Some(1)),
        ("export_started", "application_id=FH-ACCESS-1", None),
        ("export", "application_id=FH-ACCESS-1", Some(1)),
    ] {
        assert!(seen.contains(&expected), "{expected:?} not in {seen:?}");
    }
    assert!(entries
        .iter()
        .all(|e| e["caller"] == "demo-review" && e["role"] == "review"));
    assert!(entries
        .iter()
        .all(|e| !e["request_id"].as_str().unwrap().is_empty()));
    // Reading the log is logged too.
    let (_, _, again) = send(
        "GET",
        &server.url("/v1/admin/access?limit=500"),
        Some(ADMIN),
        None,
        None,
    );
    assert!(again.contains("\"action\":\"access_log\""), "{again}");
}

#[test]
fn access_log_and_callers_keys_on_sqlite() {
    access_and_keys(None);
}

#[test]
fn access_log_and_callers_keys_on_postgres() {
    let Some(db) = stores::postgres() else { return };
    access_and_keys(Some(db.url.clone()));
}
