//! Group membership uploads: one label per application, or probabilities over several groups
//! (proxy methods such as BISG give these). Probabilities are carried as exact integers in
//! billionths, so the four-fifths comparison is exact arithmetic on the counts. Protected
//! attributes live only here, in memory, for one report; they are never model inputs and never
//! written into decision records.

use serde_json::Value;
use std::collections::HashMap;

/// One whole membership, in billionths.
pub const WHOLE: u64 = 1_000_000_000;
/// Default tolerance for probabilities summing to 1.
pub const SUM_TOLERANCE: f64 = 0.001;
/// Most groups in one dimension.
pub const MAX_GROUPS: usize = 64;

#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Kind {
    Labels,
    Probabilities,
}

impl Kind {
    pub fn name(self) -> &'static str {
        match self {
            Kind::Labels => "labels",
            Kind::Probabilities => "probabilities",
        }
    }
}

/// One group dimension (e.g. race and ethnicity, or sex): its groups and each application's
/// membership weights (group index, billionths).
#[derive(Debug, Clone)]
pub struct Dimension {
    pub name: String,
    pub kind: Kind,
    pub groups: Vec<String>,
    pub members: HashMap<String, Vec<(u16, u64)>>,
}

/// A problem with the upload: where (row numbered from 1, and the field), which rule.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}{field}: {message} [{rule}]", row.map(|r| format!("row {r}, ")).unwrap_or_default())]
pub struct UploadError {
    pub row: Option<usize>,
    pub field: String,
    pub rule: &'static str,
    pub message: String,
}

fn err(
    row: Option<usize>,
    field: &str,
    rule: &'static str,
    message: impl Into<String>,
) -> UploadError {
    UploadError {
        row,
        field: field.to_string(),
        rule,
        message: message.into(),
    }
}

/// A decimal text as exact billionths (at most 9 decimals).
fn billionths(text: &str) -> Option<u64> {
    let (whole, frac) = text.trim().split_once('.').unwrap_or((text.trim(), ""));
    if whole.is_empty() && frac.is_empty()
        || frac.len() > 9
        || !frac.chars().all(|c| c.is_ascii_digit())
    {
        return None;
    }
    let whole: u64 = if whole.is_empty() {
        0
    } else {
        whole.parse().ok()?
    };
    let frac: u64 = if frac.is_empty() {
        0
    } else {
        format!("{frac:0<9}").parse().ok()?
    };
    whole.checked_mul(WHOLE)?.checked_add(frac)
}

/// A JSON number as billionths (rounded to the nearest; decimal inputs of up to 9 places are exact).
fn billionths_of(v: f64) -> Option<u64> {
    (v.is_finite() && (0.0..=1.0 + 1e-9).contains(&v)).then(|| (v * WHOLE as f64).round() as u64)
}

struct Builder {
    dim: Dimension,
    tolerance: f64,
}

impl Builder {
    fn new(name: &str, kind: Kind, tolerance: f64) -> Self {
        Builder {
            dim: Dimension {
                name: name.to_string(),
                kind,
                groups: Vec::new(),
                members: HashMap::new(),
            },
            tolerance,
        }
    }

    fn group(&mut self, name: &str, row: usize) -> Result<u16, UploadError> {
        if let Some(i) = self.dim.groups.iter().position(|g| g == name) {
            return Ok(i as u16);
        }
        if name.trim().is_empty() || name.len() > 64 {
            return Err(err(
                Some(row),
                "group",
                "group_name",
                "a group name is 1-64 characters",
            ));
        }
        if self.dim.groups.len() >= MAX_GROUPS {
            return Err(err(
                Some(row),
                "group",
                "max_groups",
                format!("at most {MAX_GROUPS} groups per dimension"),
            ));
        }
        self.dim.groups.push(name.to_string());
        Ok((self.dim.groups.len() - 1) as u16)
    }

    fn add(&mut self, row: usize, id: &str, weights: Vec<(u16, u64)>) -> Result<(), UploadError> {
        if id.trim().is_empty() {
            return Err(err(
                Some(row),
                "application_id",
                "required",
                "every row needs an application id",
            ));
        }
        if self.dim.kind == Kind::Probabilities {
            let sum: u64 = weights.iter().map(|w| w.1).sum();
            let off = (sum as f64 - WHOLE as f64).abs() / WHOLE as f64;
            if off > self.tolerance {
                return Err(err(
                    Some(row),
                    "probabilities",
                    "sum_to_one",
                    format!(
                        "the probabilities sum to {}, not 1 (tolerance {})",
                        sum as f64 / WHOLE as f64,
                        self.tolerance
                    ),
                ));
            }
        }
        if self.dim.members.insert(id.to_string(), weights).is_some() {
            return Err(err(
                Some(row),
                "application_id",
                "unique",
                format!(
                    "application {id} appears twice in dimension {}",
                    self.dim.name
                ),
            ));
        }
        Ok(())
    }

    fn finish(self) -> Result<Dimension, UploadError> {
        if self.dim.members.is_empty() {
            return Err(err(
                None,
                &self.dim.name,
                "not_empty",
                "the upload holds no memberships",
            ));
        }
        Ok(self.dim)
    }
}

/// A CSV upload for one dimension: `application_id,group` (labels) or `application_id,G1,G2,...`
/// (probabilities per group, summing to 1 within `tolerance`).
pub fn from_csv(text: &str, dimension: &str, tolerance: f64) -> Result<Dimension, UploadError> {
    let table = crate::tabular::read(text).map_err(|e| match e.row {
        None if e.message == "the file is empty" => {
            err(None, "file", "not_empty", "the upload is empty")
        }
        row => err(row, "file", "csv", e.message),
    })?;
    let owned_header = table.header.clone();
    let header: Vec<&str> = owned_header.iter().map(String::as_str).collect();
    if header.first() != Some(&"application_id") || header.len() < 2 {
        return Err(err(
            None,
            "header",
            "columns",
            "the header must be application_id,group or application_id,<group>,<group>,...",
        ));
    }
    let labels = header.len() == 2 && header[1] == "group";
    let mut b = Builder::new(
        dimension,
        if labels {
            Kind::Labels
        } else {
            Kind::Probabilities
        },
        tolerance,
    );
    if !labels {
        for name in &header[1..] {
            if b.dim.groups.iter().any(|g| g == name) {
                return Err(err(
                    None,
                    name,
                    "unique_group",
                    format!("group {name} is a column twice"),
                ));
            }
            b.group(name, 0)?;
        }
    }
    for record in table {
        let (row, record) = record.map_err(|e| err(e.row, "row", "csv", e.message))?;
        let cells: Vec<&str> = record.iter().collect();
        if cells.len() != header.len() {
            return Err(err(
                Some(row),
                "row",
                "cells",
                format!(
                    "{} cells, the header has {}{}",
                    cells.len(),
                    header.len(),
                    if cells.iter().any(|c| c.contains('\n')) {
                        " (a quote opened in this row is not closed)"
                    } else {
                        ""
                    }
                ),
            ));
        }
        let weights = if labels {
            vec![(b.group(cells[1], row)?, WHOLE)]
        } else {
            let mut w = Vec::new();
            for (i, cell) in cells[1..].iter().enumerate() {
                let v = billionths(cell).filter(|&v| v <= WHOLE).ok_or_else(|| {
                    err(
                        Some(row),
                        header[i + 1],
                        "probability",
                        format!("\"{cell}\" is not a probability from 0 to 1 (at most 9 decimals)"),
                    )
                })?;
                if v > 0 {
                    w.push((i as u16, v));
                }
            }
            w
        };
        b.add(row, cells[0], weights)?;
    }
    b.finish()
}

/// A JSON upload: `{"dimensions": [{"name": "...", "rows": [{"application_id": "...", "group":
/// "..."} or {"application_id": "...", "probabilities": {"G": p, ...}}, ...]}, ...]}`.
pub fn from_json(v: &Value, tolerance: f64) -> Result<Vec<Dimension>, UploadError> {
    let dims = v
        .get("dimensions")
        .and_then(Value::as_array)
        .filter(|d| !d.is_empty())
        .ok_or_else(|| err(None, "dimensions", "required", "an upload is {\"dimensions\": [{\"name\", \"rows\"}, ...]} with at least one dimension"))?;
    dims.iter()
        .enumerate()
        .map(|(d, dim)| {
            let at = |f: &str| format!("dimensions[{d}].{f}");
            let name = dim.get("name").and_then(Value::as_str).filter(|n| !n.trim().is_empty()).ok_or_else(|| err(None, &at("name"), "required", "each dimension needs a name"))?;
            let rows = dim.get("rows").and_then(Value::as_array).ok_or_else(|| err(None, &at("rows"), "required", "each dimension needs rows"))?;
            let kind = match rows.first() {
                Some(r) if r.get("probabilities").is_some() => Kind::Probabilities,
                _ => Kind::Labels,
            };
            let mut b = Builder::new(name, kind, tolerance);
            for (n, r) in rows.iter().enumerate() {
                let row = n + 1;
                let id = r.get("application_id").and_then(Value::as_str).unwrap_or_default();
                let extra = r.as_object().and_then(|o| o.keys().find(|k| !matches!(k.as_str(), "application_id" | "group" | "probabilities")).cloned());
                if let Some(k) = extra {
                    return Err(err(Some(row), &k, "known_field", "a row holds application_id and group, or application_id and probabilities"));
                }
                let weights = match (kind, r.get("group"), r.get("probabilities")) {
                    (Kind::Labels, Some(Value::String(g)), None) => vec![(b.group(g, row)?, WHOLE)],
                    (Kind::Probabilities, None, Some(Value::Object(p))) => {
                        let mut w = Vec::new();
                        for (g, p) in p {
                            let v = p.as_f64().and_then(billionths_of).ok_or_else(|| err(Some(row), &format!("probabilities.{g}"), "probability", "must be a number from 0 to 1"))?;
                            let i = b.group(g, row)?;
                            if v > 0 {
                                w.push((i, v));
                            }
                        }
                        w
                    }
                    _ => return Err(err(Some(row), "group", "one_kind", "every row of a dimension gives a group label, or every row gives probabilities")),
                };
                b.add(row, id, weights)?;
            }
            b.finish()
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_are_exact_billionths() {
        assert_eq!(billionths("0.1134"), Some(113_400_000));
        assert_eq!(billionths("1"), Some(WHOLE));
        assert_eq!(billionths(".5"), Some(500_000_000));
        assert_eq!(billionths("0.1234567891"), None, "more than 9 decimals");
        assert_eq!(billionths("-0.1"), None);
        assert_eq!(billionths_of(0.7), Some(700_000_000));
    }

    #[test]
    fn rows_that_do_not_sum_to_one_are_named() {
        let e = from_csv(
            "application_id,a,b\nFH-1,0.5,0.5\nFH-2,0.5,0.4\n",
            "x",
            SUM_TOLERANCE,
        )
        .unwrap_err();
        assert_eq!((e.row, e.rule), (Some(2), "sum_to_one"));
        let e = from_csv("application_id,group\n", "x", SUM_TOLERANCE).unwrap_err();
        assert_eq!(e.rule, "not_empty");
    }
}
