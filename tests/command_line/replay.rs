//! `plumbline replay`: recorded decisions decided again by a model file or a running service.
//! The champion against its own records changes nothing; a challenger with a lower approve
//! cutoff flips exactly the recorded approvals whose probability reaches the new cutoff.

use crate::common;
use crate::common::server::{send, TestServer, REVIEW, SCORING};
use serde_json::Value;
use std::process::{Command, Output};

fn replay(args: &[&str], key: Option<&str>) -> Output {
    let mut c = Command::new(env!("CARGO_BIN_EXE_plumbline"));
    c.arg("replay").args(args);
    if let Some(k) = key {
        c.env("PLUMBLINE_API_KEY", k);
    }
    c.output().unwrap()
}

fn report(out: &Output) -> Value {
    serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&out.stderr)))
}

#[test]
fn the_champion_replays_its_own_records_unchanged() {
    let out = replay(
        &[
            "demo-requests",
            "--against",
            "models/fernhill-logistic.json",
            "--json",
        ],
        None,
    );
    assert_eq!(out.status.code(), Some(0));
    let r = report(&out);
    assert!(r["compared"].as_u64().unwrap() >= 10);
    assert_eq!(r["unchanged"], r["compared"]);
}

#[test]
fn a_lower_approve_cutoff_flips_exactly_the_approvals_it_should() {
    let dir = common::stores::TempDir::new();
    let mut model: Value =
        serde_json::from_str(&std::fs::read_to_string("models/fernhill-logistic.json").unwrap())
            .unwrap();
    model["policy"]["approve_below"] = 0.03.into();
    let challenger = dir.0.join("challenger.json");
    std::fs::write(&challenger, model.to_string()).unwrap();
    // Expected, from the recorded responses alone: approvals (no rule fired) at p >= 0.03 become
    // refers; nothing else moves.
    let mut expected = 0;
    for e in std::fs::read_dir("demo-requests").unwrap() {
        let pair: Value = match serde_json::from_str(
            &std::fs::read_to_string(e.unwrap().path()).unwrap_or_default(),
        ) {
            Ok(v) => v,
            Err(_) => continue,
        };
        let body = &pair["response"]["body"];
        if pair["request"]["path"] == "/v1/decisions"
            && pair["response"]["status"] == 200
            && body["outcome"] == "approve"
            && body["probability_of_default"].as_f64().unwrap() >= 0.03
        {
            expected += 1;
        }
    }
    assert!(expected > 0, "the demo pairs include approvals above 0.03");
    let junit = dir.0.join("replay.xml");
    let out = replay(
        &[
            "demo-requests",
            "--against",
            challenger.to_str().unwrap(),
            "--json",
            "--junit",
            junit.to_str().unwrap(),
        ],
        None,
    );
    assert_eq!(
        out.status.code(),
        Some(3),
        "changes beyond tolerance exit 3"
    );
    let r = report(&out);
    assert_eq!(r["decision_flips"], expected);
    assert_eq!(r["swap_set"]["approve"]["refer"], expected);
    assert_eq!(
        r["probability_only"], 0,
        "the probabilities themselves did not move"
    );
    let xml = std::fs::read_to_string(&junit).unwrap();
    assert!(xml.starts_with("<?xml"));
    assert_eq!(
        xml.matches("<failure type=\"decision_flip\"").count(),
        expected as usize
    );
    assert_eq!(
        xml.matches("<testcase ").count() as u64,
        r["compared"].as_u64().unwrap()
    );
    // The readable summary carries the swap set.
    let out = replay(
        &["demo-requests", "--against", challenger.to_str().unwrap()],
        None,
    );
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("swap set") && text.contains("decision flips"),
        "{text}"
    );
}

#[test]
fn a_records_export_replays_against_a_running_service() {
    let server = TestServer::demo();
    let body =
        std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap();
    let (status, _, _) = send(
        "POST",
        &server.url("/v1/decisions"),
        Some(SCORING),
        Some("application/json"),
        Some(&body),
    );
    assert_eq!(status, 200);
    let (status, _, export) = send(
        "GET",
        &server.url("/v1/decisions/export"),
        Some(REVIEW),
        None,
        None,
    );
    assert_eq!(status, 200);
    let dir = common::stores::TempDir::new();
    let file = dir.0.join("export.jsonl");
    std::fs::write(&file, export).unwrap();
    let out = replay(
        &[file.to_str().unwrap(), "--against", &server.base, "--json"],
        Some(SCORING),
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    assert_eq!(report(&out)["unchanged"], 1);
    // Without a key the service refuses every request: reported as errors, exit 3.
    let out = replay(
        &[file.to_str().unwrap(), "--against", &server.base, "--json"],
        None,
    );
    assert_eq!(out.status.code(), Some(3));
    assert_eq!(report(&out)["errors"], 1);
}

#[test]
fn bad_replay_input_is_exit_2() {
    let dir = common::stores::TempDir::new();
    assert_eq!(
        replay(
            &[
                dir.0.to_str().unwrap(),
                "--against",
                "models/fernhill-logistic.json"
            ],
            None
        )
        .status
        .code(),
        Some(2)
    );
    assert_eq!(
        replay(
            &[
                "demo-requests",
                "--against",
                "models/fernhill-logistic.json",
                "--tolerance",
                "-1"
            ],
            None
        )
        .status
        .code(),
        Some(2)
    );
    let junk = dir.0.join("junk.jsonl");
    std::fs::write(&junk, "{\"not\": \"a record\"}\n").unwrap();
    let out = replay(
        &[
            junk.to_str().unwrap(),
            "--against",
            "models/fernhill-logistic.json",
        ],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 1"));
}
