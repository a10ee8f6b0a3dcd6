//! The command line as a user runs it: exit status 0 / 2, messages naming field and rule, and
//! the same bytes as the library.

use std::io::Write;
use std::process::{Command, Output, Stdio};

const MODEL: &str = "models/fernhill-logistic.json";

fn plumbline(args: &[&str], stdin: &str) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // A command that does not read stdin (or exits early on a bad model) may close the pipe
    // before we finish writing; that is not a failure of the command.
    let _ = child.stdin.take().unwrap().write_all(stdin.as_bytes());
    child.wait_with_output().unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

#[test]
fn score_prints_the_library_decision_bytes() {
    let out = plumbline(
        &[
            "score",
            "--model",
            MODEL,
            "demo-requests/applications/typical-approve.json",
        ],
        "",
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let model = plumbline::LoadedModel::from_path(std::path::Path::new(MODEL)).unwrap();
    let req: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/applications/typical-approve.json").unwrap(),
    )
    .unwrap();
    let want = serde_json::to_string(&plumbline::decide_request(&model, &req).unwrap()).unwrap();
    assert_eq!(text(&out.stdout), format!("{want}\n"));
}

#[test]
fn json_lines_keep_good_requests_and_name_bad_ones() {
    let good = std::fs::read_to_string("demo-requests/applications/typical-approve.json").unwrap();
    let bad = good.replace("\"housing\": \"mortgage\"", "\"housing\": \"boat\"");
    let input = format!("{}\n{}\n{}\n", good.trim(), bad.trim(), good.trim());
    let out = plumbline(&["score", "--model", MODEL, "-"], &input);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        text(&out.stdout).lines().count(),
        2,
        "both good requests are decided"
    );
    let err = text(&out.stderr);
    assert!(
        err.contains("request 2 (line 2): applicant.housing"),
        "{err}"
    );
    assert!(err.contains("[level]"), "{err}");
}

#[test]
fn malformed_json_is_exit_2_with_position() {
    let out = plumbline(
        &["score", "--model", MODEL],
        "{\"application_id\": \"x\", \"applicant\": {",
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(
        text(&out.stderr).contains("malformed JSON at line 1"),
        "{}",
        text(&out.stderr)
    );
    let out = plumbline(&["score", "--model", MODEL], "   \n");
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn bad_model_is_exit_2_with_json_path() {
    let dir = std::env::temp_dir().join(format!("plumbline-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("broken.json");
    let model = std::fs::read_to_string(MODEL)
        .unwrap()
        .replace("\"approve_below\": 0.08", "\"approve_below\": 0.5");
    std::fs::write(&path, model).unwrap();
    let out = plumbline(&["inspect", path.to_str().unwrap()], "");
    assert_eq!(out.status.code(), Some(2));
    assert!(
        text(&out.stderr).contains("$.policy.decline_at_or_above"),
        "{}",
        text(&out.stderr)
    );
    let out = plumbline(&["score", "--model", "no/such/model.json"], "{}");
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn inspect_shows_digest_fields_cutoffs_and_reasons() {
    let out = plumbline(&["inspect", MODEL], "");
    assert_eq!(out.status.code(), Some(0));
    let s = text(&out.stdout);
    let model = plumbline::LoadedModel::from_path(std::path::Path::new(MODEL)).unwrap();
    assert!(s.contains(&model.sha256));
    for needle in [
        "housing: category [rent, own, mortgage, other], base rent",
        "approve when PD < 0.08",
        "INC_MIN",
        "decision support",
    ] {
        assert!(s.contains(needle), "inspect lacks {needle:?}:\n{s}");
    }
    let out = plumbline(&["inspect", "--json", MODEL], "");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["sha256"], model.sha256.as_str());
}

#[test]
fn score_can_explain_against_the_alternate_reference_for_review() {
    let app = std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap();
    let model = "models/fernhill-logistic-trained.json";
    let primary = plumbline(&["score", "--model", model], &app);
    let alternate = plumbline(
        &["score", "--model", model, "--reference", "all_applicants"],
        &app,
    );
    assert!(primary.status.success() && alternate.status.success());
    let p: serde_json::Value = serde_json::from_slice(&primary.stdout).unwrap();
    let a: serde_json::Value = serde_json::from_slice(&alternate.stdout).unwrap();
    assert_eq!(
        p["contributions"]["reference"]["population"],
        "near_approve_cutoff"
    );
    assert_eq!(
        a["contributions"]["reference"]["population"],
        "all_applicants"
    );
    assert_eq!(
        p["probability_of_default"], a["probability_of_default"],
        "same model"
    );
    // The hand-assembled demo model carries one population only: a clear refusal.
    let none = plumbline(
        &[
            "score",
            "--model",
            "models/fernhill-logistic.json",
            "--reference",
            "all_applicants",
        ],
        &app,
    );
    assert_eq!(none.status.code(), Some(2));
    assert!(
        text(&none.stderr).contains("no such reference population"),
        "{}",
        text(&none.stderr)
    );
}

#[test]
fn draft_spec_prints_an_editable_spec_and_writes_nothing() {
    let dir = std::env::temp_dir().join(format!("plumbline-draft-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let data = dir.join("past-applications.csv");
    std::fs::write(
        &data,
        plumbline::train::demo_data::applications_csv(500, 3).0,
    )
    .unwrap();
    let out = plumbline(&["draft-spec", "--data", data.to_str().unwrap()], "");
    assert!(out.status.success(), "{}", text(&out.stderr));
    let spec: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(spec["model_id"], "past-applications");
    assert_eq!(spec["target"], "defaulted");
    assert!(text(&out.stderr).contains("left out application_id"));
    assert_eq!(
        std::fs::read_dir(&dir).unwrap().count(),
        1,
        "nothing written"
    );
}

#[test]
fn demo_requests_decide_with_the_trained_model() {
    let dir = std::env::temp_dir().join(format!("plumbline-demo-req-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let (csv, requests) = (dir.join("apps.csv"), dir.join("requests.jsonl"));
    let out = plumbline(
        &[
            "demo-data",
            "--rows",
            "300",
            "--out",
            csv.to_str().unwrap(),
            "--requests-out",
            requests.to_str().unwrap(),
        ],
        "",
    );
    assert!(out.status.success(), "{}", text(&out.stderr));
    let lines = std::fs::read_to_string(&requests).unwrap();
    assert_eq!(lines.lines().count(), 300);
    // Missing values are left out (the generator leaves utilisation blank for some applicants).
    assert!(lines.lines().any(|l| !l.contains("revolving_utilization")));
    assert!(!lines.contains("defaulted"), "the outcome is not an input");
    let scored = plumbline(
        &[
            "score",
            "--model",
            "models/fernhill-logistic-trained.json",
            requests.to_str().unwrap(),
        ],
        "",
    );
    assert!(scored.status.success(), "{}", text(&scored.stderr));
    assert_eq!(text(&scored.stdout).lines().count(), 300);
}

/// Long work shows progress on a terminal and nothing of it in a pipe or a log. The terminal is
/// a pseudo-terminal from util-linux `script` (skipped, said so, where it is missing).
#[test]
fn progress_shows_on_a_terminal_only() {
    let dir = std::env::temp_dir().join(format!("plumbline-progress-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let out_csv = dir.join("apps.csv").display().to_string();
    let bin = env!("CARGO_BIN_EXE_plumbline");
    let piped = plumbline(
        &[
            "demo-data",
            "--rows",
            "50000",
            "--seed",
            "1",
            "--out",
            &out_csv,
        ],
        "",
    );
    assert_eq!(piped.status.code(), Some(0));
    let err = text(&piped.stderr);
    assert!(
        !err.contains('\u{1b}') && !err.contains('\r'),
        "no progress in a pipe: {err:?}"
    );
    if Command::new("script").arg("--version").output().is_err() {
        eprintln!("skipped the terminal half: util-linux `script` is not installed");
        return;
    }
    let cmd = format!("{bin} demo-data --rows 50000 --seed 1 --out {out_csv}");
    let tty = Command::new("script")
        .args(["-qec", &cmd, "/dev/null"])
        .output()
        .unwrap();
    assert!(
        text(&tty.stdout).contains("generating applications"),
        "{}",
        text(&tty.stdout)
    );
    let _ = std::fs::remove_dir_all(&dir);
}
