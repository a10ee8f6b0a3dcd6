//! Applicant JSON -> checked field values -> encoded model columns.

use super::schema::{FieldIndex, FieldType, Missing, Schema};
use super::{FieldError, InputError};
use serde::Serialize;
use serde_json::{Map, Value};

/// A checked value of one field, as the applicant gave it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FieldValue {
    Number(f64),
    Bool(bool),
    /// Index into the field's levels.
    Level(usize),
    Missing,
}

/// How a missing value was handled, echoed in every decision so it is never silent.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "treatment", rename_all = "snake_case")]
pub enum MissingTreatment {
    /// Replaced by the artifact's stated value before scoring.
    Imputed { value: Value },
    /// Sent to each tree node's missing side.
    TreeDefault,
}

/// A checked, encoded applicant.
#[derive(Debug, Clone, PartialEq)]
pub struct Encoded {
    /// One value per model column; NaN marks a missing value left to the trees.
    pub columns: Vec<f64>,
    /// One value per schema field, as given (before imputation).
    pub values: Vec<FieldValue>,
    /// Fields that were missing, in schema order, with what was done.
    pub missing: Vec<(FieldIndex, MissingTreatment)>,
}

impl Schema {
    /// Checks an applicant object against every field and encodes it. `path` prefixes field
    /// names in errors (e.g. `applicant`). All problems are reported, not just the first.
    pub fn check_and_encode(&self, applicant: &Value, path: &str) -> Result<Encoded, InputError> {
        let Some(obj) = applicant.as_object() else {
            return Err(InputError::one(
                path,
                "type",
                format!(
                    "expected a JSON object of applicant fields, got {}",
                    kind_of(applicant)
                ),
            ));
        };
        let mut errors = Vec::new();
        for key in obj.keys() {
            if self.field_index(key).is_none() {
                errors.push(FieldError {
                    field: format!("{path}.{key}"),
                    rule: "unknown_field",
                    message: "is not a field of this model".to_string(),
                });
            }
        }
        let mut values = Vec::with_capacity(self.fields.len());
        for (i, _) in self.indexed_fields() {
            match self.check_field(i, obj, path) {
                Ok(v) => values.push(v),
                Err(e) => {
                    errors.push(e);
                    values.push(FieldValue::Missing);
                }
            }
        }
        if !errors.is_empty() {
            return Err(InputError { errors });
        }
        Ok(self.encode(values))
    }

    fn check_field(
        &self,
        i: FieldIndex,
        obj: &Map<String, Value>,
        path: &str,
    ) -> Result<FieldValue, FieldError> {
        let field = &self[i];
        let at = || format!("{path}.{}", field.name);
        match obj.get(&field.name) {
            None | Some(Value::Null) => {
                if field.missing == Missing::Reject {
                    Err(FieldError {
                        field: at(),
                        rule: "required",
                        message: "is required and was missing or null".to_string(),
                    })
                } else {
                    Ok(FieldValue::Missing)
                }
            }
            Some(v) => self
                .check_value(i, v)
                .map_err(|(rule, message)| FieldError {
                    field: at(),
                    rule,
                    message,
                }),
        }
    }

    /// Checks one present value against field `i`'s type and range.
    pub fn check_value(
        &self,
        i: FieldIndex,
        v: &Value,
    ) -> Result<FieldValue, (&'static str, String)> {
        let field = &self[i];
        match &field.ty {
            FieldType::Number | FieldType::Count => {
                let Some(x) = v.as_f64() else {
                    return Err(("type", format!("expected a number, got {}", kind_of(v))));
                };
                if field.ty == FieldType::Count && (x.fract() != 0.0 || x < 0.0) {
                    return Err((
                        "integer",
                        format!("must be a whole number 0 or more, got {x}"),
                    ));
                }
                let below = field.min.is_some_and(|m| x < m);
                let above = field.max.is_some_and(|m| x > m);
                if below || above {
                    return Err(("range", range_message(field.min, field.max, x)));
                }
                Ok(FieldValue::Number(x))
            }
            FieldType::Boolean => match v {
                Value::Bool(b) => Ok(FieldValue::Bool(*b)),
                _ => Err((
                    "type",
                    format!("expected true or false, got {}", kind_of(v)),
                )),
            },
            FieldType::Category { levels, .. } => match v {
                Value::String(s) => match levels.iter().position(|l| l == s) {
                    Some(l) => Ok(FieldValue::Level(l)),
                    None => Err((
                        "level",
                        format!("must be one of {}; got \"{s}\"", quoted_list(levels)),
                    )),
                },
                _ => Err((
                    "type",
                    format!("expected a string level, got {}", kind_of(v)),
                )),
            },
        }
    }

    fn encode(&self, values: Vec<FieldValue>) -> Encoded {
        let mut columns = vec![0.0; self.columns.len()];
        let mut missing = Vec::new();
        for (i, field) in self.indexed_fields() {
            let mut value = values[i.get()];
            if value == FieldValue::Missing {
                match &field.missing {
                    Missing::Impute(v) => {
                        missing.push((i, MissingTreatment::Imputed { value: v.clone() }));
                        // Checked at load time, so this cannot fail.
                        value = self.check_value(i, v).unwrap_or(FieldValue::Missing);
                    }
                    Missing::TreeDefault => missing.push((i, MissingTreatment::TreeDefault)),
                    Missing::Reject => {}
                }
            }
            if !field.scored {
                continue;
            }
            let cols = &mut columns[field.columns.clone()];
            match value {
                FieldValue::Number(x) => cols[0] = x,
                FieldValue::Bool(b) => cols[0] = if b { 1.0 } else { 0.0 },
                FieldValue::Level(l) => {
                    for (c, col) in field.columns.clone().zip(cols.iter_mut()) {
                        *col = if self.columns[c].level == Some(l) {
                            1.0
                        } else {
                            0.0
                        };
                    }
                }
                FieldValue::Missing => cols.fill(f64::NAN),
            }
        }
        Encoded {
            columns,
            values,
            missing,
        }
    }
}

fn range_message(min: Option<f64>, max: Option<f64>, x: f64) -> String {
    match (min, max) {
        (Some(lo), Some(hi)) => format!("must be between {lo} and {hi} inclusive, got {x}"),
        (Some(lo), None) => format!("must be at least {lo}, got {x}"),
        (None, Some(hi)) => format!("must be at most {hi}, got {x}"),
        (None, None) => format!("is out of range, got {x}"),
    }
}

fn quoted_list(levels: &[String]) -> String {
    levels
        .iter()
        .map(|l| format!("\"{l}\""))
        .collect::<Vec<_>>()
        .join(", ")
}

/// JSON type name for messages.
pub fn kind_of(v: &Value) -> &'static str {
    match v {
        Value::Null => "null",
        Value::Bool(_) => "a boolean",
        Value::Number(_) => "a number",
        Value::String(_) => "a string",
        Value::Array(_) => "an array",
        Value::Object(_) => "an object",
    }
}
