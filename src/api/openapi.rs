//! The OpenAPI 3.1 document, generated from the handlers and types (utoipa). A test keeps the
//! checked-in copy, openapi/plumbline.json, equal to it.

use super::{access, batch, compliance, decisions, fairness, routes, underwriting};
use actix_web::HttpResponse;
use utoipa::openapi::security::{HttpAuthScheme, HttpBuilder, SecurityScheme};
use utoipa::{Modify, OpenApi};

#[derive(OpenApi)]
#[openapi(
    info(
        title = "plumbline decision service",
        description = "Scores loan applications with a validated model and returns the probability of default, a scaled score, an approve / refer / decline outcome, ranked reason codes and exact per-field contributions.\n\nModel output is decision support, not a credit decision by itself. Lenders remain responsible for complying with ECOA / Regulation B, FCRA and local law, for their adverse-action notices, and for their own model-risk review; defer to compliance counsel.\n\nErrors are RFC 9457 problem details (`application/problem+json`) naming each bad field with the rule it broke.",
        license(name = "Apache-2.0")
    ),
    paths(decisions::post_decision, batch::post_batch, compliance::search, compliance::export, compliance::get_decision, compliance::adverse_action, underwriting::post_final_action, fairness::create_report, routes::get_models, routes::get_model, routes::live, routes::ready, routes::metrics, routes::reload, access::get_access, serve),
    components(schemas(crate::decide::Decision, super::recording::RecordRef, super::problem::Problem, decisions::DecisionRequest, batch::BatchResponse, compliance::SearchPage, underwriting::FinalActionRequest)),
    modifiers(&ApiKey),
    tags(
        (name = "decisions", description = "Decide applications; each decision is recorded before it is sent"),
        (name = "records", description = "Recorded decisions for compliance review: look-up, adverse-action content, search, export (review role); final actions on referrals (underwriting role)"),
        (name = "fairness", description = "Fair-lending screening over recorded decisions (review role): a screening statistic for people who decide, not a legal finding"),
        (name = "models", description = "What is loaded"),
        (name = "operations", description = "Probes, metrics, reload"),
    )
)]
struct Document;

struct ApiKey;

impl Modify for ApiKey {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        let components = openapi.components.get_or_insert_with(Default::default);
        components.add_security_scheme(
            "api_key",
            SecurityScheme::Http(
                HttpBuilder::new()
                    .scheme(HttpAuthScheme::Bearer)
                    .description(Some(
                        "API key with a role: scoring, review, underwriting or admin",
                    ))
                    .build(),
            ),
        );
    }
}

/// The document as pretty JSON, with a trailing newline (as checked in).
pub fn document() -> String {
    let mut doc = Document::openapi();
    doc.info.version = crate::VERSION.to_string();
    format!("{}\n", doc.to_pretty_json().unwrap_or_default())
}

/// This document.
#[utoipa::path(get, path = "/openapi.json", tag = "operations", operation_id = "openapi", responses((status = 200, description = "The OpenAPI 3.1 document", content_type = "application/json", body = Object)))]
pub async fn serve() -> HttpResponse {
    HttpResponse::Ok()
        .content_type("application/json")
        .body(document())
}
