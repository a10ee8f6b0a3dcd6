//! Applicant schema: checking applicant JSON against the model's fields and encoding it into the
//! model's columns (n-1 dummies for categories, stated missing-value policy).

mod encode;
mod schema;

pub use encode::{kind_of, Encoded, FieldValue, MissingTreatment};
pub use schema::{Column, Field, FieldIndex, FieldType, Missing, Schema};

use serde::Serialize;

/// One problem with one input field: where, which rule, and a sentence for a person.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, utoipa::ToSchema)]
pub struct FieldError {
    /// JSON path of the offending value, e.g. `applicant.annual_income`.
    pub field: String,
    /// Machine-readable rule name: `required`, `type`, `range`, `integer`, `level`, `unknown_field`.
    pub rule: &'static str,
    pub message: String,
}

/// Every problem found in one request; validation does not stop at the first.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[error("{}", display_errors(.errors))]
pub struct InputError {
    pub errors: Vec<FieldError>,
}

fn display_errors(errors: &[FieldError]) -> String {
    errors
        .iter()
        .map(|e| format!("{}: {} ({})", e.field, e.message, e.rule))
        .collect::<Vec<_>>()
        .join("; ")
}

impl InputError {
    pub fn one(field: impl Into<String>, rule: &'static str, message: impl Into<String>) -> Self {
        InputError {
            errors: vec![FieldError {
                field: field.into(),
                rule,
                message: message.into(),
            }],
        }
    }
}
