//! POST /v1/outcomes (review role): observed outcomes of decided applications, as CSV, a JSON
//! array or JSON lines, loaded as they arrive (one group of rows in memory at a time) and
//! answered with every row accounted for. The load is written to the access log.

use super::auth::Role;
use super::compliance::{access, log_access, store_for};
use super::problem::Problem;
use super::State;
use crate::outcomes::{self, Format, LoadError, LoadSummary};
use actix_web::{web, HttpRequest, HttpResponse};
use std::sync::{Arc, Mutex};

const LOADERS: &[Role] = &[Role::Review];
/// The media types a load is read from.
const MEDIA: &[&str] = &["text/csv", "application/json", "application/x-ndjson"];
/// How much longer than a decision body an upload may take to arrive and be written (the
/// writes of a large file pace how fast it is read).
const UPLOAD_TIME: u32 = 60;

/// A CSV or JSON-lines file of outcomes, sent as it is (the document calls it binary, as
/// OpenAPI 3.1 writes a file upload, so that client generators send the bytes untouched).
#[derive(utoipa::ToSchema)]
#[schema(value_type = String, format = Binary)]
pub struct OutcomesFile(#[allow(dead_code)] Vec<u8>);

/// What had been loaded when a load stopped, for the problem's detail.
fn so_far(s: &LoadSummary) -> String {
    format!(
        "of the {} rows read before it: {} stored, {} duplicates, {} conflicts, {} unknown applications, {} bad rows; sending the whole file again is safe (stored rows then count as duplicates)",
        s.rows, s.stored, s.duplicates, s.conflicts, s.unknown_applications, s.bad_rows
    )
}

/// Observed outcomes (whether each application went on to default), loaded append-only.
#[utoipa::path(post, path = "/v1/outcomes", tag = "monitoring",
    request_body(description = "Rows of `application_id`, `defaulted` (0 or 1) and `observed_at` (RFC 3339 UTC or a date): CSV with a header line (other columns are ignored and named), a JSON array of objects, or JSON lines (application/x-ndjson). Up to the upload limit (64 MiB by default), read as it arrives; one outcome per application, never updated.",
        content(
            (OutcomesFile = "text/csv", example = "application_id,defaulted,observed_at\nA-1001,0,2027-06-30\nA-1002,1,2027-04-12\n"),
            (Vec<Object> = "application/json"),
            (OutcomesFile = "application/x-ndjson"),
        )),
    responses(
        (status = 200, description = "Every row accounted for: stored, duplicate (the same outcome is stored), conflict (a different one is stored and kept), unknown application (no decision recorded), or bad (named with its field and rule); the first 100 rows not stored are listed", body = LoadSummary),
        (status = 400, description = "The CSV header lacks a column, or the text stops being CSV or JSON at a row; rows before it are kept, as the detail counts", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may load outcomes", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "The service keeps no records", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The body did not arrive in time", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Larger than the upload limit; rows before the limit are kept", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not text/csv, application/json or application/x-ndjson", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports, exports and loads as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
        (status = 503, description = "The store could not be written; rows before the fault are kept, as the detail counts", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn post_outcomes(
    state: web::Data<State>,
    req: HttpRequest,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, LOADERS)?;
    if !req.query_string().is_empty() {
        return Err(Problem::bad_query(
            req.query_string()
                .split(['=', '&'])
                .next()
                .unwrap_or("query"),
            "known_parameter",
            "this route takes no parameters",
        ));
    }
    let media = (req.headers().get("content-type"))
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.split(';').next())
        .map(str::trim)
        .unwrap_or("");
    // Unknown types are refused with 415 by the body reader, before anything is read.
    let format = Format::from_media_type(media).unwrap_or(Format::Json);
    let slot = state.report_slot()?;
    let write = store.clone();
    let by = caller.name.clone();
    // The summary as of the last group written: what a body cut short (too large, too slow)
    // still stored, since then the body reader's own problem is the answer.
    let kept = Arc::new(Mutex::new(LoadSummary::default()));
    let seen = kept.clone();
    let loaded = super::body::parse_streamed(
        &req,
        payload,
        (
            state.limits.max_upload_bytes,
            state.limits.body_timeout * UPLOAD_TIME,
        ),
        MEDIA,
        move |body| {
            let _slot = slot;
            Ok(outcomes::load(body, format, &*write, &by, &mut |s| {
                if let Ok(mut k) = seen.lock() {
                    *k = s.clone();
                }
            }))
        },
    )
    .await;
    let (summary, problem) = match loaded {
        Ok(Ok(summary)) => (summary, None),
        Ok(Err(e)) => match e {
            LoadError::Header { rule, message } => (
                LoadSummary::default(),
                Some(Problem::bad_upload("header", rule, message)),
            ),
            LoadError::Syntax {
                row,
                message,
                so_far: s,
            } => {
                let detail = format!("{message}; {}", so_far(&s));
                let p = Problem::bad_upload(&format!("row {row}"), format.rule(), detail);
                (*s, Some(p))
            }
            LoadError::Store { error, so_far: s } => {
                let mut p = Problem::store_failed(&error);
                p.detail = format!("{}; {}", p.detail, so_far(&s));
                (*s, Some(p))
            }
        },
        Err(mut p) => {
            let s = kept.lock().map(|k| k.clone()).unwrap_or_default();
            if s.rows > 0 {
                p.detail = format!("{}; {}", p.detail, so_far(&s));
            }
            (s, Some(p))
        }
    };
    // Every load that wrote anything is in the access log, whether it ended well or not.
    if problem.is_none() || summary.stored > 0 {
        let entry = access(
            &caller,
            &req,
            "outcomes_loaded",
            &format!("{} rows", summary.rows),
            Some(summary.stored as i64),
        );
        log_access(&store, entry).await?;
    }
    match problem {
        Some(p) => Err(p),
        None => Ok(super::json(&summary)),
    }
}
