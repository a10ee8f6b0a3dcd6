//! The HTTP service (actix-web): routes over the same library calls as the command line.
//!
//! Limits are explicit and documented in [`Limits`]; errors are RFC 9457 problem details;
//! every request gets an id, a structured log line (no applicant values) and metrics.

mod access;
pub mod auth;
mod batch;
mod body;
mod compliance;
mod console;
mod decisions;
mod fairness;
mod metrics;
mod monitoring;
pub mod openapi;
mod outcomes;
mod params;
pub mod problem;
mod recording;
pub mod registry;
mod routes;
mod startup;
mod underwriting;

use actix_web::dev::{ServerHandle, Service};
use actix_web::{web, App, HttpServer};
use std::net::SocketAddr;
use std::path::PathBuf;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

pub use auth::{Auth, Keys, Role};
pub use registry::Registry;
pub use startup::StartError;

/// Request limits. Defaults: 64 KiB per decision, 8 MiB and 1,000 items per batch, 64 MiB per
/// group-membership upload (60 s to arrive), 5 s for a body to arrive, 5 s for a client to send
/// its request head, 10 s for a decision to be committed, 30 s to finish in-flight work on
/// shutdown, at most 2 fairness reports and record exports at once.
#[derive(Debug, Clone)]
pub struct Limits {
    pub max_body_bytes: usize,
    pub max_batch_body_bytes: usize,
    pub max_batch_items: usize,
    /// Largest group-membership upload (POST /v1/fairness/reports).
    pub max_upload_bytes: usize,
    pub body_timeout: Duration,
    /// A decision not committed by then is not given and not recorded.
    pub commit_timeout: Duration,
    /// Longest the recorder holds a commit for decisions still being decided.
    pub commit_gather: Duration,
    pub head_timeout: Duration,
    pub shutdown_timeout: Duration,
    /// Most fairness reports and record exports running at once (each holds a read connection
    /// and walks many records); more are refused with 429 and Retry-After.
    pub max_reports: usize,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            max_body_bytes: 64 * 1024,
            max_batch_body_bytes: 8 * 1024 * 1024,
            max_batch_items: 1_000,
            max_upload_bytes: 64 * 1024 * 1024,
            body_timeout: Duration::from_secs(5),
            commit_timeout: crate::records::recorder::COMMIT_TIMEOUT,
            commit_gather: crate::records::recorder::GATHER,
            head_timeout: Duration::from_secs(5),
            shutdown_timeout: Duration::from_secs(30),
            max_reports: 2,
        }
    }
}

/// Everything the service needs to start.
#[derive(Debug, Clone)]
pub struct ServeConfig {
    pub addr: SocketAddr,
    /// Model files; the first is the champion.
    pub models: Vec<PathBuf>,
    pub auth: Auth,
    pub limits: Limits,
    pub workers: usize,
    /// Where decisions are recorded (`sqlite:PATH` or `postgres://...`); `None` records nothing.
    pub store: Option<String>,
    /// A bearer key `/metrics` requires, for deployments whose scraper can send one; `None`:
    /// open, like the health probes.
    pub metrics_key: Option<String>,
    /// Terminate TLS here: the certificate chain and private key (PEM files); `None`: plain
    /// HTTP, for a TLS-terminating proxy or mesh in front.
    pub tls: Option<(PathBuf, PathBuf)>,
}

/// Shared by all workers.
pub struct State {
    pub registry: Registry,
    pub auth: Auth,
    pub metrics: metrics::Metrics,
    pub limits: Limits,
    /// Writes decision records (group commit); `None` when records are off.
    pub recorder: Option<crate::records::Recorder>,
    /// SHA-256 of the key `/metrics` requires, if one was set.
    pub metrics_key: Option<[u8; 32]>,
    /// Places for long reads (fairness reports, exports): `limits.max_reports` of them.
    pub report_slots: std::sync::Arc<tokio::sync::Semaphore>,
}

impl State {
    /// Admits the request for `allowed` roles: the caller (key name and role) it came from.
    pub fn admit(
        &self,
        req: &actix_web::HttpRequest,
        allowed: &[Role],
    ) -> Result<auth::Caller, problem::Problem> {
        self.auth.admit(req, allowed)
    }

    /// A place for one report or export, held until it is dropped; 429 when none is free.
    pub fn report_slot(&self) -> Result<tokio::sync::OwnedSemaphorePermit, problem::Problem> {
        (self.report_slots.clone().try_acquire_owned())
            .map_err(|_| problem::Problem::busy(self.limits.max_reports))
    }
}

/// A 200 with `value` as JSON; a 500 problem (its cause logged) if `value` cannot be written,
/// never an empty 200.
fn json<T: serde::Serialize>(value: &T) -> actix_web::HttpResponse {
    match serde_json::to_string(value) {
        Ok(body) => actix_web::HttpResponse::Ok()
            .content_type("application/json")
            .body(body),
        Err(e) => problem::Problem::internal("the response could not be written")
            .caused_by(format_args!("serialising a response failed: {e}"))
            .response(),
    }
}

/// A started server: where it listens and how to stop it.
pub struct Running {
    pub addr: SocketAddr,
    /// `https` when the service terminates TLS itself, else `http`.
    pub scheme: &'static str,
    pub handle: ServerHandle,
    pub server: actix_web::dev::Server,
}

static REQUEST_SEQ: AtomicU64 = AtomicU64::new(0);

/// The request's id, noted on the request for handlers (the access log keeps it).
#[derive(Debug, Clone)]
pub struct RequestId(pub String);

/// The id of `req` (empty outside the service's middleware).
pub fn request_id_of(req: &actix_web::HttpRequest) -> String {
    use actix_web::HttpMessage;
    (req.extensions().get::<RequestId>()).map_or_else(String::new, |r| r.0.clone())
}

/// A caller's `x-request-id` if it is short and printable, else a new one.
fn request_id(req: &actix_web::dev::ServiceRequest) -> String {
    match req
        .headers()
        .get("x-request-id")
        .and_then(|v| v.to_str().ok())
    {
        Some(id)
            if !id.is_empty() && id.len() <= 64 && id.chars().all(|c| c.is_ascii_graphic()) =>
        {
            id.to_string()
        }
        _ => format!(
            "{:x}-{:x}",
            std::process::id(),
            REQUEST_SEQ.fetch_add(1, Ordering::Relaxed)
        ),
    }
}

/// A route for `method` that answers other methods with a 405 problem and an `Allow` header.
fn resource(path: &str, method: &'static str, route: actix_web::Route) -> actix_web::Resource {
    web::resource(path)
        .route(route)
        .default_service(routes::method_not_allowed(method))
}

/// Validates every model and binds the address; the returned server runs once awaited.
pub fn start(config: ServeConfig) -> Result<Running, StartError> {
    let registry = Registry::new(config.models.clone())?;
    let tls = match &config.tls {
        Some((cert, key)) => Some(crate::tls::server_config(cert, key).map_err(StartError::Tls)?),
        None => None,
    };
    let recorder = match &config.store {
        Some(location) => {
            // On its own thread: the PostgreSQL client blocks on a runtime of its own, which
            // cannot start inside the caller's async context.
            let at = location.clone();
            let redacted = || crate::records::redacted(location);
            let store = std::thread::spawn(move || crate::records::open(&at))
                .join()
                .map_err(|_| StartError::StorePanicked {
                    location: redacted(),
                })?
                .map_err(|source| StartError::Store {
                    location: redacted(),
                    source,
                })?;
            tracing::info!(store = %store.describe(), "recording decisions");
            Some(crate::records::Recorder::start(
                store,
                config.limits.commit_timeout,
                config.limits.commit_gather,
            ))
        }
        None => None,
    };
    let state = web::Data::new(State {
        registry,
        auth: config.auth.clone(),
        metrics: Default::default(),
        limits: config.limits.clone(),
        recorder,
        metrics_key: config.metrics_key.as_deref().map(auth::digest),
        report_slots: std::sync::Arc::new(tokio::sync::Semaphore::new(config.limits.max_reports)),
    });
    let limits = config.limits.clone();
    let server = HttpServer::new(move || {
        App::new()
            .app_data(state.clone())
            .wrap_fn(|req, srv| {
                use actix_web::HttpMessage;
                let started = Instant::now();
                let id = request_id(&req);
                req.extensions_mut().insert(RequestId(id.clone()));
                let method = req.method().to_string();
                let data = req.app_data::<web::Data<State>>().cloned();
                let fut = srv.call(req);
                async move {
                    let mut res = fut.await?;
                    let route = res.request().match_pattern().unwrap_or_else(|| "unmatched".into());
                    let status = res.status().as_u16();
                    let seconds = started.elapsed().as_secs_f64();
                    if let Some(d) = data {
                        d.metrics.observe_request(&route, &method, status, seconds);
                    }
                    // The calling key's name and role, never the key.
                    let (caller, role) = match res.request().extensions().get::<auth::Caller>() {
                        Some(c) => (c.name.clone(), c.role_name()),
                        None => (String::new(), "none"),
                    };
                    tracing::info!(request_id = %id, method = %method, route = %route, status, micros = (seconds * 1e6) as u64, caller = %caller, role, "request");
                    // Every 5xx once, with its cause; the client saw only the problem document.
                    if status >= 500 {
                        let cause = res.response().extensions().get::<problem::Cause>().map(|c| c.0.clone());
                        let cause = cause.as_deref().unwrap_or("no cause was given");
                        // A replica that is not ready answers every probe with a 503: a warning
                        // each time, not an error.
                        if route.starts_with("/health/") {
                            tracing::warn!(request_id = %id, method = %method, route = %route, status, cause, "request failed");
                        } else {
                            tracing::error!(request_id = %id, method = %method, route = %route, status, cause, "request failed");
                        }
                    }
                    if let Ok(v) = actix_web::http::header::HeaderValue::from_str(&id) {
                        res.headers_mut().insert(actix_web::http::header::HeaderName::from_static("x-request-id"), v);
                    }
                    Ok(res)
                }
            })
            .service(
                web::resource("/v1/decisions")
                    .route(web::post().to(decisions::post_decision))
                    .route(web::get().to(compliance::search))
                    .default_service(routes::method_not_allowed("GET, POST")),
            )
            .service(resource("/v1/decisions/batch", "POST", web::post().to(batch::post_batch)))
            .service(resource("/v1/decisions/export", "GET", web::get().to(compliance::export)))
            .service(resource("/v1/decisions/{id}", "GET", web::get().to(compliance::get_decision)))
            .service(resource(
                "/v1/decisions/{id}/final-action",
                "POST",
                web::post().to(underwriting::post_final_action),
            ))
            .service(resource(
                "/v1/decisions/{id}/adverse-action",
                "GET",
                web::get().to(compliance::adverse_action),
            ))
            .service(resource("/v1/models", "GET", web::get().to(routes::get_models)))
            .service(resource("/v1/models/{id}", "GET", web::get().to(routes::get_model)))
            .service(resource("/v1/fairness/reports", "POST", web::post().to(fairness::create_report)))
            .service(resource("/v1/monitoring/stability", "GET", web::get().to(monitoring::stability)))
            .service(resource("/v1/monitoring/reasons", "GET", web::get().to(monitoring::reasons)))
            .service(resource("/v1/monitoring/outcomes", "GET", web::get().to(monitoring::outcomes)))
            .service(resource("/v1/outcomes", "POST", web::post().to(outcomes::post_outcomes)))
            .service(resource("/v1/admin/reload", "POST", web::post().to(routes::reload)))
            .service(resource("/v1/admin/access", "GET", web::get().to(access::get_access)))
            .service(resource("/health/live", "GET", web::get().to(routes::live)))
            .service(resource("/health/ready", "GET", web::get().to(routes::ready)))
            .service(resource("/metrics", "GET", web::get().to(routes::metrics)))
            .service(resource("/openapi.json", "GET", web::get().to(openapi::serve)))
            .service(resource("/console", "GET", web::get().to(console::redirect)))
            .service(resource("/console/{file:.*}", "GET", web::get().to(console::file)))
            .default_service(web::to(routes::not_found))
    })
    .workers(config.workers.max(1))
    .client_request_timeout(limits.head_timeout)
    .client_disconnect_timeout(Duration::from_secs(1))
    .shutdown_timeout(limits.shutdown_timeout.as_secs())
    // A TLS handshake must finish within the time a request head has.
    .tls_handshake_timeout(limits.head_timeout);
    let scheme = if tls.is_some() { "https" } else { "http" };
    let server = match tls {
        Some(tls) => server.bind_rustls_0_23(config.addr, tls),
        None => server.bind(config.addr),
    }
    .map_err(|source| StartError::Listen {
        addr: config.addr,
        source,
    })?;
    let addr = server.addrs().first().copied().unwrap_or(config.addr);
    let server = server.run();
    Ok(Running {
        addr,
        scheme,
        handle: server.handle(),
        server,
    })
}

/// Starts the service and runs it until SIGINT / SIGTERM (then stops accepting, finishes
/// in-flight requests and exits).
pub fn serve(config: ServeConfig) -> Result<(), StartError> {
    let system = actix_web::rt::System::new();
    system.block_on(async move {
        let no_auth = config.auth.0.is_none();
        let running = start(config)?;
        if no_auth {
            let banner = "AUTHENTICATION IS OFF (--no-auth): anyone who can reach this port can request decisions and reload models";
            tracing::warn!("{banner}");
            eprintln!("\n*** WARNING: {banner} ***\n");
        }
        tracing::info!(addr = %running.addr, "listening");
        eprintln!("plumbline listening on {}://{}", running.scheme, running.addr);
        running.server.await.map_err(StartError::Run)
    })
}
