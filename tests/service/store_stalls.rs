//! "503 not recorded" means exactly that, and a late or lost commit answer never turns into a
//! wrong answer. The real binary runs with a one-second commit timeout while its store stalls:
//! SQLite's write lock held by another process, a PostgreSQL connection paused in the middle
//! (a proxy stops passing bytes while TCP stays up), and PostgreSQL connections cut at the
//! commit, before or after the server commits. Afterwards the store holds exactly the decisions
//! answered 200.

use crate::common::proxy::{AtCommit, Proxy};
use crate::common::server::{send, spawn_binary, SCORING};
use crate::common::stores;
use serde_json::{json, Value};
use std::time::{Duration, Instant};

fn request(id: &str) -> String {
    json!({"application_id": id, "applicant": {"requested_amount": 12000,
        "annual_income": 85000, "debt_to_income": 14.5, "revolving_utilization": 22,
        "months_since_oldest_account": 190, "delinquencies_24m": 0, "inquiries_6m": 1,
        "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"}})
    .to_string()
}

fn decide(base: &str, id: &str) -> (u16, Value) {
    let (status, _, body) = send(
        "POST",
        &format!("{base}/v1/decisions"),
        Some(SCORING),
        Some("application/json"),
        Some(&request(id)),
    );
    (status, serde_json::from_str(&body).unwrap_or(Value::Null))
}

/// Two decisions sent `gap` apart while `stall` lasts; both must be 503 not-recorded.
fn two_during_stall(base: &str, prefix: &str, gap: Duration) {
    let base2 = base.to_string();
    let first = std::thread::spawn({
        let id = format!("{prefix}-A");
        move || decide(&base2, &id)
    });
    std::thread::sleep(gap);
    let (s2, p2) = decide(base, &format!("{prefix}-B"));
    let (s1, p1) = first.join().unwrap();
    for (s, p) in [(s1, p1), (s2, p2)] {
        assert_eq!(s, 503, "{p}");
        assert_eq!(p["type"], "/problems/not-recorded", "{p}");
        let detail = p["detail"].as_str().unwrap();
        assert!(detail.contains("nothing of it is in the store"), "{detail}");
        // The store's own words (SQL, paths) stay in the log.
        assert!(
            !detail.contains("sqlite") && !detail.contains("SELECT"),
            "{detail}"
        );
    }
}

fn count(store: &str, prefix: &str) -> usize {
    let store = plumbline::records::open(store).unwrap();
    ["A", "B", "C", "D"]
        .iter()
        .filter(|s| {
            let q = plumbline::records::Query {
                application_id: Some(format!("{prefix}-{s}")),
                ..Default::default()
            };
            !store.search(&q, 10).unwrap().records.is_empty()
        })
        .count()
}

#[test]
fn a_held_sqlite_lock_records_nothing_it_refused() {
    let (location, _dir) = stores::sqlite();
    let (mut child, base) = spawn_binary(&["--store", &location, "--commit-timeout-ms", "1000"]);
    assert_eq!(decide(&base, "FH-LOCK-0").0, 200);
    // Another process's writer holds the lock for 3 s (as `BEGIN IMMEDIATE` in a shell would).
    let path = location.strip_prefix("sqlite:").unwrap().to_string();
    let holder = std::thread::spawn(move || {
        let c = rusqlite::Connection::open(path).unwrap();
        c.execute_batch("BEGIN IMMEDIATE").unwrap();
        std::thread::sleep(Duration::from_secs(3));
        c.execute_batch("ROLLBACK").unwrap();
    });
    std::thread::sleep(Duration::from_millis(200));
    let started = Instant::now();
    two_during_stall(&base, "FH-LOCK", Duration::from_millis(500));
    assert!(
        started.elapsed() < Duration::from_millis(2900),
        "answered by the deadline"
    );
    // While the lock is held the replica is not ready.
    let (status, _, ready) = send("GET", &format!("{base}/health/ready"), None, None, None);
    assert_eq!(status, 503, "{ready}");
    holder.join().unwrap();
    std::thread::sleep(Duration::from_millis(300));
    assert_eq!(
        count(&location, "FH-LOCK"),
        0,
        "refused decisions stay out of the store"
    );
    let (status, d) = decide(&base, "FH-LOCK-C");
    assert_eq!(status, 200, "{d}");
    assert_eq!(count(&location, "FH-LOCK"), 1);
    assert_eq!(
        send("GET", &format!("{base}/health/ready"), None, None, None).0,
        200
    );
    child.kill().unwrap();
    let _ = child.wait();
}

/// The service's PostgreSQL URL through `proxy`, in plain text: the proxy finds each `COMMIT`
/// in the bytes it forwards.
fn through(db: &stores::TempDatabase, proxy: &Proxy) -> String {
    let (head, tail) = db.url.split_once('@').unwrap();
    let (_, name) = tail.split_once('/').unwrap();
    format!("{head}@127.0.0.1:{}/{name}?sslmode=disable", proxy.port)
}

fn target(db: &stores::TempDatabase) -> String {
    let tail = db.url.split_once('@').unwrap().1;
    tail.split_once('/').unwrap().0.to_string()
}

#[test]
fn a_paused_postgres_connection_records_nothing_it_refused() {
    let Some(db) = stores::postgres() else { return };
    let proxy = Proxy::start(&target(&db));
    let url = through(&db, &proxy);
    let (mut child, base) = spawn_binary(&["--store", &url, "--commit-timeout-ms", "1000"]);
    assert_eq!(decide(&base, "FH-PAUSE-0").0, 200);
    proxy.pause(true);
    let started = Instant::now();
    two_during_stall(&base, "FH-PAUSE", Duration::from_millis(500));
    assert!(
        started.elapsed() < Duration::from_secs(3),
        "answered by the deadline"
    );
    proxy.pause(false);
    // The old connection's bytes now arrive, but without a commit; the server rolls back.
    std::thread::sleep(Duration::from_millis(500));
    assert_eq!(
        count(&db.url, "FH-PAUSE"),
        0,
        "refused decisions stay out of the store"
    );
    // The writer reconnects.
    let (status, d) = decide(&base, "FH-PAUSE-C");
    assert_eq!(status, 200, "{d}");
    assert_eq!(count(&db.url, "FH-PAUSE"), 1);
    child.kill().unwrap();
    let _ = child.wait();
}

#[test]
fn a_commit_cut_on_its_way_is_not_recorded_and_one_cut_on_its_way_back_is() {
    let Some(db) = stores::postgres() else { return };
    let proxy = Proxy::start(&target(&db));
    let url = through(&db, &proxy);
    let (mut child, base) = spawn_binary(&["--store", &url, "--commit-timeout-ms", "2000"]);
    assert_eq!(decide(&base, "FH-CUT-0").0, 200);
    // The commit never reaches the server: 503, and the store does not hold it.
    proxy.at_next_commit(AtCommit::CutBefore);
    let (status, p) = decide(&base, "FH-CUT-A");
    assert_eq!(
        (status, p["type"].as_str()),
        (503, Some("/problems/not-recorded")),
        "{p}"
    );
    assert_eq!(count(&db.url, "FH-CUT"), 0);
    // The server commits but its answer is lost: the writer finds the record and gives it.
    proxy.at_next_commit(AtCommit::CutAfter);
    let (status, d) = decide(&base, "FH-CUT-B");
    assert_eq!(status, 200, "{d}");
    assert_eq!(count(&db.url, "FH-CUT"), 1, "recorded once");
    let id = d["record"]["decision_id"].as_str().unwrap();
    let stored = plumbline::records::open(&db.url)
        .unwrap()
        .get(id)
        .unwrap()
        .unwrap();
    assert_eq!(stored.application_id, "FH-CUT-B");
    child.kill().unwrap();
    let _ = child.wait();
}
