//! Reading a training CSV against a model's fields: every cell is checked by the same rules as
//! a live applicant, and every problem names its row and column.

use crate::features::{FieldType, Schema};
use serde_json::{Map, Value};

/// Encoded rows and outcomes.
#[derive(Debug, Clone)]
pub struct Dataset {
    pub columns: Vec<Vec<f64>>,
    /// The rows as applicant objects (for background samples).
    pub applicants: Vec<Map<String, Value>>,
    pub defaulted: Vec<bool>,
    /// SHA-256 of the file's bytes, for provenance.
    pub sha256: String,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}", self.problems.join("; "))]
pub struct DataError {
    /// "row R, column C: message", data rows numbered from 1 after the header.
    pub problems: Vec<String>,
}

fn problem(msg: String) -> DataError {
    DataError {
        problems: vec![msg],
    }
}

/// Reads `text` (CSV as spreadsheets write it, header first; see [`crate::tabular`]), encodes
/// each row, and stops after 20 problems.
pub fn read_csv(text: &str, schema: &Schema, target: &str) -> Result<Dataset, DataError> {
    read_rows(text, schema, Some(target))
}

/// As [`read_csv`]; without a target the outcome column may be absent (explanation background
/// rows need no outcome) and `defaulted` stays empty.
pub fn read_rows(text: &str, schema: &Schema, target: Option<&str>) -> Result<Dataset, DataError> {
    let table = crate::tabular::read(text).map_err(|e| problem(e.to_string()))?;
    let header = table.header.clone();
    let col = |name: &str| header.iter().position(|h| *h == name);
    let target_at = match target {
        Some(t) => {
            Some(col(t).ok_or_else(|| problem(format!("header: no target column \"{t}\"")))?)
        }
        None => None,
    };
    let mut at = Vec::new();
    let mut missing_columns = Vec::new();
    for f in &schema.fields {
        match col(&f.name) {
            Some(i) => at.push(i),
            None => missing_columns.push(format!("header: no column \"{}\"", f.name)),
        }
    }
    if !missing_columns.is_empty() {
        return Err(DataError {
            problems: missing_columns,
        });
    }
    let mut problems = Vec::new();
    let (mut columns, mut defaulted, mut applicants) = (Vec::new(), Vec::new(), Vec::new());
    for record in table {
        let (row, record) = match record {
            Ok(r) => r,
            Err(e) => {
                problems.push(e.to_string());
                if problems.len() >= 20 {
                    break;
                }
                continue;
            }
        };
        let cells: Vec<&str> = record.iter().collect();
        if cells.len() != header.len() {
            problems.push(format!(
                "row {row}: {} cells, the header has {}",
                cells.len(),
                header.len()
            ));
            continue;
        }
        let mut applicant = Map::new();
        let before = problems.len();
        for (f, &i) in schema.fields.iter().zip(&at) {
            let cell = cells[i];
            let value = if cell.is_empty() {
                Value::Null
            } else {
                match &f.ty {
                    FieldType::Number | FieldType::Count => match cell.parse::<f64>() {
                        Ok(x) if x.is_finite() => serde_json::json!(x),
                        _ => {
                            problems.push(format!(
                                "row {row}, column {}: \"{cell}\" is not a number",
                                f.name
                            ));
                            continue;
                        }
                    },
                    FieldType::Boolean => match cell {
                        "true" | "1" => Value::Bool(true),
                        "false" | "0" => Value::Bool(false),
                        _ => {
                            problems.push(format!(
                                "row {row}, column {}: \"{cell}\" is not true/false",
                                f.name
                            ));
                            continue;
                        }
                    },
                    FieldType::Category { .. } => Value::String(cell.to_string()),
                }
            };
            applicant.insert(f.name.clone(), value);
        }
        let object = Value::Object(applicant);
        // A cell already named above is not reported again as missing.
        let checked = if problems.len() > before {
            Ok(None)
        } else {
            schema.check_and_encode(&object, "").map(Some)
        };
        match checked {
            Ok(Some(e)) if problems.is_empty() => {
                columns.push(e.columns);
                if let Value::Object(m) = object {
                    applicants.push(m);
                }
            }
            Ok(_) => {}
            Err(e) => {
                for fe in e.errors {
                    problems.push(format!(
                        "row {row}, column {}: {} [{}]",
                        fe.field.trim_start_matches('.'),
                        fe.message,
                        fe.rule
                    ));
                }
            }
        }
        if let (Some(at), Some(target)) = (target_at, target) {
            match cells[at] {
                "1" => defaulted.push(true),
                "0" => defaulted.push(false),
                other => problems.push(format!(
                    "row {row}, column {target}: \"{other}\" is not 0 or 1"
                )),
            }
        }
        if problems.len() >= 20 {
            break;
        }
    }
    if !problems.is_empty() {
        return Err(DataError { problems });
    }
    if columns.is_empty() {
        return Err(problem("no data rows".into()));
    }
    Ok(Dataset {
        columns,
        applicants,
        defaulted,
        sha256: crate::artifact::sha256_hex(text.as_bytes()),
    })
}
