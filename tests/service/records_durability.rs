//! Nothing the service said it decided is lost. The real binary is killed with SIGKILL while
//! clients send decisions; after a restart every decision a client received a 200 for is in the
//! store, byte for byte, and no record is partial. Two servers sharing one PostgreSQL database
//! receive the same idempotency keys at once: one record per key, one response for both.

use crate::common;
use crate::common::server::SCORING;
use crate::common::stores;
use plumbline::records::{self, Query};
use std::process::Child;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// The service binary on a free port, recording into `store`; returns it and its base URL.
fn spawn(store: &str) -> (Child, String) {
    common::server::spawn_binary(&["--workers", "2", "--store", store])
}

fn request(id: &str, key: Option<&str>) -> String {
    let mut r = serde_json::json!({"application_id": id, "applicant": {"requested_amount": 12000,
        "annual_income": 85000, "debt_to_income": 14.5, "revolving_utilization": 22,
        "months_since_oldest_account": 190, "delinquencies_24m": 0, "inquiries_6m": 1,
        "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"}});
    if let Some(k) = key {
        r["idempotency_key"] = k.into();
    }
    r.to_string()
}

/// POST a decision; the body on a 200, `None` on anything else (including a dropped connection).
fn decide(agent: &ureq::Agent, base: &str, body: &str) -> Option<String> {
    let r = agent
        .post(&format!("{base}/v1/decisions"))
        .set("Authorization", &format!("Bearer {SCORING}"))
        .set("Content-Type", "application/json")
        .send_string(body)
        .ok()?;
    (r.status() == 200).then(|| r.into_string().ok()).flatten()
}

fn kill_while_deciding(store: &str) {
    let (mut child, base) = spawn(store);
    let received: Mutex<Vec<String>> = Mutex::new(Vec::new());
    let stop = AtomicBool::new(false);
    std::thread::scope(|s| {
        for t in 0..6 {
            let (received, stop, base) = (&received, &stop, &base);
            s.spawn(move || {
                let agent = ureq::AgentBuilder::new()
                    .timeout(Duration::from_secs(5))
                    .build();
                let mut n = 0;
                while !stop.load(Ordering::Relaxed) {
                    n += 1;
                    let key = (n % 2 == 0).then(|| format!("kill-{t}-{n}"));
                    if let Some(body) = decide(
                        &agent,
                        base,
                        &request(&format!("FH-KILL-{t}-{n}"), key.as_deref()),
                    ) {
                        received.lock().unwrap().push(body);
                    }
                }
            });
        }
        // Kill mid-stream, once decisions are flowing.
        let started = Instant::now();
        while received.lock().unwrap().len() < 200 && started.elapsed() < Duration::from_secs(30) {
            std::thread::sleep(Duration::from_millis(5));
        }
        child.kill().unwrap(); // SIGKILL: no shutdown, no flush
        child.wait().unwrap();
        stop.store(true, Ordering::Relaxed);
    });
    let received = received.into_inner().unwrap();
    assert!(
        received.len() >= 200,
        "only {} decisions before the kill",
        received.len()
    );

    // Restart on the same store: it opens (recovering the WAL), serves, and holds everything.
    let (mut again, base) = spawn(store);
    let agent = ureq::AgentBuilder::new().build();
    assert!(decide(&agent, &base, &request("FH-AFTER-KILL", None)).is_some());
    again.kill().unwrap();
    again.wait().unwrap();

    let store = records::open(store).unwrap();
    for body in &received {
        let v: serde_json::Value = serde_json::from_str(body).unwrap();
        let id = v["record"]["decision_id"].as_str().unwrap();
        let record = store
            .get(id)
            .unwrap()
            .unwrap_or_else(|| panic!("decision {id} was given but is not recorded"));
        assert_eq!(
            &record.response, body,
            "decision {id} is not stored byte for byte"
        );
    }
    // No partial record: every stored row is whole, and its response names its own id.
    let mut stored = 0;
    store
        .export(&Query::default(), &mut |r| {
            stored += 1;
            let response: serde_json::Value =
                serde_json::from_str(&r.response).expect("whole JSON");
            assert_eq!(response["record"]["decision_id"], r.decision_id.as_str());
            assert!(serde_json::from_str::<serde_json::Value>(&r.request).is_ok());
            true
        })
        .unwrap();
    assert!(
        stored > received.len(),
        "{stored} stored, {} received",
        received.len()
    );
}

#[test]
fn sigkill_loses_no_given_decision_on_sqlite() {
    let (location, _dir) = stores::sqlite();
    kill_while_deciding(&location);
}

#[test]
fn sigkill_loses_no_given_decision_on_postgres() {
    let Some(db) = stores::postgres() else { return };
    kill_while_deciding(&db.url);
}

#[test]
fn two_replicas_share_idempotency_keys_on_postgres() {
    let Some(db) = stores::postgres() else { return };
    let (mut a, base_a) = spawn(&db.url);
    let (mut b, base_b) = spawn(&db.url);
    let keys = 60;
    let answers: Mutex<Vec<(usize, String)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for base in [&base_a, &base_b, &base_a, &base_b] {
            let answers = &answers;
            s.spawn(move || {
                let agent = ureq::AgentBuilder::new().build();
                for k in 0..keys {
                    let body = request(&format!("FH-SHARED-{k}"), Some(&format!("shared-key-{k}")));
                    let got = decide(&agent, base, &body).expect("every retry succeeds");
                    answers.lock().unwrap().push((k, got));
                }
            });
        }
    });
    a.kill().unwrap();
    b.kill().unwrap();
    let _ = (a.wait(), b.wait());
    let answers = answers.into_inner().unwrap();
    for k in 0..keys {
        let bodies: std::collections::BTreeSet<&String> = answers
            .iter()
            .filter(|(i, _)| *i == k)
            .map(|(_, b)| b)
            .collect();
        assert_eq!(
            bodies.len(),
            1,
            "key {k}: the replicas answered differently"
        );
    }
    let store = records::open(&db.url).unwrap();
    let mut stored = 0;
    store
        .export(&Query::default(), &mut |_| {
            stored += 1;
            true
        })
        .unwrap();
    assert_eq!(stored, keys, "exactly one record per key");
}
