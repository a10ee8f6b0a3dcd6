//! Hostile bodies as a load tester sends them, measured from outside: the service's peak
//! resident memory (Linux `VmHWM`, reset through `/proc/PID/clear_refs` before each body) may
//! grow by at most twice the body's size, whatever the body's shape, for batches and
//! fair-lending uploads alike.

use crate::common;
use std::io::Write;

const MIB: usize = 1024 * 1024;

fn status_kib(pid: u32, field: &str) -> usize {
    let text = std::fs::read_to_string(format!("/proc/{pid}/status")).unwrap();
    let line = (text.lines())
        .find(|l| l.starts_with(field))
        .unwrap_or_else(|| panic!("{field} in /proc/{pid}/status"));
    line.split_whitespace().nth(1).unwrap().parse().unwrap()
}

/// How far the peak resident set rose above the resident set while `send` ran, in bytes.
fn peak_growth(pid: u32, send: impl FnOnce() -> u16) -> (u16, usize) {
    // "5" resets the peak to the current resident set (proc(5), since Linux 4.0).
    std::fs::OpenOptions::new()
        .write(true)
        .open(format!("/proc/{pid}/clear_refs"))
        .and_then(|mut f| f.write_all(b"5"))
        .expect("the peak resident set can be reset");
    let before = status_kib(pid, "VmRSS:");
    let status = send();
    let peak = status_kib(pid, "VmHWM:");
    (status, peak.saturating_sub(before) * 1024)
}

fn post(base: &str, path: &str, key: &str, body: &str) -> u16 {
    common::server::send(
        "POST",
        &format!("{base}{path}"),
        Some(key),
        Some("application/json"),
        Some(body),
    )
    .0
}

/// `head`, then copies of `unit` joined by commas up to about `size` bytes, then `tail`.
fn filled(head: &str, unit: &str, tail: &str, size: usize) -> String {
    let n = (size - head.len() - tail.len()) / (unit.len() + 1);
    let mut s = String::with_capacity(size);
    s.push_str(head);
    for i in 0..n {
        if i > 0 {
            s.push(',');
        }
        s.push_str(unit);
    }
    s.push_str(tail);
    s
}

#[test]
fn hostile_bodies_cost_at_most_twice_their_size() {
    let (store, _dir) = common::stores::sqlite();
    let (mut child, base) = common::server::spawn_binary(&[
        "--store",
        &store,
        "--workers",
        "2",
        "--max-upload-bytes",
        &(8 * MIB).to_string(),
    ]);
    let pid = child.id();
    let size = 8 * MIB - 64;
    let item = r#"{"application_id":"FH-1","applicant":{"requested_amount":[1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1,1]}}"#;
    let rows = r#"{"application_id":"FH-2026-000101","group":"a"}"#;
    // An item of about 8 KiB whose applicant field holds thousands of small numbers.
    let junk_item = item.replace("[1,", &format!("[{}1,", "1,".repeat(4000)));
    let cases: Vec<(&str, &str, &str, String)> = vec![
        // Small JSON values in one item: the old tree was ~20 bytes per byte.
        (
            "batch, one item of tiny numbers",
            "/v1/decisions/batch",
            common::server::SCORING,
            filled(r#"{"items":[{"applicant":{"x":["#, "1", "]}}]}", size),
        ),
        (
            "batch, millions of empty items",
            "/v1/decisions/batch",
            common::server::SCORING,
            filled(r#"{"items":["#, "{}", "]}", size),
        ),
        (
            "batch, 1000 junk items",
            "/v1/decisions/batch",
            common::server::SCORING,
            filled(
                r#"{"items":["#,
                &junk_item,
                "]}",
                1000 * (junk_item.len() + 1) + 16,
            ),
        ),
        (
            "fairness upload, label rows",
            "/v1/fairness/reports",
            common::server::REVIEW,
            {
                // Distinct ids: the upload is valid, so every row is kept.
                let mut body = String::from(r#"{"groups":{"dimensions":[{"name":"g","rows":["#);
                let mut i = 0;
                while body.len() < size - 100 {
                    if i > 0 {
                        body.push(',');
                    }
                    body.push_str(&rows.replace("000101", &format!("{i:06}")));
                    i += 1;
                }
                body.push_str("]}]}}");
                body
            },
        ),
        (
            "fairness upload, a long cutoff list",
            "/v1/fairness/reports",
            common::server::REVIEW,
            filled(r#"{"cutoffs":["#, "0.1", "]}", size),
        ),
        (
            "fairness upload, nested lists",
            "/v1/fairness/reports",
            common::server::REVIEW,
            filled(
                r#"{"groups":{"dimensions":[{"name":"g","rows":["#,
                "[[1]]",
                "]}]}}",
                size,
            ),
        ),
    ];
    for (what, path, key, body) in &cases {
        let (status, growth) = peak_growth(pid, || post(&base, path, key, body));
        eprintln!(
            "{what}: {} bytes, status {status}, peak growth {:.1} MiB",
            body.len(),
            growth as f64 / MIB as f64
        );
        assert!((200..500).contains(&status), "{what}: answered {status}");
        assert!(
            growth <= 2 * body.len(),
            "{what}: peak resident memory grew {growth} bytes for a {} byte body",
            body.len()
        );
    }
    child.kill().unwrap();
    child.wait().unwrap();
}
