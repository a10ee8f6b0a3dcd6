//! The reference populations of an artifact's explanation section. Regulation B, Official
//! Interpretation comment 9(b)(2)-5, names two ways to pick the factors behind a denial: against
//! all applicants, or against applicants just inside the approve cutoff. Training builds both,
//! the spec's choice as primary (used by decisions) and the other as the alternate (for
//! reviewers to compare), so switching later needs no retraining.

use super::spec::{ReferenceChoice, TrainError};
use crate::artifact::spec::Population;
use serde_json::{json, Value};

/// Fewest applicants a reference population may hold.
pub const MIN_MEMBERS: usize = 30;

/// Rows of each population, by fitted probability of default `p`.
fn members(population: Population, p: &[f64], cutoff: f64, band: f64) -> Vec<usize> {
    match population {
        Population::AllApplicants => (0..p.len()).collect(),
        Population::NearApproveCutoff => (0..p.len())
            .filter(|&i| p[i] >= cutoff - band && p[i] < cutoff)
            .collect(),
    }
}

fn other(population: Population) -> Population {
    match population {
        Population::AllApplicants => Population::NearApproveCutoff,
        Population::NearApproveCutoff => Population::AllApplicants,
    }
}

/// The words written for an alternate population the spec does not label.
fn default_label(population: Population, rows: usize, cutoff: f64, band: f64) -> String {
    match population {
        Population::AllApplicants => format!("All {rows} training applicants"),
        Population::NearApproveCutoff => format!(
            "The {rows} training applicants with fitted probability of default in [{}, {cutoff})",
            ((cutoff - band) * 1e9).round() / 1e9
        ),
    }
}

/// The explanation section: `section(population, label, rows)` builds one population's JSON;
/// the alternate is nested under `alternate`. Returns notes for the person training.
pub fn explanation(
    choice: &ReferenceChoice,
    p: &[f64],
    cutoff: f64,
    mut section: impl FnMut(Population, &str, &[usize]) -> Value,
) -> Result<(Value, Vec<String>), TrainError> {
    let primary = members(choice.population, p, cutoff, choice.band);
    if primary.len() < MIN_MEMBERS {
        return Err(TrainError::Fit(format!(
            "only {} applicants in the reference population; widen reference.band",
            primary.len()
        )));
    }
    let mut out = section(choice.population, &choice.label, &primary);
    let mut notes = Vec::new();
    if choice.alternate {
        let alt = other(choice.population);
        let rows = members(alt, p, cutoff, choice.band);
        if rows.len() < MIN_MEMBERS {
            notes.push(format!(
                "no alternate reference population: only {} applicants near the approve cutoff (fewer than {MIN_MEMBERS}); widen reference.band to carry it",
                rows.len()
            ));
        } else {
            let label = choice
                .alternate_label
                .clone()
                .unwrap_or_else(|| default_label(alt, rows.len(), cutoff, choice.band));
            out["alternate"] = section(alt, &label, &rows);
        }
    }
    Ok((out, notes))
}

/// One population's mean of each encoded column (linear explanations).
pub fn linear_section(
    population: Population,
    label: &str,
    rows: &[usize],
    x: &[Vec<f64>],
    names: &[String],
) -> Value {
    let mean: serde_json::Map<String, Value> = names
        .iter()
        .enumerate()
        .map(|(c, n)| {
            let m = rows.iter().map(|&i| x[i][c]).sum::<f64>() / rows.len() as f64;
            (n.clone(), json!(m))
        })
        .collect();
    json!({"method": "linear", "reference": {"population": population, "label": label}, "mean": mean})
}

/// Rows of the background sample kept for interventional TreeSHAP (its cost grows with it).
pub const BACKGROUND_ROWS: usize = 200;

/// All applicants through the node covers (path-dependent TreeSHAP), or applicants near the
/// cutoff as an evenly spaced background sample (interventional TreeSHAP).
pub fn tree_section(
    population: Population,
    label: &str,
    rows: &[usize],
    applicants: &[serde_json::Map<String, Value>],
) -> Value {
    let reference = json!({"population": population, "label": label});
    match population {
        Population::AllApplicants => {
            json!({"method": "tree_cover_weighted", "reference": reference})
        }
        Population::NearApproveCutoff => {
            let step = rows.len().div_ceil(BACKGROUND_ROWS).max(1);
            let background: Vec<Value> = (rows.iter().step_by(step))
                .map(|&i| Value::Object(applicants[i].clone()))
                .collect();
            json!({"method": "tree_interventional", "reference": reference, "background": background})
        }
    }
}
