//! The review console at `/console/`: a few static files compiled into the binary and served
//! with a strict Content-Security-Policy. The pages hold no data of their own; everything they
//! show comes from the same API, with the key the person typed (kept for the tab only, sent as
//! the Bearer header), so a console response never carries applicant data.

use actix_web::http::header;
use actix_web::{web, HttpRequest, HttpResponse};
use sha2::{Digest, Sha256};
use std::sync::OnceLock;

const INDEX: &str = include_str!("../../console/index.html");
const SCRIPT: &str = include_str!("../../console/app.js");
const STYLE: &str = include_str!("../../console/app.css");

/// The policy of every console response: scripts, styles and connections from this origin only,
/// no inline script, no framing by other sites, no form posted anywhere. The fairness report
/// (shown in a frame of its own from `srcdoc`) keeps its one fixed style block, allowed by hash.
fn policy() -> &'static str {
    static POLICY: OnceLock<String> = OnceLock::new();
    POLICY.get_or_init(|| {
        use base64::Engine;
        let report_style = base64::engine::general_purpose::STANDARD
            .encode(Sha256::digest(crate::fairness::html::STYLE.as_bytes()));
        format!(
            "default-src 'none'; script-src 'self'; style-src 'self' 'sha256-{report_style}'; \
             img-src 'self' data:; connect-src 'self'; frame-src 'self'; form-action 'none'; \
             base-uri 'none'; frame-ancestors 'none'"
        )
    })
}

fn asset(content_type: &str, body: &'static str) -> HttpResponse {
    HttpResponse::Ok()
        .content_type(content_type)
        .insert_header((header::CONTENT_SECURITY_POLICY, policy()))
        .insert_header((header::X_CONTENT_TYPE_OPTIONS, "nosniff"))
        .insert_header((header::REFERRER_POLICY, "no-referrer"))
        .insert_header((header::X_FRAME_OPTIONS, "DENY"))
        .insert_header((header::CACHE_CONTROL, "no-cache"))
        .body(body)
}

/// `GET /console`: to the console's own folder, so its relative links resolve.
pub async fn redirect() -> HttpResponse {
    HttpResponse::PermanentRedirect()
        .insert_header((header::LOCATION, "/console/"))
        .finish()
}

/// `GET /console/{file}`: the page, its script or its stylesheet.
pub async fn file(req: HttpRequest, name: web::Path<String>) -> HttpResponse {
    match name.as_str() {
        "" | "index.html" => asset("text/html; charset=utf-8", INDEX),
        "app.js" => asset("text/javascript; charset=utf-8", SCRIPT),
        "app.css" => asset("text/css; charset=utf-8", STYLE),
        _ => super::problem::Problem::not_found(req.path()).response(),
    }
}
