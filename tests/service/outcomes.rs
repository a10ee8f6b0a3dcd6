//! Observed outcomes and back-testing on both stores: loading accounts for every row (stored,
//! duplicate, conflict, unknown application, bad row named), a file larger than one group and a
//! fault part-way keep what came before, an outcome belongs to its application's latest decision;
//! and, through the real binary, POST /v1/outcomes and GET /v1/monitoring/outcomes against
//! `plumbline outcomes load` and `plumbline monitor outcomes`, with roles and refusals.
//! (The statistics themselves are checked against scipy in tests/references/reference_backtest.rs.)

use crate::common::server::{send, spawn_binary, REVIEW, SCORING};
use crate::common::stores;
use plumbline::outcomes::{self, Format, LoadError};
use plumbline::records::{self, DecisionWithOutcome, Query, Record, Store};
use serde_json::Value;

fn decision(app: &str, decided_at: &str, outcome: &str, probability: f64) -> Record {
    Record {
        decision_id: records::ids::new_decision_id(),
        application_id: app.into(),
        idempotency_key: None,
        received_at: decided_at.into(),
        decided_at: decided_at.into(),
        model_id: "fernhill-personal-logistic".into(),
        model_version: "0.1.0".into(),
        model_sha256: "ab".repeat(32),
        plumbline_version: plumbline::VERSION.into(),
        request_sha256: "cd".repeat(32),
        outcome: records::Outcome::from_name(outcome).unwrap(),
        probability,
        score: 600,
        request: "{}".into(),
        response: "{}".into(),
        requested_by: "los-test".into(),
        final_action: None,
    }
}

fn load(store: &dyn Store, format: Format, text: &str) -> Result<outcomes::LoadSummary, LoadError> {
    outcomes::load(
        &mut text.as_bytes(),
        format,
        store,
        "review-test",
        &mut |_| {},
    )
}

fn joined(store: &dyn Store) -> Vec<DecisionWithOutcome> {
    let query = Query {
        model_id: Some("fernhill-personal-logistic".into()),
        ..Query::default()
    };
    let mut rows = Vec::new();
    store
        .with_outcomes(&query, &mut |d| {
            rows.push(d.clone());
            true
        })
        .unwrap();
    rows
}

fn suite(location: &str) {
    let store = records::open(location).unwrap();
    // 2,500 applications (more than two groups of a load); FH-0 is decided twice.
    let mut decided: Vec<Record> = (0..2_500)
        .map(|i| {
            decision(
                &format!("FH-{i}"),
                "2026-01-10T09:00:00.000000Z",
                "approve",
                0.05,
            )
        })
        .collect();
    decided.push(decision(
        "FH-0",
        "2026-02-10T09:00:00.000000Z",
        "refer",
        0.15,
    ));
    store.insert_group(&decided).unwrap();

    let mut csv = String::from("observed_at,application_id,defaulted,branch\n");
    for i in 0..2_500 {
        csv.push_str(&format!(
            "2026-06-{:02},FH-{i},{},north\n",
            1 + i % 28,
            u8::from(i % 10 == 0)
        ));
    }
    // In the same file: a duplicate, a conflict, an unknown application, three bad rows (the
    // last one cell short).
    csv.push_str("2026-06-01,FH-0,1,north\n2026-06-01,FH-1,1,north\n2026-06-01,FH-NONE,0,north\n");
    csv.push_str("2026-06-01,FH-2,yes,north\nnot-a-date,FH-3,0,north\n2026-06-01,FH-4,0\n");
    let s = load(&*store, Format::Csv, &csv).unwrap();
    assert_eq!(
        (
            s.rows,
            s.stored,
            s.duplicates,
            s.conflicts,
            s.unknown_applications,
            s.bad_rows
        ),
        (2_506, 2_500, 1, 1, 1, 3)
    );
    assert_eq!(s.ignored_columns, ["branch"]);
    let named: Vec<(u64, &str)> = s
        .not_loaded
        .iter()
        .map(|r| (r.row, r.rule.as_str()))
        .collect();
    assert_eq!(
        named,
        [
            (2_502, "conflict"),
            (2_503, "unknown_application"),
            (2_504, "zero_or_one"),
            (2_505, "rfc3339"),
            (2_506, "cells")
        ]
    );
    assert_eq!(s.not_loaded[2].field.as_deref(), Some("defaulted"));

    // Loading the same file again stores nothing new.
    let again = load(&*store, Format::Csv, &csv).unwrap();
    assert_eq!(
        (again.stored, again.duplicates, again.conflicts),
        (0, 2_501, 1)
    );

    // JSON lines and a JSON array: the same accounting; a fault part-way keeps what came before.
    store
        .insert_group(&[
            decision("FH-J1", "2026-03-01T00:00:00.000000Z", "approve", 0.2),
            decision("FH-J2", "2026-03-01T00:00:00.000000Z", "approve", 0.2),
        ])
        .unwrap();
    let lines = "{\"application_id\":\"FH-J1\",\"defaulted\":1,\"observed_at\":\"2026-07-01T00:00:00Z\"}\n{\"application_id\":\"FH-J2\",\"defaulted\":true,\"observed_at\":\"2026-07-01\",\"extra\":1}\n";
    let s = load(&*store, Format::JsonLines, lines).unwrap();
    assert_eq!((s.stored, s.bad_rows), (1, 1));
    assert_eq!(s.not_loaded[0].field.as_deref(), Some("extra"));
    let cut = "[{\"application_id\":\"FH-J2\",\"defaulted\":0,\"observed_at\":\"2026-07-01\"}, {\"application_id\": ";
    match load(&*store, Format::Json, cut) {
        Err(LoadError::Syntax { row, so_far, .. }) => assert_eq!((row, so_far.stored), (2, 1)),
        other => panic!("{other:?}"),
    }
    assert!(matches!(
        load(&*store, Format::Csv, "application_id,defaulted\nFH-1,0\n"),
        Err(LoadError::Header {
            rule: "required",
            ..
        })
    ));

    // The rows named are the first by row, whenever each was found: an unknown application
    // (answered when its group is written) before 150 bad rows (named as read); a cell that is
    // not UTF-8 is a bad row, not the end of the file; FH-7's second outcome is a conflict.
    let mut many = b"application_id,defaulted,observed_at\nFH-UNKNOWN,0,2026-06-01\n".to_vec();
    for i in 0..150 {
        many.extend_from_slice(format!("FH-{i},maybe,2026-06-01\n").as_bytes());
    }
    many.extend_from_slice(b"FH-\xe9,0,2026-06-01\nFH-7,1,2026-06-07\n");
    let s = outcomes::load(
        &mut &many[..],
        Format::Csv,
        &*store,
        "review-test",
        &mut |_| {},
    )
    .unwrap();
    assert_eq!(
        (s.rows, s.bad_rows, s.unknown_applications, s.conflicts),
        (153, 151, 1, 1)
    );
    assert_eq!((s.not_loaded.len(), s.more_not_named), (100, 53));
    assert_eq!(
        (s.not_loaded[0].row, s.not_loaded[0].rule.as_str()),
        (1, "unknown_application")
    );
    assert_eq!(s.not_loaded[99].row, 100);
    let count = |rule: &str| s.not_loaded.iter().filter(|r| r.rule == rule).count();
    assert_eq!(count("zero_or_one"), 99);

    // Each application's latest decision carries its outcome; FH-0's first is superseded.
    let rows = joined(&*store);
    assert_eq!(rows.len(), 2_502);
    let fh0: Vec<&DecisionWithOutcome> = rows
        .iter()
        .filter(|r| {
            r.decision_id == decided[2_500].decision_id || r.decision_id == decided[0].decision_id
        })
        .collect();
    assert_eq!(fh0.len(), 1);
    assert_eq!(fh0[0].decision_id, decided[2_500].decision_id);
    assert_eq!(
        fh0[0].observed,
        Some((true, "2026-06-01T00:00:00.000000Z".into()))
    );
    assert_eq!(rows.iter().filter(|r| r.observed.is_some()).count(), 2_502);
}

#[test]
fn sqlite_outcomes_suite() {
    let (location, _dir) = stores::sqlite();
    suite(&location);
}

#[test]
fn postgres_outcomes_suite() {
    let Some(db) = stores::postgres() else { return };
    suite(&db.url);
}

fn post(base: &str, key: &str, media: &str, body: &str) -> (u16, String) {
    let (status, _, text) = send(
        "POST",
        &format!("{base}/v1/outcomes"),
        Some(key),
        Some(media),
        Some(body),
    );
    (status, text)
}

#[test]
fn the_service_and_the_command_line_load_and_back_test_alike() {
    let (location, _dir) = stores::sqlite();
    let (mut server, base) = spawn_binary(&["--store", &location]);
    let (applications, _) = plumbline::train::demo_data::applications_csv(3_000, 17);
    let requests = plumbline::train::demo_data::requests_jsonl(&applications);
    let lines: Vec<&str> = requests.lines().collect();
    let mut csv = String::from("application_id,defaulted,observed_at\n");
    let labels: Vec<&str> = applications.lines().skip(1).collect();
    let header: Vec<&str> = applications.lines().next().unwrap().split(',').collect();
    let target = header.iter().position(|h| *h == "defaulted").unwrap();
    // Observed after the decisions: what a load months later would say.
    let mut decided = Vec::new();
    for (chunk, labels) in lines.chunks(500).zip(labels.chunks(500)) {
        let body = format!("{{\"items\":[{}]}}", chunk.join(","));
        let (status, _, text) = send(
            "POST",
            &format!("{base}/v1/decisions/batch"),
            Some(SCORING),
            Some("application/json"),
            Some(&body),
        );
        assert_eq!(status, 200, "{text}");
        let answer: Value = serde_json::from_str(&text).unwrap();
        for (item, label) in answer["results"].as_array().unwrap().iter().zip(labels) {
            let d = &item["decision"];
            if d["outcome"] != "decline" {
                let flag = label.split(',').nth(target).unwrap();
                decided.push((
                    d["application_id"].as_str().unwrap().to_string(),
                    flag.to_string(),
                ));
            }
        }
    }
    std::thread::sleep(std::time::Duration::from_millis(5));
    let observed = plumbline::records::now();
    for (id, flag) in &decided {
        csv.push_str(&format!("{id},{flag},{observed}\n"));
    }
    // Roles, media types and the header are checked before anything is stored.
    assert_eq!(post(&base, SCORING, "text/csv", &csv).0, 403);
    assert_eq!(post(&base, REVIEW, "text/plain", &csv).0, 415);
    let (status, text) = post(
        &base,
        REVIEW,
        "text/csv",
        "application_id,observed_at\nx,2026-01-01\n",
    );
    assert_eq!(status, 400, "{text}");
    assert!(text.contains("defaulted"), "{text}");

    let (status, text) = post(&base, REVIEW, "text/csv", &csv);
    assert_eq!(status, 200, "{text}");
    let summary: Value = serde_json::from_str(&text).unwrap();
    let loaded = csv.lines().count() as u64 - 1;
    assert_eq!(summary["stored"], loaded, "{summary}");

    let model = "fernhill-personal-logistic";
    let (status, _, text) = send(
        "GET",
        &format!("{base}/v1/monitoring/outcomes?model_id={model}"),
        Some(REVIEW),
        None,
        None,
    );
    assert_eq!(status, 200, "{text}");
    let report: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(report["decisions"], 3_000);
    assert_eq!(report["with_outcome"], loaded);
    let auc = report["discrimination"]["auc"].as_f64().unwrap();
    assert!(
        auc > 0.6,
        "the demo model ranks its own invented labels: {auc}"
    );
    assert_eq!(report["by_decile"].as_array().unwrap().len(), 10);
    let declines = report["by_outcome"]
        .as_array()
        .unwrap()
        .iter()
        .find(|o| o["outcome"] == "decline")
        .unwrap();
    assert_eq!(declines["with_outcome"], 0);
    let (status, _, page) = send(
        "GET",
        &format!("{base}/v1/monitoring/outcomes?model_id={model}&format=html"),
        Some(REVIEW),
        None,
        None,
    );
    assert_eq!(status, 200);
    assert!(
        page.contains("<svg")
            && page.contains("Calibration by score band")
            && !page.contains("<script")
    );
    assert_eq!(
        send(
            "GET",
            &format!("{base}/v1/monitoring/outcomes?model_id={model}"),
            Some(SCORING),
            None,
            None
        )
        .0,
        403
    );
    assert_eq!(
        send(
            "GET",
            &format!("{base}/v1/monitoring/outcomes?model_id={model}&from=2040-01-01"),
            Some(REVIEW),
            None,
            None
        )
        .0,
        409
    );
    assert_eq!(
        send(
            "GET",
            &format!("{base}/v1/monitoring/outcomes?model_id={model}&cursor=x"),
            Some(REVIEW),
            None,
            None
        )
        .0,
        400
    );
    let _ = server.kill();
    let _ = server.wait();

    // The command line reads the same store to the same report, and loads as the service does.
    let cli = |args: &[&str]| {
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
            .args(args)
            .output()
            .unwrap();
        (
            out.status.code(),
            String::from_utf8_lossy(&out.stdout).into_owned(),
            String::from_utf8_lossy(&out.stderr).into_owned(),
        )
    };
    let (code, out, err) = cli(&[
        "monitor",
        "outcomes",
        "--store",
        &location,
        "--model",
        "models/fernhill-logistic.json",
        "--json",
    ]);
    assert_eq!(code, Some(0), "{err}");
    let from_cli: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(from_cli, report);
    let file = _dir.0.join("again.csv");
    std::fs::write(&file, &csv).unwrap();
    let (code, out, err) = cli(&[
        "outcomes",
        "load",
        file.to_str().unwrap(),
        "--store",
        &location,
        "--json",
    ]);
    assert_eq!(code, Some(0), "{err}");
    let again: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(
        (again["stored"].as_u64(), again["duplicates"].as_u64()),
        (Some(0), Some(loaded))
    );
    std::fs::write(
        &file,
        "application_id,defaulted,observed_at\nFH-NOT-DECIDED,1,2026-11-30\n",
    )
    .unwrap();
    let (code, out, _) = cli(&[
        "outcomes",
        "load",
        file.to_str().unwrap(),
        "--store",
        &location,
    ]);
    assert_eq!(code, Some(2));
    assert!(
        out.contains("1 unknown applications") && out.contains("unknown_application"),
        "{out}"
    );
}
