//! POST /v1/fairness/reports over the service's recorded decisions: the JSON report, the HTML
//! page (and what a person sees of it in headless Chromium), and bad uploads named by row.

use crate::common::server::{send, TestServer, REVIEW, SCORING};
use serde_json::{json, Value};

fn applicant(approvable: bool) -> Value {
    if approvable {
        json!({"requested_amount": 12000, "annual_income": 85000, "debt_to_income": 14.5,
            "revolving_utilization": 22, "months_since_oldest_account": 190, "delinquencies_24m": 0,
            "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"})
    } else {
        json!({"requested_amount": 18000, "annual_income": 31000, "debt_to_income": 41,
            "revolving_utilization": 88, "months_since_oldest_account": 14, "delinquencies_24m": 2,
            "inquiries_6m": 5, "months_with_employer": 4, "housing": "rent", "loan_purpose": "other"})
    }
}

/// 60 approvals (FH-A-i) and 60 declines (FH-D-i), one decision without group data; groups a
/// (40 approvals + 10 declines: rate 0.8) and b (20 + 50: rate 2/7), and one upload row whose
/// application was never decided.
fn book(server: &TestServer) -> Value {
    let mut items: Vec<Value> = (0..60)
        .flat_map(|i| {
            [
                json!({"application_id": format!("FH-A-{i}"), "applicant": applicant(true)}),
                json!({"application_id": format!("FH-D-{i}"), "applicant": applicant(false)}),
            ]
        })
        .collect();
    items.push(json!({"application_id": "FH-NO-GROUP", "applicant": applicant(true)}));
    let (status, _, text) = send(
        "POST",
        &server.url("/v1/decisions/batch"),
        Some(SCORING),
        Some("application/json"),
        Some(&json!({"items": items}).to_string()),
    );
    assert_eq!(status, 200, "{text}");
    let mut rows = Vec::new();
    for i in 0..60 {
        rows.push(
            json!({"application_id": format!("FH-A-{i}"), "group": if i < 40 { "a" } else { "b" }}),
        );
    }
    for i in 0..60 {
        rows.push(
            json!({"application_id": format!("FH-D-{i}"), "group": if i < 10 { "a" } else { "b" }}),
        );
    }
    rows.push(json!({"application_id": "FH-NEVER-DECIDED", "group": "a"}));
    json!({"dimensions": [{"name": "synthetic_group", "rows": rows}]})
}

fn report(server: &TestServer, body: &Value, query: &str, key: &str) -> (u16, String, String) {
    send(
        "POST",
        &server.url(&format!("/v1/fairness/reports{query}")),
        Some(key),
        Some("application/json"),
        Some(&body.to_string()),
    )
}

#[test]
fn a_report_over_recorded_decisions() {
    let server = TestServer::demo();
    let groups = book(&server);
    let (status, ct, text) = report(
        &server,
        &json!({"groups": groups, "from": "2000-01-01"}),
        "",
        REVIEW,
    );
    assert_eq!((status, ct.as_str()), (200, "application/json"), "{text}");
    let r: Value = serde_json::from_str(&text).unwrap();
    assert!(r["caution"]
        .as_str()
        .unwrap()
        .contains("not a legal finding"));
    let d = &r["dimensions"][0];
    assert_eq!(d["control_group"], "a");
    let g = |name: &str| {
        d["groups"]
            .as_array()
            .unwrap()
            .iter()
            .find(|g| g["group"] == name)
            .unwrap()
            .clone()
    };
    assert_eq!(
        (
            g("a")["applications"].as_f64(),
            g("a")["approvals"].as_f64()
        ),
        (Some(50.0), Some(40.0))
    );
    assert_eq!(
        (
            g("b")["applications"].as_f64(),
            g("b")["approvals"].as_f64()
        ),
        (Some(70.0), Some(20.0))
    );
    assert_eq!(g("b")["four_fifths"], "below_four_fifths");
    assert!((g("b")["adverse_impact_ratio"].as_f64().unwrap() - (20.0 / 70.0) / 0.8).abs() < 1e-12);
    assert!(g("b")["fisher_p"].as_f64().unwrap() < 1e-6);
    assert_eq!(d["decisions_without_group_data"], 1);
    assert_eq!(
        d["unknown_application_ids_listed"],
        json!(["FH-NEVER-DECIDED"])
    );

    // The same report as a page, and what a person sees of it.
    let (status, ct, page) = report(&server, &json!({"groups": groups}), "?format=html", REVIEW);
    assert_eq!((status, ct.as_str()), (200, "text/html; charset=utf-8"));
    assert!(
        page.contains("<svg")
            && page.contains("below four-fifths")
            && page.contains("not a legal finding")
    );
    assert!(!page.contains("<script"), "no scripts");
    browser_check(&page);
}

/// Headless Chromium (Debian's package) renders the page: the text a person reads, and a
/// screenshot kept under target/test-artifacts/. Skips with a reason when Chromium is absent,
/// unless PLUMBLINE_REQUIRE_BROWSER is set (CI installs it and sets that).
fn browser_check(page: &str) {
    let Some(chromium) = ["chromium", "chromium-browser"].into_iter().find(|c| {
        std::process::Command::new(c)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
    }) else {
        assert!(
            std::env::var_os("PLUMBLINE_REQUIRE_BROWSER").is_none(),
            "Chromium is required here but not installed"
        );
        eprintln!("skipping the browser check: no chromium on PATH");
        return;
    };
    let dir = std::path::Path::new(env!("CARGO_TARGET_TMPDIR")).join("../test-artifacts");
    std::fs::create_dir_all(&dir).unwrap();
    let html = dir.join("fairness-report.html");
    std::fs::write(&html, page).unwrap();
    let url = format!("file://{}", html.canonicalize().unwrap().display());
    let run = |extra: &[&str]| {
        std::process::Command::new(chromium)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--no-first-run",
                "--disable-dev-shm-usage",
            ])
            .args(extra)
            .arg(&url)
            .output()
            .unwrap()
    };
    // The rendered DOM, as the browser built it from the page.
    let dom = String::from_utf8_lossy(&run(&["--dump-dom"]).stdout).into_owned();
    for seen in [
        "Fair-lending screening",
        "synthetic_group",
        "Control group",
        "below four-fifths",
        "four-fifths of the control rate",
        "If the approve cutoff were different",
        "not a legal finding",
    ] {
        assert!(dom.contains(seen), "the page does not show {seen:?}");
    }
    assert_eq!(dom.matches("<svg").count(), 2, "two charts");
    let shot = dir.join("fairness-report.png");
    let out = run(&[
        &format!("--screenshot={}", shot.display()),
        "--window-size=1100,1600",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let png = std::fs::read(&shot).unwrap();
    assert!(
        png.starts_with(b"\x89PNG") && png.len() > 10_000,
        "a real screenshot"
    );
}

#[test]
fn bad_report_requests_are_named() {
    let server = TestServer::demo();
    let groups =
        json!({"dimensions": [{"name": "g", "rows": [{"application_id": "FH-1", "group": "a"}]}]});
    assert_eq!(
        report(&server, &json!({"groups": groups}), "", SCORING).0,
        403
    );
    // Every broken field rule at once (validator 0.20), each naming its field and rule.
    let (status, _, text) = report(
        &server,
        &json!({"groups": groups, "min_group_size": 0, "sum_tolerance": 0.7, "cutoffs": [0.3, 0.2], "refer_without_final_action": "excluded"}),
        "",
        REVIEW,
    );
    assert_eq!(status, 422, "{text}");
    let problem: serde_json::Value = serde_json::from_str(&text).unwrap();
    let named: Vec<(String, String)> = (problem["errors"].as_array().unwrap().iter())
        .map(|e| {
            (
                e["field"].as_str().unwrap().into(),
                e["rule"].as_str().unwrap().into(),
            )
        })
        .collect();
    let want = [
        ("cutoffs", "cutoffs"),
        ("min_group_size", "range"),
        ("refer_without_final_action", "refer_final"),
        ("sum_tolerance", "range"),
    ];
    assert_eq!(
        named,
        want.map(|(f, r)| (f.to_string(), r.to_string())),
        "{text}"
    );
    let (status, _, text) = report(&server, &json!({"groups": {"dimensions": []}}), "", REVIEW);
    assert_eq!(status, 422);
    assert!(text.contains("\"field\":\"groups.dimensions\""), "{text}");
    let bad_sum = json!({"dimensions": [{"name": "g", "rows": [{"application_id": "FH-1", "probabilities": {"a": 0.5, "b": 0.1}}]}]});
    let (status, _, text) = report(&server, &json!({"groups": bad_sum}), "", REVIEW);
    assert_eq!(status, 422);
    assert!(
        text.contains("groups.dimensions[0].rows[0].probabilities") && text.contains("sum_to_one"),
        "{text}"
    );
    let (status, _, _) = report(
        &server,
        &json!({"groups": groups, "groups_csv": "application_id,group\n"}),
        "",
        REVIEW,
    );
    assert_eq!(status, 422);
    let (status, _, _) = report(
        &server,
        &json!({"groups": groups, "from": "2026-12-02", "to": "2026-12-01"}),
        "",
        REVIEW,
    );
    assert_eq!(status, 400);
    let (status, _, text) = report(
        &server,
        &json!({"groups": groups, "colour": "red"}),
        "",
        REVIEW,
    );
    assert_eq!(status, 422);
    assert!(text.contains("colour"), "{text}");
    assert_eq!(
        report(&server, &json!({"groups": groups}), "?format=pdf", REVIEW).0,
        400
    );
    // A CSV upload with one group: a clearly marked result, not an error.
    let (status, _, text) = report(
        &server,
        &json!({"groups_csv": "application_id,group\nFH-1,a\n", "dimension": "g"}),
        "",
        REVIEW,
    );
    assert_eq!(status, 200);
    assert!(text.contains("nothing to compare"), "{text}");
}

/// `refer: final` over the service: referrals counted as the underwriter's final actions
/// recorded through `POST /v1/decisions/{id}/final-action`, the pending ones as the fallback
/// says, and their count in the report.
#[test]
fn referrals_count_as_the_final_actions_recorded() {
    use crate::common::server::UNDERWRITING;
    let server = TestServer::demo();
    let refer: Value = serde_json::from_str(
        &std::fs::read_to_string("demo-requests/03-refer-amount-rule.json").unwrap(),
    )
    .unwrap();
    let mut rows = Vec::new();
    // Four approvals and four referrals: approved on review, declined, withdrawn, pending.
    let finals = [Some("approve"), Some("decline"), Some("withdrawn"), None];
    for i in 0..4 {
        let id = format!("FH-AP-{i}");
        let body = json!({"application_id": id, "applicant": applicant(true)});
        let (s, _, text) = send(
            "POST",
            &server.url("/v1/decisions"),
            Some(SCORING),
            Some("application/json"),
            Some(&body.to_string()),
        );
        assert_eq!(s, 200, "{text}");
        rows.push(json!({"application_id": id, "group": "a"}));
    }
    for (i, action) in finals.iter().enumerate() {
        let id = format!("FH-RF-{i}");
        let mut body = refer["request"]["body"].clone();
        body["application_id"] = id.clone().into();
        let (s, _, text) = send(
            "POST",
            &server.url("/v1/decisions"),
            Some(SCORING),
            Some("application/json"),
            Some(&body.to_string()),
        );
        assert_eq!(s, 200, "{text}");
        let d: Value = serde_json::from_str(&text).unwrap();
        assert_eq!(d["outcome"], "refer");
        if let Some(action) = action {
            let mut fa = json!({"action": action});
            if *action == "decline" {
                fa["reasons"] = json!(["MR_CAPACITY"]);
            }
            let path = format!(
                "/v1/decisions/{}/final-action",
                d["record"]["decision_id"].as_str().unwrap()
            );
            let (s, _, text) = send(
                "POST",
                &server.url(&path),
                Some(UNDERWRITING),
                Some("application/json"),
                Some(&fa.to_string()),
            );
            assert_eq!(s, 201, "{text}");
        }
        rows.push(json!({"application_id": id, "group": "a"}));
    }
    let groups = json!({"dimensions": [{"name": "synthetic_group", "rows": rows}]});
    let run = |extra: Value| {
        let mut body = json!({"groups": groups, "min_group_size": 1});
        for (k, v) in extra.as_object().unwrap() {
            body[k] = v.clone();
        }
        let (s, _, text) = report(&server, &body, "", REVIEW);
        (s, text)
    };
    let counts = |text: &str| {
        let r: Value = serde_json::from_str(text).unwrap();
        let g = &r["dimensions"][0]["groups"][0];
        (
            g["approvals"].as_f64().unwrap(),
            g["applications"].as_f64().unwrap(),
            r["referrals_without_final_action"].as_u64(),
            r["referrals_excluded"].as_u64().unwrap(),
        )
    };
    let (s, text) = run(json!({"refer": "final"}));
    assert_eq!(s, 200, "{text}");
    assert_eq!(counts(&text), (5.0, 7.0, Some(1), 1));
    let (s, text) = run(json!({"refer": "final", "refer_without_final_action": "excluded"}));
    assert_eq!(s, 200, "{text}");
    assert_eq!(counts(&text), (5.0, 6.0, Some(1), 2));
    let (s, text) = run(json!({}));
    assert_eq!(s, 200, "{text}");
    assert_eq!(counts(&text), (4.0, 8.0, None, 0));
    let (s, text) = run(json!({"refer_without_final_action": "excluded"}));
    assert!(
        s == 422 && text.contains("refer_without_final_action") && text.contains("refer_final"),
        "{text}"
    );
    // The page says how many referrals had no final action.
    let body = json!({"groups": groups, "min_group_size": 1, "refer": "final"});
    let (s, _, page) = report(&server, &body, "?format=html", REVIEW);
    assert_eq!(s, 200);
    assert!(page.contains("1 had none; 1 left out"), "{page}");
    let r: Value = serde_json::from_str(&run(json!({"refer": "excluded"})).1).unwrap();
    assert_eq!(
        r["dimensions"][0]["unknown_application_ids"], 0,
        "left-out referrals still match their upload rows"
    );
}
