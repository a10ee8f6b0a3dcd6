//! POST /v1/decisions/batch: many applications in one request. Items are decided on the blocking
//! pool, recorded in one group, and reported one by one; a bad item never fails the others.

use super::body::read_bytes;
use super::decisions::{decide_value, DecisionRequest, DECIDERS};
use super::json;
use super::problem::Problem;
use super::{recording, State};
use crate::decide::Decision;
use crate::policy::Outcome;
use actix_web::{web, HttpRequest, HttpResponse};
use serde::de::{DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};
use serde::Serialize;
use serde_json::value::RawValue;
use serde_json::Value;
use utoipa::ToSchema;

#[derive(serde::Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
#[allow(dead_code)]
pub struct BatchRequestDoc {
    /// Decision requests, each as for POST /v1/decisions (at most `--max-batch-items`, 1,000
    /// by default). Each is checked on its own: a bad item gets its own problem in the 200.
    #[schema(max_items = 1000)]
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
    let caller = state.admit(&req, DECIDERS)?;
    let body = read_bytes(
        &req,
        payload,
        state.limits.max_batch_body_bytes,
        state.limits.body_timeout,
    )
    .await?;
    // A full batch is milliseconds of CPU: run it on the blocking pool so this worker keeps
    // reading other requests (and finishes them on shutdown) meanwhile.
    let received_at = crate::records::now();
    let state = state.into_inner();
    let worker = state.clone();
    let decided = web::block(move || {
        let items = batch_items(&body, worker.limits.max_batch_items)?;
        Ok::<_, Problem>(decide_batch(&worker, &items, received_at, &caller.name))
    })
    .await
    .map_err(|_| Problem::internal("the batch worker stopped"))??;
    let request_id = super::request_id_of(&req);
    Ok(json(&batch_response(&state, decided, &request_id).await?))
}

/// Each item in order: decided and among the records to write, decided with records off, or
/// refused with its own problem.
enum Slot {
    Recorded,
    Bare(Box<Decision>),
    Failed(Problem),
}

/// The batch's items as slices of the body (no JSON tree of the whole batch is built), refused
/// while it is read once there are more than `most`: a malformed body is a 400, anything but
/// `{"items": [...]}` a 422.
fn batch_items(body: &[u8], most: usize) -> Result<Vec<&RawValue>, Problem> {
    let mut de = serde_json::Deserializer::from_slice(body);
    let items = (Items { most }.deserialize(&mut de)).and_then(|items| de.end().map(|()| items));
    match items {
        Ok(Ok(items)) => Ok(items),
        Ok(Err(count)) => Err(Problem::batch_too_large(count, most)),
        Err(e) if e.is_syntax() || e.is_eof() => Err(Problem::malformed_json(&e)),
        Err(_) => Err(Problem::invalid(crate::InputError::one(
            "items",
            "required",
            "a batch is {\"items\": [request, ...]} and nothing else",
        ))),
    }
}

/// Reads `{"items": [...]}` keeping each item as its raw text; `Err(n)` once item `n` passes
/// the limit.
struct Items {
    most: usize,
}

impl<'de> DeserializeSeed<'de> for Items {
    type Value = Result<Vec<&'de RawValue>, usize>;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> Visitor<'de> for Items {
    type Value = Result<Vec<&'de RawValue>, usize>;
    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("{\"items\": [...]}")
    }
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Self::Value, A::Error> {
        let mut items = None;
        // Owned: a key may be written with escapes (`"it\u0065ms"`), which cannot be borrowed.
        while let Some(key) = map.next_key::<String>()? {
            if key != "items" || items.is_some() {
                return Err(serde::de::Error::unknown_field(&key, &["items"]));
            }
            items = Some(map.next_value_seed(ItemList { most: self.most })?);
        }
        items.ok_or_else(|| serde::de::Error::missing_field("items"))
    }
}

struct ItemList {
    most: usize,
}

impl<'de> DeserializeSeed<'de> for ItemList {
    type Value = Result<Vec<&'de RawValue>, usize>;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de> Visitor<'de> for ItemList {
    type Value = Result<Vec<&'de RawValue>, usize>;
    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("a list of decision requests")
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<Self::Value, A::Error> {
        let mut items = Vec::new();
        while let Some(item) = seq.next_element::<&RawValue>()? {
            if items.len() == self.most {
                // The rest are counted, not kept.
                let mut count = self.most + 1;
                while seq.next_element::<serde::de::IgnoredAny>()?.is_some() {
                    count += 1;
                }
                return Ok(Err(count));
            }
            items.push(item);
        }
        Ok(Ok(items))
    }
}

/// The items decided, and the records to write for them (in item order). Each item is parsed
/// on its own, so at most one item's JSON tree exists at a time; an item larger than a single
/// decision's body limit is refused unread.
fn decide_batch(
    state: &State,
    items: &[&RawValue],
    received_at: String,
    requested_by: &str,
) -> (Vec<Slot>, Vec<crate::records::Record>) {
    let mut records = Vec::new();
    let slots = (items.iter())
        .map(|raw| {
            if raw.get().len() > state.limits.max_body_bytes {
                return Err(Problem::item_too_large(state.limits.max_body_bytes));
            }
            let item: Value =
                serde_json::from_str(raw.get()).map_err(|e| Problem::malformed_json(&e))?;
            decide_value(state, &item).map(|d| (d, item))
        })
        .map(|decided| match decided {
            Ok((d, item)) if state.recorder.is_some() => match recording::record_for(
                &d.decision,
                d.idempotency_key,
                &item,
                received_at.clone(),
                requested_by,
            ) {
                Ok(record) => {
                    records.push(record);
                    Slot::Recorded
                }
                Err(p) => Slot::Failed(p),
            },
            Ok((d, _)) => Slot::Bare(Box::new(d.decision)),
            Err(p) => Slot::Failed(p),
        })
        .collect();
    (slots, records)
}

/// Records every decided item in one group (committed before anything is sent), then reports
/// each item: its decision as recorded, or its own problem.
async fn batch_response(
    state: &State,
    (slots, records): (Vec<Slot>, Vec<crate::records::Record>),
    request_id: &str,
) -> Result<BatchResponse, Problem> {
    let mut written = match (&state.recorder, records.is_empty()) {
        (Some(recorder), false) => (recorder.record(records, None).await)
            .map_err(|e| Problem::not_recorded(&e))?
            .into_iter(),
        _ => Vec::new().into_iter(),
    };
    let mut response = BatchResponse {
        results: Vec::with_capacity(slots.len()),
        approved: 0,
        referred: 0,
        declined: 0,
        failed: 0,
    };
    for (index, slot) in slots.into_iter().enumerate() {
        let given = match slot {
            Slot::Recorded => {
                let (record, outcome) = (written.next())
                    .ok_or_else(|| Problem::internal("the store gave too few outcomes"))?;
                let model = (record.model_id.clone(), record.model_version.clone());
                recording::settle(record, outcome)
                    .map(|g| (g.body, g.outcome, (!g.replayed).then_some(model)))
            }
            Slot::Bare(d) => (serde_json::to_string(&d))
                .map_err(|e| recording::unwritable(&e))
                .map(|body| {
                    let model = (d.model.id.clone(), d.model.version.clone());
                    (body, d.outcome, Some(model))
                }),
            Slot::Failed(p) => Err(p),
        };
        response.results.push(match given {
            Ok((body, outcome, counted)) => {
                match outcome {
                    Outcome::Approve => response.approved += 1,
                    Outcome::Refer => response.referred += 1,
                    Outcome::Decline => response.declined += 1,
                }
                // New decisions count in the metrics as single ones do; replayed ones do not.
                if let Some((model, version)) = counted {
                    (state.metrics).observe_decision(&model, &version, outcome.name());
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
                // An item's 5xx travels inside the 200, past the middleware: its cause is
                // logged here, once.
                if problem.status >= 500 {
                    let cause = problem
                        .cause
                        .as_deref()
                        .map_or(problem.detail.as_str(), String::as_str);
                    tracing::error!(
                        request_id,
                        item = index,
                        status = problem.status,
                        cause,
                        "batch item failed"
                    );
                }
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
