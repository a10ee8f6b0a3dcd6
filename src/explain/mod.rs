//! Exact per-column contributions: base value + sum(contributions) = model output.
//!
//! Every number here is in the model's [`Space`]: log-odds for logistic and boosted models,
//! probability for forests. Contributions are per encoded column; summing dummies back to their
//! field happens in [`crate::decide`].

mod linear;
mod paths;
mod quadrature;
pub mod shapley;
mod tree_interventional;
mod tree_path;
mod weights;

pub use linear::LinearExplainer;
pub use paths::TreePaths;
pub use shapley::ShapleyExplainer;
pub use tree_interventional::InterventionalExplainer;
pub use tree_path::{Kernel, PathExplainer};

use crate::model::Space;

/// Which algorithm produced a set of contributions.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    Linear,
    /// Path-dependent TreeSHAP (Lundberg, Erion, Lee 2018): conditional expectations weighted by
    /// the training cover of each node.
    TreeCoverWeighted,
    /// Interventional TreeSHAP against a background sample.
    TreeInterventional,
    /// Exact interventional Shapley values of any model, by enumerating every coalition.
    ShapleyInterventional,
    /// Interventional Shapley values estimated from seeded permutations, with standard errors.
    ShapleySampled,
}

/// A compiled explainer, ready for one row at a time.
#[derive(Debug, Clone)]
pub enum Explainer {
    Linear(LinearExplainer),
    PathDependent(PathExplainer),
    Interventional(InterventionalExplainer),
    Shapley(ShapleyExplainer),
}

impl Explainer {
    pub fn method(&self) -> Method {
        match self {
            Explainer::Linear(_) => Method::Linear,
            Explainer::PathDependent(_) => Method::TreeCoverWeighted,
            Explainer::Interventional(_) => Method::TreeInterventional,
            Explainer::Shapley(e) => match e.mode() {
                shapley::Mode::Exact => Method::ShapleyInterventional,
                shapley::Mode::Sampled { .. } => Method::ShapleySampled,
            },
        }
    }

    /// The model output of the reference population that contributions are measured from.
    pub fn base_value(&self) -> f64 {
        match self {
            Explainer::Linear(e) => e.base_value(),
            Explainer::PathDependent(e) => e.base_value(),
            Explainer::Interventional(e) => e.base_value(),
            Explainer::Shapley(e) => e.base_value(),
        }
    }

    /// Writes one contribution per encoded column into `out` (overwritten, not added to).
    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        self.explain_with_errors(x, out, &mut Vec::new());
    }

    /// As [`Self::explain_into`]; estimated contributions also write their standard errors into
    /// `errors` (one per column, like `out`), which is left empty for exact ones.
    pub fn explain_with_errors(&self, x: &[f64], out: &mut [f64], errors: &mut Vec<f64>) {
        self.explain_scored(x, out, errors);
    }

    /// As [`Self::explain_with_errors`]; an explainer that finds the model's raw output on the
    /// way (path-dependent TreeSHAP passes every split) returns it, bit for bit what the model's
    /// own evaluation gives, so the caller need not evaluate the model again.
    pub fn explain_scored(&self, x: &[f64], out: &mut [f64], errors: &mut Vec<f64>) -> Option<f64> {
        out.fill(0.0);
        errors.clear();
        match self {
            Explainer::Linear(e) => e.explain_into(x, out),
            Explainer::PathDependent(e) => return Some(e.explain_and_score(x, out)),
            Explainer::Interventional(e) => e.explain_into(x, out),
            Explainer::Shapley(e) => e.explain_into(x, out, errors),
        }
        None
    }

    /// [`Self::explain_scored`] for many rows: `rows` holds them one after another, `width`
    /// values each, and `out` (overwritten) gets each row's contributions in the same shape;
    /// `errors` gets standard errors in that shape for estimated contributions (else stays
    /// empty). Each row's numbers are bit for bit what it gets alone. Path-dependent TreeSHAP
    /// takes the rows in vector lanes, a block per pass over each tree, and returns their raw
    /// outputs; the other explainers go row by row.
    pub fn explain_rows_scored(
        &self,
        rows: &[f64],
        width: usize,
        out: &mut [f64],
        errors: &mut Vec<f64>,
    ) -> Option<Vec<f64>> {
        out.fill(0.0);
        errors.clear();
        if let Explainer::PathDependent(e) = self {
            return Some(e.explain_rows_and_score(rows, width, out));
        }
        let mut row_errors = Vec::new();
        for (x, out) in rows
            .chunks_exact(width.max(1))
            .zip(out.chunks_exact_mut(width.max(1)))
        {
            self.explain_scored(x, out, &mut row_errors);
            errors.extend_from_slice(&row_errors);
        }
        None
    }
}

/// Tolerance of the additivity check, relative to the size of the terms added:
/// |base + sum - output| <= 1e-9 * max(1, |output|, |base|, sum |contribution|).
pub const ADDITIVITY_TOLERANCE: f64 = 1e-9;

/// Whether contributions add up to the output within [`ADDITIVITY_TOLERANCE`]. The scale
/// includes the terms themselves, since rounding grows with them (huge inputs to a logistic
/// model give huge, cancelling terms).
pub fn is_additive(base: f64, contributions: &[f64], output: f64) -> bool {
    let total = base + contributions.iter().sum::<f64>();
    let scale = contributions
        .iter()
        .map(|c| c.abs())
        .sum::<f64>()
        .max(base.abs())
        .max(output.abs())
        .max(1.0);
    (total - output).abs() <= ADDITIVITY_TOLERANCE * scale
}

/// Convenience for tests and tools: contributions and base for one row.
pub fn explain(explainer: &Explainer, x: &[f64]) -> (f64, Vec<f64>) {
    let mut out = vec![0.0; x.len()];
    explainer.explain_into(x, &mut out);
    (explainer.base_value(), out)
}

/// Documented with each number: the space, for readers of JSON.
pub fn space_name(space: Space) -> &'static str {
    match space {
        Space::LogOdds => "log_odds",
        Space::Probability => "probability",
    }
}
