//! The underwriter's final action on a referred decision: a referral is not the action taken on
//! the application (Regulation B, 12 CFR 1002.9(a)); the underwriter's decision is, and the
//! notice, the fair-lending report and monitoring must see it. Recorded append-only beside the
//! decision (who, when, what), never editing the decision's record.

use super::auth::Role;
use super::problem::Problem;
use super::State;
use crate::artifact::spec::RuleAction;
use crate::artifact::LoadedModel;
use crate::features::{FieldError, InputError};
use crate::records::{ActionTaken, FinalAction, FinalInsert, GivenReason, Record};
use actix_web::{web, HttpRequest, HttpResponse};
use serde_json::{json, Value};
use utoipa::ToSchema;
use validator::{Validate, ValidationError};

const UNDERWRITERS: &[Role] = &[Role::Underwriting];
/// Longest note kept with a final action.
pub const MAX_NOTE: usize = 2000;
/// Longest idempotency key (as for decisions).
const MAX_KEY: usize = 128;

/// `POST /v1/decisions/{id}/final-action` body (documentation: the body is checked field by
/// field by [`check`], so that every fault is named at once).
#[derive(Debug, Clone, ToSchema)]
#[allow(dead_code)]
pub struct FinalActionRequest {
    pub action: ActionTaken,
    /// For a decline, the principal reasons in order (at least one, at most the policy's
    /// `max_reasons`): codes of the model's reason table (a field's reason, or a decline rule's)
    /// or of the lender's manual-review reasons (the artifact's `review_reasons`). A refer
    /// rule's code says why the application was referred, not why it was declined, and is
    /// refused. Empty (or absent) for an approval or a withdrawal.
    #[schema(max_items = 8)]
    pub reasons: Option<Vec<String>>,
    /// The underwriter's note, kept for the file and never put in a notice (at most 2,000
    /// characters).
    #[schema(max_length = 2000)]
    pub note: Option<String>,
    /// The caller's own reference for this request (1 to 128 printable characters), recorded
    /// with the final action. A repeat is recognised by its content: the decision takes one
    /// final action, and the same body again returns it.
    #[schema(min_length = 1, max_length = 128, pattern = "^[!-~]+$")]
    pub idempotency_key: Option<String>,
}

/// A final-action body read and checked: every field's faults, or the parts.
struct Checked {
    action: ActionTaken,
    reasons: Vec<String>,
    note: String,
    idempotency_key: Option<String>,
}

fn fault(
    errors: &mut Vec<FieldError>,
    field: &str,
    rule: &'static str,
    message: impl Into<String>,
) {
    errors.push(FieldError {
        field: field.into(),
        rule,
        message: message.into(),
    });
}

/// [`MAX_NOTE`] and [`MAX_KEY`] as validator takes them.
const NOTE_CHARS: u64 = MAX_NOTE as u64;
const KEY_CHARS: u64 = MAX_KEY as u64;

/// The text rules of a final action, declared once with validator (FinalActionRequest's schema
/// states the same bounds).
#[derive(Validate)]
struct TextRules<'a> {
    #[validate(length(max = NOTE_CHARS))]
    note: Option<&'a str>,
    #[validate(length(min = 1, max = KEY_CHARS), custom(function = "graphic_ascii"))]
    idempotency_key: Option<&'a str>,
}

/// Printable ASCII without spaces (`!` to `~`).
fn graphic_ascii(key: &str) -> Result<(), ValidationError> {
    (key.chars().all(|c| c.is_ascii_graphic()))
        .then_some(())
        .ok_or_else(|| ValidationError::new("pattern"))
}

/// Whether `field` already has a fault.
fn broken_text(errors: &[FieldError], field: &str) -> bool {
    errors.iter().any(|e| e.field == field)
}

/// Reads the body's shape, naming every field at fault. A `null` is the same as absent.
fn check(body: &Value) -> Result<Checked, InputError> {
    let mut errors = Vec::new();
    let Some(object) = body.as_object() else {
        fault(&mut errors, "body", "type", "must be a JSON object");
        return Err(InputError { errors });
    };
    for name in object.keys() {
        if !["action", "reasons", "note", "idempotency_key"].contains(&name.as_str()) {
            fault(
                &mut errors,
                name,
                "unknown",
                "is not a field of a final action",
            );
        }
    }
    let action = match &body["action"] {
        Value::Null => {
            fault(
                &mut errors,
                "action",
                "required",
                "approve, decline or withdrawn",
            );
            None
        }
        Value::String(s) => ActionTaken::from_name(s).or_else(|| {
            fault(
                &mut errors,
                "action",
                "one_of",
                format!("{s:?} is not approve, decline or withdrawn"),
            );
            None
        }),
        _ => {
            fault(
                &mut errors,
                "action",
                "type",
                "must be a string: approve, decline or withdrawn",
            );
            None
        }
    };
    let mut reasons = Vec::new();
    match &body["reasons"] {
        Value::Null => {}
        Value::Array(items) => {
            for (i, item) in items.iter().enumerate() {
                match item.as_str() {
                    Some(code) if reasons.iter().any(|r| r == code) => fault(
                        &mut errors,
                        &format!("reasons[{i}]"),
                        "unique",
                        format!("{code} is given twice"),
                    ),
                    Some(code) => reasons.push(code.to_string()),
                    None => fault(
                        &mut errors,
                        &format!("reasons[{i}]"),
                        "type",
                        "must be a reason code (a string)",
                    ),
                }
            }
        }
        _ => fault(
            &mut errors,
            "reasons",
            "type",
            "must be a list of reason codes",
        ),
    }
    let text = |key: &str| match &body[key] {
        Value::Null => Ok(None),
        Value::String(s) => Ok(Some(s.as_str())),
        _ => Err(()),
    };
    let (note, idempotency_key) = (text("note"), text("idempotency_key"));
    for (name, given) in [("note", &note), ("idempotency_key", &idempotency_key)] {
        if given.is_err() {
            fault(&mut errors, name, "type", "must be a string");
        }
    }
    let rules = TextRules {
        note: note.ok().flatten(),
        idempotency_key: idempotency_key.ok().flatten(),
    };
    if let Err(broken) = rules.validate() {
        let fields = broken.field_errors();
        if fields.contains_key("note") {
            fault(
                &mut errors,
                "note",
                "max_length",
                format!("at most {MAX_NOTE} characters"),
            );
        }
        if fields.contains_key("idempotency_key") {
            fault(
                &mut errors,
                "idempotency_key",
                "pattern",
                format!("1 to {MAX_KEY} printable ASCII characters without spaces"),
            );
        }
    }
    let note = if broken_text(&errors, "note") {
        String::new()
    } else {
        rules.note.unwrap_or_default().to_string()
    };
    let idempotency_key = (!broken_text(&errors, "idempotency_key"))
        .then(|| rules.idempotency_key.map(str::to_string))
        .flatten();
    match (action, reasons.len()) {
        (Some(ActionTaken::Decline), 0)
            if !errors.iter().any(|e| e.field.starts_with("reasons")) =>
        {
            fault(
                &mut errors,
                "reasons",
                "required",
                "a decline states its specific principal reasons (12 CFR 1002.9(b)(2))",
            )
        }
        (Some(ActionTaken::Approve | ActionTaken::Withdrawn), n) if n > 0 => fault(
            &mut errors,
            "reasons",
            "none",
            "only a decline gives reasons",
        ),
        _ => {}
    }
    match action {
        Some(action) if errors.is_empty() => Ok(Checked {
            action,
            reasons,
            note,
            idempotency_key,
        }),
        _ => Err(InputError { errors }),
    }
}

/// Every reason a final decline may give, with where it comes from: the reason table's codes
/// that a field or a decline rule carries, then the manual-review reasons (the checks of
/// [`reasons_of`] read the other way).
pub(super) fn decline_reasons(model: &LoadedModel) -> Vec<(&crate::reasons::Reason, &'static str)> {
    let mut out = Vec::new();
    for (place, reason) in model.reasons.indexed() {
        let by_field = model.schema.fields.iter().any(|f| f.reason == Some(place));
        let by_decline_rule = (model.policy.rules.iter())
            .any(|rule| rule.reason == place && rule.action == RuleAction::Decline);
        if by_field {
            out.push((reason, "model"));
        } else if by_decline_rule {
            out.push((reason, "rule"));
        }
    }
    out.extend(model.review_reasons.iter().map(|r| (r, "review")));
    out
}

/// A decline's reasons against the decision's own model: each code with its text and where it
/// comes from, or every code at fault.
fn reasons_of(model: &LoadedModel, codes: &[String]) -> Result<Vec<GivenReason>, InputError> {
    let mut errors = Vec::new();
    let mut given = Vec::new();
    if codes.len() > model.policy.max_reasons {
        fault(
            &mut errors,
            "reasons",
            "max_reasons",
            format!(
                "at most {} principal reasons (Regulation B comment 9(b)(2)-1: more are not likely helpful)",
                model.policy.max_reasons
            ),
        );
    }
    for (i, code) in codes.iter().enumerate() {
        let at = format!("reasons[{i}]");
        let table = model.reasons.index(code);
        let by_field =
            table.is_some_and(|r| model.schema.fields.iter().any(|f| f.reason == Some(r)));
        let rules: Vec<RuleAction> = (model.policy.rules.iter())
            .filter(|rule| Some(rule.reason) == table)
            .map(|rule| rule.action)
            .collect();
        let review = model.review_reasons.iter().find(|r| &r.code == code);
        let (source, reason) = match table {
            Some(r) if by_field => ("model", &model.reasons[r]),
            Some(r) if rules.contains(&RuleAction::Decline) => ("rule", &model.reasons[r]),
            Some(_) => {
                fault(
                    &mut errors,
                    &at,
                    "refer_rule",
                    format!("{code} is a refer rule's code: it says why the application was referred, not why it was declined; give the specific reason"),
                );
                continue;
            }
            None => match review {
                Some(r) => ("review", r),
                None => {
                    fault(
                        &mut errors,
                        &at,
                        "reason_table",
                        format!("{code} is not in the model's reason table or its review reasons"),
                    );
                    continue;
                }
            },
        };
        given.push(GivenReason {
            code: code.clone(),
            text: reason.text.clone(),
            source: source.into(),
        });
    }
    if errors.is_empty() {
        Ok(given)
    } else {
        Err(InputError { errors })
    }
}

/// Record the final action on a referred decision.
#[utoipa::path(post, path = "/v1/decisions/{id}/final-action", tag = "records",
    request_body = FinalActionRequest,
    params(("id" = String, Path, description = "decision id of a referral")),
    responses(
        (status = 201, description = "Recorded beside the decision: the final action as stored", content_type = "application/json"),
        (status = 200, description = "The same final action was recorded before (header `x-response-from-record: true`)", content_type = "application/json"),
        (status = 400, description = "Malformed JSON", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only underwriting keys may record final actions", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body arrived too slowly", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body larger than the limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Content-Type is not application/json", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such decision, or records are off", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "Not a referral, another final action is recorded, or (for a decline) the decision's model is not loaded", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad action, reasons, note or key, each named with its rule", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn post_final_action(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    let decided_by = state.auth.admit(&req, UNDERWRITERS)?.name;
    let recorder = state.recorder.as_ref().ok_or_else(Problem::records_off)?;
    let store = recorder.store().clone();
    let body = super::body::read_json(
        &req,
        payload,
        state.limits.max_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    let request = check(&body).map_err(Problem::invalid)?;
    let id = id.into_inner();
    let record = look_up(store.clone(), id.clone()).await?;
    if record.outcome != crate::records::Outcome::Refer {
        return Err(Problem::not_a_referral(&id, record.outcome));
    }
    // A decline's reasons come from the decision's own model; an approval or a withdrawal
    // needs none, so it can be recorded after that model was unloaded.
    let reasons = if request.action == ActionTaken::Decline {
        let set = state.registry.current();
        let model = (set.models.iter())
            .find(|m| m.sha256 == record.model_sha256)
            .ok_or_else(|| Problem::model_not_loaded(&record.model_id, &record.model_version))?;
        reasons_of(model, &request.reasons).map_err(Problem::invalid)?
    } else {
        Vec::new()
    };
    // What a repeat must match: the action, reasons and note as read (not the raw bytes).
    let content =
        json!({"action": request.action.name(), "reasons": request.reasons, "note": request.note});
    let action = FinalAction {
        decision_id: record.decision_id.clone(),
        action: request.action,
        reasons: serde_json::to_string(&reasons)
            .map_err(|e| Problem::internal("the final action could not be written").caused_by(e))?,
        note: request.note,
        decided_by,
        decided_at: crate::records::now(),
        idempotency_key: request.idempotency_key,
        body_sha256: crate::artifact::sha256_hex(
            crate::artifact::canonical_json(&content).as_bytes(),
        ),
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
            .map_err(|e| Problem::internal("the final action could not be written").caused_by(e))?;
    let mut response = HttpResponse::build(status);
    if replayed {
        response.insert_header(("x-response-from-record", "true"));
    }
    Ok(response.content_type("application/json").body(body))
}

/// The decision a final action is for.
async fn look_up(
    store: std::sync::Arc<dyn crate::records::Store>,
    id: String,
) -> Result<Record, Problem> {
    let key = id.clone();
    web::block(move || store.get(&key))
        .await
        .map_err(|_| Problem::internal("the store worker stopped"))?
        .map_err(|e| Problem::store_failed(&e))?
        .ok_or_else(|| Problem::unknown_decision(&id))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// What the model summary offers an underwriter is exactly what the final action accepts:
    /// each listed code alone is a valid decline, and every code of the table left out (a refer
    /// rule's) is refused.
    #[test]
    fn the_listed_decline_reasons_are_the_accepted_ones() {
        let model = LoadedModel::from_path(std::path::Path::new("models/fernhill-logistic.json"))
            .expect("the demo model loads");
        let listed: Vec<String> = (decline_reasons(&model).into_iter())
            .map(|(r, _)| r.code.clone())
            .collect();
        for code in &listed {
            let given = reasons_of(&model, std::slice::from_ref(code)).expect("accepted");
            assert_eq!(given[0].code, *code);
        }
        let left_out: Vec<&String> = (model.reasons.reasons.iter())
            .map(|r| &r.code)
            .filter(|c| !listed.contains(c))
            .collect();
        assert_eq!(left_out, ["AMT_LIMIT"], "the demo's one refer rule");
        for code in left_out {
            let refused = reasons_of(&model, std::slice::from_ref(code)).unwrap_err();
            assert_eq!(refused.errors[0].rule, "refer_rule");
        }
        assert!(
            listed.contains(&"MR_DOCS".to_string()),
            "review reasons are listed"
        );
    }
}
