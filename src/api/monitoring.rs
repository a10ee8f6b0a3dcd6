//! GET /v1/monitoring/stability and /v1/monitoring/reasons (review role): population stability
//! of a loaded model's recorded decisions against its development bins, and reason trends among
//! declines and referrals by period, as JSON (or CSV) or a printable page.
//! The records stream past a tally on the blocking pool (memory holds one count per bin), the
//! read is written to the access log, and the `plumbline_stability_psi` gauges take the result.

use super::auth::Caller;
use super::auth::Role;
use super::compliance::{access, blocking, log_access, parse_query_of, store_for};
use super::problem::Problem;
use super::State;
use crate::monitor::{
    html, BackTest, BackTestTally, Period, ReasonTrends, Stability, StabilityTally, TrendTally,
};
use crate::records::{Query, Store, StoreError};
use actix_web::{web, HttpRequest, HttpResponse};
use std::collections::HashMap;
use std::sync::Arc;

const REVIEWERS: &[Role] = &[Role::Review];
/// The records filters the monitoring routes take (the others do not apply to them).
const FILTERS: [&str; 4] = ["model_id", "model_version", "from", "to"];

/// The query of a monitoring route: the records filters it takes plus `extra`, unknown ones named
/// in a 400, and the model id it requires.
fn model_query(
    req: &HttpRequest,
    extra: &[&str],
) -> Result<(Query, HashMap<String, String>, String), Problem> {
    let (query, params) = parse_query_of(req, &[&FILTERS[..], extra].concat())?;
    let Some(model_id) = query.model_id.clone() else {
        return Err(Problem::bad_query(
            "model_id",
            "required",
            "the model whose decisions are read",
        ));
    };
    Ok((query, params, model_id))
}

/// `read` (the records of `query`, or its decisions with their outcomes, streamed into the
/// tally) on the blocking pool, one report place held, then the read written to the access
/// log: the tally, whatever it counted.
async fn tally_records<T: Send + 'static>(
    state: &State,
    req: &HttpRequest,
    (store, caller): (&Arc<dyn Store>, &Caller),
    query: Query,
    action: &str,
    mut tally: T,
    read: fn(&dyn Store, &Query, &mut T) -> Result<u64, StoreError>,
) -> Result<T, Problem> {
    let slot = state.report_slot()?;
    let store_read = store.clone();
    let (tally, counted) = blocking(move || {
        let _slot = slot;
        let n = read(&*store_read, &query, &mut tally)?;
        Ok((tally, n))
    })
    .await?;
    let entry = access(
        caller,
        req,
        action,
        req.query_string(),
        Some(counted as i64),
    );
    log_access(store, entry).await?;
    Ok(tally)
}

/// The loaded model of this id (and version, when the query names one).
fn loaded_model(
    state: &State,
    query: &Query,
    model_id: &str,
) -> Result<Arc<crate::artifact::LoadedModel>, Problem> {
    let set = state.registry.current();
    let found = (set.models.iter()).find(|m| {
        m.identity.model_id == model_id
            && (query.model_version.as_ref()).is_none_or(|v| *v == m.identity.version)
    });
    found.cloned().ok_or_else(|| {
        let what = match &query.model_version {
            Some(v) => format!("{model_id} version {v}"),
            None => model_id.to_string(),
        };
        Problem::unknown_model(&what)
    })
}

/// `json` (false) or `html` (true) from the `format` parameter.
fn html_wanted(params: &HashMap<String, String>) -> Result<bool, Problem> {
    match params.get("format").map(String::as_str) {
        None | Some("json") => Ok(false),
        Some("html") => Ok(true),
        Some(_) => Err(Problem::bad_query("format", "one_of", "json or html")),
    }
}

/// Population stability of the score and every field.
#[utoipa::path(get, path = "/v1/monitoring/stability", tag = "monitoring",
    params(
        ("model_id" = String, Query, description = "The loaded model whose decisions are read (its development bins are the baseline)"),
        ("model_version" = Option<String>, Query, description = "Its version (default: the loaded one with that id)"),
        ("from" = Option<super::params::TimeParam>, Query, description = "Decided at or after (RFC 3339 UTC, or a date)"),
        ("to" = Option<super::params::TimeParam>, Query, description = "Decided before (a date includes that whole day)"),
        ("format" = Option<super::params::ReportFormat>, Query, description = "json (default) or html"),
    ),
    responses(
        (status = 200, description = "PSI of the score and of every field with its band (below 0.10 stable, 0.10 to 0.25 watch, above 0.25 act: common practice), the missing-share shift and the bins; or the same as a printable HTML page with SVG charts", content((Stability = "application/json"), (String = "text/html"))),
        (status = 400, description = "A bad or unknown parameter, or model_id missing", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may read monitoring", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "The model is not loaded, or the service keeps no records", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The artifact carries no development bins, or no decision of the model is recorded in the range", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports and exports as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
        (status = 503, description = "The store could not be read", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn stability(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, REVIEWERS)?;
    let (mut query, params, model_id) = model_query(&req, &["format"])?;
    let html_page = html_wanted(&params)?;
    let model = loaded_model(&state, &query, &model_id)?;
    let version = model.identity.version.clone();
    let Some(dev) = model.stability.clone() else {
        return Err(Problem::no_development_bins(&model_id, &version));
    };
    query.model_version = Some(version.clone());
    let range = (query.from.clone(), query.to.clone());
    let tally = StabilityTally::new(&dev);
    let tally = tally_records(
        &state,
        &req,
        (&store, &caller),
        query,
        "stability",
        tally,
        |store, query, tally| {
            store.export(query, &mut |r| {
                tally.add_record(r);
                true
            })
        },
    )
    .await?;
    let report = tally.finish((&model_id, &version), range);
    if report.decisions == 0 {
        // Every share would be zero and every index enormous: no report, and no gauge moved.
        return Err(Problem::no_decisions(&model_id, &version));
    }
    let psi: Vec<(String, f64)> = (report.distributions.iter())
        .map(|d| (d.name.clone(), d.psi))
        .collect();
    state.metrics.observe_stability(&model_id, &version, &psi);
    if html_page {
        return Ok(HttpResponse::Ok()
            .content_type("text/html; charset=utf-8")
            .body(html::page(&report)));
    }
    Ok(super::json(&report))
}

/// How often each reason code was a principal reason among declines and referrals, by period.
#[utoipa::path(get, path = "/v1/monitoring/reasons", tag = "monitoring",
    params(
        ("model_id" = String, Query, description = "The model whose decisions are read"),
        ("model_version" = Option<String>, Query, description = "One version only (default: every version, each with its own periods)"),
        ("from" = Option<super::params::TimeParam>, Query, description = "Decided at or after (RFC 3339 UTC, or a date)"),
        ("to" = Option<super::params::TimeParam>, Query, description = "Decided before (a date includes that whole day)"),
        ("period" = Option<String>, Query, description = "week (ISO 8601) or month (default), UTC"),
        ("format" = Option<String>, Query, description = "json (default), csv or html"),
    ),
    responses(
        (status = 200, description = "Per period and model version: declines, referrals, and each code's count, share and change in share against the version's previous period; or the same as CSV lines or a printable page with a chart per code", content((ReasonTrends = "application/json"), (String = "text/csv"), (String = "text/html"))),
        (status = 400, description = "A bad or unknown parameter, or model_id missing", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may read monitoring", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "The service keeps no records", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports and exports as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
        (status = 503, description = "The store could not be read", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn reasons(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, REVIEWERS)?;
    let (query, params, model_id) = model_query(&req, &["format", "period"])?;
    let format = params.get("format").map_or("json", String::as_str);
    if !matches!(format, "json" | "csv" | "html") {
        return Err(Problem::bad_query("format", "one_of", "json, csv or html"));
    }
    let period = match params.get("period") {
        None => Period::Month,
        Some(p) => Period::from_name(p)
            .ok_or_else(|| Problem::bad_query("period", "one_of", "week or month"))?,
    };
    let range = (query.from.clone(), query.to.clone());
    let tally = TrendTally::new(period);
    let tally = tally_records(
        &state,
        &req,
        (&store, &caller),
        query,
        "reason_trends",
        tally,
        |store, query, tally| {
            store.export(query, &mut |r| {
                tally.add_record(r);
                true
            })
        },
    )
    .await?;
    let report = tally.finish(&model_id, range);
    Ok(match format {
        "csv" => HttpResponse::Ok()
            .content_type("text/csv; charset=utf-8")
            .body(report.csv()),
        "html" => HttpResponse::Ok()
            .content_type("text/html; charset=utf-8")
            .body(html::trends_page(&report)),
        _ => super::json(&report),
    })
}

/// Back-testing: the recorded probabilities against the observed outcomes.
#[utoipa::path(get, path = "/v1/monitoring/outcomes", tag = "monitoring",
    params(
        ("model_id" = String, Query, description = "The loaded model whose decisions are read (its score scale sets the bands)"),
        ("model_version" = Option<String>, Query, description = "Its version (default: the loaded one with that id)"),
        ("from" = Option<super::params::TimeParam>, Query, description = "Decided at or after (RFC 3339 UTC, or a date)"),
        ("to" = Option<super::params::TimeParam>, Query, description = "Decided before (a date includes that whole day)"),
        ("format" = Option<super::params::ReportFormat>, Query, description = "json (default) or html"),
    ),
    responses(
        (status = 200, description = "Over the decisions in the range with an observed outcome (each its application's latest under the model): AUC, Gini and KS, the Brier score; calibration by score band, by probability decile and by months from decision to observation, each band with its expected and observed default rates, the one-sided binomial test and the Jeffreys 95% interval, and a rating (a band with fewer than 5 defaults observed and expected is not rated: common practice); the default rate by decision outcome and final action. Or the same as a printable HTML page with SVG charts", content((BackTest = "application/json"), (String = "text/html"))),
        (status = 400, description = "A bad or unknown parameter, or model_id missing", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may read monitoring", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "The model is not loaded, or the service keeps no records", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "No decision of the model is recorded in the range", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports and exports as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
        (status = 503, description = "The store could not be read", body = Problem, content_type = "application/problem+json"),
    ),
    security(("api_key" = [])))]
pub async fn outcomes(state: web::Data<State>, req: HttpRequest) -> Result<HttpResponse, Problem> {
    let (store, caller) = store_for(&state, &req, REVIEWERS)?;
    let (mut query, params, model_id) = model_query(&req, &["format"])?;
    let html_page = html_wanted(&params)?;
    let model = loaded_model(&state, &query, &model_id)?;
    let version = model.identity.version.clone();
    query.model_version = Some(version.clone());
    let range = (query.from.clone(), query.to.clone());
    let tally = BackTestTally::new(model.policy.scaling.points, model.policy.scaling.pdo);
    let tally = tally_records(
        &state,
        &req,
        (&store, &caller),
        query,
        "back_test",
        tally,
        |store, query, tally| {
            store.with_outcomes(query, &mut |d| {
                tally.add(d);
                true
            })
        },
    )
    .await?;
    let (report, curve) = tally.finish((&model_id, &version), range);
    if report.decisions == 0 {
        return Err(Problem::no_decisions(&model_id, &version));
    }
    if html_page {
        return Ok(HttpResponse::Ok()
            .content_type("text/html; charset=utf-8")
            .body(crate::monitor::backtest_html::page(&report, &curve)));
    }
    Ok(super::json(&report))
}
