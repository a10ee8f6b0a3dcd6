//! Logistic contributions: beta_j * (x_j - reference_j) in log-odds, exact by linearity.

use crate::model::Logistic;

#[derive(Debug, Clone)]
pub struct LinearExplainer {
    coefficients: Vec<f64>,
    reference: Vec<f64>,
    base: f64,
}

impl LinearExplainer {
    /// `reference` is the mean encoded row of the reference population.
    pub fn new(model: &Logistic, reference: Vec<f64>) -> Self {
        let base = model.intercept
            + model
                .coefficients
                .iter()
                .zip(&reference)
                .map(|(b, r)| b * r)
                .sum::<f64>();
        LinearExplainer {
            coefficients: model.coefficients.clone(),
            reference,
            base,
        }
    }

    /// Log-odds of the reference row.
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn reference(&self) -> &[f64] {
        &self.reference
    }

    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        for ((o, b), (x, r)) in out
            .iter_mut()
            .zip(&self.coefficients)
            .zip(x.iter().zip(&self.reference))
        {
            *o = b * (x - r);
        }
    }
}
