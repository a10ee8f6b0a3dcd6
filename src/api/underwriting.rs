//! The underwriter's final action on a referred decision: a referral is not the action taken on
//! the application (Regulation B, 12 CFR 1002.9(a)); the underwriter's decision is, and the
//! notice, the fair-lending report and monitoring must see it. Recorded append-only beside the
//! decision (who, when, what), never editing the decision's record.

use super::auth::Role;
use super::problem::Problem;
use super::State;
use crate::features::{FieldError, InputError};
use crate::records::{FinalAction, FinalInsert};
use actix_web::{web, HttpRequest, HttpResponse};
use serde::Deserialize;
use serde_json::{json, Value};
use utoipa::ToSchema;

const UNDERWRITERS: &[Role] = &[Role::Underwriting];
/// Longest note kept with a final action.
pub const MAX_NOTE: usize = 2000;

/// The action an underwriter took.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Action {
    Approve,
    Decline,
    /// The applicant withdrew before a decision: no adverse action, as the lender refused
    /// nothing (12 CFR 1002.2(c)(1), cited from memory).
    Withdrawn,
}

impl Action {
    fn name(self) -> &'static str {
        match self {
            Action::Approve => "approve",
            Action::Decline => "decline",
            Action::Withdrawn => "withdrawn",
        }
    }
}

/// `POST /v1/decisions/{id}/final-action` body.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct FinalActionRequest {
    pub action: Action,
    /// For a decline, the principal reasons in order: codes of the model's reason table or the
    /// lender's manual-review reasons (the artifact's `review_reasons`); empty otherwise.
    #[serde(default)]
    pub reasons: Vec<String>,
    /// The underwriter's note (at most 2,000 characters).
    #[serde(default)]
    pub note: String,
    #[serde(default)]
    pub idempotency_key: Option<String>,
}

fn invalid(field: &str, rule: &'static str, message: impl Into<String>) -> Problem {
    Problem::invalid(InputError {
        errors: vec![FieldError {
            field: field.into(),
            rule,
            message: message.into(),
        }],
    })
}

/// Record the final action on a referred decision.
#[utoipa::path(post, path = "/v1/decisions/{id}/final-action", tag = "records",
    request_body = FinalActionRequest,
    params(("id" = String, Path, description = "decision id of a referral")),
    responses(
        (status = 201, description = "Recorded beside the decision: the final action as stored", content_type = "application/json"),
        (status = 200, description = "The same final action was recorded before (header `x-response-from-record: true`)", content_type = "application/json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only underwriting keys may record final actions", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such decision, or records are off", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "Not a referral, another final action is recorded, or the decision's model is not loaded", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad action, reasons or note, each named with its rule", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn post_final_action(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    let header = (req.headers().get("authorization")).and_then(|v| v.to_str().ok());
    let caller = state.auth.caller(header, UNDERWRITERS)?;
    let decided_by = caller.map_or_else(
        || "unauthenticated (--no-auth)".to_string(),
        |k| k.name.clone(),
    );
    let recorder = state.recorder.as_ref().ok_or_else(Problem::records_off)?;
    let store = recorder.store().clone();
    let body = super::body::read_json(
        &req,
        payload,
        state.limits.max_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    let request: FinalActionRequest = serde_path_to_error::deserialize(&body).map_err(|e| {
        let path = e.path().to_string();
        invalid(
            if path == "." { "body" } else { &path },
            "shape",
            e.into_inner().to_string(),
        )
    })?;
    let id = id.into_inner();
    let key = id.clone();
    let lookup = store.clone();
    let record = web::block(move || lookup.get(&key))
        .await
        .map_err(|_| Problem::internal("the store worker stopped"))?
        .map_err(|e| Problem::store_failed(&e))?
        .ok_or_else(|| Problem::unknown_decision(&id))?;
    if record.outcome != "refer" {
        return Err(Problem::not_a_referral(&id, &record.outcome));
    }
    // The reasons come from the decision's own model: its reason table and review reasons.
    let set = state.registry.current();
    let model = (set.models.iter())
        .find(|m| m.sha256 == record.model_sha256)
        .ok_or_else(|| Problem::model_not_loaded(&record.model_id, &record.model_version))?;
    let mut reasons = Vec::new();
    for (i, code) in request.reasons.iter().enumerate() {
        let from_model = model.reasons.reasons.iter().find(|r| &r.code == code);
        let found = from_model.map(|r| (r, "model")).or_else(|| {
            model
                .review_reasons
                .iter()
                .find(|r| &r.code == code)
                .map(|r| (r, "review"))
        });
        let Some((reason, source)) = found else {
            return Err(invalid(
                &format!("reasons[{i}]"),
                "reason_table",
                format!("{code} is not in the model's reason table or its review reasons"),
            ));
        };
        if reasons.iter().any(|r: &Value| r["code"] == *code) {
            return Err(invalid(
                &format!("reasons[{i}]"),
                "unique",
                format!("{code} is given twice"),
            ));
        }
        reasons.push(json!({"code": code, "text": reason.text, "source": source}));
    }
    match (request.action, reasons.len()) {
        (Action::Decline, 0) => {
            return Err(invalid(
                "reasons",
                "required",
                "a decline states its specific principal reasons (12 CFR 1002.9(b)(2))",
            ))
        }
        (Action::Decline, n) if n > model.policy.max_reasons => {
            return Err(invalid(
                "reasons",
                "max_reasons",
                format!("at most {} principal reasons (Regulation B comment 9(b)(2)-1: more are not likely helpful)", model.policy.max_reasons),
            ))
        }
        (Action::Approve | Action::Withdrawn, n) if n > 0 => {
            return Err(invalid("reasons", "none", "only a decline gives reasons"))
        }
        _ => {}
    }
    if request.note.chars().count() > MAX_NOTE {
        return Err(invalid(
            "note",
            "max_length",
            format!("at most {MAX_NOTE} characters"),
        ));
    }
    // What a repeat must match: the body without its idempotency key.
    let mut canonical = body.clone();
    if let Some(o) = canonical.as_object_mut() {
        o.remove("idempotency_key");
    }
    let action = FinalAction {
        decision_id: record.decision_id.clone(),
        action: request.action.name().to_string(),
        reasons: Value::Array(reasons).to_string(),
        note: request.note.clone(),
        decided_by,
        decided_at: crate::records::now(),
        idempotency_key: request.idempotency_key.clone(),
        body_sha256: crate::artifact::sha256_hex(&crate::artifact::canonical_json(&canonical)),
    };
    let to_write = action.clone();
    let written = web::block(move || store.insert_final_action(&to_write))
        .await
        .map_err(|_| Problem::internal("the store worker stopped"))?
        .map_err(|e| Problem::store_failed(&e))?;
    let (stored, status, replayed) = match written {
        FinalInsert::Inserted => (action, actix_web::http::StatusCode::CREATED, false),
        FinalInsert::Existing(earlier) if earlier.body_sha256 == action.body_sha256 => {
            (earlier, actix_web::http::StatusCode::OK, true)
        }
        FinalInsert::Existing(earlier) => {
            return Err(Problem::final_action_recorded(
                &record.decision_id,
                &earlier,
            ))
        }
    };
    let view = stored.view().map_err(|e| Problem::store_failed(&e))?;
    let body =
        serde_json::to_string(&json!({"decision_id": stored.decision_id, "final_action": view}))
            .map_err(|e| Problem::internal(&e.to_string()))?;
    let mut response = HttpResponse::build(status);
    if replayed {
        response.insert_header(("x-response-from-record", "true"));
    }
    Ok(response.content_type("application/json").body(body))
}
