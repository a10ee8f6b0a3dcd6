//! GET /v1/admin/access: the access log of the records (who looked up, searched, exported or
//! reported on which records, when, how many), for administrators. Reading it is logged too.

use super::auth::Role;
use super::compliance::{access, log_access, store_for};
use super::problem::Problem;
use super::State;
use crate::records::{AccessPage, Cursor};
use actix_web::{web, HttpRequest, HttpResponse};
use std::collections::HashMap;

const ADMINS: &[Role] = &[Role::Admin];

/// The access log, oldest first, a page at a time.
#[utoipa::path(get, path = "/v1/admin/access", tag = "operations",
    params(
        ("from" = Option<super::params::TimeParam>, Query, description = "inclusive: RFC 3339 UTC time or a date"),
        ("to" = Option<super::params::TimeParam>, Query, description = "exclusive time, or a date (that whole day included)"),
        ("cursor" = Option<super::params::CursorParam>, Query, description = "next_cursor of the previous page"),
        ("limit" = Option<usize>, Query, minimum = 1, maximum = 500, description = "page size, 1-500 (default 100)"),
    ),
    responses(
        (status = 200, description = "A page of the access log: entries (access_id, at, caller, role, action, target, records, request_id) and next_cursor", content_type = "application/json"),
        (status = 400, description = "A bad parameter", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only admin keys may read the access log", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn get_access(
    state: web::Data<State>,
    req: HttpRequest,
) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, ADMINS)?;
    let params = web::Query::<HashMap<String, String>>::from_query(req.query_string())
        .map_err(|e| Problem::bad_query("query", "form_encoded", e.to_string()))?
        .into_inner();
    let known = ["from", "to", "cursor", "limit"];
    if let Some(unknown) = params.keys().find(|k| !known.contains(&k.as_str())) {
        return Err(Problem::bad_query(
            unknown,
            "known_parameter",
            format!("not a parameter of this route; use {}", known.join(", ")),
        ));
    }
    let time = |name: &str, end: bool, default: &str| match params.get(name) {
        None => Ok(default.to_string()),
        Some(v) => crate::records::normalise_time(v, end).map_err(|_| {
            Problem::bad_query(
                name,
                "rfc3339",
                format!("{v:?} is not an RFC 3339 UTC time or a date"),
            )
        }),
    };
    // "~" sorts after every stored time: no upper bound.
    let (from, to) = (time("from", false, "")?, time("to", true, "~")?);
    let after = match params.get("cursor") {
        None => None,
        Some(c) => Some(Cursor::decode(c).ok_or_else(|| {
            Problem::bad_query("cursor", "cursor", "not a cursor this service gave")
        })?),
    };
    let limit = super::compliance::page_size(&params)?;
    let read = store.clone();
    let mut entries = web::block(move || {
        let after = after
            .as_ref()
            .map(|c| (c.decided_at.as_str(), c.decision_id.as_str()));
        read.access_log(&from, &to, after, limit + 1)
    })
    .await
    .map_err(|_| Problem::internal("the store worker stopped"))?
    .map_err(|e| Problem::store_failed(&e))?;
    let next_cursor = (entries.len() > limit).then(|| {
        entries.truncate(limit);
        let last = &entries[limit - 1];
        Cursor {
            decided_at: last.at.clone(),
            decision_id: last.access_id.clone(),
        }
        .encode()
    });
    let entry = access(
        &caller,
        &req,
        "access_log",
        req.query_string(),
        Some(entries.len() as i64),
    );
    log_access(&store, entry).await?;
    Ok(HttpResponse::Ok().json(AccessPage {
        entries,
        next_cursor,
    }))
}
