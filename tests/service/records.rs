//! The store suite, run against both back ends: byte-identical round trips, idempotency by
//! unique key (also within one group), search filters and cursors, streamed export, and
//! migrations that apply once (also when several replicas open the database together), and a
//! store from before final actions upgraded in place.

use crate::common::stores;
use plumbline::records::{self, Cursor, Insert, Query, Record, Store};
use std::sync::Arc;

fn record(n: usize, key: Option<&str>, decided_at: &str, outcome: &str) -> Record {
    Record {
        decision_id: records::ids::new_decision_id(),
        application_id: format!("FH-TEST-{:04}", n % 7),
        idempotency_key: key.map(String::from),
        received_at: decided_at.to_string(),
        decided_at: decided_at.to_string(),
        model_id: "fernhill-personal-logistic".into(),
        model_version: if n.is_multiple_of(2) { "0.1.0" } else { "0.2.0" }.into(),
        model_sha256: "ab".repeat(32),
        plumbline_version: plumbline::VERSION.into(),
        request_sha256: format!("{n:064x}"),
        outcome: records::Outcome::from_name(outcome).expect("a test outcome"),
        probability: 0.1 + n as f64 / 1e4,
        score: 600 - n as i64,
        // Unicode, escapes and key order must survive byte for byte.
        request: format!("{{\"application_id\":\"FH-TEST-{n}\",\"applicant\":{{\"z\":1,\"a\":\"caf\\u00e9 ✓\"}}}}"),
        response: format!("{{\"outcome\":\"{outcome}\",\"probability_of_default\":0.1000000000000000055511151231257827,\"n\":{n}}}"),
        requested_by: "los-test".into(),
        final_action: None,
    }
}

fn time(minute: usize) -> String {
    format!(
        "2026-11-{:02}T{:02}:{:02}:00.000000Z",
        1 + minute / 1440,
        (minute / 60) % 24,
        minute % 60
    )
}

fn suite(location: &str) {
    let store = records::open(location).unwrap();
    // Round trip, byte for byte.
    let a = record(1, Some("key-1"), &time(10), "decline");
    assert_eq!(
        store.insert_group(std::slice::from_ref(&a)).unwrap(),
        vec![Insert::Inserted]
    );
    assert_eq!(store.get(&a.decision_id).unwrap().as_ref(), Some(&a));
    assert_eq!(store.get(&records::ids::new_decision_id()).unwrap(), None);
    assert_eq!(
        store.find_key("los-test", "key-1").unwrap().as_ref(),
        Some(&a)
    );
    assert_eq!(store.find_key("los-test", "no-such-key").unwrap(), None);
    // The access log: appended, read back in order, paged.
    for (i, action) in ["get", "search", "export"].iter().enumerate() {
        store
            .log_access(&records::Access {
                access_id: records::ids::new_decision_id(),
                at: time(20 + i),
                caller: "compliance-1".into(),
                role: "review".into(),
                action: action.to_string(),
                target: "from=2026-11-01".into(),
                records: Some(i as i64),
                request_id: format!("req-{i}"),
            })
            .unwrap();
    }
    let log = store.access_log("", "~", None, 10).unwrap();
    let actions: Vec<&str> = log.iter().map(|e| e.action.as_str()).collect();
    assert_eq!(actions, ["get", "search", "export"]);
    let after = (log[0].at.as_str(), log[0].access_id.as_str());
    assert_eq!(
        store.access_log("", "~", Some(after), 1).unwrap()[0].action,
        "search"
    );
    assert_eq!(
        store
            .access_log(&time(21), &time(22), None, 10)
            .unwrap()
            .len(),
        1
    );

    // The same key again, and twice within one group: the first record comes back, nothing new.
    let retry = record(2, Some("key-1"), &time(11), "approve");
    let b = record(3, Some("key-2"), &time(12), "approve");
    let b_again = record(4, Some("key-2"), &time(12), "approve");
    let out = store.insert_group(&[retry, b.clone(), b_again]).unwrap();
    assert_eq!(out[0], Insert::Existing(Box::new(a.clone())));
    assert_eq!(out[1], Insert::Inserted);
    assert_eq!(out[2], Insert::Existing(Box::new(b.clone())));
    // Records without a key never conflict.
    let many: Vec<Record> = (5..65)
        .map(|n| {
            record(
                n,
                None,
                &time(20 + n),
                if n % 3 == 0 { "decline" } else { "approve" },
            )
        })
        .collect();
    assert!(store
        .insert_group(&many)
        .unwrap()
        .iter()
        .all(|i| *i == Insert::Inserted));
    let total = store.export(&Query::default(), &mut |_| true).unwrap();
    assert_eq!(total, 62);

    // Pages follow (decided_at, decision_id) without gaps or repeats.
    let mut seen = Vec::new();
    let mut query = Query::default();
    loop {
        let page = store.search(&query, 7).unwrap();
        assert!(page.records.len() <= 7);
        seen.extend(page.records.iter().map(|r| r.decision_id.clone()));
        match page.next {
            Some(c) => query.after = Some(Cursor::decode(&c.encode()).unwrap()),
            None => break,
        }
    }
    assert_eq!(seen.len(), 62);
    let unique: std::collections::BTreeSet<_> = seen.iter().collect();
    assert_eq!(unique.len(), 62);

    // Filters: application, outcome, model version, and a half-open time range.
    let q = Query {
        outcome: Some(records::Outcome::Decline),
        model_version: Some("0.1.0".into()),
        ..Query::default()
    };
    let page = store.search(&q, 500).unwrap();
    assert!(!page.records.is_empty());
    assert!(page
        .records
        .iter()
        .all(|r| r.outcome == records::Outcome::Decline && r.model_version == "0.1.0"));
    let q = Query {
        from: Some(time(30)),
        to: Some(time(40)),
        ..Query::default()
    };
    let page = store.search(&q, 500).unwrap();
    assert_eq!(page.records.len(), 10, "[30, 40) minutes");
    let q = Query {
        application_id: Some("FH-TEST-0003".into()),
        ..Query::default()
    };
    assert!(store
        .search(&q, 500)
        .unwrap()
        .records
        .iter()
        .all(|r| r.application_id == "FH-TEST-0003"));

    // Export stops when the sink says so.
    let mut n = 0;
    store
        .export(&Query::default(), &mut |_| {
            n += 1;
            n < 5
        })
        .unwrap();
    assert_eq!(n, 5);

    // Keys are the requester's own: another caller's same key is another decision.
    assert_eq!(store.find_key("los-other", "key-1").unwrap(), None);
    let theirs = Record {
        requested_by: "los-other".into(),
        ..record(9, Some("key-1"), &time(10), "approve")
    };
    assert_eq!(
        store.insert_group(std::slice::from_ref(&theirs)).unwrap(),
        vec![Insert::Inserted]
    );
    assert_eq!(
        store.find_key("los-other", "key-1").unwrap().as_ref(),
        Some(&theirs)
    );
    assert_eq!(
        store.find_key("los-test", "key-1").unwrap().as_ref(),
        Some(&a)
    );

    // Reopening applies no migration twice and keeps everything.
    let again = records::open(location).unwrap();
    assert_eq!(again.get(&a.decision_id).unwrap(), Some(a));
}

#[test]
fn sqlite_store_suite() {
    let (location, _dir) = stores::sqlite();
    suite(&location);
}

#[test]
fn postgres_store_suite() {
    let Some(db) = stores::postgres() else { return };
    suite(&db.url);
    // Logs name the database without credentials.
    let with_password = db.url.replacen("postgres@", "postgres:secret@", 1);
    let described = records::open(&with_password).unwrap().describe();
    assert!(
        described.starts_with("postgres:")
            && described.ends_with(db.url.rsplit('/').next().unwrap()),
        "{described}"
    );
    assert!(!described.contains("secret"));
}

/// Replicas starting together: each migration applies exactly once (advisory lock), and
/// concurrent writers of the same keys get one record per key.
#[test]
fn postgres_replicas_migrate_once_and_share_keys() {
    let Some(db) = stores::postgres() else { return };
    let opened: Vec<Arc<dyn Store>> = std::thread::scope(|s| {
        let handles: Vec<_> = (0..4)
            .map(|_| s.spawn(|| records::open(&db.url).unwrap()))
            .collect();
        handles.into_iter().map(|h| h.join().unwrap()).collect()
    });
    let mut c = postgres::Client::connect(&db.url, postgres::NoTls).unwrap();
    let applied: i64 = c
        .query_one("SELECT COUNT(*) FROM plumbline_migrations", &[])
        .unwrap()
        .get(0);
    assert_eq!(applied as usize, records::sql_migrations_count());
    std::thread::scope(|s| {
        for (i, store) in opened.iter().enumerate() {
            s.spawn(move || {
                for k in 0..25 {
                    let r = record(
                        i * 100 + k,
                        Some(&format!("shared-{k}")),
                        &time(k),
                        "approve",
                    );
                    store.insert_group(&[r]).unwrap();
                }
            });
        }
    });
    let rows: i64 = c
        .query_one("SELECT COUNT(*) FROM decisions", &[])
        .unwrap()
        .get(0);
    assert_eq!(rows, 25, "one record per key across replicas");
}

/// The decisions table as the first release created it (migration 1), with one record in it.
const VERSION_1: &str = "CREATE TABLE plumbline_migrations (
    version BIGINT PRIMARY KEY, about TEXT NOT NULL, applied_at TEXT NOT NULL);
INSERT INTO plumbline_migrations VALUES (1, 'decision records', '2026-11-01T00:00:00.000000Z');
CREATE TABLE decisions (
    decision_id TEXT PRIMARY KEY, application_id TEXT NOT NULL, idempotency_key TEXT UNIQUE,
    received_at TEXT NOT NULL, decided_at TEXT NOT NULL, model_id TEXT NOT NULL,
    model_version TEXT NOT NULL, model_sha256 TEXT NOT NULL, plumbline_version TEXT NOT NULL,
    request_sha256 TEXT NOT NULL, outcome TEXT NOT NULL, probability DOUBLE PRECISION NOT NULL,
    score BIGINT NOT NULL, request TEXT NOT NULL, response TEXT NOT NULL);
INSERT INTO decisions VALUES ('01a00000-0000-7000-8000-000000000001', 'FH-OLD-1', NULL,
    '2026-11-01T09:00:00.000000Z', '2026-11-01T09:00:00.000000Z', 'fernhill-personal-logistic',
    '0.1.0', 'abab', '0.1.0', 'cdcd', 'refer', 0.1, 600, '{\"a\":1}', '{\"outcome\":\"refer\"}');";

/// A store written before final actions existed opens, gains the final-actions table (migration
/// 2) and keeps its records; a final action can then be recorded on an old referral.
fn upgrades_in_place(location: &str) {
    let store = records::open(location).unwrap();
    let old = store
        .get("01a00000-0000-7000-8000-000000000001")
        .unwrap()
        .expect("the old record is kept");
    assert_eq!(
        (old.outcome.name(), old.final_action.as_ref()),
        ("refer", None)
    );
    let action = records::FinalAction {
        decision_id: old.decision_id.clone(),
        action: records::ActionTaken::Approve,
        reasons: "[]".into(),
        note: String::new(),
        decided_by: "demo-underwriting".into(),
        decided_at: "2026-11-02T10:00:00.000000Z".into(),
        idempotency_key: None,
        body_sha256: "ef".repeat(32),
    };
    assert_eq!(
        store.insert_final_action(&action).unwrap(),
        records::FinalInsert::Inserted
    );
    let again = records::open(location).unwrap();
    assert_eq!(
        again.get(&old.decision_id).unwrap().unwrap().final_action,
        Some(action)
    );
}

#[test]
fn sqlite_store_from_version_1_upgrades_in_place() {
    let (location, _dir) = stores::sqlite();
    let path = location.strip_prefix("sqlite:").unwrap();
    rusqlite::Connection::open(path)
        .unwrap()
        .execute_batch(VERSION_1)
        .unwrap();
    upgrades_in_place(&location);
}

#[test]
fn postgres_store_from_version_1_upgrades_in_place() {
    let Some(db) = stores::postgres() else { return };
    let mut c = postgres::Client::connect(&db.url, postgres::NoTls).unwrap();
    c.batch_execute(VERSION_1).unwrap();
    upgrades_in_place(&db.url);
    let applied: i64 = c
        .query_one("SELECT COUNT(*) FROM plumbline_migrations", &[])
        .unwrap()
        .get(0);
    assert_eq!(applied as usize, records::sql_migrations_count());
}

/// `sslmode` as libpq reads it, against the test server's own certificate (Debian's server
/// ships a self-signed one naming the machine, not 127.0.0.1): `require` encrypts (the server
/// lists the connection in `pg_stat_ssl`), `verify-full` refuses a certificate no trusted root
/// signed, `verify-ca` with that certificate as `sslrootcert` accepts it, and `verify-full`
/// with it still refuses a name the certificate does not hold.
#[test]
fn postgres_connections_use_tls_as_sslmode_says() {
    let Some(db) = stores::postgres() else { return };
    let mut admin = postgres::Client::connect(&db.url, postgres::NoTls).unwrap();
    let ssl: String = admin.query_one("SHOW ssl", &[]).unwrap().get(0);
    assert_eq!(ssl, "on", "the test server must offer TLS (ssl = on)");
    let cert: String = admin.query_one("SHOW ssl_cert_file", &[]).unwrap().get(0);
    let with = |q: &str| format!("{}?{q}", db.url);
    let store = plumbline::records::open(&with("sslmode=require")).expect("TLS without checks");
    let encrypted: i64 = admin
        .query_one(
            "SELECT count(*) FROM pg_stat_ssl s JOIN pg_stat_activity a USING (pid)
             WHERE a.datname = current_database() AND s.ssl AND a.pid <> pg_backend_pid()",
            &[],
        )
        .unwrap()
        .get(0);
    assert!(encrypted >= 1, "the store's connection is encrypted");
    drop(store);
    let refused = plumbline::records::open(&with("sslmode=verify-full"))
        .err()
        .unwrap();
    assert!(refused.to_string().contains("certificate"), "{refused}");
    let rooted = format!("sslrootcert={cert}");
    plumbline::records::open(&with(&format!("sslmode=verify-ca&{rooted}")))
        .expect("the chain leads to the given root");
    let named = plumbline::records::open(&with(&format!("sslmode=verify-full&{rooted}")))
        .err()
        .unwrap();
    assert!(named.to_string().contains("certificate"), "{named}");
}
