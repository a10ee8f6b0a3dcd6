//! The reference kernel of path-dependent TreeSHAP: one recursive depth-first walk per tree.
//!
//! It carries `prod_j g_j(u)` down at each quadrature point and sums leaf values times it back
//! up; a column's share is collected on each edge that splits on it, with a telescoping
//! correction where the column was split on higher up. Simple to follow and exact, but every
//! edge branches on whether the row goes that way, which the processor cannot predict; the
//! level-order kernel (`super::levels`) computes the same quantities without those branches and
//! serves decisions. This one stays as the reference the tests hold the fast kernel to.

use super::{edge_zero_fractions, MAX_POINTS, QUADRATURE_MAX_DEPTH};
use crate::explain::quadrature::gauss_legendre;
use crate::model::Node;

#[derive(Debug, Clone, Default)]
pub(super) struct Rule {
    u: [f64; MAX_POINTS],
    w: [f64; MAX_POINTS],
    /// 1 / (1 - u)
    inv_one_minus_u: [f64; MAX_POINTS],
}

impl Rule {
    /// The q-point Gauss-Legendre rule on [0, 1] (q = 0: empty).
    pub(super) fn new(q: usize) -> Rule {
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
    }
}

/// A tree laid out for the quadrature walk: pre-order, so a split's left child is the next node
/// and the walk reads memory front to back.
#[derive(Debug, Clone)]
pub(super) struct QuadTree {
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
    pub(super) fn new(nodes: &[Node], pos: &[u8], weight: f64, points: usize) -> Self {
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

    /// Number of quadrature points this tree needs.
    pub(super) fn points(&self) -> usize {
        self.points
    }

    /// Adds this tree's contributions for row `x` to `out`; `rule` has [`Self::points`] points.
    pub(super) fn explain_into(&self, rule: &Rule, x: &[f64], out: &mut [f64]) {
        match self.points {
            1 => walk::<1>(self, rule, x, out),
            2 => walk::<2>(self, rule, x, out),
            3 => walk::<3>(self, rule, x, out),
            4 => walk::<4>(self, rule, x, out),
            5 => walk::<5>(self, rule, x, out),
            6 => walk::<6>(self, rule, x, out),
            7 => walk::<7>(self, rule, x, out),
            _ => walk::<8>(self, rule, x, out),
        }
    }
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
    /// One data-dependent branch per edge (which child is hot depends on the row); every other
    /// step is unconditional.
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
