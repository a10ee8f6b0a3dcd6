//! The decision request envelope, shared by `plumbline score` and `POST /v1/decisions`:
//!
//! ```json
//! {"application_id": "FH-2026-000101", "idempotency_key": "optional",
//!  "model": {"id": "optional", "version": "optional"}, "applicant": {"field": "value", ...}}
//! ```

use crate::features::{kind_of, FieldError, InputError};
use crate::LoadedModel;
use serde_json::{Map, Value};
use std::borrow::Cow;
use validator::{Validate, ValidationError};

/// Longest application id accepted.
pub const MAX_APPLICATION_ID: usize = 128;
/// Longest idempotency key accepted.
pub const MAX_IDEMPOTENCY_KEY: usize = 128;

const KEYS: &[&str] = &["application_id", "idempotency_key", "model", "applicant"];

/// Which loaded model a request asks for; absent means the champion.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ModelSelector {
    pub id: String,
    pub version: Option<String>,
}

impl ModelSelector {
    pub fn matches(&self, model: &LoadedModel) -> bool {
        self.id == model.identity.model_id
            && self
                .version
                .as_ref()
                .is_none_or(|v| *v == model.identity.version)
    }

    pub fn describe(&self) -> String {
        match &self.version {
            Some(v) => format!("{} version {v}", self.id),
            None => self.id.clone(),
        }
    }
}

/// A parsed envelope. Problems with the envelope are collected in `errors`, so they can be
/// reported together with the applicant's. The applicant is borrowed from the request, or owned
/// once the envelope must outlive it ([`Envelope::into_owned`]).
#[derive(Debug, Clone)]
pub struct Envelope<'a> {
    pub application_id: Option<String>,
    pub idempotency_key: Option<String>,
    pub model: Option<ModelSelector>,
    pub applicant: Option<Cow<'a, Value>>,
    pub errors: Vec<FieldError>,
}

fn error(field: &str, rule: &'static str, message: impl Into<String>) -> FieldError {
    FieldError {
        field: field.into(),
        rule,
        message: message.into(),
    }
}

const APPLICATION_ID_CHARS: u64 = MAX_APPLICATION_ID as u64;
const IDEMPOTENCY_KEY_CHARS: u64 = MAX_IDEMPOTENCY_KEY as u64;
/// Longest model id or version in a selector.
pub const MAX_SELECTOR: usize = 64;
const SELECTOR_CHARS: u64 = MAX_SELECTOR as u64;

/// The envelope's text rules, declared once with validator; the OpenAPI schema of a decision
/// request states the same bounds. One field is set at a time (see [`text`]).
#[derive(Default, Validate)]
struct TextRules<'a> {
    #[validate(length(min = 1, max = APPLICATION_ID_CHARS), custom(function = "no_control"))]
    application_id: Option<&'a str>,
    #[validate(length(min = 1, max = IDEMPOTENCY_KEY_CHARS), custom(function = "no_control"))]
    idempotency_key: Option<&'a str>,
    #[validate(length(min = 1, max = SELECTOR_CHARS), custom(function = "no_control"))]
    id: Option<&'a str>,
    #[validate(length(min = 1, max = SELECTOR_CHARS), custom(function = "no_control"))]
    version: Option<&'a str>,
}

fn no_control(s: &str) -> Result<(), ValidationError> {
    match s.chars().any(char::is_control) {
        true => Err(ValidationError::new("control")),
        false => Ok(()),
    }
}

/// A non-empty printable string of at most `max` characters (as [`TextRules`] declares for
/// `key`), or the problem with it.
fn text(
    obj: &Map<String, Value>,
    key: &str,
    max: usize,
    errors: &mut Vec<FieldError>,
) -> Option<String> {
    let s = match obj.get(key) {
        None | Some(Value::Null) => return None,
        Some(Value::String(s)) => s.as_str(),
        Some(v) => {
            errors.push(error(
                key,
                "type",
                format!("expected a string, got {}", kind_of(v)),
            ));
            return None;
        }
    };
    let mut rules = TextRules::default();
    match key {
        "application_id" => rules.application_id = Some(s),
        "idempotency_key" => rules.idempotency_key = Some(s),
        "id" => rules.id = Some(s),
        _ => rules.version = Some(s),
    }
    let Err(broken) = rules.validate() else {
        return Some(s.to_string());
    };
    let codes: Vec<&str> = (broken.field_errors().values())
        .flat_map(|list| list.iter().map(|e| e.code.as_ref()))
        .collect();
    // One problem per field, the length first.
    if codes.contains(&"length") {
        errors.push(error(
            key,
            "format",
            format!("must be 1 to {max} characters"),
        ));
    } else {
        errors.push(error(key, "format", "must not contain control characters"));
    }
    None
}

impl<'a> Envelope<'a> {
    /// Fails only when the request is not a JSON object at all.
    pub fn parse(request: &'a Value) -> Result<Self, InputError> {
        let Some(obj) = request.as_object() else {
            return Err(InputError::one(
                "$",
                "type",
                format!("expected a JSON object, got {}", kind_of(request)),
            ));
        };
        let mut errors = Vec::new();
        for key in obj.keys().filter(|k| !KEYS.contains(&k.as_str())) {
            errors.push(error(
                key,
                "unknown_field",
                format!("is not part of a decision request ({})", KEYS.join(", ")),
            ));
        }
        let application_id = text(obj, "application_id", MAX_APPLICATION_ID, &mut errors);
        if application_id.is_none() && !errors.iter().any(|e| e.field == "application_id") {
            errors.push(error("application_id", "required", "is required"));
        }
        let idempotency_key = text(obj, "idempotency_key", MAX_IDEMPOTENCY_KEY, &mut errors);
        let model = match obj.get("model") {
            None | Some(Value::Null) => None,
            Some(Value::Object(m)) => {
                for key in m.keys().filter(|k| *k != "id" && *k != "version") {
                    errors.push(error(
                        &format!("model.{key}"),
                        "unknown_field",
                        "a model selector has id and version",
                    ));
                }
                let mut inner = Vec::new();
                let id = text(m, "id", MAX_SELECTOR, &mut inner);
                let version = text(m, "version", MAX_SELECTOR, &mut inner);
                errors.extend(inner.into_iter().map(|e| FieldError {
                    field: format!("model.{}", e.field),
                    ..e
                }));
                match id {
                    Some(id) => Some(ModelSelector { id, version }),
                    None => {
                        if !errors.iter().any(|e| e.field == "model.id") {
                            errors.push(error(
                                "model.id",
                                "required",
                                "a model selector names the model id",
                            ));
                        }
                        None
                    }
                }
            }
            Some(v) => {
                errors.push(error(
                    "model",
                    "type",
                    format!("expected an object with id and version, got {}", kind_of(v)),
                ));
                None
            }
        };
        let applicant = match obj.get("applicant") {
            None | Some(Value::Null) => {
                errors.push(error("applicant", "required", "is required"));
                None
            }
            Some(v) => Some(Cow::Borrowed(v)),
        };
        Ok(Envelope {
            application_id,
            idempotency_key,
            model,
            applicant,
            errors,
        })
    }

    /// The envelope with its applicant copied out of the request, to send to another thread.
    pub fn into_owned(self) -> Envelope<'static> {
        Envelope {
            applicant: self.applicant.map(|a| Cow::Owned(a.into_owned())),
            application_id: self.application_id,
            idempotency_key: self.idempotency_key,
            model: self.model,
            errors: self.errors,
        }
    }
}
