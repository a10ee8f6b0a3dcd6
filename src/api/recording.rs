//! Recording a decision before it is sent. The response body is made once, with the record's
//! id and time in it, and those exact bytes are both stored and sent. An idempotency key already
//! recorded gives back the stored bytes when the request is the same, and a 409 when it is not.

use super::problem::Problem;
use crate::decide::Decision;
use crate::records::{ids, Insert, Record};
use serde::Serialize;
use serde_json::Value;

/// Where the decision is recorded, as the response shows it.
#[derive(Serialize, utoipa::ToSchema)]
pub struct RecordRef<'a> {
    /// Look-ups: GET /v1/decisions/{decision_id} and its adverse-action content.
    pub decision_id: &'a str,
    /// When the decision was made (RFC 3339, UTC, microseconds).
    pub decided_at: &'a str,
}

#[derive(Serialize)]
struct Recorded<'a> {
    #[serde(flatten)]
    decision: &'a Decision,
    record: RecordRef<'a>,
}

/// A decision made from `request`, as a record ready to write (response bytes included). A
/// response that cannot be written fails the decision (500): a record never holds empty text.
pub fn record_for(
    decision: &Decision,
    idempotency_key: Option<String>,
    request: &Value,
    received_at: String,
    requested_by: &str,
) -> Result<Record, Problem> {
    let canonical = crate::artifact::canonical_json(request);
    let decision_id = ids::new_decision_id();
    let decided_at = crate::records::now();
    let response = serde_json::to_string(&Recorded {
        decision,
        record: RecordRef {
            decision_id: &decision_id,
            decided_at: &decided_at,
        },
    })
    .map_err(|e| unwritable(&e))?;
    Ok(Record {
        decision_id,
        application_id: decision.application_id.clone(),
        idempotency_key,
        received_at,
        decided_at,
        model_id: decision.model.id.clone(),
        model_version: decision.model.version.clone(),
        model_sha256: decision.model.sha256.clone(),
        plumbline_version: crate::VERSION.to_string(),
        request_sha256: crate::artifact::sha256_hex(canonical.as_bytes()),
        outcome: decision.outcome,
        probability: decision.probability_of_default,
        score: decision.score,
        request: canonical,
        response,
        requested_by: requested_by.to_string(),
        final_action: None,
    })
}

/// A decision whose response could not be written: refused, never recorded half-written.
pub fn unwritable(e: &serde_json::Error) -> Problem {
    Problem::internal(
        "the decision's response could not be written, so it was neither recorded nor given",
    )
    .caused_by(format_args!("serialising a decision failed: {e}"))
}

/// The stored response for a request whose idempotency key (`key`, as its parsed envelope
/// holds it) `requested_by` already used (`None` when it has not, or the service keeps no
/// records); a 409 when that caller used the key for another body. Keys are the caller's own:
/// another caller's never match.
pub async fn earlier(
    state: &super::State,
    requested_by: &str,
    key: Option<&str>,
    request: &Value,
) -> Result<Option<String>, Problem> {
    let (Some(recorder), Some(key)) = (&state.recorder, key) else {
        return Ok(None);
    };
    let (store, key) = (recorder.store().clone(), key.to_string());
    let by = requested_by.to_string();
    let found = actix_web::web::block(move || store.find_key(&by, &key))
        .await
        .map_err(|_| Problem::internal("the store worker stopped"))?
        .map_err(|e| Problem::store_failed(&e))?;
    let Some(existing) = found else {
        return Ok(None);
    };
    let digest = crate::artifact::sha256_hex(crate::artifact::canonical_json(request).as_bytes());
    if existing.request_sha256 == digest {
        Ok(Some(existing.response))
    } else {
        Err(Problem::idempotency_conflict(
            existing.idempotency_key.as_deref().unwrap_or_default(),
            &existing.decision_id,
        ))
    }
}

/// What is sent for a written record.
pub struct Given {
    pub body: String,
    pub outcome: crate::records::Outcome,
    /// The stored response of an earlier identical request (nothing new was written).
    pub replayed: bool,
}

/// The response for `record` once the store has answered.
pub fn settle(
    record: Record,
    outcome: Result<Insert, crate::records::StoreError>,
) -> Result<Given, Problem> {
    match outcome.map_err(|e| Problem::not_recorded(&e))? {
        Insert::Inserted => Ok(Given {
            body: record.response,
            outcome: record.outcome,
            replayed: false,
        }),
        Insert::Existing(existing) if existing.request_sha256 == record.request_sha256 => {
            Ok(Given {
                body: existing.response,
                outcome: existing.outcome,
                replayed: true,
            })
        }
        Insert::Existing(existing) => Err(Problem::idempotency_conflict(
            existing.idempotency_key.as_deref().unwrap_or_default(),
            &existing.decision_id,
        )),
    }
}
