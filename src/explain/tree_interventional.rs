//! Exact interventional TreeSHAP against a background sample (Lundberg et al. 2020, Nature
//! Machine Intelligence 2:56-67).
//!
//! For a row x and one background row b, a leaf is reached by the hybrid row (x on coalition S,
//! b elsewhere) iff S holds every path column that only x satisfies (set A) and none that only b
//! satisfies (set B). That game has the closed form: a member of A gets
//! `v (|A|-1)! |B|! / (|A|+|B|)!`, a member of B minus `v |A|! (|B|-1)! / (|A|+|B|)!`. A joint
//! walk of the tree for x and b visits only leaves some hybrid can reach. Values are averaged
//! over the background.

use super::paths::{PathTree, TreePaths};
use super::weights::{unanimity, MAX_PATH_COLUMNS};
use crate::model::{Ensemble, Node};

#[derive(Debug, Clone)]
pub struct InterventionalExplainer {
    trees: Vec<(Vec<Node>, PathTree)>,
    /// Encoded background rows, row after row.
    background: Vec<f64>,
    columns: usize,
    base: f64,
}

impl InterventionalExplainer {
    /// `background` holds encoded rows (NaN = missing); must not be empty (checked at load).
    pub fn new(ensemble: &Ensemble, background: &[Vec<f64>]) -> Self {
        let paths = TreePaths::new(ensemble);
        let columns = background.first().map_or(0, Vec::len);
        let base =
            background.iter().map(|b| ensemble.raw(b)).sum::<f64>() / background.len() as f64;
        InterventionalExplainer {
            trees: ensemble
                .trees
                .iter()
                .zip(paths.trees)
                .map(|(t, p)| (t.nodes.clone(), p))
                .collect(),
            background: background.concat(),
            columns,
            base,
        }
    }

    /// Mean model output over the background sample.
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn background_rows(&self) -> usize {
        self.background.len() / self.columns.max(1)
    }

    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        for (nodes, paths) in &self.trees {
            for b in self.background.chunks_exact(self.columns) {
                walk(nodes, paths, x, b, out);
            }
        }
        let n = self.background_rows() as f64;
        for v in out.iter_mut() {
            *v /= n;
        }
    }
}

/// Joint walk for one (row, background row) pair; adds that pair's Shapley values to `out`.
fn walk(nodes: &[Node], paths: &PathTree, x: &[f64], b: &[f64], out: &mut [f64]) {
    // (node, bits x satisfies, bits b satisfies); a position cleared in both is unreachable.
    let mut stack = [(0u32, 0u64, 0u64); MAX_PATH_COLUMNS + 2];
    let mut top = 1;
    stack[0] = (0, u64::MAX, u64::MAX);
    while top > 0 {
        top -= 1;
        let (id, xs, bs) = stack[top];
        let node = &nodes[id as usize];
        if node.is_leaf() {
            let only_x = xs & !bs;
            let only_b = bs & !xs;
            let (a, nb) = (only_x.count_ones() as usize, only_b.count_ones() as usize);
            if a + nb == 0 {
                continue; // x and b agree on this path: no one moves the output here
            }
            let leaf = paths.leaves[paths.leaf_index[id as usize] as usize];
            let cols = &paths.cols[leaf.range()];
            if a > 0 {
                let gain = leaf.value * unanimity(a, nb);
                for_each_bit(only_x, |p| out[cols[p] as usize] += gain);
            }
            if nb > 0 {
                let loss = leaf.value * unanimity(nb, a);
                for_each_bit(only_b, |p| out[cols[p] as usize] -= loss);
            }
            continue;
        }
        let bit = 1u64 << paths.pos[id as usize];
        let c = node.column as usize;
        let (x_left, b_left) = (node.goes_left(x[c]), node.goes_left(b[c]));
        for (child, went_left) in [(node.left, true), (node.right, false)] {
            let nx = if x_left == went_left { xs } else { xs & !bit };
            let nbs = if b_left == went_left { bs } else { bs & !bit };
            if (nx | nbs) & bit != 0 {
                stack[top] = (child, nx, nbs);
                top += 1;
            }
        }
    }
}

#[inline]
fn for_each_bit(mut bits: u64, mut f: impl FnMut(usize)) {
    while bits != 0 {
        f(bits.trailing_zeros() as usize);
        bits &= bits - 1;
    }
}
