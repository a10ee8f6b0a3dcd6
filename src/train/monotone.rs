//! Stated risk directions checked on a fitted or imported tree model. A logistic slope is checked
//! exactly when the artifact loads; a random forest cannot be constrained by smartcore, and an
//! imported ensemble was fitted elsewhere, so training and import report where its partial
//! dependence (average prediction with one input set to each grid value, Friedman 2001, sec. 8.2)
//! runs against the stated direction, for a reviewer to judge.

use crate::artifact::spec::{FieldSpec, Monotone};

/// Rows averaged per grid value, evenly spaced through the data.
const SAMPLE_ROWS: usize = 300;
/// Grid values per field: quantiles of its training values.
const GRID: usize = 11;

/// One note per field whose partial dependence moves against its stated direction.
pub fn forest_notes(
    fields: &[FieldSpec],
    names: &[String],
    x: &[Vec<f64>],
    predict: impl Fn(&[&[f64]]) -> Vec<f64>,
) -> Vec<String> {
    let step = x.len().div_ceil(SAMPLE_ROWS).max(1);
    let sample: Vec<&Vec<f64>> = x.iter().step_by(step).collect();
    let mut notes = Vec::new();
    for f in fields {
        let (Some(direction), Some(c)) = (f.monotone, names.iter().position(|n| *n == f.name))
        else {
            continue;
        };
        // Missing values (left to the trees) are no point on the grid.
        let mut values: Vec<f64> = x.iter().map(|r| r[c]).filter(|v| !v.is_nan()).collect();
        if values.is_empty() {
            continue;
        }
        values.sort_by(f64::total_cmp);
        let mut grid: Vec<f64> = (0..GRID)
            .map(|k| values[k * (values.len() - 1) / (GRID - 1)])
            .collect();
        grid.dedup();
        let pd: Vec<f64> = grid
            .iter()
            .map(|&g| {
                let rows: Vec<Vec<f64>> = (sample.iter())
                    .map(|r| {
                        let mut r = (*r).clone();
                        r[c] = g;
                        r
                    })
                    .collect();
                let refs: Vec<&[f64]> = rows.iter().map(Vec::as_slice).collect();
                predict(&refs).iter().sum::<f64>() / refs.len() as f64
            })
            .collect();
        // The largest step against the direction.
        let worst = (1..pd.len())
            .map(|k| {
                let against = match direction {
                    Monotone::Increasing => pd[k - 1] - pd[k],
                    Monotone::Decreasing => pd[k] - pd[k - 1],
                };
                (against, k)
            })
            .max_by(|a, b| a.0.total_cmp(&b.0));
        if let Some((against, k)) = worst.filter(|w| w.0 > 1e-12) {
            notes.push(format!(
                "{}: stated risk direction {}, but the model's average probability of default moves the other way by {against:.5} between {} and {} (partial dependence on {} rows); the model is not constrained to the direction, so review before use",
                f.name,
                match direction {
                    Monotone::Increasing => "increasing",
                    Monotone::Decreasing => "decreasing",
                },
                grid[k - 1],
                grid[k],
                sample.len()
            ));
        }
    }
    notes
}
