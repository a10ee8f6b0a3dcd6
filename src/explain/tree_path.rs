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
//! a polynomial of degree k-1 that Gauss-Legendre quadrature with ceil(depth/2) points gets exactly
//! (the idea of Linear TreeShap, Yu et al. 2022, arXiv:2209.08192). One depth-first walk per tree
//! carries `prod_j g_j` down at each quadrature point and sums leaf values times it back up; a
//! column's contribution is collected on each edge that splits on it, with a telescoping
//! correction where a column is split on again deeper down. Work is O(nodes x points) per tree
//! and nothing is allocated per row.
//!
//! Trees with more than [`QUADRATURE_MAX_DEPTH`] distinct columns on a path use the per-leaf closed form in elementary
//! symmetric polynomials (`closed_form_into`), O(leaves x depth^2).

use super::paths::{PathTree, TreePaths};
use super::quadrature::gauss_legendre;
use super::weights::shapley;
use crate::artifact::spec::Aggregation;
use crate::model::{Ensemble, Node};

/// Most distinct columns on one path explained by quadrature (8 points); wider trees use the
/// per-leaf closed form.
pub const QUADRATURE_MAX_DEPTH: usize = 16;
const MAX_POINTS: usize = QUADRATURE_MAX_DEPTH / 2;

#[derive(Debug, Clone)]
pub struct PathExplainer {
    trees: Vec<CompiledTree>,
    base: f64,
    /// Gauss-Legendre rules on [0, 1], indexed by number of points.
    rules: Vec<Rule>,
}

#[derive(Debug, Clone, Default)]
struct Rule {
    u: [f64; MAX_POINTS],
    w: [f64; MAX_POINTS],
    /// 1 / (1 - u)
    inv_one_minus_u: [f64; MAX_POINTS],
}

#[derive(Debug, Clone)]
enum CompiledTree {
    Quadrature(QuadTree),
    PerLeaf { nodes: Vec<Node>, paths: PathTree },
}

/// A tree laid out for the quadrature walk: pre-order, so a split's left child is the next node
/// and the walk reads memory front to back.
#[derive(Debug, Clone)]
struct QuadTree {
    nodes: Vec<QNode>,
    /// Per node, `points` values: 1 / (z + (1 - z) u_r), the inverse of g when the edge is hot.
    inv_hot: Vec<f64>,
    points: usize,
}

#[derive(Debug, Clone, Copy)]
struct QNode {
    /// Split threshold; for a leaf, the leaf value times the tree weight.
    threshold: f64,
    /// Zero fraction of the parent's column once the edge into this node is taken (fixed by the
    /// tree: the product of cover ratios of the splits on that column down to here).
    zero: f64,
    /// 1 / zero (infinite for a zero-cover edge, which the walk never uses).
    inv_zero: f64,
    right: u32,
    column: u16,
    /// Position of this split's column on the path.
    pos: u8,
    flags: u8,
}

const IS_LEAF: u8 = 1;
const STRICT: u8 = 2;
const MISSING_LEFT: u8 = 4;

impl QNode {
    #[inline]
    fn goes_left(&self, x: f64) -> bool {
        if x.is_nan() {
            self.flags & MISSING_LEFT != 0
        } else if self.flags & STRICT != 0 {
            x < self.threshold
        } else {
            x <= self.threshold
        }
    }
}

impl QuadTree {
    fn new(nodes: &[Node], pos: &[u8], weight: f64, points: usize) -> Self {
        let zero = edge_zero_fractions(nodes, pos);
        let (u, _) = gauss_legendre(points);
        let mut out = QuadTree {
            nodes: Vec::with_capacity(nodes.len()),
            inv_hot: Vec::new(),
            points,
        };
        // Pre-order copy; `right` is patched once the left subtree is laid out.
        let mut stack = vec![(0u32, None::<usize>)];
        while let Some((id, parent_slot)) = stack.pop() {
            let n = &nodes[id as usize];
            let at = out.nodes.len();
            if let Some(p) = parent_slot {
                out.nodes[p].right = at as u32;
            }
            let z = zero[id as usize];
            out.inv_hot
                .extend(u.iter().map(|&u| 1.0 / (z + (1.0 - z) * u)));
            if n.is_leaf() {
                out.nodes.push(QNode {
                    threshold: n.value * weight,
                    zero: z,
                    inv_zero: 1.0 / z,
                    right: 0,
                    column: 0,
                    pos: 0,
                    flags: IS_LEAF,
                });
                continue;
            }
            let flags =
                if n.strict { STRICT } else { 0 } | if n.missing_left { MISSING_LEFT } else { 0 };
            out.nodes.push(QNode {
                threshold: n.threshold,
                zero: z,
                inv_zero: 1.0 / z,
                right: 0,
                column: n.column as u16,
                pos: pos[id as usize],
                flags,
            });
            stack.push((n.right, Some(at)));
            stack.push((n.left, None));
        }
        out
    }
}

impl PathExplainer {
    /// Needs every node's cover (checked at load).
    pub fn new(ensemble: &Ensemble) -> Self {
        Self::with_quadrature_limit(ensemble, QUADRATURE_MAX_DEPTH)
    }

    /// As [`Self::new`], using quadrature only for trees whose paths hold at most `limit` distinct
    /// columns (0: never) and the per-leaf closed form for the others. Both are exact; tests use
    /// this to check the closed form on small trees.
    pub fn with_quadrature_limit(ensemble: &Ensemble, limit: usize) -> Self {
        let limit = limit.min(QUADRATURE_MAX_DEPTH);
        let weight = ensemble.tree_weight();
        let mut base = match ensemble.aggregation {
            Aggregation::SumLogOdds | Aggregation::SumProbability => ensemble.initial_value,
            Aggregation::MeanProbability => 0.0,
        };
        let paths = TreePaths::new(ensemble);
        let mut trees = Vec::with_capacity(ensemble.trees.len());
        for (tree, paths) in ensemble.trees.iter().zip(paths.trees) {
            let root = tree.nodes[0].cover;
            if root > 0.0 {
                for node in tree.nodes.iter().filter(|n| n.is_leaf()) {
                    base += weight * node.value * node.cover / root;
                }
            }
            // The widest leaf game has k players; its integrand has degree k - 1.
            let players = paths.leaves.iter().map(|l| l.k as usize).max().unwrap_or(0);
            trees.push(
                if players <= limit && tree.nodes.len() < u32::MAX as usize {
                    CompiledTree::Quadrature(QuadTree::new(
                        &tree.nodes,
                        &paths.pos,
                        weight,
                        players.div_ceil(2).max(1),
                    ))
                } else {
                    CompiledTree::PerLeaf {
                        nodes: tree.nodes.clone(),
                        paths,
                    }
                },
            );
        }
        let rules = (0..=MAX_POINTS)
            .map(|q| {
                let mut rule = Rule::default();
                if q > 0 {
                    let (u, w) = gauss_legendre(q);
                    for r in 0..q {
                        rule.u[r] = u[r];
                        rule.w[r] = w[r];
                        rule.inv_one_minus_u[r] = 1.0 / (1.0 - u[r]);
                    }
                }
                rule
            })
            .collect();
        PathExplainer { trees, base, rules }
    }

    /// Expected output over the training population (through the covers).
    pub fn base_value(&self) -> f64 {
        self.base
    }

    pub fn explain_into(&self, x: &[f64], out: &mut [f64]) {
        for tree in &self.trees {
            match tree {
                CompiledTree::Quadrature(t) => {
                    let rule = &self.rules[t.points];
                    match t.points {
                        1 => walk::<1>(t, rule, x, out),
                        2 => walk::<2>(t, rule, x, out),
                        3 => walk::<3>(t, rule, x, out),
                        4 => walk::<4>(t, rule, x, out),
                        5 => walk::<5>(t, rule, x, out),
                        6 => walk::<6>(t, rule, x, out),
                        7 => walk::<7>(t, rule, x, out),
                        _ => walk::<8>(t, rule, x, out),
                    }
                }
                CompiledTree::PerLeaf { nodes, paths } => per_leaf_into(nodes, paths, x, out),
            }
        }
    }

    /// (trees explained by quadrature, trees explained per leaf), for `inspect`.
    pub fn algorithm_counts(&self) -> (usize, usize) {
        let quad = self
            .trees
            .iter()
            .filter(|t| matches!(t, CompiledTree::Quadrature(_)))
            .count();
        (quad, self.trees.len() - quad)
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

struct Walk<'a, const Q: usize> {
    nodes: &'a [QNode],
    inv_hot: &'a [f64],
    u: [f64; Q],
    w: [f64; Q],
    inv_one_minus_u: [f64; Q],
    x: &'a [f64],
    out: &'a mut [f64],
    /// Per path position: is the column hot, its zero fraction, and 1/g at each point.
    hot: [bool; QUADRATURE_MAX_DEPTH + 1],
    zero: [f64; QUADRATURE_MAX_DEPTH + 1],
    inv_g: [[f64; Q]; QUADRATURE_MAX_DEPTH + 1],
}

fn walk<const Q: usize>(t: &QuadTree, rule: &Rule, x: &[f64], out: &mut [f64]) {
    // A column not yet on the path behaves as hot with zero fraction 1: g = 1, coefficient 0.
    let mut walk = Walk {
        nodes: &t.nodes,
        inv_hot: &t.inv_hot,
        u: std::array::from_fn(|r| rule.u[r]),
        w: std::array::from_fn(|r| rule.w[r]),
        inv_one_minus_u: std::array::from_fn(|r| rule.inv_one_minus_u[r]),
        x,
        out,
        hot: [true; QUADRATURE_MAX_DEPTH + 1],
        zero: [1.0; QUADRATURE_MAX_DEPTH + 1],
        inv_g: [[1.0; Q]; QUADRATURE_MAX_DEPTH + 1],
    };
    walk.visit(0, [1.0; Q]);
}

impl<const Q: usize> Walk<'_, Q> {
    /// Returns, at each point, the sum over leaves below `id` of value x prod_j g_j.
    ///
    /// Written for the branch predictor: which child is hot depends on the row, so there is one
    /// data-dependent branch per edge and every other step is unconditional.
    fn visit(&mut self, id: usize, carried: [f64; Q]) -> [f64; Q] {
        let node = self.nodes[id];
        if node.flags & IS_LEAF != 0 {
            return carried.map(|a| a * node.threshold);
        }
        let p = node.pos as usize;
        let column = node.column as usize;
        let (old_hot, old_zero, old_inv) = (self.hot[p], self.zero[p], self.inv_g[p]);
        let o = if old_hot { 1.0 } else { 0.0 };
        let old_coef: [f64; Q] = std::array::from_fn(|r| (o - old_zero) * old_inv[r]);
        let goes_left = node.goes_left(self.x[column]);
        let mut sum = [0.0; Q];
        for (child, is_left) in [(id + 1, true), (node.right as usize, false)] {
            let next = self.nodes[child];
            let zero = next.zero;
            let hot = old_hot && goes_left == is_left;
            if !hot && zero == 0.0 {
                continue; // g = 0 everywhere: no leaf below adds to anyone
            }
            let mut coef = [0.0; Q];
            let mut down = [0.0; Q];
            let mut inv = [0.0; Q];
            if hot {
                let inv_hot = &self.inv_hot[child * Q..child * Q + Q];
                for r in 0..Q {
                    inv[r] = inv_hot[r];
                    coef[r] = (1.0 - zero) * inv[r] - old_coef[r];
                    down[r] = carried[r] * (zero + (1.0 - zero) * self.u[r]) * old_inv[r];
                }
            } else {
                for r in 0..Q {
                    inv[r] = self.inv_one_minus_u[r] * next.inv_zero;
                    coef[r] = -self.inv_one_minus_u[r] - old_coef[r];
                    down[r] = carried[r] * (zero * (1.0 - self.u[r])) * old_inv[r];
                }
            }
            self.hot[p] = hot;
            self.zero[p] = zero;
            self.inv_g[p] = inv;
            let below = if next.flags & IS_LEAF != 0 {
                down.map(|a| a * next.threshold) // a leaf: no call needed
            } else {
                self.visit(child, down)
            };
            let mut phi = 0.0;
            for r in 0..Q {
                phi += self.w[r] * coef[r] * below[r];
                sum[r] += below[r];
            }
            self.out[column] += phi;
        }
        self.hot[p] = old_hot;
        self.zero[p] = old_zero;
        self.inv_g[p] = old_inv;
        sum
    }
}

/// Per-leaf closed form for deep trees: with H the hot columns of a path (h of k) and e_m the
/// elementary symmetric polynomials of their zero fractions, a cold column gets
/// `-v prod_cold(z) sum_s w(s,k) e_{h-s}(z_H)` and a hot column i
/// `(1 - z_i) v prod_cold(z) sum_s w(s,k) e_{h-1-s}(z_{H\i})`, w(s,k) = s!(k-1-s)!/k!.
/// Leaf values in `paths` already carry the tree weight.
fn per_leaf_into(nodes: &[Node], paths: &PathTree, x: &[f64], out: &mut [f64]) {
    let mut stack = [(0u32, 0u64); super::weights::MAX_PATH_COLUMNS + 2];
    let mut top = 1;
    stack[0] = (0, u64::MAX);
    while top > 0 {
        top -= 1;
        let (id, hot) = stack[top];
        let node = &nodes[id as usize];
        if node.is_leaf() {
            let leaf = paths.leaves[paths.leaf_index[id as usize] as usize];
            let k = leaf.k as usize;
            if k > 0 {
                let mask = if k == 64 { u64::MAX } else { (1u64 << k) - 1 };
                closed_form_into(
                    leaf.value,
                    &paths.zero[leaf.range()],
                    &paths.cols[leaf.range()],
                    hot & mask,
                    out,
                );
            }
            continue;
        }
        let bit = 1u64 << paths.pos[id as usize];
        let left = node.goes_left(x[node.column as usize]);
        stack[top] = (node.right, if left { hot & !bit } else { hot });
        stack[top + 1] = (node.left, if left { hot } else { hot & !bit });
        top += 2;
    }
}

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
