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
//!
//! The game's two ends, v(all) = f(x) and v(empty) = mean f(b), are the model's own outputs for
//! one row (the decision's probability and the base value), so contributions add up to the
//! decision exactly. The coalitions between are evaluated in bulk, by the fastest exact route
//! the model allows: a network's first layer walked in Gray-code order (one vector addition per
//! coalition), an RBF support-vector machine's kernel factored over fields (a product of
//! per-field terms, so each background row costs one small matrix product), otherwise the
//! hybrid rows themselves. Bulk evaluation may differ from one-row evaluation in the last
//! float32 bit, which moves a contribution by about 1e-8.

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
    /// An RBF support-vector machine's kernel, factored over fields.
    svm: Option<Rbf>,
    /// Walk a network's folded first layer (off: evaluate every hybrid row in full).
    use_front: bool,
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
        let background_output = (background.iter())
            .map(|b| {
                let row: Vec<f64> = b.iter().map(|&v| v as f64).collect();
                model.probability(&row)
            })
            .collect::<Vec<f64>>();
        if background_output.iter().any(|p| !p.is_finite()) {
            return Err("the model gives no finite probability for a background row".into());
        }
        let svm = match (model.as_svm(), model.front()) {
            (Some((scaler, svm)), None) => match svm.kernel {
                crate::model::graph::Kernel::Rbf { gamma } => {
                    Some(Rbf::new(svm, scaler, gamma, &background, &groups))
                }
                _ => None,
            },
            _ => None,
        };
        let base = background_output.iter().sum::<f64>() / background.len().max(1) as f64;
        let orders = match &mode {
            Mode::Exact => Vec::new(),
            Mode::Sampled { permutations, seed } => {
                let mut rng = crate::rng::Rng::new(*seed);
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
            svm,
            use_front: true,
        })
    }

    /// The same explainer evaluating every hybrid row in full, without the first-layer walk
    /// or the factored kernel (for checking those against it).
    pub fn without_shortcuts(mut self) -> Self {
        self.svm = None;
        self.use_front = false;
        self
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
        let fx = self.model.probability(x);
        let (phi, se) = match &self.mode {
            Mode::Exact => (self.exact(&x32, fx), None),
            Mode::Sampled { .. } => {
                let (p, s) = self.sampled(&x32, fx);
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

    fn exact(&self, x: &[f32], fx: f64) -> Vec<f64> {
        let f = self.groups.len();
        let coalitions = 1usize << f;
        let mut v = vec![0.0f64; coalitions];
        // Several background rows per batch, about 8,192 model rows at a time.
        let per_batch = (8192 / coalitions).max(1);
        for start in (0..self.background.len()).step_by(per_batch) {
            let block = start..(start + per_batch).min(self.background.len());
            let p = self.coalition_values(x, block.clone());
            for k in 0..block.len() {
                for (mask, value) in v.iter_mut().enumerate() {
                    *value += p[k * coalitions + mask];
                }
            }
        }
        let n = self.background.len() as f64;
        v.iter_mut().for_each(|value| *value /= n);
        // The game's ends are the model's own outputs: f(x) and the base value.
        v[coalitions - 1] = fx;
        v[0] = self.base;
        shapley_from_values(&v, f)
    }

    /// The model's output on every coalition's hybrid row, for background rows `block`:
    /// `block.len() * 2^F` values, background-major, coalitions by bit mask.
    fn coalition_values(&self, x: &[f32], block: std::ops::Range<usize>) -> Vec<f64> {
        let f = self.groups.len();
        let coalitions = 1usize << f;
        let rows = block.len() * coalitions;
        if let Some(rbf) = &self.svm {
            return block.flat_map(|b| rbf.values(x, b)).collect();
        }
        let failed = || vec![f64::NAN; rows];
        if let Some(front) = self.model.front().filter(|_| self.use_front) {
            let h = front.hidden;
            // Each field's share of the first layer, for the applicant and for a row.
            let share = |row: &[f32], g: usize| {
                let mut out = vec![0.0f64; h];
                for j in self.groups[g].clone() {
                    let w = &front.weights[j * h..(j + 1) * h];
                    for (o, w) in out.iter_mut().zip(w) {
                        *o += row[j] as f64 * w;
                    }
                }
                out
            };
            let ux: Vec<Vec<f64>> = (0..f).map(|g| share(x, g)).collect();
            let mut pre = vec![0.0f32; rows * h];
            for (k, b) in block.clone().enumerate() {
                let ub: Vec<Vec<f64>> = (0..f).map(|g| share(&self.background[b], g)).collect();
                let mut a: Vec<f64> = front.bias.clone();
                for u in &ub {
                    a.iter_mut().zip(u).for_each(|(a, u)| *a += u);
                }
                let base = k * coalitions;
                let write = |pre: &mut [f32], mask: usize, a: &[f64]| {
                    let at = (base + mask) * h;
                    for (p, v) in pre[at..at + h].iter_mut().zip(a) {
                        *p = *v as f32;
                    }
                };
                write(&mut pre, 0, &a);
                // Gray code: coalition i differs from i - 1 in field trailing_zeros(i).
                for i in 1..coalitions {
                    let g = i.trailing_zeros() as usize;
                    let mask = i ^ (i >> 1);
                    let (to, from) = if mask >> g & 1 == 1 {
                        (&ux[g], &ub[g])
                    } else {
                        (&ub[g], &ux[g])
                    };
                    for ((a, t), s) in a.iter_mut().zip(to).zip(from) {
                        *a += t - s;
                    }
                    write(&mut pre, mask, &a);
                }
            }
            return self
                .model
                .probabilities_after_front(pre, rows)
                .unwrap_or_else(|_| failed());
        }
        let width = x.len();
        let mut hybrid = vec![0.0f32; rows * width];
        for (k, b) in block.enumerate() {
            for mask in 0..coalitions {
                let at = (k * coalitions + mask) * width;
                self.hybrid(
                    x,
                    &self.background[b],
                    mask as u64,
                    &mut hybrid[at..at + width],
                );
            }
        }
        self.model
            .probabilities(&hybrid, rows)
            .unwrap_or_else(|_| failed())
    }

    fn sampled(&self, x: &[f32], fx: f64) -> (Vec<f64>, Vec<f64>) {
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
                for (step, &g) in order.iter().enumerate() {
                    // The last step reaches x itself: the decision's own probability.
                    let now = if step + 1 == order.len() { fx } else { p[k] };
                    let d = now - prev;
                    prev = now;
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

/// An RBF support-vector machine's kernel factored over fields:
/// `exp(-gamma |z - sv|^2) = prod over fields of exp(-gamma |z_f - sv_f|^2)`. For one
/// background row every coalition's decision value is `rho + sum_m coef_m P1_m(S1) P2_m(S2)`,
/// `S1`, `S2` the coalition's parts in two halves of the fields: a matrix product.
#[derive(Debug, Clone)]
struct Rbf {
    svm: std::sync::Arc<crate::model::graph::Svm>,
    scaler: Vec<(f32, f32)>,
    gamma: f64,
    groups: Vec<Range<usize>>,
    /// Fields in the first half.
    first: usize,
    /// Per background row, support vector and field: exp(-gamma |z_f - sv_f|^2).
    background_terms: Vec<f64>,
}

impl Rbf {
    fn new(
        svm: &crate::model::graph::Svm,
        scaler: Option<&[(f32, f32)]>,
        gamma: f64,
        background: &[Vec<f32>],
        groups: &[Range<usize>],
    ) -> Self {
        let mut r = Rbf {
            svm: std::sync::Arc::new(svm.clone()),
            scaler: scaler.map(<[_]>::to_vec).unwrap_or_default(),
            gamma,
            groups: groups.to_vec(),
            first: groups.len() / 2,
            background_terms: Vec::new(),
        };
        r.background_terms = background.iter().flat_map(|b| r.terms(b)).collect();
        r
    }

    fn scaled(&self, row: &[f32]) -> Vec<f64> {
        (row.iter().enumerate())
            .map(|(j, &v)| match self.scaler.as_slice() {
                [] => v as f64,
                [one] => (v as f64 - one.0 as f64) * one.1 as f64,
                cols => (v as f64 - cols[j].0 as f64) * cols[j].1 as f64,
            })
            .collect()
    }

    /// exp(-gamma |z_f - sv_f|^2) for every support vector and field.
    fn terms(&self, row: &[f32]) -> Vec<f64> {
        let z = self.scaled(row);
        let w = self.svm.width;
        let mut out = Vec::with_capacity(self.svm.support_vectors() * self.groups.len());
        for sv in self.svm.vectors.chunks_exact(w) {
            for g in &self.groups {
                let d: f64 = g.clone().map(|j| (z[j] - sv[j]).powi(2)).sum();
                out.push((-self.gamma * d).exp());
            }
        }
        out
    }

    /// Products over one half of the fields, for every subset of that half, by doubling.
    fn half(terms_x: &[f64], terms_b: &[f64], fields: Range<usize>, out: &mut Vec<f64>) {
        out.clear();
        out.push(1.0);
        for f in fields {
            let n = out.len();
            for i in 0..n {
                let v = out[i];
                out[i] = v * terms_b[f];
                out.push(v * terms_x[f]);
            }
        }
    }

    /// Probabilities of every coalition for background row `b`.
    fn values(&self, x: &[f32], b: usize) -> Vec<f64> {
        let f = self.groups.len();
        let tx = self.terms(x);
        let per_sv = f;
        let count = self.svm.support_vectors();
        let tb = &self.background_terms[b * count * per_sv..(b + 1) * count * per_sv];
        let (n1, n2) = (1usize << self.first, 1usize << (f - self.first));
        let mut d = vec![0.0f64; n1 * n2];
        let (mut p1, mut p2) = (Vec::with_capacity(n1), Vec::with_capacity(n2));
        for m in 0..count {
            let (sx, sb) = (
                &tx[m * per_sv..(m + 1) * per_sv],
                &tb[m * per_sv..(m + 1) * per_sv],
            );
            Self::half(sx, sb, 0..self.first, &mut p1);
            Self::half(sx, sb, self.first..f, &mut p2);
            let c = self.svm.coefficients[m];
            for (s2, &q) in p2.iter().enumerate() {
                let cq = c * q;
                let row = &mut d[s2 * n1..(s2 + 1) * n1];
                for (slot, &p) in row.iter_mut().zip(&p1) {
                    *slot += cq * p;
                }
            }
        }
        // d[s2 * n1 + s1] is coalition s1 | s2 << first.
        d.iter()
            .map(|&sum| self.svm.probability(sum + self.svm.rho))
            .collect()
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
