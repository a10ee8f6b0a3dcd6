//! Deciding one application (POST /v1/decisions), and the steps batches share with it: who may
//! decide, selecting the model, deciding a parsed request, counting the outcome.

use super::auth::Role;
use super::body::read_json;
use super::problem::Problem;
use super::{json, recording, State};
use crate::decide::{decide_envelope, Decision, Envelope};
use crate::policy::Outcome;
use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::Value;
use utoipa::ToSchema;

pub(super) const DECIDERS: &[Role] = &[Role::Scoring];

/// A decision request (documentation of the body; the server reads it as JSON and checks every
/// field against the model's schema). The patterns say what `decide::envelope` checks: no control
/// characters (Unicode category Cc).
#[derive(serde::Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[schema(example = json!({"application_id": "FH-2026-000101", "applicant": {"requested_amount": 12000, "annual_income": 85000, "debt_to_income": 14.5, "revolving_utilization": 22, "months_since_oldest_account": 190, "delinquencies_24m": 0, "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"}}))]
#[allow(dead_code)]
pub struct DecisionRequest {
    /// The lender's id for the application, 1-128 characters, no control characters.
    #[schema(
        example = "FH-2026-000101",
        min_length = 1,
        max_length = 128,
        pattern = "^[^\\u0000-\\u001F\\u007F-\\u009F]*$"
    )]
    application_id: String,
    /// Optional key for safe retries (recorded with the decision once records exist), 1-128
    /// characters, no control characters.
    #[schema(
        min_length = 1,
        max_length = 128,
        pattern = "^[^\\u0000-\\u001F\\u007F-\\u009F]*$"
    )]
    idempotency_key: Option<String>,
    /// Optional model selector; the champion when absent.
    model: Option<ModelSelectorDoc>,
    /// Applicant fields keyed by the model's field names (GET /v1/models/{id} lists them).
    #[schema(value_type = Object, example = json!({"requested_amount": 12000, "annual_income": 85000, "debt_to_income": 14.5, "revolving_utilization": 22, "months_since_oldest_account": 190, "delinquencies_24m": 0, "inquiries_6m": 1, "months_with_employer": 72, "housing": "mortgage", "loan_purpose": "home_improvement"}))]
    applicant: Value,
}

#[derive(serde::Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[allow(dead_code)]
pub struct ModelSelectorDoc {
    #[schema(
        min_length = 1,
        max_length = 64,
        pattern = "^[^\\u0000-\\u001F\\u007F-\\u009F]*$"
    )]
    id: String,
    #[schema(
        min_length = 1,
        max_length = 64,
        pattern = "^[^\\u0000-\\u001F\\u007F-\\u009F]*$"
    )]
    version: Option<String>,
}

/// A decision and the idempotency key its request carried.
pub(super) struct Decided {
    pub decision: Decision,
    pub idempotency_key: Option<String>,
}

/// Decides a batch item: its envelope parsed, then as [`decide_parsed`].
pub(super) fn decide_value(state: &State, request: &Value) -> Result<Decided, Problem> {
    let envelope = Envelope::parse(request).map_err(Problem::invalid)?;
    decide_parsed(state, &envelope)
}

/// Decides a parsed request with the model it selects (the champion when it names none).
pub(super) fn decide_parsed(state: &State, envelope: &Envelope<'_>) -> Result<Decided, Problem> {
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
    let decision = decide_envelope(&model, envelope).map_err(Problem::invalid)?;
    Ok(Decided {
        decision,
        idempotency_key: envelope.idempotency_key.clone(),
    })
}

/// Whether the model a request selects explains by enumerating coalitions (milliseconds).
fn slow_to_explain(state: &State, envelope: &Envelope<'_>) -> bool {
    let set = state.registry.current();
    (set.select(envelope.model.as_ref()))
        .is_some_and(|m| matches!(m.explainer, crate::explain::Explainer::Shapley(_)))
}

pub(super) fn observe(state: &State, decision: &Decision, outcome: Outcome) {
    (state.metrics).observe_decision(&decision.model.id, &decision.model.version, outcome.name());
}

/// Decide one application.
#[utoipa::path(post, path = "/v1/decisions", tag = "decisions", request_body = DecisionRequest,
    responses(
        (status = 200, description = "The decision: probability, score, outcome, reasons and exact contributions, plus `record` (RecordRef: decision_id, decided_at) once committed to the store. A retry with a recorded idempotency_key and the same body returns the stored bytes with header `x-response-from-record: true`", body = Decision,
            links(
                ("GetDecision" = (operation_id = "get_decision", parameters(("id" = "$response.body#/record/decision_id")), description = "The decision as recorded")),
                ("AdverseAction" = (operation_id = "adverse_action", parameters(("id" = "$response.body#/record/decision_id")), description = "Its adverse-action content")),
                ("FinalAction" = (operation_id = "post_final_action", parameters(("id" = "$response.body#/record/decision_id")), description = "An underwriter's final action on a referral")),
            )),
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
    let caller = state.admit(&req, DECIDERS)?;
    let request = read_json(
        &req,
        payload,
        state.limits.max_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    // Parsed once, here; a bad envelope is refused before the records are asked anything.
    let envelope = Envelope::parse(&request).map_err(Problem::invalid)?;
    // A recorded key answers before anything is decided: a retry gets the stored response even
    // if its model has since been unloaded, and a different body is a conflict first.
    let key = envelope.idempotency_key.as_deref();
    if let Some(given) = recording::earlier(&state, &caller.name, key, &request).await? {
        return Ok(HttpResponse::Ok()
            .insert_header(("x-response-from-record", "true"))
            .content_type("application/json")
            .body(given));
    }
    // From here a record is on its way: the recorder may hold its next commit for it.
    let expected = state.recorder.as_ref().map(|r| r.expect());
    // Graph models' explanations take milliseconds: they run on the blocking pool, so a worker
    // keeps reading other requests meanwhile.
    let Decided {
        decision,
        idempotency_key,
    } = if slow_to_explain(&state, &envelope) {
        let (s, e) = (state.clone(), envelope.into_owned());
        web::block(move || decide_parsed(&s, &e))
            .await
            .map_err(|_| Problem::internal("the decision's worker thread failed"))??
    } else {
        decide_parsed(&state, &envelope)?
    };
    let Some(recorder) = &state.recorder else {
        observe(&state, &decision, decision.outcome);
        return Ok(json(&decision));
    };
    let record = recording::record_for(
        &decision,
        idempotency_key,
        &request,
        received_at,
        &caller.name,
    )?;
    let mut written =
        (recorder.record(vec![record], expected).await).map_err(|e| Problem::not_recorded(&e))?;
    let (record, outcome) = written
        .pop()
        .ok_or_else(|| Problem::internal("the store gave no outcome"))?;
    let given = recording::settle(record, outcome)?;
    if !given.replayed {
        observe(&state, &decision, given.outcome);
    }
    let mut response = HttpResponse::Ok();
    if given.replayed {
        response.insert_header(("x-response-from-record", "true"));
    }
    Ok(response.content_type("application/json").body(given.body))
}
