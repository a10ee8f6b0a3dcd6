//! A first training spec inferred from a CSV, for a person to edit: field kinds, observed ranges,
//! category levels, missing-value policies, one reason code per field, and placeholder cutoffs.
//! Reason texts start with [`DRAFT_MARK`] and training refuses them until they are rewritten,
//! since only people who know the product can state a reason specifically.

use super::spec::TrainError;
use crate::train::spec::ModelKind;
use serde_json::{json, Value};
use std::collections::BTreeMap;

/// Prefix of every text a person must rewrite before training.
pub const DRAFT_MARK: &str = "DRAFT:";
/// More distinct text values than this is not a category (an identifier or free text).
pub const MAX_LEVELS: usize = 50;

enum Kind {
    Boolean,
    Count,
    Number,
    Category(Vec<String>),
}

/// The draft spec (a JSON object in the training-spec format) for `csv` with outcome `target`,
/// and notes on columns left out (identifiers and free text).
pub fn draft(
    csv: &str,
    target: &str,
    model_id: &str,
    kind: ModelKind,
) -> Result<(Value, Vec<String>), TrainError> {
    let table = crate::tabular::read(csv).map_err(|e| TrainError::Data(e.to_string()))?;
    let owned_header = table.header.clone();
    let header: Vec<&str> = owned_header.iter().map(String::as_str).collect();
    let target_at = (header.iter().position(|h| *h == target))
        .ok_or_else(|| TrainError::Data(format!("header: no target column \"{target}\"")))?;
    let records: Vec<csv::StringRecord> = table
        .map(|r| {
            r.map(|(_, rec)| rec)
                .map_err(|e| TrainError::Data(e.to_string()))
        })
        .collect::<Result<_, _>>()?;
    let rows: Vec<Vec<&str>> = records.iter().map(|r| r.iter().collect()).collect();
    if rows.is_empty() {
        return Err(TrainError::Data("no data rows".into()));
    }
    if let Some(n) = rows.iter().position(|r| r.len() != header.len()) {
        return Err(TrainError::Data(format!(
            "row {}: {} cells, the header has {}",
            n + 1,
            rows[n].len(),
            header.len()
        )));
    }
    let mut defaults = 0usize;
    for (n, r) in rows.iter().enumerate() {
        match r[target_at] {
            "1" => defaults += 1,
            "0" => {}
            other => {
                return Err(TrainError::Data(format!(
                    "row {}, column {target}: \"{other}\" is not 0 or 1",
                    n + 1
                )))
            }
        }
    }
    let base_rate = defaults as f64 / rows.len() as f64;
    let mut features = Vec::new();
    let mut reasons = Vec::new();
    let mut notes = Vec::new();
    for (c, name) in header.iter().enumerate().filter(|&(c, _)| c != target_at) {
        let cells: Vec<&str> = rows
            .iter()
            .map(|r| r[c])
            .filter(|v| !v.is_empty())
            .collect();
        if cells.is_empty() {
            return Err(TrainError::Data(format!(
                "column {name}: every cell is empty"
            )));
        }
        let Some(kind) = infer(&cells) else {
            notes.push(format!("left out {name}: more than {MAX_LEVELS} distinct text values (an identifier or free text is not a model input)"));
            continue;
        };
        let code = reason_code(name, &reasons);
        features.push(field(name, kind, &cells, rows.len(), &code));
        reasons.push(json!({
            "code": code,
            "text": format!("{DRAFT_MARK} state specifically how {name} counted against the applicant"),
        }));
    }
    // Placeholder cutoffs around the base rate; the lender's risk appetite decides the real ones.
    let approve = ((base_rate * 100.0).round() / 100.0).clamp(0.01, 0.5);
    let spec = json!({
        "model_id": model_id,
        "version": "0.1.0",
        "description": format!("{DRAFT_MARK} say what this model is for, and who may use it"),
        "score_provider": format!("{DRAFT_MARK} who provides the score, as disclosures name it (the lender, or the model's owner)"),
        "created_at": crate::records::now().get(..19).map(|t| format!("{t}Z")),
        "target": target,
        "kind": kind.name(),
        "features": features,
        "reasons": reasons,
        "policy": {
            "approve_below": approve,
            "decline_at_or_above": (approve * 2.0).min(0.99),
            "scaling": {"points": 600, "odds": 50, "pdo": 20, "min_score": 300, "max_score": 850},
            "max_reasons": 4,
        },
        "reference": {"population": "all_applicants", "label": "All training applicants"},
    });
    Ok((spec, notes))
}

/// The field name in capitals, cut to the 16 characters a code may have, made unique.
fn reason_code(name: &str, taken: &[Value]) -> String {
    let base: String = name.to_ascii_uppercase().chars().take(14).collect();
    let used = |c: &str| taken.iter().any(|r| r["code"] == c);
    let mut code = base.clone();
    let mut n = 2;
    while used(&code) {
        code = format!("{base}{n}");
        n += 1;
    }
    code
}

fn infer(cells: &[&str]) -> Option<Kind> {
    if cells.iter().all(|v| matches!(*v, "true" | "false")) {
        return Some(Kind::Boolean);
    }
    let numbers: Option<Vec<f64>> = (cells.iter())
        .map(|v| v.parse::<f64>().ok().filter(|x| x.is_finite()))
        .collect();
    if let Some(x) = numbers {
        return Some(if x.iter().all(|v| v.fract() == 0.0 && *v >= 0.0) {
            Kind::Count
        } else {
            Kind::Number
        });
    }
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for v in cells {
        *counts.entry(v).or_default() += 1;
    }
    if counts.len() > MAX_LEVELS {
        return None;
    }
    let mut levels: Vec<(&str, usize)> = counts.into_iter().collect();
    levels.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(b.0)));
    Some(Kind::Category(
        levels.into_iter().map(|(l, _)| l.to_string()).collect(),
    ))
}

fn field(name: &str, kind: Kind, cells: &[&str], rows: usize, code: &str) -> Value {
    let has_missing = cells.len() < rows;
    let numbers = || {
        let mut x: Vec<f64> = cells.iter().filter_map(|v| v.parse().ok()).collect();
        x.sort_by(f64::total_cmp);
        x
    };
    let mut f = json!({"name": name, "unit": "", "reason": code, "missing": {"policy": "reject"}});
    match kind {
        Kind::Boolean => f["kind"] = json!("boolean"),
        Kind::Count | Kind::Number => {
            let x = numbers();
            let is_count = matches!(kind, Kind::Count);
            f["kind"] = json!(if is_count { "count" } else { "number" });
            // Observed range, to be widened to what the product really accepts.
            f["min"] = json!(x[0].floor());
            f["max"] = json!(x[x.len() - 1].ceil());
            if has_missing {
                let median = x[x.len() / 2];
                let value = if is_count { median.round() } else { median };
                f["missing"] = json!({"policy": "impute", "value": value});
            }
        }
        Kind::Category(levels) => {
            f["kind"] = json!("category");
            f["base_level"] = json!(levels[0]);
            if has_missing {
                f["missing"] = json!({"policy": "impute", "value": levels[0]});
            }
            f["levels"] = json!(levels);
        }
    }
    f
}

/// Refuses a spec that still holds draft placeholders.
pub fn check_no_placeholders(spec: &super::build::TrainingSpec) -> Result<(), TrainError> {
    let left: Vec<String> = [
        ("description".to_string(), &spec.description),
        ("score_provider".to_string(), &spec.score_provider),
    ]
    .into_iter()
    .chain(
        spec.reasons
            .iter()
            .map(|r| (format!("reason {}", r.code), &r.text)),
    )
    .filter(|(_, t)| t.trim_start().starts_with(DRAFT_MARK))
    .map(|(w, _)| w)
    .collect();
    if left.is_empty() {
        return Ok(());
    }
    Err(TrainError::Spec(format!(
        "still a draft placeholder ({DRAFT_MARK} ...): {}; rewrite these texts before training",
        left.join(", ")
    )))
}
