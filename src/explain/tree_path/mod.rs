//! Exact path-dependent TreeSHAP (Lundberg, Erion, Lee 2018, arXiv:1802.03888).
//!
//! For one leaf, the expectation over the training population is a product game: column j on
//! the path counts with its indicator `o_j` (does the row satisfy every split on j?) when j is
//! known, and with its zero fraction `z_j` (share of cover) when not. Writing
//! `g_j(u) = z_j + (o_j - z_j) u`, the Shapley weight s!(k-1-s)!/k! is a Beta integral, so
//!
//! ```text
//! phi_i = v (o_i - z_i) * integral over [0,1] of prod_{j != i} g_j(u) du,
//! ```
//!
//! a polynomial of degree k-1 that Gauss-Legendre quadrature with ceil(k/2) points gets exactly
//! (the idea of Linear TreeShap, Yu et al. 2022, arXiv:2209.08192). Per tree, `prod_j g_j` is
//! carried down to every node at each quadrature point and leaf values times it are summed back
//! up; a column's contribution is collected on each edge that splits on it, with a telescoping
//! correction where a column is split on again deeper down. Work is O(nodes x points) per tree.
//!
//! Two kernels compute this: `levels` (flat passes over trees laid out level by level, no branch
//! on the row, vectorised; it explains decisions) and `recursive` (a depth-first walk, the
//! reference the tests hold the other to). Trees with more than [`QUADRATURE_MAX_DEPTH`]
//! distinct columns on a path use the per-leaf closed form in elementary symmetric polynomials
//! (`per_leaf`), O(leaves x depth^2).

mod levels;
mod per_leaf;
mod recursive;

use super::paths::{PathTree, TreePaths};
use crate::artifact::spec::Aggregation;
use crate::model::forest::finish;
use crate::model::{Ensemble, Node};
use levels::{LevelGroup, LANES};
use recursive::{QuadTree, Rule};

/// Most distinct columns on one path explained by quadrature (8 points); wider trees use the
/// per-leaf closed form.
pub const QUADRATURE_MAX_DEPTH: usize = 16;
const MAX_POINTS: usize = QUADRATURE_MAX_DEPTH / 2;

/// Which kernel explains the trees that quadrature takes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kernel {
    /// Level by level, branch-free and vectorised: what decisions use.
    Levels,
    /// Depth-first recursion: the reference the tests and benchmarks compare with.
    Recursive,
}

#[derive(Debug, Clone)]
pub struct PathExplainer {
    base: f64,
    /// What turns the leaves a row reaches into the model's raw output.
    aggregation: Aggregation,
    initial_value: f64,
    tree_count: usize,
    /// Trees for the level kernel, one group per quadrature rule in use.
    groups: Vec<LevelGroup>,
    /// Trees for the recursive kernel, with their place in the ensemble and their nodes.
    recursive: Vec<(usize, QuadTree, Vec<Node>)>,
    /// Trees too wide for quadrature, with their place in the ensemble.
    per_leaf: Vec<(usize, Vec<Node>, PathTree)>,
    /// Gauss-Legendre rules on [0, 1] for the recursive kernel, indexed by number of points.
    rules: Vec<Rule>,
}

impl PathExplainer {
    /// Needs every node's cover (checked at load).
    pub fn new(ensemble: &Ensemble) -> Self {
        Self::with_options(ensemble, QUADRATURE_MAX_DEPTH, Kernel::Levels)
    }

    /// As [`Self::new`], using quadrature only for trees whose paths hold at most `limit` distinct
    /// columns (0: never) and the per-leaf closed form for the others, and `kernel` for the
    /// quadrature. All are exact; tests use this to check each against the others.
    pub fn with_options(ensemble: &Ensemble, limit: usize, kernel: Kernel) -> Self {
        let limit = limit.min(QUADRATURE_MAX_DEPTH);
        let weight = ensemble.tree_weight();
        let mut base = match ensemble.aggregation {
            Aggregation::SumLogOdds | Aggregation::SumProbability => ensemble.initial_value,
            Aggregation::MeanProbability => 0.0,
        };
        let mut explainer = PathExplainer {
            base: 0.0,
            aggregation: ensemble.aggregation,
            initial_value: ensemble.initial_value,
            tree_count: ensemble.trees.len(),
            groups: LANES.iter().map(|&q| LevelGroup::new(q)).collect(),
            recursive: Vec::new(),
            per_leaf: Vec::new(),
            rules: (0..=MAX_POINTS).map(Rule::new).collect(),
        };
        let paths = TreePaths::new(ensemble);
        for (index, (tree, paths)) in ensemble.trees.iter().zip(paths.trees).enumerate() {
            let root = tree.nodes[0].cover;
            if root > 0.0 {
                for node in tree.nodes.iter().filter(|n| n.is_leaf()) {
                    base += weight * node.value * node.cover / root;
                }
            }
            // The widest leaf game has k players; its integrand has degree k - 1.
            let players = paths.leaves.iter().map(|l| l.k as usize).max().unwrap_or(0);
            let points = players.div_ceil(2).max(1);
            let group = (explainer.groups.iter_mut())
                .find(|g| g.points() >= points)
                .filter(|g| g.has_room_for(paths.leaves.len()));
            if players > limit || tree.nodes.len() >= u32::MAX as usize {
                explainer.per_leaf.push((index, tree.nodes.clone(), paths));
            } else if let (Kernel::Levels, Some(group)) = (kernel, group) {
                let zero = edge_zero_fractions(&tree.nodes, &paths.pos);
                group.push(index, &tree.nodes, &paths.pos, &zero, weight);
            } else {
                let t = QuadTree::new(&tree.nodes, &paths.pos, weight, points);
                explainer.recursive.push((index, t, tree.nodes.clone()));
            }
        }
        explainer.groups.retain(|g| g.tree_count() > 0);
        explainer.base = base;
        explainer
    }

    /// Expected output over the training population (through the covers).
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        self.explain_and_score(x, out);
    }

    /// As [`Self::explain_into`], and returns the model's raw output for `x`, bit for bit what
    /// `Ensemble::raw` gives: the walk decides at every split where the row goes, so the leaf it
    /// reaches in each tree comes at the cost of a short descent through memory just written,
    /// where the model's own walk would fetch each tree's nodes again.
    pub fn explain_and_score(&self, x: &[f64], out: &mut [f64]) -> f64 {
        let mut reached = vec![0.0; self.tree_count];
        for group in &self.groups {
            group.explain_into(x, out, &mut reached);
        }
        self.explain_other_trees(x, out, &mut reached);
        // Summed in tree order, as the model's walk sums them.
        let sum: f64 = reached.iter().sum();
        finish(self.aggregation, self.initial_value, self.tree_count, sum)
    }

    /// [`Self::explain_and_score`] for many rows at once: `rows` holds them one after another,
    /// `width` values each, and each row's contributions are added to its `width` values of
    /// `out`; returns each row's raw output. The level kernel takes a block of rows per pass
    /// over each tree (rows in vector lanes); every row gets the bits it gets alone.
    pub fn explain_rows_and_score(&self, rows: &[f64], width: usize, out: &mut [f64]) -> Vec<f64> {
        let n = rows.len().checked_div(width).unwrap_or(0);
        let trees = self.tree_count;
        let mut reached = vec![0.0; n * trees];
        for group in &self.groups {
            group.explain_rows_into(rows, width, out, &mut reached, trees);
        }
        let rows = rows.chunks_exact(width.max(1));
        let outs = out.chunks_exact_mut(width.max(1));
        let reached_rows = reached.chunks_exact_mut(trees.max(1));
        for ((x, out), reached) in rows.zip(outs).zip(reached_rows) {
            self.explain_other_trees(x, out, reached);
        }
        (0..n)
            .map(|i| {
                let sum: f64 = reached[i * trees..(i + 1) * trees].iter().sum();
                finish(self.aggregation, self.initial_value, trees, sum)
            })
            .collect()
    }

    /// The trees outside the level kernel's groups, for one row: contributions added to `out`,
    /// each tree's reached leaf value written to `reached` at its place.
    fn explain_other_trees(&self, x: &[f64], out: &mut [f64], reached: &mut [f64]) {
        for (index, tree, nodes) in &self.recursive {
            tree.explain_into(&self.rules[tree.points()], x, out);
            reached[*index] = leaf_value(nodes, x);
        }
        for (index, nodes, paths) in &self.per_leaf {
            per_leaf::per_leaf_into(nodes, paths, x, out);
            reached[*index] = leaf_value(nodes, x);
        }
    }

    /// (trees explained by quadrature, trees explained per leaf), for `inspect`.
    pub fn algorithm_counts(&self) -> (usize, usize) {
        let levels: usize = self.groups.iter().map(|g| g.tree_count()).sum();
        (levels + self.recursive.len(), self.per_leaf.len())
    }
}

/// The zero fraction each edge leaves its parent's column with: the product of the cover ratios
/// of every split on that column from the root down to and including this edge (1 at the root).
fn edge_zero_fractions(nodes: &[Node], pos: &[u8]) -> Vec<f64> {
    let mut zero = vec![1.0; nodes.len()];
    let mut stack = vec![(0u32, [1.0f64; QUADRATURE_MAX_DEPTH + 1])];
    while let Some((id, path)) = stack.pop() {
        let n = &nodes[id as usize];
        if n.is_leaf() {
            continue;
        }
        let p = pos[id as usize] as usize;
        for c in [n.left, n.right] {
            let child = nodes[c as usize].cover;
            let ratio = if n.cover == 0.0 { 0.0 } else { child / n.cover };
            let mut next = path;
            next[p] *= ratio;
            zero[c as usize] = next[p];
            stack.push((c, next));
        }
    }
    zero
}

/// The value of the leaf `x` reaches, by the model's own rule.
fn leaf_value(nodes: &[Node], x: &[f64]) -> f64 {
    let mut n = &nodes[0];
    while !n.is_leaf() {
        n = &nodes[n.child(x[n.column as usize]) as usize];
    }
    n.value
}
