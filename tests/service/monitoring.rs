//! GET /v1/monitoring/stability and `plumbline monitor stability` over decisions recorded
//! through the real binary. The streamed tally is checked against the training-time comparison
//! (`evaluate::stability::compare_all`, which bins the same applicants held in memory), the CLI
//! against the service, a shifted population (incomes halved) against the bands (PSI above 0.25:
//! common practice), and the gauges, roles and refusals.

use crate::common::server::{send, spawn_binary, REVIEW, SCORING};
use crate::common::stores::TempDir;
use serde_json::Value;

const TRAINED: &str = "models/fernhill-logistic-trained.json";

/// Decides `requests` (JSON lines) through the batch route; returns the applicants and scores.
fn decide_all(base: &str, requests: &str) -> (Vec<serde_json::Map<String, Value>>, Vec<f64>) {
    let lines: Vec<&str> = requests.lines().collect();
    let (mut applicants, mut scores) = (Vec::new(), Vec::new());
    for chunk in lines.chunks(500) {
        let body = format!("{{\"items\":[{}]}}", chunk.join(","));
        let url = format!("{base}/v1/decisions/batch");
        let (status, _, text) = send(
            "POST",
            &url,
            Some(SCORING),
            Some("application/json"),
            Some(&body),
        );
        assert_eq!(status, 200, "{text}");
        let answer: Value = serde_json::from_str(&text).unwrap();
        for (line, item) in chunk.iter().zip(answer["results"].as_array().unwrap()) {
            let request: Value = serde_json::from_str(line).unwrap();
            applicants.push(request["applicant"].as_object().unwrap().clone());
            scores.push(item["decision"]["score"].as_f64().unwrap());
        }
    }
    (applicants, scores)
}

fn get(base: &str, path: &str, key: &str) -> (u16, String, String) {
    send("GET", &format!("{base}{path}"), Some(key), None, None)
}

#[test]
fn stability_over_the_records_agrees_with_the_training_comparison() {
    let dir = TempDir::new();
    let location = format!("sqlite:{}", dir.0.join("records.sqlite3").display());
    let (mut server, base) = spawn_binary(&[
        "--store",
        &location,
        "--model",
        TRAINED,
        "--model",
        "models/fernhill-logistic.json",
    ]);
    let model = plumbline::LoadedModel::from_path(std::path::Path::new(TRAINED)).unwrap();
    let dev = model
        .stability
        .clone()
        .expect("the trained demo model has bins");
    let (applications, _) = plumbline::train::demo_data::applications_csv(1_500, 11);
    let requests = plumbline::train::demo_data::requests_jsonl(&applications);
    let (applicants, scores) = decide_all(&base, &requests);

    let path = "/v1/monitoring/stability?model_id=fernhill-personal-logistic&model_version=1.0.0";
    let (status, _, text) = get(&base, path, REVIEW);
    assert_eq!(status, 200, "{text}");
    let report: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(report["decisions"], 1_500);
    let expected = plumbline::evaluate::stability::compare_all(&dev, &applicants, &scores);
    let shown = report["distributions"].as_array().unwrap();
    assert_eq!(shown.len(), expected.len());
    for e in &expected {
        let d = shown.iter().find(|d| d["name"] == e.name.as_str()).unwrap();
        let psi = d["psi"].as_f64().unwrap();
        assert!(
            (psi - e.psi).abs() < 1e-12,
            "{}: {psi} against {}",
            e.name,
            e.psi
        );
        let now: Vec<f64> = (d["bins"].as_array().unwrap().iter())
            .map(|b| b["now"].as_f64().unwrap())
            .collect();
        let then: Vec<f64> = e.bins.iter().map(|b| b.2).collect();
        assert_eq!(now, then, "{}: the current shares", e.name);
        // A fresh sample of the development process is stable (common-practice band).
        assert_eq!(d["band"], "stable", "{}", e.name);
    }

    // The command line reads the same store to the same report.
    let cli = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "monitor",
            "stability",
            "--store",
            &location,
            "--model",
            TRAINED,
            "--json",
        ])
        .output()
        .unwrap();
    assert!(
        cli.status.success(),
        "{}",
        String::from_utf8_lossy(&cli.stderr)
    );
    let from_cli: Value = serde_json::from_slice(&cli.stdout).unwrap();
    assert_eq!(from_cli["distributions"], report["distributions"]);

    // A shifted population after a point in time: incomes halved.
    std::thread::sleep(std::time::Duration::from_millis(20));
    let since = plumbline::records::now();
    let halved: String = (requests.lines())
        .map(|l| {
            let mut r: Value = serde_json::from_str(l).unwrap();
            let income = r["applicant"]["annual_income"].as_f64().unwrap();
            r["applicant"]["annual_income"] = Value::from((income / 2.0).round());
            r["application_id"] =
                Value::from(format!("{}-H", r["application_id"].as_str().unwrap()));
            format!("{r}\n")
        })
        .collect();
    decide_all(&base, &halved);
    let shifted = format!("{path}&from={since}");
    let (status, _, text) = get(&base, &shifted, REVIEW);
    assert_eq!(status, 200, "{text}");
    let report: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(report["decisions"], 1_500);
    let income = (report["distributions"].as_array().unwrap().iter())
        .find(|d| d["name"] == "annual_income")
        .unwrap();
    assert!(income["psi"].as_f64().unwrap() > 0.25, "{income}");
    assert_eq!(income["band"], "act");

    // The gauges hold the latest report; the page draws its charts.
    let (_, _, metrics) = get(&base, "/metrics", REVIEW);
    let gauge = (metrics.lines())
        .find(|l| {
            l.starts_with("plumbline_stability_psi{")
                && l.contains("distribution=\"annual_income\"")
        })
        .expect("an income gauge");
    let value: f64 = gauge.rsplit(' ').next().unwrap().parse().unwrap();
    assert_eq!(value, income["psi"].as_f64().unwrap());
    let (status, content_type, page) = get(&base, &format!("{path}&format=html"), REVIEW);
    assert_eq!(status, 200);
    assert!(content_type.starts_with("text/html"));
    assert!(
        page.matches("<svg").count() >= 2 && page.contains("common practice"),
        "{page}"
    );
    assert!(!page.contains("<script"), "the page is script-free");

    // Roles and refusals.
    assert_eq!(get(&base, path, SCORING).0, 403);
    let (status, _, text) = get(&base, "/v1/monitoring/stability", REVIEW);
    assert!(status == 400 && text.contains("model_id"), "{text}");
    let (status, _, text) = get(&base, "/v1/monitoring/stability?model_id=nope", REVIEW);
    assert!(status == 404 && text.contains("nope"), "{text}");
    let (status, _, text) = get(
        &base,
        "/v1/monitoring/stability?model_id=fernhill-personal-logistic&model_version=0.1.0",
        REVIEW,
    );
    assert!(
        status == 409 && text.contains("no-development-bins"),
        "{text}"
    );
    // An empty range is refused rather than reported as a major shift everywhere.
    let (status, _, text) = get(&base, &format!("{path}&from=2030-01-01"), REVIEW);
    assert!(status == 409 && text.contains("no-decisions"), "{text}");
    let (status, _, text) = get(&base, &format!("{path}&outcome=decline"), REVIEW);
    assert!(status == 400 && text.contains("outcome"), "{text}");
    let (_, _, log) = get(&base, "/v1/admin/access", crate::common::server::ADMIN);
    assert!(
        log.contains("\"action\":\"stability\""),
        "every read is in the access log: {log}"
    );
    server.kill().unwrap();
    let _ = server.wait();
}

/// A recorded decision of `version` at `decided_at` giving `codes` as its principal reasons.
fn record(
    n: usize,
    version: &str,
    decided_at: &str,
    outcome: &str,
    codes: &[&str],
) -> plumbline::records::Record {
    let reasons: Vec<Value> = (codes.iter().enumerate())
        .map(|(i, c)| serde_json::json!({"rank": i + 1, "code": c, "text": "t", "source": "model"}))
        .collect();
    plumbline::records::Record {
        decision_id: format!("01a00000-0000-7000-8000-{n:012}"),
        application_id: format!("FH-TREND-{n}"),
        idempotency_key: None,
        received_at: decided_at.to_string(),
        decided_at: decided_at.to_string(),
        model_id: "fernhill-personal-logistic".into(),
        model_version: version.into(),
        model_sha256: "ab".repeat(32),
        plumbline_version: plumbline::VERSION.into(),
        request_sha256: format!("{n:064x}"),
        outcome: plumbline::records::Outcome::from_name(outcome).unwrap(),
        probability: 0.3,
        score: 500,
        request: format!("{{\"application_id\":\"FH-TREND-{n}\",\"applicant\":{{}}}}"),
        response: serde_json::json!({"outcome": outcome, "reasons": reasons}).to_string(),
        requested_by: "trend-test".into(),
        final_action: None,
    }
}

/// Reason trends by month and version, worked by hand from the records laid out below, through
/// the service and the command line alike.
#[test]
fn reason_trends_count_principal_reasons_by_period_and_version() {
    let dir = TempDir::new();
    let location = format!("sqlite:{}", dir.0.join("records.sqlite3").display());
    let store = plumbline::records::open(&location).unwrap();
    // October, 0.1.0: 4 declines/referrals, DTI 3 times, INQ twice (an approval not counted).
    // November, 0.1.0: 2, DTI once, UTIL twice. November, 0.2.0: 1, INQ.
    let rows = [
        (
            "0.1.0",
            "2026-10-03T10:00:00.000000Z",
            "decline",
            &["DTI", "INQ"][..],
        ),
        (
            "0.1.0",
            "2026-10-09T10:00:00.000000Z",
            "decline",
            &["DTI"][..],
        ),
        (
            "0.1.0",
            "2026-10-20T10:00:00.000000Z",
            "refer",
            &["DTI", "INQ"][..],
        ),
        ("0.1.0", "2026-10-21T10:00:00.000000Z", "refer", &[][..]),
        ("0.1.0", "2026-10-22T10:00:00.000000Z", "approve", &[][..]),
        (
            "0.1.0",
            "2026-11-02T10:00:00.000000Z",
            "decline",
            &["UTIL", "DTI"][..],
        ),
        (
            "0.1.0",
            "2026-11-30T23:59:59.999999Z",
            "decline",
            &["UTIL"][..],
        ),
        (
            "0.2.0",
            "2026-11-15T10:00:00.000000Z",
            "decline",
            &["INQ"][..],
        ),
    ];
    let records: Vec<_> = (rows.iter().enumerate())
        .map(|(n, (v, at, o, codes))| record(n, v, at, o, codes))
        .collect();
    store.insert_group(&records).unwrap();
    drop(store);
    let (mut server, base) = spawn_binary(&["--store", &location]);
    let (status, _, text) = get(
        &base,
        "/v1/monitoring/reasons?model_id=fernhill-personal-logistic&period=month",
        REVIEW,
    );
    assert_eq!(status, 200, "{text}");
    let report: Value = serde_json::from_str(&text).unwrap();
    let periods = report["periods"].as_array().unwrap();
    let summary: Vec<(String, String, u64, u64)> = (periods.iter())
        .map(|p| {
            (
                p["period"].as_str().unwrap().into(),
                p["model_version"].as_str().unwrap().into(),
                p["declines"].as_u64().unwrap(),
                p["referrals"].as_u64().unwrap(),
            )
        })
        .collect();
    assert_eq!(
        summary,
        [
            ("2026-10".into(), "0.1.0".into(), 2, 2),
            ("2026-11".into(), "0.1.0".into(), 2, 0),
            ("2026-11".into(), "0.2.0".into(), 1, 0),
        ]
    );
    let shares = |p: &Value| -> Vec<(String, u64, f64, Option<f64>)> {
        (p["reasons"].as_array().unwrap().iter())
            .map(|r| {
                (
                    r["code"].as_str().unwrap().into(),
                    r["count"].as_u64().unwrap(),
                    r["share"].as_f64().unwrap(),
                    r["change"].as_f64(),
                )
            })
            .collect()
    };
    assert_eq!(
        shares(&periods[0]),
        [("DTI".into(), 3, 0.75, None), ("INQ".into(), 2, 0.5, None)]
    );
    // November against October (same version): DTI 0.5 - 0.75, UTIL 1.0 - 0, INQ 0 - 0.5.
    assert_eq!(
        shares(&periods[1]),
        [
            ("UTIL".into(), 2, 1.0, Some(1.0)),
            ("DTI".into(), 1, 0.5, Some(-0.25)),
            ("INQ".into(), 0, 0.0, Some(-0.5)),
        ]
    );
    // A new version starts its own series.
    assert_eq!(shares(&periods[2]), [("INQ".into(), 1, 1.0, None)]);
    // The command line reads the same store to the same report; CSV and the page too.
    let cli = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "monitor",
            "reasons",
            "--store",
            &location,
            "--model-id",
            "fernhill-personal-logistic",
            "--json",
        ])
        .output()
        .unwrap();
    assert!(
        cli.status.success(),
        "{}",
        String::from_utf8_lossy(&cli.stderr)
    );
    let from_cli: Value = serde_json::from_slice(&cli.stdout).unwrap();
    assert_eq!(from_cli["periods"], report["periods"]);
    let (_, content_type, csv) = get(
        &base,
        "/v1/monitoring/reasons?model_id=fernhill-personal-logistic&format=csv",
        REVIEW,
    );
    assert!(content_type.starts_with("text/csv"));
    assert!(
        csv.lines()
            .any(|l| l == "2026-11,0.1.0,2,0,DTI,1,0.5,-0.25"),
        "{csv}"
    );
    let (_, _, page) = get(
        &base,
        "/v1/monitoring/reasons?model_id=fernhill-personal-logistic&format=html",
        REVIEW,
    );
    assert!(
        page.matches("<svg").count() >= 4 && !page.contains("<script"),
        "{page}"
    );
    // ISO weeks: 2026-10-03 is in week 40, 2026-11-30 in week 49 (as the time crate computes).
    let (_, _, text) = get(
        &base,
        "/v1/monitoring/reasons?model_id=fernhill-personal-logistic&period=week",
        REVIEW,
    );
    let weekly: Value = serde_json::from_str(&text).unwrap();
    let weeks: Vec<&str> = (weekly["periods"].as_array().unwrap().iter())
        .map(|p| p["period"].as_str().unwrap())
        .collect();
    assert_eq!(weeks.first(), Some(&"2026-W40"));
    assert!(weeks.contains(&"2026-W49"), "{weeks:?}");
    let (status, _, text) = get(
        &base,
        "/v1/monitoring/reasons?model_id=x&period=day",
        REVIEW,
    );
    assert!(status == 400 && text.contains("period"), "{text}");
    assert_eq!(
        get(&base, "/v1/monitoring/reasons?model_id=x", SCORING).0,
        403
    );
    server.kill().unwrap();
    let _ = server.wait();
}
