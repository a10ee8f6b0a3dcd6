//! Model evaluation: encoded columns -> raw output (log-odds or probability) -> probability.
//! Evaluation only; fitting lives elsewhere.

pub mod forest;
pub mod graph;
pub mod logistic;

pub use forest::{Ensemble, Node, Tree};
pub use logistic::Logistic;

use serde::Serialize;

/// The space a raw model output and its contributions are in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Space {
    /// Log-odds of default (logistic models, boosted trees).
    LogOdds,
    /// Probability of default (forests averaging leaf probabilities).
    Probability,
}

#[derive(Debug, Clone)]
pub enum Scorer {
    Logistic(Logistic),
    Trees(Ensemble),
    /// An ONNX graph (neural network, support-vector machine), evaluated: probability space.
    Graph(std::sync::Arc<graph::GraphModel>),
}

impl Scorer {
    /// Raw output in [`Self::space`].
    pub fn raw(&self, x: &[f64]) -> f64 {
        match self {
            Scorer::Logistic(m) => m.log_odds(x),
            Scorer::Trees(m) => m.raw(x),
            Scorer::Graph(g) => g.probability(x),
        }
    }

    pub fn space(&self) -> Space {
        match self {
            Scorer::Logistic(_) => Space::LogOdds,
            Scorer::Trees(m) => m.space(),
            Scorer::Graph(_) => Space::Probability,
        }
    }

    /// Probability of default and log-odds of default for a raw output.
    pub fn probability_and_log_odds(&self, raw: f64) -> (f64, f64) {
        match self.space() {
            Space::LogOdds => (sigmoid(raw), raw),
            Space::Probability => {
                // A forest can average to exactly 0 or 1; clamp so log-odds stay finite.
                let p = raw.clamp(PROBABILITY_FLOOR, 1.0 - PROBABILITY_FLOOR);
                (raw, (p / (1.0 - p)).ln())
            }
        }
    }
}

/// Probabilities are clamped to [1e-12, 1 - 1e-12] only when turned into log-odds.
pub const PROBABILITY_FLOOR: f64 = 1e-12;

/// Logistic function, written to stay accurate for large |z|.
pub fn sigmoid(z: f64) -> f64 {
    if z >= 0.0 {
        1.0 / (1.0 + (-z).exp())
    } else {
        let e = z.exp();
        e / (1.0 + e)
    }
}
