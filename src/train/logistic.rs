//! Logistic regression by maximum likelihood (iteratively reweighted least squares, i.e.
//! Newton's method), unpenalised or with an L2 penalty, with Wald standard errors.
//!
//! Columns are standardised internally so that Newton steps are well conditioned whatever the
//! units (a balance in dollars next to a 0/1 dummy); coefficients and their covariance are
//! reported back in original units. For a penalised fit the standard errors come from the
//! penalised information matrix and are approximate.

/// A fitted model: `coefficients[0]` is the intercept, then one per column.
#[derive(Debug, Clone, PartialEq)]
pub struct LogisticFit {
    pub coefficients: Vec<f64>,
    pub std_errors: Vec<f64>,
    pub log_likelihood: f64,
    pub iterations: usize,
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    #[error("no rows")]
    Empty,
    #[error("row {row} has {got} values, expected {want}")]
    Ragged { row: usize, got: usize, want: usize },
    #[error("the outcome has one class only ({0} rows); a default model needs both")]
    OneClass(usize),
    #[error("column {0} is constant; drop it")]
    Constant(usize),
    #[error("column {column} row {row} is not a finite number")]
    NotFinite { row: usize, column: usize },
    #[error("the information matrix is singular (collinear columns?)")]
    Singular,
    #[error("no convergence after {0} Newton steps (complete separation?)")]
    NoConvergence(usize),
}

impl LogisticFit {
    /// log-odds for one row (without the intercept column).
    pub fn log_odds(&self, row: &[f64]) -> f64 {
        self.coefficients[0]
            + self.coefficients[1..]
                .iter()
                .zip(row)
                .map(|(b, x)| b * x)
                .sum::<f64>()
    }
}

const MAX_STEPS: usize = 100;

/// Fits `P(y = 1) = logistic(b0 + b . x)`. `l2` penalises the standardised slopes (not the
/// intercept); 0 is plain maximum likelihood.
pub fn fit(rows: &[Vec<f64>], y: &[bool], l2: f64) -> Result<LogisticFit, FitError> {
    let n = rows.len();
    if n == 0 {
        return Err(FitError::Empty);
    }
    let k = rows[0].len();
    for (i, r) in rows.iter().enumerate() {
        if r.len() != k {
            return Err(FitError::Ragged {
                row: i,
                got: r.len(),
                want: k,
            });
        }
        if let Some(c) = r.iter().position(|v| !v.is_finite()) {
            return Err(FitError::NotFinite { row: i, column: c });
        }
    }
    let positives = y.iter().filter(|&&v| v).count();
    if positives == 0 || positives == n {
        return Err(FitError::OneClass(n));
    }
    // Standardise: z = (x - mean) / sd.
    let mean: Vec<f64> = (0..k)
        .map(|j| rows.iter().map(|r| r[j]).sum::<f64>() / n as f64)
        .collect();
    let sd: Vec<f64> = (0..k)
        .map(|j| (rows.iter().map(|r| (r[j] - mean[j]).powi(2)).sum::<f64>() / n as f64).sqrt())
        .collect();
    if let Some(j) = sd.iter().position(|&s| s == 0.0) {
        return Err(FitError::Constant(j));
    }
    let p = k + 1;
    let design = |r: &[f64], j: usize| {
        if j == 0 {
            1.0
        } else {
            (r[j - 1] - mean[j - 1]) / sd[j - 1]
        }
    };
    let mut gamma = vec![0.0; p];
    let rate = positives as f64 / n as f64;
    gamma[0] = (rate / (1.0 - rate)).ln();
    let mut info = vec![0.0; p * p];
    let mut steps = 0;
    loop {
        let mut grad = vec![0.0; p];
        info.iter_mut().for_each(|v| *v = 0.0);
        let mut z = vec![0.0; p];
        for (r, &yi) in rows.iter().zip(y) {
            for (j, zj) in z.iter_mut().enumerate() {
                *zj = design(r, j);
            }
            let eta: f64 = z.iter().zip(&gamma).map(|(a, b)| a * b).sum();
            let mu = crate::model::sigmoid(eta);
            let w = mu * (1.0 - mu);
            let resid = f64::from(u8::from(yi)) - mu;
            for a in 0..p {
                grad[a] += z[a] * resid;
                for b in 0..=a {
                    info[a * p + b] += w * z[a] * z[b];
                }
            }
        }
        for a in 1..p {
            grad[a] -= l2 * gamma[a];
            info[a * p + a] += l2;
        }
        for a in 0..p {
            for b in 0..a {
                info[b * p + a] = info[a * p + b];
            }
        }
        let step = solve(&info, &grad, p).ok_or(FitError::Singular)?;
        for (g, s) in gamma.iter_mut().zip(&step) {
            *g += s;
        }
        steps += 1;
        let size = step.iter().map(|s| s.abs()).fold(0.0, f64::max);
        if size < 1e-10 {
            break;
        }
        if steps >= MAX_STEPS || gamma.iter().any(|g| !g.is_finite() || g.abs() > 50.0) {
            return Err(FitError::NoConvergence(steps));
        }
    }
    // Back to original units: b_j = g_j / sd_j, b_0 = g_0 - sum g_j mean_j / sd_j. The map is
    // linear, b = A g, so Cov(b) = A Cov(g) A'.
    let cov_g = inverse(&info, p).ok_or(FitError::Singular)?;
    let mut a = vec![0.0; p * p];
    a[0] = 1.0;
    for j in 1..p {
        a[j] = -mean[j - 1] / sd[j - 1];
        a[j * p + j] = 1.0 / sd[j - 1];
    }
    let coefficients: Vec<f64> = (0..p)
        .map(|i| (0..p).map(|j| a[i * p + j] * gamma[j]).sum())
        .collect();
    let std_errors = (0..p)
        .map(|i| {
            let mut v = 0.0;
            for j in 0..p {
                for l in 0..p {
                    v += a[i * p + j] * cov_g[j * p + l] * a[i * p + l];
                }
            }
            v.sqrt()
        })
        .collect();
    let log_likelihood = rows
        .iter()
        .zip(y)
        .map(|(r, &yi)| {
            let eta: f64 = (0..p).map(|j| design(r, j) * gamma[j]).sum();
            // log(1 + e^eta), computed without overflow
            let log1pexp = if eta > 0.0 {
                eta + (-eta).exp().ln_1p()
            } else {
                eta.exp().ln_1p()
            };
            if yi {
                eta - log1pexp
            } else {
                -log1pexp
            }
        })
        .sum();
    Ok(LogisticFit {
        coefficients,
        std_errors,
        log_likelihood,
        iterations: steps,
    })
}

/// Cholesky factor of a symmetric positive definite p x p matrix (row-major), lower triangle.
fn cholesky(m: &[f64], p: usize) -> Option<Vec<f64>> {
    let mut l = vec![0.0; p * p];
    for i in 0..p {
        for j in 0..=i {
            let s: f64 = (0..j).map(|k| l[i * p + k] * l[j * p + k]).sum();
            if i == j {
                let d = m[i * p + i] - s;
                if d <= 0.0 || !d.is_finite() {
                    return None;
                }
                l[i * p + i] = d.sqrt();
            } else {
                l[i * p + j] = (m[i * p + j] - s) / l[j * p + j];
            }
        }
    }
    Some(l)
}

fn solve_with(l: &[f64], b: &[f64], p: usize) -> Vec<f64> {
    let mut y = vec![0.0; p];
    for i in 0..p {
        y[i] = (b[i] - (0..i).map(|k| l[i * p + k] * y[k]).sum::<f64>()) / l[i * p + i];
    }
    let mut x = vec![0.0; p];
    for i in (0..p).rev() {
        x[i] = (y[i] - (i + 1..p).map(|k| l[k * p + i] * x[k]).sum::<f64>()) / l[i * p + i];
    }
    x
}

fn solve(m: &[f64], b: &[f64], p: usize) -> Option<Vec<f64>> {
    cholesky(m, p).map(|l| solve_with(&l, b, p))
}

fn inverse(m: &[f64], p: usize) -> Option<Vec<f64>> {
    let l = cholesky(m, p)?;
    let mut inv = vec![0.0; p * p];
    for c in 0..p {
        let mut e = vec![0.0; p];
        e[c] = 1.0;
        for (r, v) in solve_with(&l, &e, p).into_iter().enumerate() {
            inv[r * p + c] = v;
        }
    }
    Some(inv)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refuses_degenerate_data() {
        let rows = vec![vec![1.0], vec![2.0], vec![3.0]];
        assert_eq!(
            fit(&rows, &[true, true, true], 0.0),
            Err(FitError::OneClass(3))
        );
        assert_eq!(
            fit(&[vec![1.0], vec![1.0]], &[true, false], 0.0),
            Err(FitError::Constant(0))
        );
        // Complete separation: x < 2 is always 0, x > 2 always 1.
        let rows: Vec<Vec<f64>> = (0..10).map(|i| vec![i as f64]).collect();
        let y: Vec<bool> = (0..10).map(|i| i > 4).collect();
        assert!(matches!(
            fit(&rows, &y, 0.0),
            Err(FitError::NoConvergence(_))
        ));
        assert!(
            fit(&rows, &y, 1.0).is_ok(),
            "an L2 penalty makes separable data fittable"
        );
    }
}
