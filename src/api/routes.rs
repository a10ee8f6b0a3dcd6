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

const DECIDERS: &[Role] = &[Role::Scoring];
const READERS: &[Role] = &[Role::Scoring, Role::Review];
const ADMINS: &[Role] = &[Role::Admin];

fn authorize(state: &State, req: &HttpRequest, allowed: &[Role]) -> Result<(), Problem> {
    let header = req
        .headers()
        .get("authorization")
        .and_then(|v| v.to_str().ok());
    state.auth.check(header, allowed).map(|_| ())
}

fn json<T: Serialize>(value: &T) -> HttpResponse {
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
struct Decided {
    decision: Decision,
    idempotency_key: Option<String>,
}

fn decide_value(state: &State, request: &Value) -> Result<Decided, Problem> {
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

fn observe(state: &State, decision: &Decision, outcome: &str) {
    let outcome = match outcome {
        "approve" => "approve",
        "refer" => "refer",
        _ => "decline",
    };
    (state.metrics).observe_decision(&decision.model.id, &decision.model.version, outcome);
}

/// Decide one application.
#[utoipa::path(post, path = "/v1/decisions", tag = "decisions", request_body = DecisionRequest,
    responses(
        (status = 200, description = "The decision: probability, score, outcome, reasons and exact contributions, plus `record` (RecordRef: decision_id, decided_at) once committed to the store. A retry with a recorded idempotency_key and the same body returns the stored bytes with header `idempotency-replayed: true`", body = Decision),
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
    authorize(&state, &req, DECIDERS)?;
    let request = read_json(
        &req,
        payload,
        state.limits.max_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    let Decided {
        decision,
        idempotency_key,
    } = decide_value(&state, &request)?;
    let Some(recorder) = &state.recorder else {
        observe(&state, &decision, decision.outcome.name());
        return Ok(json(&decision));
    };
    let record = recording::record_for(&decision, idempotency_key, &request, received_at);
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
        response.insert_header(("idempotency-replayed", "true"));
    }
    Ok(response.content_type("application/json").body(given.body))
}

#[derive(ToSchema)]
#[allow(dead_code)]
pub struct BatchRequestDoc {
    /// Decision requests, each as for POST /v1/decisions.
    items: Vec<DecisionRequest>,
}

/// One item's result: a decision or the problem with that item alone.
#[derive(Serialize, ToSchema)]
pub struct BatchItem {
    pub index: usize,
    pub status: u16,
    /// The decision as recorded (with its `record` reference when the service keeps records).
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schema(value_type = Option<Decision>)]
    pub decision: Option<Box<serde_json::value::RawValue>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub problem: Option<Problem>,
}

#[derive(Serialize, ToSchema)]
pub struct BatchResponse {
    pub results: Vec<BatchItem>,
    pub approved: usize,
    pub referred: usize,
    pub declined: usize,
    pub failed: usize,
}

/// Decide many applications; one bad item never fails the others.
#[utoipa::path(post, path = "/v1/decisions/batch", tag = "decisions", request_body = BatchRequestDoc,
    responses(
        (status = 200, description = "Per-item decisions and per-item problems", body = BatchResponse),
        (status = 400, description = "Malformed JSON", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key's role may not decide", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body larger than the batch limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Content-Type is not application/json", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a batch, or more items than allowed", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn post_batch(
    state: web::Data<State>,
    req: HttpRequest,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    authorize(&state, &req, DECIDERS)?;
    let body = read_json(
        &req,
        payload,
        state.limits.max_batch_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    let items = match body.get("items") {
        Some(Value::Array(items)) if body.as_object().is_some_and(|o| o.len() == 1) => items,
        _ => {
            return Err(Problem::invalid(crate::InputError::one(
                "items",
                "required",
                "a batch is {\"items\": [request, ...]} and nothing else",
            )));
        }
    };
    if items.len() > state.limits.max_batch_items {
        return Err(Problem::batch_too_large(
            items.len(),
            state.limits.max_batch_items,
        ));
    }
    // A full batch is milliseconds of CPU: run it on the blocking pool so this worker keeps
    // reading other requests (and finishes them on shutdown) meanwhile.
    let received_at = crate::records::now();
    let state = state.into_inner();
    let worker = state.clone();
    let decided = web::block(move || decide_batch(&worker, &body, received_at))
        .await
        .map_err(|_| Problem::internal("the batch worker stopped"))?;
    Ok(json(&batch_response(&state, decided).await?))
}

/// Each item decided, as the record to write (or as the bare decision when records are off).
enum ItemResult {
    Recorded(crate::records::Record),
    Unrecorded(Decision),
    Failed(Problem),
}

fn decide_batch(state: &State, body: &Value, received_at: String) -> Vec<ItemResult> {
    let items = body["items"]
        .as_array()
        .map(Vec::as_slice)
        .unwrap_or_default();
    (items.iter())
        .map(|item| match decide_value(state, item) {
            Ok(d) if state.recorder.is_some() => ItemResult::Recorded(recording::record_for(
                &d.decision,
                d.idempotency_key,
                item,
                received_at.clone(),
            )),
            Ok(d) => ItemResult::Unrecorded(d.decision),
            Err(p) => ItemResult::Failed(p),
        })
        .collect()
}

/// Records every decided item in one group (committed before anything is sent), then reports
/// each item: its decision as recorded, or its own problem.
async fn batch_response(state: &State, items: Vec<ItemResult>) -> Result<BatchResponse, Problem> {
    let mut records = Vec::new();
    let mut rest = Vec::with_capacity(items.len());
    for item in items {
        match item {
            ItemResult::Recorded(r) => {
                records.push(r);
                rest.push(None);
            }
            other => rest.push(Some(other)),
        }
    }
    let mut written = match (&state.recorder, records.is_empty()) {
        (Some(recorder), false) => (recorder.record(records).await)
            .map_err(|e| Problem::not_recorded(&e))?
            .into_iter(),
        _ => Vec::new().into_iter(),
    };
    let mut response = BatchResponse {
        results: Vec::with_capacity(rest.len()),
        approved: 0,
        referred: 0,
        declined: 0,
        failed: 0,
    };
    for (index, item) in rest.into_iter().enumerate() {
        let given = match item {
            None => {
                let (record, outcome) = (written.next())
                    .ok_or_else(|| Problem::internal("the store gave too few outcomes"))?;
                recording::settle(record, outcome).map(|g| (g.body, g.outcome))
            }
            Some(ItemResult::Unrecorded(d)) => Ok((
                serde_json::to_string(&d).unwrap_or_default(),
                d.outcome.name().to_string(),
            )),
            Some(ItemResult::Failed(p)) => Err(p),
            Some(ItemResult::Recorded(_)) => Err(Problem::internal("an item was not recorded")),
        };
        response.results.push(match given {
            Ok((body, outcome)) => {
                match outcome.as_str() {
                    "approve" => response.approved += 1,
                    "refer" => response.referred += 1,
                    _ => response.declined += 1,
                }
                BatchItem {
                    index,
                    status: 200,
                    decision: serde_json::value::RawValue::from_string(body).ok(),
                    problem: None,
                }
            }
            Err(problem) => {
                response.failed += 1;
                BatchItem {
                    index,
                    status: problem.status,
                    decision: None,
                    problem: Some(problem),
                }
            }
        });
    }
    Ok(response)
}

/// What a loaded model is: identity, digest, fields, cutoffs and reasons.
#[derive(Serialize, ToSchema)]
pub struct ModelSummary {
    pub id: String,
    pub version: String,
    pub sha256: String,
    pub description: String,
    pub champion: bool,
    /// `logistic` or `tree_ensemble`.
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

/// Liveness: the process answers.
#[utoipa::path(get, path = "/health/live", tag = "operations", responses((status = 200, body = Health)))]
pub async fn live(state: web::Data<State>) -> HttpResponse {
    json(&Health {
        status: "live",
        models: state.registry.current().models.len(),
    })
}

/// Readiness: models are loaded and validated (and, once records exist, the store answers).
#[utoipa::path(get, path = "/health/ready", tag = "operations", responses((status = 200, body = Health)))]
pub async fn ready(state: web::Data<State>) -> HttpResponse {
    json(&Health {
        status: "ready",
        models: state.registry.current().models.len(),
    })
}

/// Counters and latency histograms, Prometheus text format.
#[utoipa::path(get, path = "/metrics", tag = "operations", responses((status = 200, content_type = "text/plain", body = String)))]
pub async fn metrics(state: web::Data<State>) -> HttpResponse {
    HttpResponse::Ok()
        .content_type("text/plain; version=0.0.4")
        .body(state.metrics.render())
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
