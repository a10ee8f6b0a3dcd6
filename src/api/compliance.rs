//! Compliance look-ups over the decision records (review role): one decision as recorded, its
//! adverse-action content, a paginated search, and a streamed export. Everything is read from
//! the record, never recomputed.

use super::auth::Caller;
use super::auth::Role;
use super::problem::Problem;
use super::State;
use crate::records::{export::Format, notice, Access, Query, Record, Store};
use actix_web::web::{self, Bytes};
use actix_web::{HttpRequest, HttpResponse};
use serde::Serialize;
use std::collections::HashMap;
use std::sync::Arc;
use utoipa::ToSchema;

const REVIEWERS: &[Role] = &[Role::Review];
/// One decision, and the search, may also be read by an underwriter settling referrals.
const READERS_OF_ONE: &[Role] = &[Role::Review, Role::Underwriting];
/// Page size when `limit` is not given.
pub const DEFAULT_PAGE: usize = 100;
/// Export chunks are flushed at about this size.
const CHUNK_BYTES: usize = 64 * 1024;

/// How long an export waits for a client that stopped reading before it ends the export.
pub const EXPORT_STALL: std::time::Duration = std::time::Duration::from_secs(60);

/// The store, for a caller whose role is in `roles`, and who that caller is.
pub(super) fn store_for(
    state: &State,
    req: &HttpRequest,
    roles: &[Role],
) -> Result<(Arc<dyn Store>, Caller), Problem> {
    let caller = state.auth.admit(req, roles)?;
    let recorder = state.recorder.as_ref().ok_or_else(Problem::records_off)?;
    Ok((recorder.store().clone(), caller))
}

/// One read of the records, for the access log.
pub(super) fn access(
    caller: &Caller,
    req: &HttpRequest,
    action: &str,
    target: &str,
    records: Option<i64>,
) -> Access {
    Access {
        access_id: crate::records::ids::new_decision_id(),
        at: crate::records::now(),
        caller: caller.name.clone(),
        role: caller.role_name().to_string(),
        action: action.to_string(),
        target: target.to_string(),
        records,
        request_id: super::request_id_of(req),
    }
}

/// Writes `entry` to the access log before anything read is returned: a read that cannot be
/// logged is not given.
pub(super) async fn log_access(store: &Arc<dyn Store>, entry: Access) -> Result<(), Problem> {
    let store = store.clone();
    blocking(move || store.log_access(&entry)).await
}

pub(super) async fn blocking<T: Send + 'static>(
    f: impl FnOnce() -> Result<T, crate::records::StoreError> + Send + 'static,
) -> Result<T, Problem> {
    web::block(f)
        .await
        .map_err(|_| Problem::internal("the store worker stopped"))?
        .map_err(|e| Problem::store_failed(&e))
}

/// The record of decision `id` for a reader (404 when none is recorded), the read logged as
/// `action`.
async fn recorded(
    state: &State,
    req: &HttpRequest,
    id: &str,
    roles: &[Role],
    action: &str,
) -> Result<Record, Problem> {
    let (store, caller) = store_for(state, req, roles)?;
    let key = id.to_string();
    let read = store.clone();
    let found = blocking(move || read.get(&key)).await?;
    let entry = access(&caller, req, action, id, Some(i64::from(found.is_some())));
    log_access(&store, entry).await?;
    found.ok_or_else(|| Problem::unknown_decision(id))
}

/// One decision exactly as recorded: request, response, model and times.
#[utoipa::path(get, path = "/v1/decisions/{id}", tag = "records",
    params(("id" = String, Path, description = "decision id (the response's record.decision_id)")),
    responses(
        (status = 200, description = "The record; `request` and `response` are the stored JSON, byte for byte", content_type = "application/json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review (or underwriting) keys may read a record", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such decision, or records are off", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn get_decision(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
) -> Result<HttpResponse, Problem> {
    let id = id.into_inner();
    let record = recorded(&state, &req, &id, READERS_OF_ONE, "get").await?;
    let body = record.view().map_err(|e| Problem::store_failed(&e))?;
    Ok(HttpResponse::Ok()
        .content_type("application/json")
        .body(body))
}

/// Notice-ready adverse-action content, read from the record.
#[utoipa::path(get, path = "/v1/decisions/{id}/adverse-action", tag = "records",
    params(("id" = String, Path, description = "decision id")),
    responses(
        (status = 200, description = "Principal reasons in order with their text, decision date, score and key factors, model version", content_type = "application/json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may read records", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such decision", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "No adverse action: the decision was an approval, a referral approved on review, or a withdrawn application", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn adverse_action(
    state: web::Data<State>,
    req: HttpRequest,
    id: web::Path<String>,
) -> Result<HttpResponse, Problem> {
    let id = id.into_inner();
    let record = recorded(&state, &req, &id, REVIEWERS, "adverse_action").await?;
    match notice::adverse_action(&record) {
        Ok(n) => Ok(HttpResponse::Ok().json(n)),
        Err(notice::NoNotice::Approved) => Err(Problem::no_adverse_action(&id)),
        Err(notice::NoNotice::ApprovedOnReview) => Err(Problem::no_adverse_action_because(
            &id,
            "the referral was approved by an underwriter",
        )),
        Err(notice::NoNotice::Withdrawn) => Err(Problem::no_adverse_action_because(
            &id,
            "the applicant withdrew: the lender refused nothing, so there is no adverse action to give notice of (12 CFR 1002.2(c)(1)(i))",
        )),
        Err(notice::NoNotice::Damaged(e)) => Err(Problem::store_failed(&e)),
    }
}

/// The filters of a query string; `extra` lists further parameters the route reads itself.
/// The page size of the records routes: its rule declared once, with the same bounds as the
/// OpenAPI parameter (`minimum = 1, maximum = 500`).
#[derive(validator::Validate)]
struct PageSize {
    #[validate(range(min = 1, max = crate::records::MAX_PAGE))]
    limit: usize,
}

/// `limit` from the query (default [`DEFAULT_PAGE`]), or a 400 naming it.
pub(super) fn page_size(params: &HashMap<String, String>) -> Result<usize, Problem> {
    use validator::Validate;
    let Some(text) = params.get("limit") else {
        return Ok(DEFAULT_PAGE);
    };
    let page = (text.parse().ok()).map(|limit| PageSize { limit });
    match page {
        Some(p) if p.validate().is_ok() => Ok(p.limit),
        _ => Err(Problem::bad_query(
            "limit",
            "range",
            format!("a whole number from 1 to {}", crate::records::MAX_PAGE),
        )),
    }
}

/// Unknown parameters are named in a 400 rather than ignored.
pub(super) fn parse_query(
    req: &HttpRequest,
    extra: &[&str],
) -> Result<(Query, HashMap<String, String>), Problem> {
    parse_query_of(req, &[crate::records::QUERY_PARAMETERS, extra].concat())
}

/// As [`parse_query`] for a route that takes exactly the parameters `known` (a subset of the
/// records filters, plus its own).
pub(super) fn parse_query_of(
    req: &HttpRequest,
    known: &[&str],
) -> Result<(Query, HashMap<String, String>), Problem> {
    let params = web::Query::<HashMap<String, String>>::from_query(req.query_string())
        .map_err(|e| Problem::bad_query("query", "form_encoded", e.to_string()))?
        .into_inner();
    if let Some(unknown) = params.keys().find(|k| !known.contains(&k.as_str())) {
        return Err(Problem::bad_query(
            unknown,
            "known_parameter",
            format!("not a parameter of this route; use {}", known.join(", ")),
        ));
    }
    let query = crate::records::parse_query(|name| params.get(name).map(String::as_str))
        .map_err(|e| Problem::bad_query(&e.param, e.rule, e.message))?;
    Ok((query, params))
}

/// One search hit: enough to find the decision; GET /v1/decisions/{id} has the rest.
#[derive(Serialize, ToSchema)]
pub struct DecisionSummary {
    pub decision_id: String,
    pub application_id: String,
    pub decided_at: String,
    pub outcome: String,
    pub probability_of_default: f64,
    pub score: i64,
    pub model_id: String,
    pub model_version: String,
    pub reason_codes: Vec<String>,
    /// The underwriter's final action on a referral, if one is recorded.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub final_action: Option<FinalSummary>,
}

#[derive(Serialize, ToSchema)]
pub struct FinalSummary {
    pub action: crate::records::ActionTaken,
    pub decided_at: String,
    /// The name of the key that recorded it.
    pub decided_by: String,
}

#[derive(Serialize, ToSchema)]
pub struct SearchPage {
    /// Oldest first.
    pub decisions: Vec<DecisionSummary>,
    /// Pass as `cursor` for the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// Search recorded decisions by application id, time range, outcome and model, a page at a time.
#[utoipa::path(get, path = "/v1/decisions", tag = "records",
    params(
        ("application_id" = Option<String>, Query, description = "the lender's application id"),
        ("from" = Option<super::params::TimeParam>, Query, description = "inclusive: RFC 3339 UTC time or a date"),
        ("to" = Option<super::params::TimeParam>, Query, description = "exclusive time, or a date (that whole day included)"),
        ("outcome" = Option<super::params::OutcomeParam>, Query, description = "approve, refer or decline"),
        ("model_id" = Option<String>, Query, description = "model id"),
        ("model_version" = Option<String>, Query, description = "model version"),
        ("final_action" = Option<super::params::FinalActionParam>, Query, description = "pending (referred, none recorded), recorded, approve, decline or withdrawn"),
        ("cursor" = Option<super::params::CursorParam>, Query, description = "next_cursor of the previous page"),
        ("limit" = Option<usize>, Query, minimum = 1, maximum = 500, description = "page size, 1-500 (default 100)"),
    ),
    responses(
        (status = 200, description = "A page of decisions, oldest first", body = SearchPage),
        (status = 400, description = "A bad parameter: malformed cursor, time, or an empty range", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review and underwriting keys may search records", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn search(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    // Underwriters search too: `final_action=pending` is their work queue.
    let (store, caller) = store_for(&state, &req, READERS_OF_ONE)?;
    let (query, params) = parse_query(&req, &["limit"])?;
    let limit = page_size(&params)?;
    let read = store.clone();
    let page = blocking(move || read.search(&query, limit)).await?;
    let entry = access(
        &caller,
        &req,
        "search",
        req.query_string(),
        Some(page.records.len() as i64),
    );
    log_access(&store, entry).await?;
    let body = SearchPage {
        decisions: page
            .records
            .iter()
            .map(|r| DecisionSummary {
                decision_id: r.decision_id.clone(),
                application_id: r.application_id.clone(),
                decided_at: r.decided_at.clone(),
                outcome: r.outcome.name().to_string(),
                probability_of_default: r.probability,
                score: r.score,
                model_id: r.model_id.clone(),
                model_version: r.model_version.clone(),
                reason_codes: crate::records::export::reason_codes(r),
                final_action: r.final_action.as_ref().map(|f| FinalSummary {
                    action: f.action,
                    decided_at: f.decided_at.clone(),
                    decided_by: f.decided_by.clone(),
                }),
            })
            .collect(),
        next_cursor: page.next.map(|c| c.encode()),
    };
    Ok(HttpResponse::Ok().json(body))
}

/// Every decision in a range as JSON lines (full records) or CSV (summaries), streamed as read.
#[utoipa::path(get, path = "/v1/decisions/export", tag = "records",
    params(
        ("format" = Option<super::params::ExportFormat>, Query, description = "jsonl (default) or csv"),
        ("from" = Option<super::params::TimeParam>, Query, description = "inclusive: RFC 3339 UTC time or a date"),
        ("to" = Option<super::params::TimeParam>, Query, description = "exclusive time, or a date (that whole day included)"),
        ("application_id" = Option<String>, Query, description = "the lender's application id"),
        ("outcome" = Option<super::params::OutcomeParam>, Query, description = "approve, refer or decline"),
        ("model_id" = Option<String>, Query, description = "model id"),
        ("model_version" = Option<String>, Query, description = "model version"),
        ("final_action" = Option<super::params::FinalActionParam>, Query, description = "pending (referred, none recorded), recorded, approve, decline or withdrawn"),
    ),
    responses(
        (status = 200, description = "Records oldest first, streamed: JSON lines of full records, or CSV summaries (`format=csv`)", content(
            (String = "application/x-ndjson"),
            (String = "text/csv"),
        )),
        (status = 400, description = "A bad parameter", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may read records", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports and exports as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
    ),
    security(("api_key" = [])))]
pub async fn export(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, REVIEWERS)?;
    let (query, params) = parse_query(&req, &["format"])?;
    let slot = state.report_slot()?;
    let format = match params.get("format") {
        None => Format::JsonLines,
        Some(f) => Format::parse(f)
            .ok_or_else(|| Problem::bad_query("format", "one_of", "jsonl or csv"))?,
    };
    // The export is logged as it starts (a read cut short still leaves its trace) and again
    // with the number of records sent once it ends.
    let filter = req.query_string().to_string();
    log_access(
        &store,
        access(&caller, &req, "export_started", &filter, None),
    )
    .await?;
    let finished = access(&caller, &req, "export", &filter, None);
    // A reader thread sends chunks through a small bounded channel: memory stays bounded
    // whatever the range; a client that goes away, or stops reading for EXPORT_STALL, ends it.
    let (tx, rx) = tokio::sync::mpsc::channel::<Result<Bytes, String>>(8);
    std::thread::spawn(move || {
        let _slot = slot;
        let mut chunk = String::from(format.header().unwrap_or_default());
        let mut failed = None;
        let result = store.export(&query, &mut |r| {
            match format.line(r) {
                Ok(line) => chunk.push_str(&line),
                Err(e) => {
                    failed = Some(e.to_string());
                    return false;
                }
            }
            if chunk.len() >= CHUNK_BYTES {
                let full = std::mem::take(&mut chunk);
                return send_within(&tx, Ok(Bytes::from(full)), EXPORT_STALL);
            }
            true
        });
        if let Ok(sent) = &result {
            let entry = Access {
                records: Some(*sent as i64),
                ..finished
            };
            if let Err(e) = store.log_access(&entry) {
                tracing::error!(error = %e, "an export's end could not be logged");
            }
        }
        let end = match (result, failed) {
            (Err(e), _) => Err(e.to_string()),
            (_, Some(e)) => Err(e),
            (Ok(_), None) => Ok(Bytes::from(chunk)),
        };
        if let Err(e) = &end {
            tracing::error!(error = %e, "export stopped");
        }
        send_within(&tx, end, EXPORT_STALL);
    });
    let stream = futures_util::stream::unfold(rx, |mut rx| async move {
        let item = rx.recv().await?;
        Some((item.map_err(actix_web::error::ErrorInternalServerError), rx))
    });
    let ext = match format {
        Format::JsonLines => "jsonl",
        Format::Csv => "csv",
    };
    Ok(HttpResponse::Ok()
        .content_type(format.content_type())
        .insert_header((
            "content-disposition",
            format!("attachment; filename=\"decisions.{ext}\""),
        ))
        .streaming(stream))
}

/// Hands `item` to the response stream, waiting at most `stall` for a client that stopped
/// reading; false when the client is gone or stalled (the export then ends).
fn send_within<T>(tx: &tokio::sync::mpsc::Sender<T>, item: T, stall: std::time::Duration) -> bool {
    use tokio::sync::mpsc::error::TrySendError;
    let until = std::time::Instant::now() + stall;
    let mut item = item;
    loop {
        match tx.try_send(item) {
            Ok(()) => return true,
            Err(TrySendError::Closed(_)) => return false,
            Err(TrySendError::Full(back)) if std::time::Instant::now() < until => {
                item = back;
                std::thread::sleep(std::time::Duration::from_millis(20));
            }
            Err(TrySendError::Full(_)) => {
                tracing::warn!(
                    seconds = stall.as_secs(),
                    "an export's client stopped reading; the export ends"
                );
                return false;
            }
        }
    }
}
