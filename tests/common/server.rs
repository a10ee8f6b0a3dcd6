//! Starts the real service on a loopback port for a test and stops it when dropped.

use plumbline::api::{Auth, Keys, Limits, ServeConfig};
use std::path::PathBuf;

pub const SCORING: &str = "fernhill-demo-scoring-key";
pub const REVIEW: &str = "fernhill-demo-review-key";
pub const ADMIN: &str = "fernhill-demo-admin-key";
pub const UNDERWRITING: &str = "fernhill-demo-underwriting-key";

pub struct TestServer {
    pub base: String,
    /// The store the server records into (a fresh SQLite file unless given).
    pub store: Option<String>,
    _dir: Option<super::stores::TempDir>,
    handle: actix_web::dev::ServerHandle,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl TestServer {
    /// The demo model with the demo keys, default limits.
    pub fn demo() -> Self {
        Self::start(
            vec![PathBuf::from("models/fernhill-logistic.json")],
            demo_auth(),
            Limits::default(),
        )
    }

    /// Records into a fresh SQLite file.
    pub fn start(models: Vec<PathBuf>, auth: Auth, limits: Limits) -> Self {
        let (location, dir) = super::stores::sqlite();
        let mut s = Self::start_with(models, auth, limits, Some(location));
        s._dir = Some(dir);
        s
    }

    /// Records into `store` (`None`: records off).
    pub fn start_with(
        models: Vec<PathBuf>,
        auth: Auth,
        limits: Limits,
        store: Option<String>,
    ) -> Self {
        let config = ServeConfig {
            metrics_key: None,
            tls: None,
            store: store.clone(),
            addr: "127.0.0.1:0".parse().unwrap(),
            models,
            auth,
            limits,
            workers: 2,
        };
        let (tx, rx) = std::sync::mpsc::channel();
        let thread = std::thread::spawn(move || {
            let system = actix_web::rt::System::new();
            system.block_on(async move {
                let running = plumbline::api::start(config).expect("server starts");
                tx.send((running.addr, running.handle.clone())).unwrap();
                let _ = running.server.await;
            });
        });
        let (addr, handle) = rx.recv().expect("server reports its address");
        TestServer {
            base: format!("http://{addr}"),
            store,
            _dir: None,
            handle,
            thread: Some(thread),
        }
    }

    pub fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    /// Graceful stop: stop accepting, finish in-flight requests.
    pub fn stop(mut self) {
        self.shutdown();
    }

    fn shutdown(&mut self) {
        if let Some(t) = self.thread.take() {
            let handle = self.handle.clone();
            let rt = actix_web::rt::System::new();
            rt.block_on(handle.stop(true));
            let _ = t.join();
        }
    }
}

impl Drop for TestServer {
    fn drop(&mut self) {
        self.shutdown();
    }
}

pub fn demo_auth() -> Auth {
    Auth(Some(
        Keys::from_json(&std::fs::read_to_string("models/demo-keys.json").unwrap()).unwrap(),
    ))
}

pub fn key_for(role: Option<&str>) -> Option<&'static str> {
    match role {
        Some("scoring") => Some(SCORING),
        Some("review") => Some(REVIEW),
        Some("admin") => Some(ADMIN),
        Some("underwriting") => Some(UNDERWRITING),
        _ => None,
    }
}

/// Sends a request; returns (status, content type, body text). Never fails on 4xx/5xx.
pub fn send(
    method: &str,
    url: &str,
    key: Option<&str>,
    content_type: Option<&str>,
    body: Option<&str>,
) -> (u16, String, String) {
    let agent = ureq::AgentBuilder::new().build();
    let mut req = agent.request(method, url);
    if let Some(k) = key {
        req = req.set("Authorization", &format!("Bearer {k}"));
    }
    if let Some(ct) = content_type {
        req = req.set("Content-Type", ct);
    }
    let result = match body {
        Some(b) => req.send_string(b),
        None => req.call(),
    };
    let response = match result {
        Ok(r) => r,
        Err(ureq::Error::Status(_, r)) => r,
        Err(e) => panic!("{method} {url}: {e}"),
    };
    let status = response.status();
    let ct = response.header("content-type").unwrap_or("").to_string();
    (status, ct, response.into_string().unwrap_or_default())
}

/// The real binary, `plumbline serve` with the demo keys on a free loopback port plus `args`;
/// returns the process and its base URL once it listens. Its stderr is drained (never shown).
pub fn spawn_binary(args: &[&str]) -> (std::process::Child, String) {
    use std::io::BufRead;
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args([
            "serve",
            "--keys",
            "models/demo-keys.json",
            "--addr",
            "127.0.0.1:0",
        ])
        .args(args)
        .env("PLUMBLINE_LOG", "warn")
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let mut lines = std::io::BufReader::new(child.stderr.take().unwrap()).lines();
    let base = loop {
        let line = lines
            .next()
            .expect("the server announces its address")
            .unwrap();
        if let Some(url) = line.strip_prefix("plumbline listening on ") {
            break url.trim().to_string();
        }
    };
    // Keep draining stderr so the server never blocks on a full pipe.
    std::thread::spawn(move || for _ in lines {});
    (child, base)
}
