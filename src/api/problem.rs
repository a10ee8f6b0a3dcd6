//! RFC 9457 problem details: every error the service returns, with the fields at fault.

use crate::features::{FieldError, InputError};
use actix_web::http::StatusCode;
use actix_web::HttpResponse;
use serde::Serialize;

/// How long a caller refused for want of a free report slot is asked to wait.
pub const BUSY_RETRY_SECONDS: u32 = 5;

/// `application/problem+json` body. `type` is a stable identifier for the class of problem.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct Problem {
    /// Problem class, e.g. `/problems/invalid-input`.
    #[serde(rename = "type")]
    #[schema(example = "/problems/invalid-input")]
    pub kind: &'static str,
    pub title: &'static str,
    #[schema(example = 422)]
    pub status: u16,
    pub detail: String,
    /// Each offending field: JSON path, rule broken, and a sentence for a person.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub errors: Vec<FieldError>,
    /// Seconds to wait before trying again, sent as the `Retry-After` header.
    #[serde(skip)]
    pub retry_after: Option<u32>,
    /// The methods the route takes, sent as the `Allow` header of a 405.
    #[serde(skip)]
    pub allow: Option<&'static str>,
    /// What went wrong inside, for the service log only (never sent): the request middleware
    /// logs it once, with the request id, for every 5xx.
    /// (Boxed: a problem travels in every handler's `Result`, and this is rarely set.)
    #[serde(skip)]
    pub cause: Option<Box<String>>,
}

/// The cause of a 5xx, carried on the response from [`Problem::response`] to the request
/// middleware, which logs it.
#[derive(Debug, Clone)]
pub struct Cause(pub String);

/// Sent if a problem document itself could not be written (it cannot: every field is text or a
/// number), so that even then the client gets a problem and not an empty body.
const UNWRITABLE: &str = r#"{"type":"/problems/internal","title":"The service failed","status":500,"detail":"the problem document could not be written; the service log holds the cause under this request's id"}"#;

impl Problem {
    fn new(
        status: StatusCode,
        kind: &'static str,
        title: &'static str,
        detail: impl Into<String>,
    ) -> Self {
        Problem {
            kind,
            title,
            status: status.as_u16(),
            detail: detail.into(),
            errors: Vec::new(),
            retry_after: None,
            allow: None,
            cause: None,
        }
    }

    /// The same problem with `cause` for the log.
    pub fn caused_by(mut self, cause: impl std::fmt::Display) -> Self {
        self.cause = Some(Box::new(cause.to_string()));
        self
    }

    fn with(mut self, field: &str, rule: &'static str, message: impl Into<String>) -> Self {
        self.errors.push(FieldError {
            field: field.into(),
            rule,
            message: message.into(),
        });
        self
    }

    pub fn invalid(e: InputError) -> Self {
        let n = e.errors.len();
        let mut p = Problem::new(
            StatusCode::UNPROCESSABLE_ENTITY,
            "/problems/invalid-input",
            "The request has invalid fields",
            format!(
                "{n} field{} failed validation; see errors",
                if n == 1 { "" } else { "s" }
            ),
        );
        p.errors = e.errors;
        p
    }

    pub fn malformed_json(e: &serde_json::Error) -> Self {
        Problem::new(
            StatusCode::BAD_REQUEST,
            "/problems/malformed-json",
            "The body is not valid JSON",
            format!("line {}, column {}: {e}", e.line(), e.column()),
        )
        .with(
            "$",
            "json",
            format!("not valid JSON at line {}, column {}", e.line(), e.column()),
        )
    }

    pub fn bad_body(why: &str) -> Self {
        Problem::new(
            StatusCode::BAD_REQUEST,
            "/problems/bad-body",
            "The body could not be read",
            why.to_string(),
        )
    }

    pub fn method_not_allowed(method: &str, path: &str, allow: &'static str) -> Self {
        let mut p = Problem::new(
            StatusCode::METHOD_NOT_ALLOWED,
            "/problems/method-not-allowed",
            "Wrong method for this route",
            format!("{method} is not allowed on {path} (it takes {allow}); see /openapi.json"),
        );
        p.allow = Some(allow);
        p
    }

    /// A Content-Type other than the route's `accepted` ones.
    pub fn unsupported_media_type(got: &str, accepted: &[&str]) -> Self {
        let title = if accepted == ["application/json"] {
            "Send JSON"
        } else {
            "Send a media type this route reads"
        };
        let wanted = match accepted {
            [one] => one.to_string(),
            many => format!("one of {}", many.join(", ")),
        };
        Problem::new(
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
            "/problems/unsupported-media-type",
            title,
            format!("Content-Type must be {wanted}, got \"{got}\""),
        )
    }

    pub fn too_large(limit: usize) -> Self {
        Problem::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "/problems/body-too-large",
            "The body is too large",
            format!("bodies on this route are limited to {limit} bytes"),
        )
    }

    pub fn batch_too_large(items: usize, limit: usize) -> Self {
        Problem::new(
            StatusCode::UNPROCESSABLE_ENTITY,
            "/problems/batch-too-large",
            "Too many items in one batch",
            format!("{items} items sent; at most {limit} per batch"),
        )
        .with("items", "max_items", format!("at most {limit} items"))
    }

    /// A batch item larger than a single decision's body may be.
    pub fn item_too_large(limit: usize) -> Self {
        Problem::new(
            StatusCode::PAYLOAD_TOO_LARGE,
            "/problems/item-too-large",
            "The item is too large",
            format!("a batch item may be at most {limit} bytes, as a single decision's body"),
        )
    }

    pub fn body_timeout(ms: u64) -> Self {
        Problem::new(
            StatusCode::REQUEST_TIMEOUT,
            "/problems/body-timeout",
            "The body arrived too slowly",
            format!("the whole body must arrive within {ms} ms"),
        )
    }

    pub fn unknown_model(what: &str) -> Self {
        Problem::new(
            StatusCode::NOT_FOUND,
            "/problems/unknown-model",
            "No such model is loaded",
            format!("{what} is not loaded; GET /v1/models lists what is"),
        )
        .with("model", "unknown_model", format!("{what} is not loaded"))
    }

    pub fn not_found(path: &str) -> Self {
        Problem::new(
            StatusCode::NOT_FOUND,
            "/problems/not-found",
            "No such route",
            format!("{path} is not a route of this service; see /openapi.json"),
        )
    }

    pub fn unauthorized() -> Self {
        Problem::new(
            StatusCode::UNAUTHORIZED,
            "/problems/unauthorized",
            "An API key is required",
            "send Authorization: Bearer <key>",
        )
    }

    pub fn forbidden(role: &str, needed: &str) -> Self {
        Problem::new(
            StatusCode::FORBIDDEN,
            "/problems/forbidden",
            "This key may not do that",
            format!("this route is not for {role} keys; it needs {needed}"),
        )
    }

    pub fn internal(detail: &str) -> Self {
        Problem::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "/problems/internal",
            "The service failed",
            detail,
        )
        .caused_by(detail)
    }

    pub fn reload_failed(detail: String) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/reload-failed",
            "The models on disk do not load; the current models stay in service",
            detail,
        )
    }

    pub fn idempotency_conflict(key: &str, decision_id: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/idempotency-conflict",
            "This idempotency key was used for a different request",
            format!("idempotency_key {key:?} is recorded with decision {decision_id} for a request with a different body; send a new key for a new request"),
        )
        .with("idempotency_key", "same_request", "a retry must repeat the original request exactly")
    }

    /// A decision whose record was not committed, so it is not given (nothing unrecorded
    /// leaves). The store's own words go to the log (with the request id), never to the caller.
    pub fn not_recorded(e: &crate::records::StoreError) -> Self {
        use crate::records::StoreError as E;
        let why = match e {
            E::Timeout(_) => "the decision store did not commit it in time",
            E::Unavailable(_) => "the decision store cannot be reached",
            E::Failed(_) => "the decision store refused the record",
            E::Unknown(_) => return Problem::record_outcome_unknown().caused_by(e),
        };
        Problem::new(
            StatusCode::SERVICE_UNAVAILABLE,
            "/problems/not-recorded",
            "The decision could not be recorded, so it was not given",
            format!("{why}; nothing of it is in the store; retry (with the same idempotency_key, if one was sent)"),
        )
        .caused_by(format_args!("a decision was not recorded, so it was not given: {e}"))
    }

    /// The one answer that cannot say whether a decision was recorded: the database connection
    /// broke during the commit and the database stayed out of reach afterwards.
    pub fn record_outcome_unknown() -> Self {
        Problem::new(
            StatusCode::INTERNAL_SERVER_ERROR,
            "/problems/record-outcome-unknown",
            "Whether the decision was recorded is not known",
            "the decision store's connection broke during the commit and its outcome could not be established; retry with the same idempotency_key (a recorded decision is then returned as stored), or look the application up before deciding it again",
        )
    }

    /// Readiness (or liveness) fails: decisions cannot be recorded now.
    pub fn not_ready(why: &str) -> Self {
        Problem::new(
            StatusCode::SERVICE_UNAVAILABLE,
            "/problems/not-ready",
            "This replica cannot record decisions now",
            why.to_string(),
        )
    }

    /// The store failed a read or a final action. Its own words go to the log only.
    pub fn store_failed(e: &crate::records::StoreError) -> Self {
        Problem::new(
            StatusCode::SERVICE_UNAVAILABLE,
            "/problems/store-unavailable",
            "The decision records cannot be read or written just now",
            "the decision store did not answer as expected; the service log holds the cause under this request's id",
        )
        .caused_by(format_args!("the decision store failed: {e}"))
    }

    pub fn records_off() -> Self {
        Problem::new(
            StatusCode::NOT_FOUND,
            "/problems/records-off",
            "This service keeps no decision records",
            "it was started with --no-store; decisions are not recorded here",
        )
    }

    pub fn unknown_decision(id: &str) -> Self {
        Problem::new(
            StatusCode::NOT_FOUND,
            "/problems/unknown-decision",
            "No such decision is recorded",
            format!("no decision {id} is recorded in this store"),
        )
        .with(
            "decision_id",
            "recorded",
            "must be the id of a recorded decision",
        )
    }

    pub fn no_adverse_action(id: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/no-adverse-action",
            "The decision was an approval; no adverse action was taken",
            format!("decision {id} approved the application, so there are no adverse-action reasons to give"),
        )
    }

    pub fn no_adverse_action_because(id: &str, why: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/no-adverse-action",
            "No adverse action was taken on this application",
            format!("decision {id}: {why}"),
        )
    }

    pub fn not_a_referral(id: &str, outcome: crate::policy::Outcome) -> Self {
        use crate::policy::Outcome;
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/not-a-referral",
            "Only a referred decision takes a final action",
            format!(
                "decision {id} was {}, which is itself the action taken",
                match outcome {
                    Outcome::Approve => "an approval",
                    Outcome::Decline => "a decline",
                    Outcome::Refer => "a referral",
                }
            ),
        )
        .with(
            "decision_id",
            "referral",
            "must be the id of a referred decision",
        )
    }

    /// Stability needs the development sample's bins, which artifacts trained or imported by
    /// this release carry.
    pub fn no_development_bins(id: &str, version: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/no-development-bins",
            "The model's artifact carries no development bins",
            format!("{id} version {version} has no `stability` section to compare with; train or import it with this release"),
        )
    }

    /// A stability report over no decisions would call every distribution a major shift.
    pub fn no_decisions(id: &str, version: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/no-decisions",
            "No decision of this model is recorded in the range",
            format!("no decision of {id} version {version} is recorded in the range asked for; widen it, or check the model and version"),
        )
    }

    pub fn model_not_loaded(id: &str, version: &str) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/model-not-loaded",
            "The decision's model is not loaded",
            format!("the decision was made by {id} version {version}, whose reason lists check a final action's reasons; load that artifact (it may run beside the champion)"),
        )
    }

    pub fn final_action_recorded(id: &str, earlier: &crate::records::FinalAction) -> Self {
        Problem::new(
            StatusCode::CONFLICT,
            "/problems/final-action-recorded",
            "A final action is already recorded for this decision",
            format!(
                "decision {id} has a final action ({}) recorded at {} by {}; final actions are append-only, and only the same request repeats",
                earlier.action.name(), earlier.decided_at, earlier.decided_by
            ),
        )
        .with("decision_id", "one_final_action", "a decision takes one final action")
    }

    /// An upload that cannot be read from `place` on (a header, a row): which, and the rule.
    pub fn bad_upload(place: &str, rule: &'static str, message: impl Into<String>) -> Self {
        let message = message.into();
        Problem::new(
            StatusCode::BAD_REQUEST,
            "/problems/bad-upload",
            "The upload cannot be read",
            format!("{place}: {message}"),
        )
        .with(place, rule, message)
    }

    /// A bad query-string parameter: which one and the rule.
    pub fn bad_query(param: &str, rule: &'static str, message: impl Into<String>) -> Self {
        let message = message.into();
        Problem::new(
            StatusCode::BAD_REQUEST,
            "/problems/invalid-query",
            "A query parameter is invalid",
            format!("{param}: {message}"),
        )
        .with(param, rule, message)
    }

    /// Too many reports and exports are running; this one may start once one ends.
    pub fn busy(running: usize) -> Self {
        let mut p = Problem::new(
            StatusCode::TOO_MANY_REQUESTS,
            "/problems/busy",
            "Too many reports and exports are running",
            format!("{running} fairness reports and record exports are running, the most this replica runs at once; retry after the Retry-After seconds"),
        );
        p.retry_after = Some(BUSY_RETRY_SECONDS);
        p
    }

    pub fn status(&self) -> StatusCode {
        StatusCode::from_u16(self.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR)
    }

    pub fn response(&self) -> HttpResponse {
        let mut r = HttpResponse::build(self.status());
        if self.status == 401 {
            r.insert_header(("WWW-Authenticate", "Bearer"));
        }
        if let Some(methods) = self.allow {
            r.insert_header(("Allow", methods));
        }
        if let Some(seconds) = self.retry_after {
            r.insert_header(("Retry-After", seconds.to_string()));
        }
        let body = serde_json::to_string(self);
        let cause = match (&body, &self.cause) {
            (Err(e), _) => Some(format!("problem document not written ({e}): {self}")),
            (Ok(_), Some(c)) => Some(c.to_string()),
            (Ok(_), None) if self.status >= 500 => Some(self.detail.clone()),
            (Ok(_), None) => None,
        };
        let mut response = match body {
            Ok(body) => r.content_type("application/problem+json").body(body),
            Err(_) => HttpResponse::InternalServerError()
                .content_type("application/problem+json")
                .body(UNWRITABLE),
        };
        if let Some(cause) = cause {
            response.extensions_mut().insert(Cause(cause));
        }
        response
    }
}

impl std::fmt::Display for Problem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} ({}): {}", self.title, self.status, self.detail)
    }
}

impl actix_web::ResponseError for Problem {
    fn status_code(&self) -> StatusCode {
        self.status()
    }
    fn error_response(&self) -> HttpResponse {
        self.response()
    }
}
