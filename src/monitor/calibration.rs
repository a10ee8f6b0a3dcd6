//! Does a band's predicted default rate hold up against what was observed? The one-sided
//! binomial test and the Jeffreys interval, as probability-of-default back-testing uses them
//! (common practice in supervisory PD validation; checked against scipy.stats.binomtest and
//! scipy.stats.beta in tests/references/reference_backtest.rs).

use serde::Serialize;
use statrs::distribution::{Beta, Binomial, ContinuousCDF, DiscreteCDF};

/// A band is rated only when it observed or expected at least this many defaults (common
/// practice: below it one default more or less swings the verdict).
pub const MIN_DEFAULTS: f64 = 5.0;
/// The one-sided test's level, and 1 minus the interval's coverage.
pub const ALPHA: f64 = 0.05;

/// P(X >= defaults) for X ~ Binomial(n, predicted): small when more defaulted than the band's
/// mean predicted probability allows (scipy's `binomtest(..., alternative="greater")`).
pub fn binomial_upper_p(defaults: u64, n: u64, predicted: f64) -> Option<f64> {
    if n == 0 || !(0.0..=1.0).contains(&predicted) {
        return None;
    }
    if defaults == 0 {
        return Some(1.0);
    }
    let b = Binomial::new(predicted, n).ok()?;
    Some(b.sf(defaults - 1).clamp(0.0, 1.0))
}

/// The Jeffreys interval for the default rate: the ALPHA/2 and 1 - ALPHA/2 quantiles of
/// Beta(defaults + 1/2, n - defaults + 1/2), without the end-point adjustment some authors add.
pub fn jeffreys_interval(defaults: u64, n: u64) -> Option<(f64, f64)> {
    if n == 0 || defaults > n {
        return None;
    }
    let beta = Beta::new(defaults as f64 + 0.5, (n - defaults) as f64 + 0.5).ok()?;
    Some((
        beta.inverse_cdf(ALPHA / 2.0),
        beta.inverse_cdf(1.0 - ALPHA / 2.0),
    ))
}

/// One band's expected and observed defaults, tested.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct BandCheck {
    pub label: String,
    /// Decisions with an observed outcome the figures rest on.
    pub decisions: u64,
    pub defaults: u64,
    /// Mean recorded probability of default.
    pub expected_rate: f64,
    pub observed_rate: f64,
    /// One-sided binomial p-value (more defaults than expected); absent for an empty band.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub binomial_p: Option<f64>,
    /// Jeffreys 95% interval for the observed rate.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interval: Option<[f64; 2]>,
    /// `consistent`, `more_defaults_than_predicted` (the test rejects at 5%),
    /// `fewer_defaults_than_predicted` (the prediction lies above the interval), or
    /// `not_rated` (fewer than five defaults observed and expected).
    pub rating: &'static str,
}

/// Counts of one band, summed as decisions stream past.
#[derive(Debug, Clone, Copy, Default)]
pub struct BandCounts {
    pub decisions: u64,
    pub defaults: u64,
    pub sum_predicted: f64,
}

impl BandCounts {
    pub fn add(&mut self, probability: f64, defaulted: bool) {
        self.decisions += 1;
        self.defaults += u64::from(defaulted);
        self.sum_predicted += probability;
    }

    /// The band tested and rated.
    pub fn check(&self, label: String) -> BandCheck {
        let n = self.decisions;
        let expected = if n == 0 {
            0.0
        } else {
            self.sum_predicted / n as f64
        };
        let observed = if n == 0 {
            0.0
        } else {
            self.defaults as f64 / n as f64
        };
        let binomial_p = binomial_upper_p(self.defaults, n, expected);
        let interval = jeffreys_interval(self.defaults, n).map(|(lo, hi)| [lo, hi]);
        let rating = if (self.defaults as f64).max(expected * n as f64) < MIN_DEFAULTS {
            "not_rated"
        } else if binomial_p.is_some_and(|p| p < ALPHA) {
            "more_defaults_than_predicted"
        } else if interval.is_some_and(|[_, hi]| expected > hi) {
            "fewer_defaults_than_predicted"
        } else {
            "consistent"
        };
        BandCheck {
            label,
            decisions: n,
            defaults: self.defaults,
            expected_rate: expected,
            observed_rate: observed,
            binomial_p,
            interval,
            rating,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_by_hand() {
        // P(X >= 1) for Binomial(2, 0.5) = 3/4; P(X >= 2) = 1/4 (by hand).
        assert!((binomial_upper_p(1, 2, 0.5).unwrap() - 0.75).abs() < 1e-12);
        assert!((binomial_upper_p(2, 2, 0.5).unwrap() - 0.25).abs() < 1e-12);
        assert_eq!(binomial_upper_p(0, 10, 0.1), Some(1.0));
        // Beta(1/2, 1/2) is symmetric: its quantiles at 2.5% and 97.5% sum to one.
        assert_eq!(jeffreys_interval(0, 0), None);
        let (lo, hi) = jeffreys_interval(5, 10).unwrap();
        assert!((lo + hi - 1.0).abs() < 1e-9, "{lo} {hi}");
        let few = BandCounts {
            decisions: 20,
            defaults: 1,
            sum_predicted: 1.0,
        }
        .check("x".into());
        assert_eq!(few.rating, "not_rated");
        let many = BandCounts {
            decisions: 1000,
            defaults: 80,
            sum_predicted: 50.0,
        }
        .check("x".into());
        assert_eq!(many.rating, "more_defaults_than_predicted");
        let fewer = BandCounts {
            decisions: 1000,
            defaults: 20,
            sum_predicted: 50.0,
        }
        .check("x".into());
        assert_eq!(fewer.rating, "fewer_defaults_than_predicted");
        let fine = BandCounts {
            decisions: 1000,
            defaults: 52,
            sum_predicted: 50.0,
        }
        .check("x".into());
        assert_eq!(fine.rating, "consistent");
    }
}
