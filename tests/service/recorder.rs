//! The recorder's group commit on the embedded store: a decision on its way joins the commit of
//! the records already waiting (one sync for both), a decision that never comes holds nobody for
//! longer than the gathering time, and the write-ahead log reaches the database file without a
//! commit doing the copy.

use crate::common::stores;
use plumbline::records::{self, Record, Recorder};
use std::time::Duration;

fn record(n: usize) -> Record {
    Record {
        decision_id: records::ids::new_decision_id(),
        application_id: format!("FH-GATHER-{n:04}"),
        idempotency_key: None,
        received_at: "2026-12-03T10:00:00.000000Z".into(),
        decided_at: "2026-12-03T10:00:00.000001Z".into(),
        model_id: "fernhill-personal-logistic".into(),
        model_version: "0.1.0".into(),
        model_sha256: "ab".repeat(32),
        plumbline_version: plumbline::VERSION.into(),
        request_sha256: format!("{n:064x}"),
        outcome: records::Outcome::Approve,
        probability: 0.05,
        score: 700,
        request: format!("{{\"application_id\":\"FH-GATHER-{n:04}\",\"applicant\":{{}}}}"),
        // About the size of a real response, so that records take pages.
        response: format!("{{\"n\":{n},\"pad\":\"{}\"}}", "x".repeat(3_000)),
        requested_by: "los-test".into(),
        final_action: None,
    }
}

fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .unwrap()
}

#[test]
fn a_decision_on_its_way_joins_the_waiting_commit() {
    let (location, _dir) = stores::sqlite();
    let store = records::open(&location).unwrap();
    // A long gathering time, so the second decision surely comes within it.
    let recorder = Recorder::start(
        store.clone(),
        Duration::from_secs(10),
        Duration::from_secs(5),
    );
    runtime().block_on(async {
        let on_its_way = recorder.expect();
        let first = tokio::spawn({
            let r = recorder.clone();
            async move { r.record(vec![record(1)], None).await }
        });
        tokio::time::sleep(Duration::from_millis(50)).await;
        let second = recorder.record(vec![record(2)], Some(on_its_way)).await;
        assert!(second.unwrap()[0].1.is_ok());
        assert!(first.await.unwrap().unwrap()[0].1.is_ok());
    });
    assert_eq!(recorder.stats(), (1, 2), "one commit for both");
}

#[test]
fn a_decision_that_never_comes_holds_no_one_past_the_gathering_time() {
    let (location, _dir) = stores::sqlite();
    let store = records::open(&location).unwrap();
    let recorder = Recorder::start(store, Duration::from_secs(10), Duration::from_millis(20));
    let _never_handed_over = recorder.expect();
    let written = runtime().block_on(async {
        // Far longer than the gathering time: only a writer that waited for ever misses it.
        tokio::time::timeout(
            Duration::from_secs(10),
            recorder.record(vec![record(3)], None),
        )
        .await
    });
    assert!(written
        .expect("committed without the missing decision")
        .unwrap()[0]
        .1
        .is_ok());
    assert_eq!(recorder.stats().0, 1);
}

/// Fewer pages than SQLite's automatic checkpoint waits for (1,000): only the store's own
/// checkpointer copies them into the database file.
#[test]
fn the_write_ahead_log_reaches_the_database_file_off_the_commit_path() {
    let (location, dir) = stores::sqlite();
    let store = records::open(&location).unwrap();
    let file = dir.0.join("records.sqlite3");
    let before = std::fs::metadata(&file).unwrap().len();
    for n in 0..40 {
        store.insert_group(&[record(100 + n)]).unwrap();
    }
    let grown = (0..100).any(|_| {
        std::thread::sleep(Duration::from_millis(50));
        std::fs::metadata(&file).unwrap().len() >= before + 40 * 3_000
    });
    assert!(grown, "the database file never received the log's pages");
}

/// Closing the store stops its checkpointer and closes every connection, so the last one
/// copies the write-ahead log home and removes it (SQLite's own rule for the last connection
/// of a WAL database).
#[test]
fn a_closed_store_leaves_no_write_ahead_log_behind() {
    let (location, dir) = stores::sqlite();
    let store = records::open(&location).unwrap();
    let wal = dir.0.join("records.sqlite3-wal");
    let kept = record(300);
    store.insert_group(std::slice::from_ref(&kept)).unwrap();
    assert!(wal.exists(), "a WAL database writes its log first");
    drop(store);
    assert!(!wal.exists(), "the log outlived the store");
    let again = records::open(&location).unwrap();
    let read = again.get(&kept.decision_id).unwrap();
    assert_eq!(read.map(|r| r.application_id), Some(kept.application_id));
}
