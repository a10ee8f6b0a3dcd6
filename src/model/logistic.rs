//! Logistic regression on encoded columns.

#[derive(Debug, Clone, PartialEq)]
pub struct Logistic {
    pub intercept: f64,
    /// One coefficient per encoded column (0 for a column the artifact leaves out).
    pub coefficients: Vec<f64>,
}

impl Logistic {
    /// log-odds of default. Missing values were imputed before this point.
    pub fn log_odds(&self, x: &[f64]) -> f64 {
        self.intercept
            + self
                .coefficients
                .iter()
                .zip(x)
                .map(|(b, v)| b * v)
                .sum::<f64>()
    }
}
