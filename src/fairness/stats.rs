//! The screening statistics: Fisher's exact test (two-sided), the pooled two-proportion z test,
//! a confidence interval for a ratio of rates, and the standardized mean difference. Checked
//! against scipy `fisher_exact` and statsmodels `proportions_ztest`
//! (tests/references/reference_fairness.rs).

/// ln(n!) by the log-gamma function (libm, accurate to a few ulps).
fn ln_factorial(n: u64) -> f64 {
    libm::lgamma(n as f64 + 1.0)
}

/// Hypergeometric log-probability of `x` successes in a draw of `draws` from a population of
/// `total` holding `successes`.
fn ln_hypergeometric(x: u64, total: u64, successes: u64, draws: u64) -> f64 {
    ln_factorial(successes) - ln_factorial(x) - ln_factorial(successes - x)
        + ln_factorial(total - successes)
        - ln_factorial(draws - x)
        - ln_factorial(total + x - successes - draws)
        - (ln_factorial(total) - ln_factorial(draws) - ln_factorial(total - draws))
}

/// Relative tolerance for "as or less likely than the observed table" (the one R's fisher.test
/// uses; scipy's differs only for near-ties).
const TIE: f64 = 1e-7;

/// Two-sided p-value of Fisher's exact test for the 2x2 table [[a, b], [c, d]]: the probability,
/// with the margins fixed, of every table no more likely than the observed one.
pub fn fisher_exact(a: u64, b: u64, c: u64, d: u64) -> f64 {
    let (row1, col1, total) = (a + b, a + c, a + b + c + d);
    if total == 0 {
        return 1.0;
    }
    let lo = col1.saturating_sub(total - row1);
    let hi = row1.min(col1);
    let observed = ln_hypergeometric(a, total, row1, col1);
    let limit = observed + TIE.ln_1p();
    // Sum in probability space relative to the observed table, for precision far in the tails.
    let sum: f64 = (lo..=hi)
        .map(|x| ln_hypergeometric(x, total, row1, col1))
        .filter(|&l| l <= limit)
        .map(|l| (l - observed).exp())
        .sum();
    (sum * observed.exp()).min(1.0)
}

/// The standard normal upper tail, P(Z > z).
pub fn normal_sf(z: f64) -> f64 {
    0.5 * libm::erfc(z / std::f64::consts::SQRT_2)
}

/// Pooled two-proportion z test of rate 1 against rate 2 (counts may be effective, non-integer
/// counts): (z, two-sided p). `None` when a group is empty or the pooled rate is 0 or 1.
pub fn two_proportion_z(x1: f64, n1: f64, x2: f64, n2: f64) -> Option<(f64, f64)> {
    if n1 <= 0.0 || n2 <= 0.0 {
        return None;
    }
    let pooled = (x1 + x2) / (n1 + n2);
    let var = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2);
    if var <= 0.0 {
        return None;
    }
    let z = (x1 / n1 - x2 / n2) / var.sqrt();
    Some((z, 2.0 * normal_sf(z.abs())))
}

/// 1.96: the two-sided 95% point of the standard normal.
pub const Z95: f64 = 1.959_963_984_540_054;

/// 95% confidence interval for (x1/n1) / (x2/n2) by the log method (Katz et al. 1978):
/// exp(ln ratio ± 1.96 sqrt(1/x1 - 1/n1 + 1/x2 - 1/n2)). `None` when either count is 0.
pub fn ratio_ci95(x1: f64, n1: f64, x2: f64, n2: f64) -> Option<(f64, f64)> {
    if x1 <= 0.0 || x2 <= 0.0 || n1 <= 0.0 || n2 <= 0.0 {
        return None;
    }
    let ratio = (x1 / n1) / (x2 / n2);
    let se = (1.0 / x1 - 1.0 / n1 + 1.0 / x2 - 1.0 / n2).max(0.0).sqrt();
    Some(((ratio.ln() - Z95 * se).exp(), (ratio.ln() + Z95 * se).exp()))
}

/// Weighted running sums of one variable: enough for a mean and a variance.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Moments {
    pub weight: f64,
    pub sum: f64,
    pub sum_squares: f64,
}

impl Moments {
    pub fn add(&mut self, w: f64, x: f64) {
        self.weight += w;
        self.sum += w * x;
        self.sum_squares += w * x * x;
    }

    pub fn mean(&self) -> f64 {
        self.sum / self.weight
    }

    /// Variance with the (effective) n - 1 denominator.
    pub fn variance(&self) -> f64 {
        let m = self.mean();
        ((self.sum_squares - self.weight * m * m) / (self.weight - 1.0)).max(0.0)
    }
}

/// Standardized mean difference (Cohen's d with the pooled standard deviation):
/// (mean_g - mean_c) / sqrt(((n_g - 1) s_g^2 + (n_c - 1) s_c^2) / (n_g + n_c - 2)).
pub fn standardized_mean_difference(group: &Moments, control: &Moments) -> Option<f64> {
    let df = group.weight + control.weight - 2.0;
    if group.weight < 2.0 || control.weight < 2.0 || df <= 0.0 {
        return None;
    }
    let pooled = ((group.weight - 1.0) * group.variance()
        + (control.weight - 1.0) * control.variance())
        / df;
    (pooled > 0.0).then(|| (group.mean() - control.mean()) / pooled.sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fisher_on_hand_worked_tables() {
        // [[1, 0], [0, 1]]: two tables are possible, each with probability 1/2: p = 1.
        assert!((fisher_exact(1, 0, 0, 1) - 1.0).abs() < 1e-12);
        // [[3, 0], [0, 3]]: P = 1/C(6,3) = 0.05 for this table and its mirror: p = 0.1.
        assert!((fisher_exact(3, 0, 0, 3) - 0.1).abs() < 1e-12);
    }

    #[test]
    fn smd_of_two_hand_worked_samples() {
        // {1, 2, 3} vs {2, 3, 4}: means differ by 1, both variances 1: d = -1.
        let (mut a, mut b) = (Moments::default(), Moments::default());
        for x in [1.0, 2.0, 3.0] {
            a.add(1.0, x);
            b.add(1.0, x + 1.0);
        }
        assert!((standardized_mean_difference(&a, &b).unwrap() + 1.0).abs() < 1e-12);
    }
}
