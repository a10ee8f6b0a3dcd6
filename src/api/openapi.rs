//! The OpenAPI 3.1 document, generated from the handlers and types (utoipa). A test keeps the
//! checked-in copy, openapi/plumbline.json, equal to it.

use super::{
    access, batch, compliance, decisions, fairness, monitoring, outcomes, routes, underwriting,
};
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
    paths(decisions::post_decision, batch::post_batch, compliance::search, compliance::export, compliance::get_decision, compliance::adverse_action, underwriting::post_final_action, fairness::create_report, monitoring::stability, monitoring::reasons, monitoring::outcomes, outcomes::post_outcomes, routes::get_models, routes::get_model, routes::live, routes::ready, routes::metrics, routes::reload, access::get_access, serve),
    components(schemas(crate::decide::Decision, super::params::TimeParam, super::params::CursorParam, super::params::OutcomeParam, super::params::FinalActionParam, super::params::ExportFormat, super::params::ReportFormat, super::recording::RecordRef, super::problem::Problem, decisions::DecisionRequest, batch::BatchResponse, compliance::SearchPage, underwriting::FinalActionRequest)),
    modifiers(&ApiKey, &RecordOnDecision),
    tags(
        (name = "decisions", description = "Decide applications; each decision is recorded before it is sent"),
        (name = "records", description = "Recorded decisions for compliance review: look-up, adverse-action content, search, export (review role); final actions on referrals (underwriting role)"),
        (name = "fairness", description = "Fair-lending screening over recorded decisions (review role): a screening statistic for people who decide, not a legal finding"),
        (name = "monitoring", description = "Ongoing monitoring of a model in use over its recorded decisions (review role): population stability against the development sample, back-testing against observed outcomes (which review keys load), reason trends among declines and referrals"),
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

/// A decision as the service answers it carries `record` (its id and time in the store) once
/// committed: the handler adds it beside the library's `Decision`, so the schema gets it here.
struct RecordOnDecision;

impl Modify for RecordOnDecision {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        use utoipa::openapi::schema::Schema;
        use utoipa::openapi::{Ref, RefOr};
        let Some(components) = openapi.components.as_mut() else {
            return;
        };
        if let Some(RefOr::T(Schema::Object(decision))) = components.schemas.get_mut("Decision") {
            decision.properties.insert(
                "record".into(),
                RefOr::Ref(Ref::from_schema_name("RecordRef")),
            );
        }
    }
}

/// The document as pretty JSON, with a trailing newline (as checked in).
pub fn document() -> String {
    let mut doc = Document::openapi();
    doc.info.version = crate::VERSION.to_string();
    let text = doc.to_pretty_json().unwrap_or_default();
    // utoipa 5.5 writes a Link object's fields in snake case; OpenAPI 3.1 (4.8.20) spells them
    // `operationRef`, `operationId` and `requestBody`. No schema here has such a property.
    let text = (text.replace("\"operation_id\": ", "\"operationId\": "))
        .replace("\"operation_ref\": ", "\"operationRef\": ")
        .replace("\"request_body\": ", "\"requestBody\": ");
    format!("{text}\n")
}

/// This document.
#[utoipa::path(get, path = "/openapi.json", tag = "operations", operation_id = "openapi", responses((status = 200, description = "The OpenAPI 3.1 document", content_type = "application/json", body = Object)))]
pub async fn serve() -> HttpResponse {
    HttpResponse::Ok()
        .content_type("application/json")
        .body(document())
}
