//! The service over real HTTP on a loopback port: same bytes as the command line, roles, limits,
//! models, probes, metrics, OpenAPI, reload under load, graceful shutdown with requests in flight.

use crate::common;
use crate::common::server::{send, TestServer, ADMIN, REVIEW, SCORING};
use plumbline::api::{Auth, Limits};
use serde_json::{json, Value};
use std::path::PathBuf;

const JSON: Option<&str> = Some("application/json");

fn demo_request() -> String {
    std::fs::read_to_string("demo-requests/applications/thin-file-decline.json").unwrap()
}

#[test]
fn decision_bytes_equal_the_command_line() {
    let server = TestServer::demo();
    let (status, ct, body) = send(
        "POST",
        &server.url("/v1/decisions"),
        Some(SCORING),
        JSON,
        Some(&demo_request()),
    );
    assert_eq!((status, ct.as_str()), (200, "application/json"));
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "score",
            "--model",
            "models/fernhill-logistic.json",
            "demo-requests/applications/thin-file-decline.json",
        ])
        .output()
        .unwrap();
    // The service's bytes are the command line's, plus the record reference at the end.
    let cli = String::from_utf8(out.stdout).unwrap();
    let decision = cli.trim_end().strip_suffix('}').unwrap();
    let rest = body.strip_prefix(decision).expect("same decision bytes");
    assert!(
        rest.starts_with(",\"record\":{\"decision_id\":\""),
        "{rest}"
    );
}

#[test]
fn roles_decide_read_and_reload() {
    let server = TestServer::demo();
    let decide = |key| {
        send(
            "POST",
            &server.url("/v1/decisions"),
            key,
            JSON,
            Some(&demo_request()),
        )
        .0
    };
    assert_eq!(decide(Some(SCORING)), 200);
    assert_eq!(decide(Some(ADMIN)), 200, "admin may do everything");
    assert_eq!(decide(Some(REVIEW)), 403);
    assert_eq!(decide(Some("not-a-key-at-all")), 401);
    assert_eq!(decide(None), 401);
    assert_eq!(
        send("GET", &server.url("/v1/models"), Some(REVIEW), None, None).0,
        200
    );
    assert_eq!(
        send(
            "POST",
            &server.url("/v1/admin/reload"),
            Some(SCORING),
            None,
            None
        )
        .0,
        403
    );
    assert_eq!(
        send(
            "POST",
            &server.url("/v1/admin/reload"),
            Some(ADMIN),
            None,
            None
        )
        .0,
        200
    );
    // Probes, metrics and the document need no key.
    for path in ["/health/live", "/health/ready", "/metrics", "/openapi.json"] {
        assert_eq!(
            send("GET", &server.url(path), None, None, None).0,
            200,
            "{path}"
        );
    }
}

#[test]
fn auth_off_only_when_asked() {
    let server = TestServer::start(
        vec![PathBuf::from("models/fernhill-logistic.json")],
        Auth(None),
        Limits::default(),
    );
    assert_eq!(
        send(
            "POST",
            &server.url("/v1/decisions"),
            None,
            JSON,
            Some(&demo_request())
        )
        .0,
        200
    );
}

#[test]
fn models_and_probes_describe_what_is_loaded() {
    let server = TestServer::demo();
    let (status, _, body) = send(
        "GET",
        &server.url("/v1/models/fernhill-personal-logistic"),
        Some(SCORING),
        None,
        None,
    );
    assert_eq!(status, 200);
    let m: Value = serde_json::from_str(&body).unwrap();
    let loaded =
        plumbline::LoadedModel::from_path(std::path::Path::new("models/fernhill-logistic.json"))
            .unwrap();
    assert_eq!(m["sha256"], loaded.sha256.as_str());
    assert_eq!(m["champion"], true);
    assert_eq!(m["approve_below"], 0.08);
    assert_eq!(m["fields"].as_array().unwrap().len(), 10);
    assert_eq!(
        send(
            "GET",
            &server.url("/v1/models/nope"),
            Some(SCORING),
            None,
            None
        )
        .0,
        404
    );
    let (_, _, ready) = send("GET", &server.url("/health/ready"), None, None, None);
    assert_eq!(
        serde_json::from_str::<Value>(&ready).unwrap(),
        json!({"status": "ready", "models": 1})
    );
}

#[test]
fn metrics_count_requests_and_decisions() {
    let server = TestServer::demo();
    for _ in 0..3 {
        send(
            "POST",
            &server.url("/v1/decisions"),
            Some(SCORING),
            JSON,
            Some(&demo_request()),
        );
    }
    send(
        "POST",
        &server.url("/v1/decisions"),
        Some(SCORING),
        JSON,
        Some("{"),
    );
    let (_, ct, text) = send("GET", &server.url("/metrics"), None, None, None);
    assert!(ct.starts_with("text/plain"));
    assert!(
        text.contains(
            r#"plumbline_http_requests_total{route="/v1/decisions",method="POST",status="200"} 3"#
        ),
        "{text}"
    );
    assert!(text.contains(
        r#"plumbline_http_requests_total{route="/v1/decisions",method="POST",status="400"} 1"#
    ));
    assert!(text.contains(r#"plumbline_decisions_total{model="fernhill-personal-logistic",version="0.1.0",outcome="decline"} 3"#));
    assert!(text.contains(r#"plumbline_http_request_duration_seconds_bucket{route="/v1/decisions",method="POST",status="200",le="+Inf"} 3"#));
}

#[test]
fn limits_are_enforced() {
    let limits = Limits {
        max_batch_items: 2,
        max_body_bytes: 2048,
        ..Limits::default()
    };
    let server = TestServer::start(
        vec![PathBuf::from("models/fernhill-logistic.json")],
        common::server::demo_auth(),
        limits,
    );
    let (status, ct, _) = send(
        "POST",
        &server.url("/v1/decisions"),
        Some(SCORING),
        JSON,
        Some(&" ".repeat(4096)),
    );
    assert_eq!((status, ct.as_str()), (413, "application/problem+json"));
    let item: Value = serde_json::from_str(&demo_request()).unwrap();
    let batch = json!({"items": [item, item, item]}).to_string();
    let (status, _, body) = send(
        "POST",
        &server.url("/v1/decisions/batch"),
        Some(SCORING),
        JSON,
        Some(&batch),
    );
    assert_eq!(status, 422);
    assert!(body.contains("at most 2 items"));
    let (status, _, _) = send(
        "POST",
        &server.url("/v1/decisions/batch"),
        Some(SCORING),
        JSON,
        Some(r#"[1, 2]"#),
    );
    assert_eq!(status, 422, "a batch is an object with items");
}

#[test]
fn checked_in_openapi_document_is_current() {
    let generated = plumbline::api::openapi::document();
    if std::env::var_os("PLUMBLINE_BLESS").is_some() {
        std::fs::write("openapi/plumbline.json", &generated).unwrap();
    }
    let checked_in =
        std::fs::read_to_string("openapi/plumbline.json").expect("openapi/plumbline.json");
    assert!(
        generated == checked_in,
        "openapi/plumbline.json is stale: run PLUMBLINE_BLESS=1 cargo test --test service api::checked_in_openapi"
    );
    let doc: Value = serde_json::from_str(&generated).unwrap();
    assert!(doc["openapi"].as_str().unwrap().starts_with("3.1"));
    for path in [
        "/v1/decisions",
        "/v1/decisions/batch",
        "/v1/models",
        "/v1/models/{id}",
        "/v1/admin/reload",
        "/health/live",
        "/health/ready",
        "/metrics",
    ] {
        assert!(doc["paths"][path].is_object(), "{path} is not documented");
    }
    assert!(doc["components"]["schemas"]["Problem"].is_object());
    assert!(doc["info"]["description"]
        .as_str()
        .unwrap()
        .contains("decision support"));
}

#[test]
fn reload_under_load_drops_nothing() {
    use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
    let server = TestServer::demo();
    let url = server.url("/v1/decisions");
    let body = demo_request();
    let (done, stop, failures) = (
        AtomicUsize::new(0),
        AtomicBool::new(false),
        AtomicUsize::new(0),
    );
    std::thread::scope(|s| {
        for _ in 0..4 {
            s.spawn(|| {
                while !stop.load(Ordering::Relaxed) {
                    if send("POST", &url, Some(SCORING), JSON, Some(&body)).0 != 200 {
                        failures.fetch_add(1, Ordering::Relaxed);
                    }
                    done.fetch_add(1, Ordering::Relaxed);
                }
            });
        }
        // Reload only once traffic flows, and keep it flowing through every reload.
        while done.load(Ordering::Relaxed) < 20 {
            std::thread::yield_now();
        }
        let before = done.load(Ordering::Relaxed);
        // At least 10 reloads, and on until 10 decisions have completed among them (each
        // decision waits for its record's commit, so they can be slower than a reload).
        let mut reloads = 0;
        while reloads < 10 || (done.load(Ordering::Relaxed) - before < 10 && reloads < 5_000) {
            reloads += 1;
            assert_eq!(
                send(
                    "POST",
                    &server.url("/v1/admin/reload"),
                    Some(ADMIN),
                    None,
                    None
                )
                .0,
                200
            );
        }
        let during = done.load(Ordering::Relaxed) - before;
        stop.store(true, Ordering::Relaxed);
        assert!(during > 0, "no request overlapped the reloads");
    });
    assert_eq!(
        failures.load(Ordering::Relaxed),
        0,
        "requests failed during reloads"
    );
}

#[test]
fn wrong_method_is_405_and_scheme_is_case_insensitive() {
    let server = TestServer::demo();
    let (status, ct, _) = send(
        "PUT",
        &server.url("/v1/decisions"),
        Some(SCORING),
        None,
        None,
    );
    assert_eq!((status, ct.as_str()), (405, "application/problem+json"));
    // RFC 9110 15.5.6: a 405 names the methods the route takes.
    let agent = ureq::AgentBuilder::new().build();
    for (method, path, allow) in [
        ("PUT", "/v1/decisions", "GET, POST"),
        ("GET", "/v1/decisions/batch", "POST"),
        ("DELETE", "/v1/models", "GET"),
        ("GET", "/v1/decisions/x/final-action", "POST"),
    ] {
        match agent.request(method, &server.url(path)).call() {
            Err(ureq::Error::Status(405, r)) => {
                assert_eq!(r.header("allow"), Some(allow), "{method} {path}")
            }
            other => panic!("{method} {path}: {other:?}"),
        }
    }
    assert_eq!(
        send(
            "POST",
            &server.url("/v1/decisions"),
            Some(SCORING),
            JSON,
            Some(&demo_request())
        )
        .0,
        200
    );
    let agent = ureq::AgentBuilder::new().build();
    let r = agent
        .post(&server.url("/v1/decisions"))
        .set("Authorization", &format!("bearer {SCORING}"))
        .set("Content-Type", "application/json")
        .send_string(&demo_request());
    assert_eq!(r.map(|r| r.status()).unwrap_or(0), 200);
}

#[test]
fn failed_reload_keeps_the_models_in_service() {
    let dir = std::env::temp_dir().join(format!("plumbline-reload-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("model.json");
    std::fs::copy("models/fernhill-logistic.json", &path).unwrap();
    let server = TestServer::start(
        vec![path.clone()],
        common::server::demo_auth(),
        Limits::default(),
    );
    std::fs::write(&path, "{ not json").unwrap();
    let (status, _, body) = send(
        "POST",
        &server.url("/v1/admin/reload"),
        Some(ADMIN),
        None,
        None,
    );
    assert_eq!(status, 409, "{body}");
    assert!(body.contains("model.json"));
    assert_eq!(
        send(
            "POST",
            &server.url("/v1/decisions"),
            Some(SCORING),
            JSON,
            Some(&demo_request())
        )
        .0,
        200
    );
}

/// SIGTERM with a request in flight: the request started before the signal is answered, then
/// the process exits 0.
#[test]
fn graceful_shutdown_finishes_in_flight_requests() {
    use std::io::{BufRead, BufReader, Read, Write};
    let (store, _dir) = common::stores::sqlite();
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "serve",
            "--no-auth",
            "--addr",
            "127.0.0.1:0",
            "--workers",
            "2",
            "--store",
            &store,
        ])
        .env("PLUMBLINE_LOG", "warn")
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let mut stderr = BufReader::new(child.stderr.take().unwrap());
    let mut line = String::new();
    let addr = loop {
        line.clear();
        assert!(
            stderr.read_line(&mut line).unwrap() > 0,
            "server exited before listening"
        );
        if let Some(rest) = line.trim().strip_prefix("plumbline listening on http://") {
            break rest.to_string();
        }
    };
    let mut conn = std::net::TcpStream::connect(&addr).unwrap();
    conn.set_read_timeout(Some(std::time::Duration::from_secs(10)))
        .unwrap();
    // Warm the connection up with one full request, so a worker has surely taken it.
    write!(conn, "GET /health/live HTTP/1.1\r\nHost: x\r\n\r\n").unwrap();
    let mut head = [0u8; 12];
    conn.read_exact(&mut head).unwrap();
    assert_eq!(&head, b"HTTP/1.1 200");
    let mut drain = [0u8; 4096];
    let _ = conn.set_read_timeout(Some(std::time::Duration::from_millis(200)));
    let _ = conn.read(&mut drain);
    conn.set_read_timeout(Some(std::time::Duration::from_secs(10)))
        .unwrap();
    // Then start a decision: head and half the body before the signal, the rest after.
    let body = demo_request();
    let (first, rest) = body.split_at(body.len() / 2);
    write!(conn, "POST /v1/decisions HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nContent-Length: {}\r\n\r\n{first}", body.len()).unwrap();
    conn.flush().unwrap();
    std::thread::sleep(std::time::Duration::from_millis(200));
    let pid = child.id().to_string();
    assert!(std::process::Command::new("kill")
        .args(["-TERM", &pid])
        .status()
        .unwrap()
        .success());
    std::thread::sleep(std::time::Duration::from_millis(200));
    conn.write_all(rest.as_bytes()).unwrap();
    conn.flush().unwrap();
    let mut answer = [0u8; 12];
    conn.read_exact(&mut answer).unwrap();
    assert_eq!(
        &answer, b"HTTP/1.1 200",
        "the request in flight at SIGTERM was not answered"
    );
    let status = child.wait().unwrap();
    assert!(status.success(), "exit status {status}");
}

/// A body that stops arriving is cut off after the body timeout (408), not left to pin a worker.
#[test]
fn slow_body_times_out() {
    use std::io::{Read, Write};
    let limits = Limits {
        body_timeout: std::time::Duration::from_millis(300),
        ..Limits::default()
    };
    let server = TestServer::start(
        vec![PathBuf::from("models/fernhill-logistic.json")],
        Auth(None),
        limits,
    );
    let addr = server.base.trim_start_matches("http://").to_string();
    let mut stream = std::net::TcpStream::connect(addr).unwrap();
    stream
        .set_read_timeout(Some(std::time::Duration::from_secs(5)))
        .unwrap();
    write!(stream, "POST /v1/decisions HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nContent-Length: 500\r\n\r\n{{\"application_id\": ").unwrap();
    stream.flush().unwrap();
    let mut answer = String::new();
    let _ = stream.read_to_string(&mut answer);
    assert!(answer.starts_with("HTTP/1.1 408"), "{answer}");
    assert!(answer.contains("/problems/body-timeout"));
}

/// A bad model file stops the service at start with a message naming the file and JSON path.
#[test]
fn bad_model_stops_startup() {
    let dir = std::env::temp_dir().join(format!("plumbline-badstart-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("broken.json");
    let text = std::fs::read_to_string("models/fernhill-logistic.json")
        .unwrap()
        .replace("\"approve_below\": 0.08", "\"approve_below\": -1");
    std::fs::write(&path, text).unwrap();
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "serve",
            "--no-auth",
            "--addr",
            "127.0.0.1:0",
            "--model",
            path.to_str().unwrap(),
            "--no-store",
        ])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("broken.json") && err.contains("$.policy.approve_below"),
        "{err}"
    );
}
