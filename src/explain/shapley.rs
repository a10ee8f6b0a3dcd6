//! Interventional Shapley values of any model, over fields, against a background sample.
//!
//! For each background row b the game is v_b(S) = f(x_S, b_notS): the applicant's values for the
//! fields in S, the background row's elsewhere (a field's dummy columns move together). Its
//! Shapley values averaged over the background are the contributions; the base value is the mean
//! of f over the background, so base + sum = f(x) (Janzing, Minorics, Bloebaum 2020 call this the
//! interventional game; shap's Exact explainer with an Independent masker computes the same).
//!
//! - Exact: all 2^F coalitions for each background row, the model evaluated in batches;
//!   phi_i = sum over S without i of |S|! (F - |S| - 1)! / F! * (v(S + i) - v(S)).
//! - Sampled: for each background row, the same seeded permutations (each with its reverse, an
//!   antithetic pair); a permutation's marginal differences add up to f(x) - f(b), so the
//!   estimate is additive exactly. Its standard error per field is the sample standard deviation
//!   of the marginals over sqrt(samples), treating samples as independent (the antithetic pairs
//!   are negatively correlated, so this overstates the error).

use crate::model::graph::GraphModel;
use std::ops::Range;
use std::sync::Arc;

/// Most fields exact enumeration is offered for (2^20 coalitions).
pub const MAX_EXACT_FIELDS: usize = 20;
/// Model evaluations allowed per decision, exact or sampled: at the measured 60-80 ns per
/// evaluation of a 10-field network (docs/PERFORMANCE.md) about 40 ms.
pub const MAX_EVALUATIONS: usize = 1 << 19;

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Mode {
    Exact,
    /// `permutations` per background row (even: each comes with its reverse).
    Sampled {
        permutations: usize,
        seed: u64,
    },
}

#[derive(Debug, Clone)]
pub struct ShapleyExplainer {
    model: Arc<GraphModel>,
    /// Encoded background rows, as float32 (the runtime's input type).
    background: Vec<Vec<f32>>,
    /// Each scored field's encoded columns.
    groups: Vec<Range<usize>>,
    mode: Mode,
    /// Sampled mode: the permutations of the groups, shared by every decision.
    orders: Vec<Vec<usize>>,
    base: f64,
    background_output: Vec<f64>,
}

/// Model evaluations one decision costs.
pub fn evaluations(fields: usize, background: usize, mode: &Mode) -> usize {
    match mode {
        Mode::Exact => (1usize << fields.min(40)).saturating_mul(background),
        Mode::Sampled { permutations, .. } => permutations
            .saturating_mul(background)
            .saturating_mul(fields),
    }
}

impl ShapleyExplainer {
    /// `background` holds encoded rows; `groups` the scored fields' column ranges. Errors when
    /// the model cannot be evaluated on the background.
    pub fn new(
        model: Arc<GraphModel>,
        background: &[Vec<f64>],
        groups: Vec<Range<usize>>,
        mode: Mode,
    ) -> Result<Self, String> {
        let background: Vec<Vec<f32>> = (background.iter())
            .map(|b| b.iter().map(|&v| v as f32).collect())
            .collect();
        let flat: Vec<f32> = background.concat();
        let background_output = model.probabilities(&flat, background.len())?;
        let base = background_output.iter().sum::<f64>() / background.len().max(1) as f64;
        let orders = match &mode {
            Mode::Exact => Vec::new(),
            Mode::Sampled { permutations, seed } => {
                let mut rng = crate::train::Rng::new(*seed);
                let mut out = Vec::new();
                for _ in 0..permutations.div_ceil(2) {
                    let mut p: Vec<usize> = (0..groups.len()).collect();
                    for i in (1..p.len()).rev() {
                        let j = (rng.next_u64() % (i as u64 + 1)) as usize;
                        p.swap(i, j);
                    }
                    let mut r = p.clone();
                    r.reverse();
                    out.push(p);
                    out.push(r);
                }
                out.truncate(*permutations);
                out
            }
        };
        Ok(ShapleyExplainer {
            model,
            background,
            groups,
            mode,
            orders,
            base,
            background_output,
        })
    }

    /// Mean model output over the background.
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn mode(&self) -> &Mode {
        &self.mode
    }

    pub fn background_rows(&self) -> usize {
        self.background.len()
    }

    pub fn fields(&self) -> usize {
        self.groups.len()
    }

    /// Model evaluations per decision.
    pub fn evaluations(&self) -> usize {
        evaluations(self.groups.len(), self.background.len(), &self.mode)
    }

    /// Contributions per field, written to each field's first column (its other columns 0);
    /// standard errors likewise into `errors` in sampled mode (left empty when exact).
    pub fn explain_into(&self, x: &[f64], out: &mut [f64], errors: &mut Vec<f64>) {
        let x32: Vec<f32> = x.iter().map(|&v| v as f32).collect();
        let (phi, se) = match &self.mode {
            Mode::Exact => (self.exact(&x32), None),
            Mode::Sampled { .. } => {
                let (p, s) = self.sampled(&x32);
                (p, Some(s))
            }
        };
        for (g, range) in self.groups.iter().enumerate() {
            if let Some(first) = range.clone().next() {
                out[first] = phi[g];
            }
        }
        errors.clear();
        if let Some(se) = se {
            errors.resize(out.len(), 0.0);
            for (g, range) in self.groups.iter().enumerate() {
                if let Some(first) = range.clone().next() {
                    errors[first] = se[g];
                }
            }
        }
    }

    /// The hybrid row: `x` on the fields in `mask`, `b` elsewhere.
    fn hybrid(&self, x: &[f32], b: &[f32], mask: u64, row: &mut [f32]) {
        row.copy_from_slice(b);
        for (g, range) in self.groups.iter().enumerate() {
            if mask >> g & 1 == 1 {
                row[range.clone()].copy_from_slice(&x[range.clone()]);
            }
        }
    }

    fn exact(&self, x: &[f32]) -> Vec<f64> {
        let f = self.groups.len();
        let coalitions = 1usize << f;
        let width = x.len();
        let mut v = vec![0.0f64; coalitions];
        // Several background rows per batch, about 8,192 rows of model input at a time.
        let per_batch = (8192 / coalitions).max(1);
        let mut rows = Vec::new();
        for block in self.background.chunks(per_batch) {
            rows.clear();
            rows.resize(block.len() * coalitions * width, 0.0f32);
            for (k, b) in block.iter().enumerate() {
                for mask in 0..coalitions {
                    let at = (k * coalitions + mask) * width;
                    self.hybrid(x, b, mask as u64, &mut rows[at..at + width]);
                }
            }
            let p = self
                .model
                .probabilities(&rows, block.len() * coalitions)
                .unwrap_or_else(|_| vec![f64::NAN; block.len() * coalitions]);
            for k in 0..block.len() {
                for (mask, value) in v.iter_mut().enumerate() {
                    *value += p[k * coalitions + mask];
                }
            }
        }
        let n = self.background.len() as f64;
        v.iter_mut().for_each(|value| *value /= n);
        shapley_from_values(&v, f)
    }

    fn sampled(&self, x: &[f32]) -> (Vec<f64>, Vec<f64>) {
        let f = self.groups.len();
        let width = x.len();
        let steps = self.orders.len() * self.background.len();
        let mut rows = vec![0.0f32; steps * f * width];
        let mut at = 0;
        for b in &self.background {
            for order in &self.orders {
                let mut row = b.clone();
                for &g in order {
                    row[self.groups[g].clone()].copy_from_slice(&x[self.groups[g].clone()]);
                    rows[at..at + width].copy_from_slice(&row);
                    at += width;
                }
            }
        }
        let p = self
            .model
            .probabilities(&rows, steps * f)
            .unwrap_or_else(|_| vec![f64::NAN; steps * f]);
        let (mut sum, mut sum_sq) = (vec![0.0f64; f], vec![0.0f64; f]);
        let mut k = 0;
        for (bi, _) in self.background.iter().enumerate() {
            for order in &self.orders {
                let mut prev = self.background_output[bi];
                for &g in order {
                    let d = p[k] - prev;
                    prev = p[k];
                    sum[g] += d;
                    sum_sq[g] += d * d;
                    k += 1;
                }
            }
        }
        let n = steps as f64;
        let phi: Vec<f64> = sum.iter().map(|s| s / n).collect();
        let se = (0..f)
            .map(|g| {
                if steps < 2 {
                    return f64::NAN;
                }
                let var = (sum_sq[g] - n * phi[g] * phi[g]) / (n - 1.0);
                (var.max(0.0) / n).sqrt()
            })
            .collect();
        (phi, se)
    }
}

/// Shapley values of the game with values `v` (indexed by coalition bit mask) over `f` players.
pub fn shapley_from_values(v: &[f64], f: usize) -> Vec<f64> {
    // w[s] = s! (f - s - 1)! / f!, built without factorials.
    let mut w = vec![0.0f64; f.max(1)];
    if f > 0 {
        w[0] = 1.0 / f as f64;
        for s in 1..f {
            w[s] = w[s - 1] * s as f64 / (f - s) as f64;
        }
    }
    let mut phi = vec![0.0f64; f];
    for mask in 0..v.len() {
        let s = (mask as u64).count_ones() as usize;
        for (i, p) in phi.iter_mut().enumerate() {
            if mask >> i & 1 == 0 {
                *p += w[s] * (v[mask | 1 << i] - v[mask]);
            }
        }
    }
    phi
}

#[cfg(test)]
mod tests {
    use super::*;

    // A linear game v(S) = sum over S of c_i: each player's value is its own c_i.
    #[test]
    fn linear_game_gives_each_its_own_term() {
        let c = [0.5, -1.25, 2.0];
        let v: Vec<f64> = (0..8)
            .map(|m: usize| (0..3).filter(|i| m >> i & 1 == 1).map(|i| c[i]).sum())
            .collect();
        let phi = shapley_from_values(&v, 3);
        for (p, c) in phi.iter().zip(c) {
            assert!((p - c).abs() < 1e-15);
        }
    }

    // v(S) = 1 only for the grand coalition of two: each player gets 1/2 (hand-worked).
    #[test]
    fn unanimity_game_splits_evenly() {
        let phi = shapley_from_values(&[0.0, 0.0, 0.0, 1.0], 2);
        assert_eq!(phi, vec![0.5, 0.5]);
    }
}
