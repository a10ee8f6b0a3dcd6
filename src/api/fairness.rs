//! POST /v1/fairness/reports (review role): the fair-lending screening report over the recorded
//! decisions in a range, joined to an uploaded group membership by application id. JSON by
//! default, or the same report as a printable HTML page with `?format=html`. The upload is used
//! for this one report in memory and never stored.

use super::auth::Role;
use super::problem::Problem;
use super::State;
use crate::fairness::{html, membership, Aggregator, DecisionRow, Refer, Settings};
use crate::features::InputError;
use actix_web::{web, HttpRequest, HttpResponse};
use serde::Deserialize;
use validator::{Validate, ValidationError};

const REVIEWERS: &[Role] = &[Role::Review];
/// Most cutoffs in one sweep.
pub const MAX_CUTOFFS: usize = 200;

/// The request body (see the OpenAPI document).
/// The field rules are declared once per field: `validate` checks them (every broken one is
/// named) and `schema` states the same bounds in the OpenAPI document.
#[derive(Debug, Deserialize, Validate, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
#[validate(schema(function = "fallback_needs_final", skip_on_field_errors = false))]
pub struct ReportRequest {
    /// JSON upload: `{"dimensions": [{"name", "rows": [{"application_id", "group"} or
    /// {"application_id", "probabilities": {"G": p}}]}]}`.
    #[schema(value_type = Option<Object>)]
    pub groups: Option<membership::Upload>,
    /// CSV upload instead: `application_id,group` or `application_id,G1,G2,...`.
    pub groups_csv: Option<String>,
    /// Name of the dimension a CSV upload describes (default `group`).
    #[validate(length(min = 1, max = 64, message = "1 to 64 characters"))]
    #[schema(min_length = 1, max_length = 64)]
    pub dimension: Option<String>,
    /// Decided at or after (RFC 3339 UTC or a date).
    pub from: Option<String>,
    /// Decided before (a date includes that day).
    pub to: Option<String>,
    /// The product's model (each product is decided by its own model id).
    pub model_id: Option<String>,
    pub model_version: Option<String>,
    /// Control group; default the largest-rate group of at least the minimum size.
    pub control: Option<String>,
    /// `not_approved` (default), `excluded`, or `final` (the underwriter's final action where
    /// one is recorded).
    #[schema(value_type = Option<String>)]
    pub refer: Option<Refer>,
    /// With `refer: final`, how a referral without a final action counts: `not_approved`
    /// (default) or `excluded`.
    #[schema(value_type = Option<String>)]
    pub refer_without_final_action: Option<Fallback>,
    /// Smallest group (effective applications) compared; default 30.
    #[validate(range(min = 1.0, message = "must be at least 1"))]
    #[schema(minimum = 1)]
    pub min_group_size: Option<f64>,
    /// How far a row's probabilities may sum from 1; default 0.001.
    #[validate(range(min = 0.0, exclusive_max = 0.5, message = "must be from 0 to 0.5"))]
    #[schema(minimum = 0, exclusive_maximum = 0.5)]
    pub sum_tolerance: Option<f64>,
    /// Approve cutoffs (probability of default) for the sweep, increasing, each in (0, 1];
    /// default 0.02 to 0.30.
    #[serde(default, deserialize_with = "at_most_max_cutoffs")]
    #[validate(custom(function = "increasing_probabilities"))]
    #[schema(min_items = 1, max_items = 200)]
    pub cutoffs: Option<Vec<f64>>,
}

/// 1 to [`MAX_CUTOFFS`] increasing probabilities in (0, 1].
fn increasing_probabilities(c: &[f64]) -> Result<(), ValidationError> {
    let fine = !c.is_empty()
        && c.len() <= MAX_CUTOFFS
        && c.iter().all(|x| x.is_finite() && *x > 0.0 && *x <= 1.0)
        && c.windows(2).all(|w| w[0] < w[1]);
    fine.then_some(()).ok_or_else(|| {
        ValidationError::new("cutoffs")
            .with_message(format!("1 to {MAX_CUTOFFS} increasing probabilities in (0, 1]").into())
    })
}

/// `refer_without_final_action` says how `refer: final` counts a referral without one.
fn fallback_needs_final(r: &ReportRequest) -> Result<(), ValidationError> {
    if r.refer != Some(Refer::Final) && r.refer_without_final_action.is_some() {
        return Err(
            ValidationError::new("refer_final").with_message("only with refer: final".into())
        );
    }
    Ok(())
}

/// Every broken field rule as a 422, fields in name order (a schema-level rule is named by the
/// field it is about).
fn rules_broken(e: validator::ValidationErrors) -> Problem {
    let mut errors: Vec<crate::features::FieldError> = Vec::new();
    for (field, list) in e.field_errors() {
        for v in list.iter() {
            let (field, rule) = match v.code.as_ref() {
                "refer_final" => ("refer_without_final_action".to_string(), "refer_final"),
                "cutoffs" => (field.to_string(), "cutoffs"),
                "range" => (field.to_string(), "range"),
                "length" => (field.to_string(), "length"),
                _ => (field.to_string(), "invalid"),
            };
            let message =
                (v.message.as_ref()).map_or_else(|| v.code.to_string(), |m| m.to_string());
            errors.push(crate::features::FieldError {
                field,
                rule,
                message,
            });
        }
    }
    errors.sort_by(|a, b| a.field.cmp(&b.field));
    Problem::invalid(InputError { errors })
}

/// The cutoff list, refused while it is read once it passes [`MAX_CUTOFFS`] (so a long list
/// costs nothing).
fn at_most_max_cutoffs<'de, D: serde::Deserializer<'de>>(
    d: D,
) -> Result<Option<Vec<f64>>, D::Error> {
    struct V;
    impl<'de> serde::de::Visitor<'de> for V {
        type Value = Vec<f64>;
        fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
            write!(f, "a list of at most {MAX_CUTOFFS} numbers")
        }
        fn visit_seq<A: serde::de::SeqAccess<'de>>(self, mut seq: A) -> Result<Vec<f64>, A::Error> {
            let mut out = Vec::new();
            while let Some(x) = seq.next_element::<f64>()? {
                if out.len() == MAX_CUTOFFS {
                    return Err(serde::de::Error::custom(format!(
                        "at most {MAX_CUTOFFS} cutoffs"
                    )));
                }
                out.push(x);
            }
            Ok(out)
        }
    }
    d.deserialize_seq(V).map(Some)
}

/// How a referral without a final action counts under `refer: final`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Fallback {
    NotApproved,
    Excluded,
}

fn invalid(field: &str, rule: &'static str, message: impl Into<String>) -> Problem {
    Problem::invalid(InputError::one(field, rule, message))
}

fn settings(r: &ReportRequest) -> Result<Settings, Problem> {
    let mut s = Settings {
        control: r.control.clone(),
        refer: r.refer.unwrap_or(Refer::NotApproved),
        refer_without_final: match r.refer_without_final_action {
            Some(Fallback::Excluded) => Refer::Excluded,
            _ => Refer::NotApproved,
        },
        ..Settings::default()
    };
    if let Some(m) = r.min_group_size {
        s.min_group_size = m;
    }
    if let Some(c) = &r.cutoffs {
        s.cutoffs = c.clone();
    }
    Ok(s)
}

fn upload(r: &mut ReportRequest) -> Result<Vec<membership::Dimension>, Problem> {
    let tolerance = r.sum_tolerance.unwrap_or(membership::SUM_TOLERANCE);
    let named = |e: membership::UploadError| {
        let dim = e.dimension.map(|d| format!("dimensions[{d}]."));
        let at = match (dim, e.row) {
            (Some(d), Some(n)) => format!("groups.{d}rows[{}].{}", n - 1, e.field),
            (Some(d), None) => format!("groups.{d}{}", e.field),
            (None, _) => format!("groups.{}", e.field),
        };
        invalid(&at, e.rule, e.message)
    };
    // A CSV upload's faults are named by the field it came in and its data row and column.
    let named_csv = |e: membership::UploadError| {
        let at = match e.row {
            Some(n) => format!("data row {n} (after the header), column {}", e.field),
            None => format!("the {}", e.field),
        };
        invalid("groups_csv", e.rule, format!("{at}: {}", e.message))
    };
    match (r.groups.take(), &r.groups_csv) {
        (Some(u), None) => u.finish(tolerance).map_err(named),
        (None, Some(text)) => {
            membership::from_csv(text, r.dimension.as_deref().unwrap_or("group"), tolerance)
                .map(|d| vec![d])
                .map_err(named_csv)
        }
        _ => Err(invalid(
            "groups",
            "one_upload",
            "send the memberships as groups (JSON) or groups_csv (CSV), one of them",
        )),
    }
}

/// Build a screening report.
#[utoipa::path(post, path = "/v1/fairness/reports", tag = "fairness", request_body = ReportRequest,
    params(("format" = Option<super::params::ReportFormat>, Query, description = "json (default) or html")),
    responses(
        (status = 200, description = "The report (JSON), or the same as a printable HTML page with SVG charts. A screening statistic, not a legal finding", content_type = "application/json"),
        (status = 400, description = "Malformed JSON, or a bad time range", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No or unknown API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Only review keys may build reports", body = Problem, content_type = "application/problem+json"),
        (status = 408, description = "The upload arrived too slowly", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Upload larger than the limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Content-Type is not application/json", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "A bad upload (naming the row) or setting", body = Problem, content_type = "application/problem+json"),
        (status = 429, description = "As many reports and exports as the service runs at once are running; retry after the Retry-After seconds", body = Problem, content_type = "application/problem+json",
            headers(("Retry-After" = u64, description = "seconds to wait"))),
    ),
    security(("api_key" = [])))]
pub async fn create_report(
    state: web::Data<State>,
    req: HttpRequest,
    payload: web::Payload,
) -> Result<HttpResponse, Problem> {
    let (store, caller) = super::compliance::store_for(&state, &req, REVIEWERS)?;
    let html_wanted = match req.query_string() {
        "" | "format=json" => false,
        "format=html" => true,
        _ => return Err(Problem::bad_query("format", "one_of", "json or html")),
    };
    let slot = state.report_slot()?;
    // Uploads are large (a million probability rows is tens of MiB): they get time to arrive,
    // and are parsed as they arrive, off the request workers, straight into their typed form.
    let mut request = super::body::parse_streamed(
        &req,
        payload,
        (
            state.limits.max_upload_bytes,
            state.limits.body_timeout * 12,
        ),
        super::body::JSON,
        |body| {
            let mut de = serde_json::Deserializer::from_reader(std::io::BufReader::new(body));
            let request: ReportRequest = serde_path_to_error::deserialize(&mut de)
                .map_err(|e| shape_problem(e.path().to_string(), e.into_inner()))?;
            de.end().map_err(|e| shape_problem(".".into(), e))?;
            Ok(request)
        },
    )
    .await?;
    request.validate().map_err(rules_broken)?;
    let settings = settings(&request)?;
    let get = |name: &str| match name {
        "from" => request.from.as_deref(),
        "to" => request.to.as_deref(),
        "model_id" => request.model_id.as_deref(),
        "model_version" => request.model_version.as_deref(),
        _ => None,
    };
    let query = crate::records::parse_query(get)
        .map_err(|e| Problem::bad_query(&e.param, e.rule, e.message))?;
    let dims = upload(&mut request)?;
    let title = format!(
        "Fair-lending screening{}{}",
        request
            .model_id
            .as_deref()
            .map(|m| format!(": {m}"))
            .unwrap_or_default(),
        match (&request.from, &request.to) {
            (Some(f), Some(t)) => format!(", {f} to {t}"),
            (Some(f), None) => format!(", from {f}"),
            (None, Some(t)) => format!(", to {t}"),
            (None, None) => String::new(),
        }
    );
    let target = format!(
        "from={} to={} model_id={} model_version={}",
        request.from.as_deref().unwrap_or(""),
        request.to.as_deref().unwrap_or(""),
        request.model_id.as_deref().unwrap_or(""),
        request.model_version.as_deref().unwrap_or("")
    );
    let read = store.clone();
    let (report, decisions) = web::block(move || {
        let mut agg = Aggregator::new(&dims, settings);
        let decisions = read.export(&query, &mut |r| {
            agg.add(&DecisionRow {
                application_id: &r.application_id,
                outcome: r.outcome.name(),
                final_action: r.final_action.as_ref().map(|f| f.action.name()),
                probability: r.probability,
                score: r.score as f64,
            });
            true
        })?;
        Ok::<_, crate::records::StoreError>((agg.finish(), decisions))
    })
    .await
    .map_err(|_| Problem::internal("the report worker stopped"))?
    .map_err(|e| Problem::store_failed(&e))?;
    let entry = super::compliance::access(
        &caller,
        &req,
        "fairness_report",
        &target,
        Some(decisions as i64),
    );
    super::compliance::log_access(&store, entry).await?;
    if html_wanted {
        return Ok(HttpResponse::Ok()
            .content_type("text/html; charset=utf-8")
            .body(html::page(&report, &title)));
    }
    drop(slot);
    Ok(HttpResponse::Ok().json(report))
}

/// A body that is not a report request: malformed JSON is a 400 as elsewhere; a wrong shape
/// is a 422 naming the path.
fn shape_problem(path: String, e: serde_json::Error) -> Problem {
    if e.is_syntax() || e.is_eof() {
        return Problem::malformed_json(&e);
    }
    invalid(
        if path == "." { "body" } else { &path },
        "shape",
        e.to_string(),
    )
}
