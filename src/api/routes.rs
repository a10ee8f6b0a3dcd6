//! Route handlers: thin shells over the library. Each checks the key's role, reads the body
//! within its limits, and calls the same functions as the command line.

use super::auth::Role;
use super::body::read_json;
use super::problem::Problem;
use super::{recording, State};
use crate::decide::{decide_envelope, Decision, Envelope};
use crate::features::{FieldType, Missing};
use crate::LoadedModel;
use actix_web::{web, HttpRequest, HttpResponse};
use serde::Serialize;
use serde_json::Value;
use utoipa::ToSchema;

pub(super) const DECIDERS: &[Role] = &[Role::Scoring];
const READERS: &[Role] = &[Role::Scoring, Role::Review];
const ADMINS: &[Role] = &[Role::Admin];

/// Admits the request for `allowed` roles; the caller (key name and role) it came from.
pub(super) fn authorize(
    state: &State,
    req: &HttpRequest,
    allowed: &[Role],
) -> Result<super::auth::Caller, Problem> {
    state.auth.admit(req, allowed)
}

pub(super) fn json<T: Serialize>(value: &T) -> HttpResponse {
    HttpResponse::Ok()
        .content_type("application/json")
        .body(serde_json::to_string(value).unwrap_or_default())
}

/// A decision request (documentation of the body; the server reads it as JSON and checks every
/// field against the model's schema).
#[derive(ToSchema)]
#[allow(dead_code)]
pub struct DecisionRequest {
    /// The lender's id for the application, 1-128 characters.
    #[schema(example = "FH-2026-000101")]
    application_id: String,
    /// Optional key for safe retries (recorded with the decision once records exist).
    idempotency_key: Option<String>,
    /// Optional model selector; the champion when absent.
    model: Option<ModelSelectorDoc>,
    /// Applicant fields keyed by the model's field names (GET /v1/models/{id} lists them).
    #[schema(value_type = Object, example = json!({"requested_amount": 12000, "annual_income": 85000, "debt_to_income": 14.5, "revolving_utilization": 22, "months_since_oldest_account": 190, "delinquencies_24m": 0, "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"}))]
    applicant: Value,
}

#[derive(ToSchema)]
#[allow(dead_code)]
pub struct ModelSelectorDoc {
    id: String,
    version: Option<String>,
}

/// A decision and the idempotency key its request carried.
pub(super) struct Decided {
    pub decision: Decision,
    pub idempotency_key: Option<String>,
}

pub(super) fn decide_value(state: &State, request: &Value) -> Result<Decided, Problem> {
    let envelope = Envelope::parse(request).map_err(Problem::invalid)?;
    let set = state.registry.current();
    let Some(model) = set.select(envelope.model.as_ref()) else {
        let what = envelope
            .model
            .as_ref()
            .map(|m| m.describe())
            .unwrap_or_default();
        // Alone, an unknown model is a 404; with other problems, all are reported together.
        if envelope.errors.is_empty() {
            return Err(Problem::unknown_model(&what));
        }
        let mut errors = envelope.errors.clone();
        errors.push(crate::features::FieldError {
            field: "model".into(),
            rule: "unknown_model",
            message: format!("{what} is not loaded"),
        });
        return Err(Problem::invalid(crate::InputError { errors }));
    };
    let decision = decide_envelope(&model, &envelope).map_err(Problem::invalid)?;
    Ok(Decided {
        decision,
        idempotency_key: envelope.idempotency_key,
    })
}

/// Whether the model a request selects explains by enumerating coalitions (milliseconds).
fn slow_to_explain(state: &State, request: &Value) -> bool {
    let Ok(envelope) = Envelope::parse(request) else {
        return false;
    };
    let set = state.registry.current();
    set.select(envelope.model.as_ref())
        .is_some_and(|m| matches!(m.explainer, crate::explain::Explainer::Shapley(_)))
}

pub(super) fn observe(state: &State, decision: &Decision, outcome: &str) {
    let outcome = outcome_label(outcome);
    (state.metrics).observe_decision(&decision.model.id, &decision.model.version, outcome);
}

/// The metrics label of an outcome.
pub(super) fn outcome_label(outcome: &str) -> &'static str {
    match outcome {
        "approve" => "approve",
        "refer" => "refer",
        _ => "decline",
    }
}

/// Decide one application.
#[utoipa::path(post, path = "/v1/decisions", tag = "decisions", request_body = DecisionRequest,
    responses(
        (status = 200, description = "The decision: probability, score, outcome, reasons and exact contributions, plus `record` (RecordRef: decision_id, decided_at) once committed to the store. A retry with a recorded idempotency_key and the same body returns the stored bytes with header `x-response-from-record: true`", body = Decision),
        (status = 400, description = "Malformed JSON", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key's role may not decide", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "The selected model is not loaded", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body larger than the limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Content-Type is not application/json", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The idempotency_key is recorded for a different request", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Fields break the model's schema: each is named with its rule", body = Problem, content_type = "application/problem+json"),
        (status = 503, description = "The decision could not be recorded, so it was not given", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn post_decision(
    state: web::Data<State>,
    req: HttpRequest,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    let received_at = crate::records::now();
    let caller = authorize(&state, &req, DECIDERS)?;
    let request = read_json(
        &req,
        payload,
        state.limits.max_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    // A recorded key answers before anything is decided: a retry gets the stored response even
    // if its model has since been unloaded, and a different body is a conflict first.
    if let Some(given) = recording::earlier(&state, &caller.name, &request).await? {
        return Ok(HttpResponse::Ok()
            .insert_header(("x-response-from-record", "true"))
            .content_type("application/json")
            .body(given));
    }
    // Graph models' explanations take milliseconds: they run on the blocking pool, so a worker
    // keeps reading other requests meanwhile.
    let Decided {
        decision,
        idempotency_key,
    } = if slow_to_explain(&state, &request) {
        let (s, r) = (state.clone(), request.clone());
        web::block(move || decide_value(&s, &r))
            .await
            .map_err(|_| Problem::internal("the decision's worker thread failed"))??
    } else {
        decide_value(&state, &request)?
    };
    let Some(recorder) = &state.recorder else {
        observe(&state, &decision, decision.outcome.name());
        return Ok(json(&decision));
    };
    let record = recording::record_for(
        &decision,
        idempotency_key,
        &request,
        received_at,
        &caller.name,
    );
    let mut written =
        (recorder.record(vec![record]).await).map_err(|e| Problem::not_recorded(&e))?;
    let (record, outcome) = written
        .pop()
        .ok_or_else(|| Problem::internal("the store gave no outcome"))?;
    let given = recording::settle(record, outcome)?;
    if !given.replayed {
        observe(&state, &decision, &given.outcome);
    }
    let mut response = HttpResponse::Ok();
    if given.replayed {
        response.insert_header(("x-response-from-record", "true"));
    }
    Ok(response.content_type("application/json").body(given.body))
}

/// What a loaded model is: identity, digest, fields, cutoffs and reasons.
#[derive(Serialize, ToSchema)]
pub struct ModelSummary {
    pub id: String,
    pub version: String,
    pub sha256: String,
    pub description: String,
    pub champion: bool,
    /// `logistic`, `tree_ensemble` or `onnx_graph`.
    pub kind: &'static str,
    pub explanation: crate::explain::Method,
    pub reference: crate::artifact::spec::Population,
    pub approve_below: f64,
    pub decline_at_or_above: f64,
    pub fields: Vec<FieldSummary>,
    pub reasons: Vec<ReasonSummary>,
}

#[derive(Serialize, ToSchema)]
pub struct FieldSummary {
    pub name: String,
    pub kind: &'static str,
    pub unit: String,
    pub min: Option<f64>,
    pub max: Option<f64>,
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub levels: Vec<String>,
    /// `required`, `impute`, or `tree_default`.
    pub missing: &'static str,
    pub scored: bool,
}

#[derive(Serialize, ToSchema)]
pub struct ReasonSummary {
    pub code: String,
    pub text: String,
}

fn summary(m: &LoadedModel, champion: bool) -> ModelSummary {
    ModelSummary {
        id: m.identity.model_id.clone(),
        version: m.identity.version.clone(),
        sha256: m.sha256.clone(),
        description: m.identity.description.clone(),
        champion,
        kind: match m.scorer {
            crate::model::Scorer::Logistic(_) => "logistic",
            crate::model::Scorer::Trees(_) => "tree_ensemble",
            crate::model::Scorer::Graph(_) => "onnx_graph",
        },
        explanation: m.explainer.method(),
        reference: m.reference.population,
        approve_below: m.policy.approve_below,
        decline_at_or_above: m.policy.decline_at_or_above,
        fields: m
            .schema
            .fields
            .iter()
            .map(|f| FieldSummary {
                name: f.name.clone(),
                kind: f.ty.name(),
                unit: f.unit.clone(),
                min: f.min,
                max: f.max,
                levels: match &f.ty {
                    FieldType::Category { levels, .. } => levels.clone(),
                    _ => Vec::new(),
                },
                missing: match f.missing {
                    Missing::Reject => "required",
                    Missing::Impute(_) => "impute",
                    Missing::TreeDefault => "tree_default",
                },
                scored: f.scored,
            })
            .collect(),
        reasons: m
            .reasons
            .reasons
            .iter()
            .map(|r| ReasonSummary {
                code: r.code.clone(),
                text: r.text.clone(),
            })
            .collect(),
    }
}

/// The loaded models.
#[utoipa::path(get, path = "/v1/models", tag = "models",
    responses((status = 200, body = Vec<ModelSummary>), (status = 401, body = Problem, content_type = "application/problem+json")),
    security(("api_key" = [])))]
pub async fn get_models(
    state: web::Data<State>,
    req: HttpRequest,
) -> Result<HttpResponse, Problem> {
    authorize(&state, &req, READERS)?;
    let set = state.registry.current();
    let list: Vec<ModelSummary> = set
        .models
        .iter()
        .map(|m| summary(m, std::sync::Arc::ptr_eq(m, &set.champion)))
        .collect();
    Ok(json(&list))
}

/// One loaded model by id (the first-listed version when several are loaded).
#[utoipa::path(get, path = "/v1/models/{id}", tag = "models", params(("id" = String, Path, description = "model id")),
    responses((status = 200, body = ModelSummary), (status = 401, body = Problem, content_type = "application/problem+json"), (status = 404, body = Problem, content_type = "application/problem+json")),
    security(("api_key" = [])))]
pub async fn get_model(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
) -> Result<HttpResponse, Problem> {
    authorize(&state, &req, READERS)?;
    let set = state.registry.current();
    let m = set
        .models
        .iter()
        .find(|m| m.identity.model_id == *id)
        .ok_or_else(|| Problem::unknown_model(&id))?;
    Ok(json(&summary(m, std::sync::Arc::ptr_eq(m, &set.champion))))
}

#[derive(Serialize, ToSchema)]
pub struct Health {
    pub status: &'static str,
    pub models: usize,
}

/// Liveness: the process answers, and its decision recorder runs (one that has stopped can
/// never record again: the process is to be restarted).
#[utoipa::path(get, path = "/health/live", tag = "operations", responses((status = 200, body = Health), (status = 503, description = "The decision recorder has stopped; restart the process", body = Problem, content_type = "application/problem+json")))]
pub async fn live(state: web::Data<State>) -> Result<HttpResponse, Problem> {
    if let Some(why) = (state.recorder.as_ref()).and_then(|r| r.health().stopped()) {
        return Err(Problem::not_ready(&why));
    }
    Ok(json(&Health {
        status: "live",
        models: state.registry.current().models.len(),
    }))
}

/// Readiness: models are loaded and validated, and the write path works: the recorder runs,
/// recent commits succeed, and the store takes writes (not a read-only standby, not locked by
/// another writer). A replica that cannot record must not take decisions.
#[utoipa::path(get, path = "/health/ready", tag = "operations", responses((status = 200, body = Health), (status = 503, description = "Decisions cannot be recorded now", body = Problem, content_type = "application/problem+json")))]
pub async fn ready(state: web::Data<State>) -> Result<HttpResponse, Problem> {
    if let Some(recorder) = &state.recorder {
        if let Some(why) = recorder.health().problem() {
            return Err(Problem::not_ready(&why));
        }
        let store = recorder.store().clone();
        web::block(move || store.probe_write())
            .await
            .map_err(|_| Problem::internal("the store worker stopped"))?
            .map_err(|e| {
                tracing::warn!(error = %e, "readiness: the store cannot take writes");
                Problem::not_ready("the decision store cannot take writes")
            })?;
    }
    Ok(json(&Health {
        status: "ready",
        models: state.registry.current().models.len(),
    }))
}

/// Counters and latency histograms, Prometheus text format.
#[utoipa::path(get, path = "/metrics", tag = "operations", responses((status = 200, content_type = "text/plain", body = String), (status = 401, description = "The service was started with --metrics-key and this request does not present it", body = Problem, content_type = "application/problem+json")))]
pub async fn metrics(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    if let Some(expected) = &state.metrics_key {
        let header = (req.headers().get("authorization")).and_then(|v| v.to_str().ok());
        if !super::auth::presents(header, expected) {
            return Err(Problem::unauthorized());
        }
    }
    Ok(HttpResponse::Ok()
        .content_type("text/plain; version=0.0.4")
        .body(state.metrics.render()))
}

#[derive(Serialize, ToSchema)]
pub struct Reloaded {
    pub models: Vec<ModelSummary>,
}

/// Load the model files again and swap them in atomically (admin only). Requests in flight finish
/// on the models they started with; if any file fails, nothing changes.
#[utoipa::path(post, path = "/v1/admin/reload", tag = "operations",
    responses((status = 200, body = Reloaded), (status = 401, body = Problem, content_type = "application/problem+json"), (status = 403, body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "A model file does not load; the old models stay", body = Problem, content_type = "application/problem+json")),
    security(("api_key" = [])))]
pub async fn reload(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    authorize(&state, &req, ADMINS)?;
    let set = state.registry.reload().map_err(Problem::reload_failed)?;
    tracing::info!(models = set.models.len(), "models reloaded");
    Ok(json(&Reloaded {
        models: set
            .models
            .iter()
            .map(|m| summary(m, std::sync::Arc::ptr_eq(m, &set.champion)))
            .collect(),
    }))
}

/// This document.
#[utoipa::path(get, path = "/openapi.json", tag = "operations", responses((status = 200, description = "The OpenAPI 3.1 document", content_type = "application/json", body = Object)))]
pub async fn openapi() -> HttpResponse {
    HttpResponse::Ok()
        .content_type("application/json")
        .body(super::openapi::document())
}

pub async fn method_not_allowed(req: HttpRequest) -> HttpResponse {
    Problem::method_not_allowed(req.method().as_str(), req.path()).response()
}

pub async fn not_found(req: HttpRequest) -> HttpResponse {
    Problem::not_found(req.path()).response()
}
