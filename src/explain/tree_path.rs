//! Exact path-dependent TreeSHAP (Lundberg, Erion, Lee 2018, arXiv:1802.03888).
//!
//! Per leaf, the expectation over the training population is a product game: column j on the
//! path contributes its indicator `o_j` (does the row satisfy every split on j?) when j is known
//! and its zero fraction `z_j` (cover share) when not. With `o` binary, a row's status on a path is
//! a bit set H of "hot" columns, and the Shapley values have closed forms in the elementary
//! symmetric polynomials `e_m` of the hot columns' zero fractions:
//!
//! * cold column: `-v * prod_cold(z) * sum_s w(s,k) e_{h-s}(z_H)` (the same for every cold column);
//! * hot column i: `(1 - z_i) * v * prod_cold(z) * sum_s w(s,k) e_{h-1-s}(z_{H\i})`,
//!
//! with `w(s,k) = s!(k-1-s)!/k!`. For short paths we tabulate `T(H) = v * R(H)` over all 2^k bit
//! sets at load (the idea of Fast TreeSHAP v2, Yang 2021, arXiv:2109.09847), so a row costs k
//! look-ups per leaf; longer paths, or paths through a zero-cover node, use the closed form.

use super::paths::{PathTree, TreePaths};
use super::weights::shapley;
use crate::model::{Ensemble, Node};

/// Paths with at most this many distinct columns are tabulated (2^k values per leaf).
pub const TABLE_MAX_COLUMNS: usize = 8;

#[derive(Debug, Clone)]
pub struct PathExplainer {
    trees: Vec<CompiledTree>,
    base: f64,
}

#[derive(Debug, Clone)]
struct CompiledTree {
    nodes: Vec<Node>,
    paths: PathTree,
    /// Per leaf: offset of its 2^k table in `table`, or `u32::MAX` for the closed form.
    table_at: Vec<u32>,
    table: Vec<f64>,
    /// Per position (aligned with `paths.cols`): (1 - z) / z, for tabulated leaves.
    hot_factor: Vec<f64>,
}

impl PathExplainer {
    /// Needs every node's cover (checked at load).
    pub fn new(ensemble: &Ensemble) -> Self {
        Self::with_table_limit(ensemble, TABLE_MAX_COLUMNS)
    }

    /// As [`Self::new`], tabulating only paths of at most `limit` distinct columns (0: never);
    /// both forms are exact, so this trades load time and memory against per-row speed.
    pub fn with_table_limit(ensemble: &Ensemble, limit: usize) -> Self {
        let limit = limit.min(TABLE_MAX_COLUMNS);
        let paths = TreePaths::new(ensemble);
        let mut base = match ensemble.aggregation {
            crate::artifact::spec::Aggregation::SumLogOdds => ensemble.base_score,
            crate::artifact::spec::Aggregation::MeanProbability => 0.0,
        };
        let trees = ensemble
            .trees
            .iter()
            .zip(paths.trees)
            .map(|(tree, paths)| {
                let root = tree.nodes[0].cover;
                for (id, node) in tree.nodes.iter().enumerate() {
                    if node.is_leaf() && root > 0.0 {
                        let leaf = paths.leaves[paths.leaf_index[id] as usize];
                        base += leaf.value * node.cover / root;
                    }
                }
                CompiledTree::new(tree.nodes.clone(), paths, limit)
            })
            .collect();
        PathExplainer { trees, base }
    }

    /// Expected output over the training population (through the covers).
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        for tree in &self.trees {
            tree.explain_into(x, out);
        }
    }

    /// How many leaves use the table, and how many values the tables hold (for `inspect`).
    pub fn table_stats(&self) -> (usize, usize, usize) {
        let mut tabulated = 0;
        let mut leaves = 0;
        let mut values = 0;
        for t in &self.trees {
            leaves += t.table_at.len();
            tabulated += t.table_at.iter().filter(|&&o| o != u32::MAX).count();
            values += t.table.len();
        }
        (tabulated, leaves, values)
    }
}

impl CompiledTree {
    fn new(nodes: Vec<Node>, paths: PathTree, limit: usize) -> Self {
        let mut table_at = Vec::with_capacity(paths.leaves.len());
        let mut table = Vec::new();
        let mut hot_factor = vec![0.0; paths.zero.len()];
        for leaf in &paths.leaves {
            let z = &paths.zero[leaf.range()];
            let k = leaf.k as usize;
            if k <= limit && z.iter().all(|&z| z > 0.0) {
                table_at.push(table.len() as u32);
                for hot in 0..(1u64 << k) {
                    table.push(if hot == (1u64 << k) - 1 {
                        0.0 // all hot: no cold column needs it, no hot column looks it up
                    } else {
                        leaf.value * reach_weight(z, hot)
                    });
                }
                for (f, z) in hot_factor[leaf.range()].iter_mut().zip(z) {
                    *f = (1.0 - z) / z;
                }
            } else {
                table_at.push(u32::MAX);
            }
        }
        CompiledTree {
            nodes,
            paths,
            table_at,
            table,
            hot_factor,
        }
    }

    fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        // Depth-first walk carrying the hot bit set; bounded stack, no allocation.
        let mut stack = [(0u32, 0u64); super::weights::MAX_PATH_COLUMNS + 2];
        let mut top = 1;
        stack[0] = (0, u64::MAX);
        while top > 0 {
            top -= 1;
            let (id, hot) = stack[top];
            let node = &self.nodes[id as usize];
            if node.is_leaf() {
                self.leaf_into(self.paths.leaf_index[id as usize] as usize, hot, out);
                continue;
            }
            let bit = 1u64 << self.paths.pos[id as usize];
            let left = node.goes_left(x[node.column as usize]);
            stack[top] = (node.right, if left { hot & !bit } else { hot });
            stack[top + 1] = (node.left, if left { hot } else { hot & !bit });
            top += 2;
        }
    }

    #[inline]
    fn leaf_into(&self, leaf_id: usize, hot: u64, out: &mut [f64]) {
        let leaf = self.paths.leaves[leaf_id];
        let k = leaf.k as usize;
        if k == 0 {
            return; // a single-leaf tree shifts only the base value
        }
        let hot = hot & ((1u64 << k) - 1);
        let cols = &self.paths.cols[leaf.range()];
        let at = self.table_at[leaf_id];
        if at != u32::MAX {
            let table = &self.table[at as usize..at as usize + (1 << k)];
            let cold = -table[hot as usize];
            let factors = &self.hot_factor[leaf.range()];
            // Branch-free: whether a column is hot is data-dependent and unpredictable.
            for (i, (&c, &f)) in cols.iter().zip(factors).enumerate() {
                let bit = 1u64 << i;
                let warm = f * table[(hot ^ bit) as usize & ((1 << k) - 1)];
                out[c as usize] += if hot & bit != 0 { warm } else { cold };
            }
        } else {
            closed_form_into(leaf.value, &self.paths.zero[leaf.range()], cols, hot, out);
        }
    }
}

/// `R(H) = prod_cold(z) * sum_s w(s,k) e_{h-s}(z_H)`: the Shapley weight that a cold column
/// loses (before the sign and leaf value), for bit set `hot` with at least one cold column.
fn reach_weight(z: &[f64], hot: u64) -> f64 {
    let k = z.len();
    let mut e = [0.0f64; super::weights::MAX_PATH_COLUMNS + 1];
    e[0] = 1.0;
    let mut h = 0;
    let mut cold = 1.0;
    for (i, &zi) in z.iter().enumerate() {
        if hot & (1 << i) != 0 {
            h += 1;
            for m in (1..=h).rev() {
                e[m] += zi * e[m - 1];
            }
        } else {
            cold *= zi;
        }
    }
    let w = shapley(k);
    cold * (0..=h).map(|s| w[s] * e[h - s]).sum::<f64>()
}

/// The closed form for one leaf, without tables or divisions (zero covers are fine).
fn closed_form_into(value: f64, z: &[f64], cols: &[u32], hot: u64, out: &mut [f64]) {
    let k = z.len();
    let w = shapley(k);
    let mut e = [0.0f64; super::weights::MAX_PATH_COLUMNS + 1];
    e[0] = 1.0;
    let mut h = 0;
    let mut cold_product = 1.0;
    for (i, &zi) in z.iter().enumerate() {
        if hot & (1 << i) != 0 {
            h += 1;
            for m in (1..=h).rev() {
                e[m] += zi * e[m - 1];
            }
        } else {
            cold_product *= zi;
        }
    }
    let scale = value * cold_product;
    if h < k {
        let cold = -scale * (0..=h).map(|s| w[s] * e[h - s]).sum::<f64>();
        for i in 0..k {
            if hot & (1 << i) == 0 {
                out[cols[i] as usize] += cold;
            }
        }
    }
    if h == 0 {
        return;
    }
    // e of the hot set without column i, by deflating one factor (z_i + t): stable for z <= 1.
    let mut without = [0.0f64; super::weights::MAX_PATH_COLUMNS + 1];
    for i in 0..k {
        if hot & (1 << i) == 0 {
            continue;
        }
        without[0] = 1.0;
        for m in 1..h {
            without[m] = e[m] - z[i] * without[m - 1];
        }
        let sum: f64 = (0..h).map(|s| w[s] * without[h - 1 - s]).sum();
        out[cols[i] as usize] += (1.0 - z[i]) * scale * sum;
    }
}
