//! Any other model (neural networks, support-vector machines): the ONNX file kept whole and
//! evaluated (`model::graph`), explained by interventional Shapley values over fields against a
//! background sample stored in the artifact.
//!
//! The background: the rows of `--background`, or a seeded sample of the reference population
//! stratified by outcome, at most [`BACKGROUND_LIMIT`] rows. Exact enumeration costs 2^F model
//! evaluations per background row; when that exceeds the per-decision budget the default sample
//! shrinks (to no fewer than [`MIN_BACKGROUND`] rows), and beyond that import refuses unless
//! sampled estimates are asked for.

use super::ImportError;
use crate::artifact::spec::{ExplainMethod, OnnxGraphSpec, Population};
use crate::explain::shapley::{self, Mode, MAX_EVALUATIONS};
use crate::model::graph::GraphModel;
use serde_json::{json, Map, Value};

/// Largest default background sample.
pub const BACKGROUND_LIMIT: usize = 256;
/// Smallest default sample exact enumeration may shrink to before sampling is needed.
pub const MIN_BACKGROUND: usize = 32;
/// Seed of the default background sample and of sampled permutations.
pub const SEED: u64 = 2026;

/// The artifact's model body for the file, and the compiled graph.
pub fn body(
    bytes: &[u8],
    model: &crate::onnx::pb::ModelProto,
    columns: &[String],
) -> Result<(OnnxGraphSpec, GraphModel), ImportError> {
    use base64::Engine;
    let graph = crate::model::graph::compile(model)?;
    if graph.width != columns.len() {
        return Err(ImportError::model(
            "input",
            format!(
                "has {} columns; the spec's features encode to {} ({}), in the order they are listed",
                graph.width,
                columns.len(),
                columns.join(", ")
            ),
        ));
    }
    Ok((
        OnnxGraphSpec {
            onnx: base64::engine::general_purpose::STANDARD.encode(bytes),
            sha256: crate::artifact::sha256_hex(bytes),
        },
        graph,
    ))
}

/// How contributions will be computed for `fields` fields, given an explicit background size
/// (or `None` for the default sample): the method and the default sample's size.
pub fn plan(
    fields: usize,
    explicit: Option<usize>,
    approximate: bool,
) -> Result<(Mode, usize), ImportError> {
    let exact_rows =
        |rows: usize| shapley::evaluations(fields, rows, &Mode::Exact) <= MAX_EVALUATIONS;
    let rows = match explicit {
        Some(n) => n,
        None => {
            let fit = if fields >= 40 {
                0
            } else {
                MAX_EVALUATIONS >> fields.min(39)
            };
            fit.clamp(MIN_BACKGROUND, BACKGROUND_LIMIT)
        }
    };
    if fields <= shapley::MAX_EXACT_FIELDS && exact_rows(rows) {
        return Ok((Mode::Exact, rows));
    }
    if !approximate {
        return Err(ImportError::Spec(format!(
            "exact Shapley values for {fields} fields over {rows} background rows need {} model evaluations per decision, above the budget of {MAX_EVALUATIONS}; give --approximate for sampled estimates with standard errors{}",
            shapley::evaluations(fields, rows, &Mode::Exact),
            if explicit.is_some() { ", or a smaller --background" } else { "" }
        )));
    }
    // Even, at least 2 (a permutation and its reverse), within the budget.
    let per_row = (MAX_EVALUATIONS / (rows * fields).max(1)).max(2) / 2 * 2;
    Ok((
        Mode::Sampled {
            permutations: per_row.min(256),
            seed: SEED,
        },
        rows,
    ))
}

/// A seeded sample of `members`, stratified by outcome (each class in proportion, at least one
/// row of a class present), in the members' order.
pub fn stratified(members: &[usize], defaulted: &[bool], size: usize, seed: u64) -> Vec<usize> {
    if members.len() <= size {
        return members.to_vec();
    }
    let (pos, neg): (Vec<usize>, Vec<usize>) = members.iter().partition(|&&i| defaulted[i]);
    let want_pos = ((size as f64 * pos.len() as f64 / members.len() as f64).round() as usize)
        .clamp(usize::from(!pos.is_empty()), pos.len().min(size));
    let mut rng = crate::rng::Rng::new(seed);
    let mut take = |mut v: Vec<usize>, k: usize| {
        for i in (1..v.len()).rev() {
            let j = (rng.next_u64() % (i as u64 + 1)) as usize;
            v.swap(i, j);
        }
        v.truncate(k);
        v
    };
    let mut out = take(pos, want_pos);
    out.extend(take(neg, size - want_pos));
    out.sort_unstable();
    out
}

/// One population's explanation section for a graph model.
pub fn section(
    population: Population,
    label: &str,
    background: Vec<Map<String, Value>>,
    mode: &Mode,
) -> Value {
    let reference = json!({"population": population, "label": label});
    let background: Vec<Value> = background.into_iter().map(Value::Object).collect();
    match mode {
        Mode::Exact => json!({
            "method": ExplainMethod::ShapleyInterventional, "reference": reference, "background": background,
        }),
        Mode::Sampled { permutations, seed } => json!({
            "method": ExplainMethod::ShapleySampled, "reference": reference, "background": background,
            "samples": permutations, "seed": seed,
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stratified_keeps_the_base_rate() {
        let defaulted: Vec<bool> = (0..1000).map(|i| i % 10 == 0).collect();
        let members: Vec<usize> = (0..1000).collect();
        let s = stratified(&members, &defaulted, 200, 7);
        assert_eq!(s.len(), 200);
        assert_eq!(s.iter().filter(|&&i| defaulted[i]).count(), 20);
        assert_eq!(s, stratified(&members, &defaulted, 200, 7), "seeded");
    }

    #[test]
    fn plan_shrinks_the_sample_then_needs_sampling() {
        assert_eq!(plan(10, None, false).unwrap(), (Mode::Exact, 256));
        assert_eq!(plan(12, None, false).unwrap(), (Mode::Exact, 128));
        assert_eq!(plan(14, None, false).unwrap(), (Mode::Exact, 32));
        assert!(plan(15, None, false).is_err());
        assert!(matches!(
            plan(15, None, true).unwrap().0,
            Mode::Sampled { .. }
        ));
        assert!(plan(10, Some(1000), false).is_err());
    }
}
