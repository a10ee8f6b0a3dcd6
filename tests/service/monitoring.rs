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
