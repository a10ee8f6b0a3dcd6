//! Route handlers: thin shells over the library. Each checks the key's role, reads the body
//! within its limits, and calls the same functions as the command line.

use super::auth::Role;
use super::json;
use super::problem::Problem;
use super::State;
use crate::features::{FieldType, Missing};
use crate::LoadedModel;
use actix_web::{web, HttpRequest, HttpResponse};
use serde::Serialize;
use utoipa::ToSchema;

/// Underwriters read models too: a final action's reasons come from the decision's model.
const READERS: &[Role] = &[Role::Scoring, Role::Review, Role::Underwriting];
const ADMINS: &[Role] = &[Role::Admin];

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
    /// Most principal reasons a decision or a final decline gives.
    pub max_reasons: usize,
    /// The codes an underwriter's final decline may give, in table order then the manual-review
    /// reasons: a field's reason (`model`), a decline rule's (`rule`), or the artifact's
    /// `review_reasons` (`review`). A refer rule's code says why an application was referred,
    /// not why it was declined, and is not among them.
    pub decline_reasons: Vec<DeclineReason>,
}

#[derive(Serialize, ToSchema)]
pub struct DeclineReason {
    pub code: String,
    pub text: String,
    /// `model`, `rule` or `review`.
    pub source: &'static str,
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
        max_reasons: m.policy.max_reasons,
        decline_reasons: (super::underwriting::decline_reasons(m).into_iter())
            .map(|(r, source)| DeclineReason {
                code: r.code.clone(),
                text: r.text.clone(),
                source,
            })
            .collect(),
    }
}

/// The loaded models.
#[utoipa::path(get, path = "/v1/models", tag = "models",
    responses((status = 200, body = Vec<ModelSummary>), (status = 401, body = Problem, content_type = "application/problem+json"), (status = 403, description = "Only scoring, review and underwriting keys may list models", body = Problem, content_type = "application/problem+json")),
    security(("api_key" = [])))]
pub async fn get_models(
    state: web::Data<State>,
    req: HttpRequest,
) -> Result<HttpResponse, Problem> {
    state.admit(&req, READERS)?;
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
    responses((status = 200, body = ModelSummary), (status = 401, body = Problem, content_type = "application/problem+json"), (status = 403, description = "Only scoring, review and underwriting keys may read models", body = Problem, content_type = "application/problem+json"), (status = 404, body = Problem, content_type = "application/problem+json")),
    security(("api_key" = [])))]
pub async fn get_model(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
) -> Result<HttpResponse, Problem> {
    state.admit(&req, READERS)?;
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
                Problem::not_ready("the decision store cannot take writes")
                    .caused_by(format_args!("readiness: the store cannot take writes: {e}"))
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
    let mut text = state.metrics.render();
    if let Some(recorder) = &state.recorder {
        let (commits, records) = recorder.stats();
        super::metrics::render_recorder(&mut text, commits, records);
    }
    Ok(HttpResponse::Ok()
        .content_type("text/plain; version=0.0.4")
        .body(text))
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
    state.admit(&req, ADMINS)?;
    let set = (state.registry.reload()).map_err(|e| Problem::reload_failed(e.to_string()))?;
    tracing::info!(models = set.models.len(), "models reloaded");
    Ok(json(&Reloaded {
        models: set
            .models
            .iter()
            .map(|m| summary(m, std::sync::Arc::ptr_eq(m, &set.champion)))
            .collect(),
    }))
}

/// The 405 answer of a route that takes only `allow` (RFC 9110 15.5.6: with an `Allow` header).
pub fn method_not_allowed(allow: &'static str) -> actix_web::Route {
    web::to(move |req: HttpRequest| async move {
        Problem::method_not_allowed(req.method().as_str(), req.path(), allow).response()
    })
}

pub async fn not_found(req: HttpRequest) -> HttpResponse {
    Problem::not_found(req.path()).response()
}
