//! The review console in a real browser (Debian's Chromium, driven by playwright-core from npm
//! through `tests/console/check.mjs`): sign-in and a refused scoring key, search, a decline's
//! reasons and contribution bars against the API's numbers, the notice content printed to PDF
//! (A4 and Letter) and read back, a screening report from a CSV file that flags the demo's tilted
//! group, a replay report file, a final action recorded by an underwriter and shown at once; no
//! console response carries applicant data without a key. Screenshots and PDFs go to
//! target/test-artifacts/console/.
//!
//! Needs `node`, `tests/console/node_modules` (`npm ci` there), `chromium` and `pdftotext`;
//! without them the test says why and skips, unless PLUMBLINE_REQUIRE_BROWSER is set (CI).

use crate::common::server::{send, spawn_binary, SCORING};
use crate::common::stores::TempDir;
use std::path::{Path, PathBuf};
use std::process::Command;

fn on_path(program: &str) -> bool {
    Command::new("sh")
        .args(["-c", &format!("command -v {program}")])
        .output()
        .is_ok_and(|o| o.status.success())
}

/// What is missing for the browser check, if anything.
fn missing() -> Option<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let needs = [
        ("node", on_path("node")),
        ("chromium", on_path("chromium")),
        ("pdftotext (poppler-utils)", on_path("pdftotext")),
        (
            "tests/console/node_modules (npm ci in tests/console)",
            root.join("tests/console/node_modules/playwright-core")
                .is_dir(),
        ),
    ];
    let absent: Vec<&str> = (needs.iter())
        .filter(|(_, ok)| !ok)
        .map(|(n, _)| *n)
        .collect();
    (!absent.is_empty()).then(|| absent.join(", "))
}

#[test]
fn the_console_works_in_a_real_browser() {
    if let Some(what) = missing() {
        assert!(
            std::env::var_os("PLUMBLINE_REQUIRE_BROWSER").is_none(),
            "the console's browser check must run here, but it lacks {what}"
        );
        eprintln!("skipping the console's browser check: no {what}");
        return;
    }
    let dir = TempDir::new();
    let location = format!("sqlite:{}", dir.0.join("records.sqlite3").display());
    let (mut server, base) = spawn_binary(&["--store", &location]);
    // The demo lender's invented applications, decided through the service in batches.
    let (applications, groups) = plumbline::train::demo_data::applications_csv(2_000, 7);
    let requests = plumbline::train::demo_data::requests_jsonl(&applications);
    let lines: Vec<&str> = requests.lines().collect();
    for chunk in lines.chunks(500) {
        let body = format!("{{\"items\":[{}]}}", chunk.join(","));
        let (status, _, text) = send(
            "POST",
            &format!("{base}/v1/decisions/batch"),
            Some(SCORING),
            Some("application/json"),
            Some(&body),
        );
        assert_eq!(status, 200, "{text}");
    }
    let groups_csv = dir.0.join("groups.csv");
    std::fs::write(&groups_csv, groups).unwrap();
    // A replay report file, as `plumbline replay --json` writes it.
    let replay = Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(["replay", "demo-requests", "--against"])
        .arg("models/fernhill-logistic.json")
        .arg("--json")
        .output()
        .unwrap();
    let replay_json = dir.0.join("replay.json");
    std::fs::write(&replay_json, &replay.stdout).unwrap();
    let artifacts: PathBuf =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("target/test-artifacts/console");
    let out = Command::new("node")
        .arg("tests/console/check.mjs")
        .arg(&base)
        .arg(&artifacts)
        .arg(&groups_csv)
        .arg(&replay_json)
        .output()
        .unwrap();
    server.kill().unwrap();
    let _ = server.wait();
    let text = format!(
        "{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(out.status.success(), "{text}");
    assert!(text.contains("console checks passed"), "{text}");
}

/// The monitoring pages (stability, back-test, reason trends) drawn by Chromium from a store the
/// service filled: no script, no error, every chart drawn with its labels inside it, printable
/// on A4 and Letter (tests/console/pages.mjs).
#[test]
fn the_monitoring_pages_draw_and_print_in_a_real_browser() {
    if let Some(what) = missing() {
        assert!(
            std::env::var_os("PLUMBLINE_REQUIRE_BROWSER").is_none(),
            "the monitoring pages' browser check must run here, but it lacks {what}"
        );
        eprintln!("skipping the monitoring pages' browser check: no {what}");
        return;
    }
    let dir = TempDir::new();
    let location = format!("sqlite:{}", dir.0.join("records.sqlite3").display());
    let trained = "models/fernhill-logistic-trained.json";
    let (mut server, base) = spawn_binary(&["--store", &location, "--model", trained]);
    let (applications, _) = plumbline::train::demo_data::applications_csv(3_000, 23);
    let requests = plumbline::train::demo_data::requests_jsonl(&applications);
    let lines: Vec<&str> = requests.lines().collect();
    let header: Vec<&str> = applications.lines().next().unwrap().split(',').collect();
    let target = header.iter().position(|h| *h == "defaulted").unwrap();
    let labels: Vec<&str> = applications.lines().skip(1).collect();
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
        let answer: serde_json::Value = serde_json::from_str(&text).unwrap();
        for (item, label) in answer["results"].as_array().unwrap().iter().zip(labels) {
            let d = &item["decision"];
            if d["outcome"] != "decline" {
                let flag = label.split(',').nth(target).unwrap().to_string();
                decided.push((d["application_id"].as_str().unwrap().to_string(), flag));
            }
        }
    }
    std::thread::sleep(std::time::Duration::from_millis(5));
    let observed = plumbline::records::now();
    let mut csv = String::from("application_id,defaulted,observed_at\n");
    for (id, flag) in &decided {
        csv.push_str(&format!("{id},{flag},{observed}\n"));
    }
    let (status, _, text) = send(
        "POST",
        &format!("{base}/v1/outcomes"),
        Some(crate::common::server::REVIEW),
        Some("text/csv"),
        Some(&csv),
    );
    assert_eq!(status, 200, "{text}");
    let model = "model_id=fernhill-personal-logistic&format=html";
    let artifacts: PathBuf =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("target/test-artifacts/monitoring");
    let out = Command::new("node")
        .arg("tests/console/pages.mjs")
        .arg(&base)
        .arg(&artifacts)
        .arg(crate::common::server::REVIEW)
        .arg(format!("/v1/monitoring/stability?{model}"))
        .arg(format!("/v1/monitoring/outcomes?{model}"))
        .arg(format!("/v1/monitoring/reasons?{model}&period=week"))
        .output()
        .unwrap();
    server.kill().unwrap();
    let _ = server.wait();
    let text = format!(
        "{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(out.status.success(), "{text}");
    assert!(text.contains("page checks passed"), "{text}");
}
