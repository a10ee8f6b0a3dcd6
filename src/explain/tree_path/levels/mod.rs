//! The level-order kernel of path-dependent TreeSHAP: the one that explains decisions.
//!
//! It computes what the recursive walk (`super::recursive`) computes, in two flat passes per
//! tree over its splits laid out level by level, root first, each split's two children side by
//! side:
//!
//! * **down**, parents before children: for both children of a split, whether the edge into
//!   it is hot (the row goes that way and every earlier split on the same column agreed),
//!   `g = z + (o - z) u` at each quadrature point, `1/g`, the coefficient `a = (o - z)/g`, and
//!   the product carried to the child, `carried(split) * g / g(replaced edge)`;
//! * **up**, children before parents: the two children's sums of leaf value times product
//!   added into the split's, and both edges' shares, `(a - a(replaced edge)) * below`, added to
//!   the split's column.
//!
//! Which earlier edge a split replaces on the path (the last one on the same column, or the root
//! standing for "not split on yet": hot, `g = 1`, `a = 0`) is a fact of the tree, worked out once
//! here. So nothing in the passes branches on the row: the lanes (one per quadrature point)
//! vectorise, and the processor has no branch to mispredict. Where it has AVX2 the passes are
//! compiled for it, chosen at run time; both builds do the same IEEE operations in the same
//! order (no fused multiply-add), so they give the same bits.
//!
//! Every lane's share is kept apart per column until the row is done, then weighted by the rule
//! and summed: no horizontal sum inside the passes.

mod rows;

use crate::explain::quadrature::gauss_legendre;
use crate::model::Node;
use std::cell::RefCell;
use std::ops::Range;

/// Point counts the kernel is compiled for; a tree takes the smallest that integrates its widest
/// leaf game exactly (more points stay exact: the rule is exact up to degree 2q - 1).
pub(super) const LANES: [usize; 4] = [1, 2, 4, 8];

/// One split and what both passes need of its two children (56 bytes).
#[derive(Debug, Clone, Copy)]
struct LevelSplit {
    /// Zero fractions of the edges into the left and the right child (the cover share their
    /// column keeps along the path).
    zero: [f64; 2],
    /// What each child's carried product is multiplied by to give its slot's first vector: the
    /// leaf value times the tree weight for a leaf, 1 for a split.
    scale: [f64; 2],
    /// The largest value that goes left (strict splits: the float just below the threshold,
    /// so `x < t` becomes `x <= below(t)` for every float x; NaN when nothing does).
    left_max: f64,
    /// Tree-local slot of this split (the children of the k-th split sit at 2k + 1, 2k + 2).
    at: u32,
    /// Slot of the edge that both children's edges replace on the path: the last edge on this
    /// column above, or the root (slot 0) when the column is new.
    replaces: u32,
    column: u32,
    /// 1 when a missing value (NaN) goes left.
    missing_left: u8,
}

impl LevelSplit {
    /// 1 if `x` goes left here, else 0, without a branch.
    #[inline(always)]
    fn goes_left(&self, x: &[f64]) -> u8 {
        let v = x[self.column as usize];
        // NaN compares false, so only the missing side can send it left.
        (v <= self.left_max) as u8 | (v.is_nan() as u8 & self.missing_left)
    }
}

/// The largest float that satisfies `x < t` (NaN if none does: `x <= NaN` is always false).
fn below(t: f64) -> f64 {
    if t.is_nan() || t == f64::NEG_INFINITY {
        f64::NAN
    } else if t == 0.0 {
        -f64::from_bits(1) // below both zeros: the largest negative subnormal
    } else if t > 0.0 {
        f64::from_bits(t.to_bits() - 1)
    } else {
        f64::from_bits(t.to_bits() + 1)
    }
}

/// Trees sharing one quadrature rule, their splits laid out level by level one after another.
#[derive(Debug, Clone)]
pub(super) struct LevelGroup {
    points: usize,
    u: Vec<f64>,
    w: Vec<f64>,
    splits: Vec<LevelSplit>,
    /// Per split, where each child leads for the descent to the leaf a row reaches: the child's
    /// split (tree-local split index), or [`LEAF`] plus its place in `values`.
    descent: Vec<[u32; 2]>,
    /// Leaf values as the model holds them (not weighted): what the row's leaf contributes to
    /// the raw output.
    values: Vec<f64>,
    trees: Vec<LevelTree>,
    /// Nodes and splits of the largest tree: the working memory a pass needs.
    largest: (usize, usize),
}

#[derive(Debug, Clone)]
struct LevelTree {
    /// Its splits in `splits` and `descent` (empty for a lone leaf).
    splits: Range<usize>,
    nodes: usize,
    /// Its place in the ensemble.
    index: usize,
    /// Place in `values` of the root, when the root is a leaf.
    lone_leaf: u32,
}

/// Marks a descent entry that is a leaf.
const LEAF: u32 = 1 << 31;

/// Per-thread working memory, grown to the largest tree met and reused row after row.
#[derive(Default)]
struct Scratch {
    /// Per node, three vectors of `points` lanes: [`PRODUCT`], [`INV`], [`COEF`].
    lanes: Vec<f64>,
    /// Per node, whether the edge into it is hot.
    hot: Vec<u8>,
    /// Per split, 1 if the row goes left there.
    dir: Vec<u8>,
    /// Per column, each lane's share before the rule's weights.
    shares: Vec<f64>,
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());

}

/// Where a node's working values sit in its slot of three lanes-wide vectors. The first holds
/// the product carried down to a split until its children are done with it, then the sum below
/// it; for a leaf, the product times the leaf value (the sum below it) from the start.
const PRODUCT: usize = 0;
/// 1/g of the edge into the node.
const INV: usize = 1;
/// The edge's coefficient (o - z)/g.
const COEF: usize = 2;

impl LevelGroup {
    /// An empty group with the `points`-point rule (one of [`LANES`]).
    pub(super) fn new(points: usize) -> Self {
        let (u, w) = gauss_legendre(points);
        LevelGroup {
            points,
            u,
            w,
            splits: Vec::new(),
            descent: Vec::new(),
            values: Vec::new(),
            trees: Vec::new(),
            largest: (0, 0),
        }
    }

    pub(super) fn points(&self) -> usize {
        self.points
    }

    pub(super) fn tree_count(&self) -> usize {
        self.trees.len()
    }

    /// Lays out tree number `index` of its ensemble: `pos` is each split's column position on
    /// its path, `zero` each edge's zero fraction (`super::edge_zero_fractions`), `weight` the
    /// ensemble's tree weight.
    pub(super) fn push(
        &mut self,
        index: usize,
        nodes: &[Node],
        pos: &[u8],
        zero: &[f64],
        weight: f64,
    ) {
        let replaces = replaced_edges(nodes, pos);
        // Level order (a breadth-first queue), a split's children pushed together: the children
        // of the k-th split sit at slots 2k + 1 and 2k + 2.
        let mut order = vec![0u32];
        let mut head = 0;
        while head < order.len() {
            let n = &nodes[order[head] as usize];
            head += 1;
            if !n.is_leaf() {
                order.extend([n.left, n.right]);
            }
        }
        let mut slot = vec![0u32; nodes.len()];
        let mut split_index = vec![0u32; nodes.len()];
        let mut k = 0;
        for (at, &id) in order.iter().enumerate() {
            slot[id as usize] = at as u32;
            if !nodes[id as usize].is_leaf() {
                split_index[id as usize] = k;
                k += 1;
            }
        }
        let start = self.splits.len();
        let lone_leaf = self.values.len() as u32;
        if nodes[0].is_leaf() {
            self.values.push(nodes[0].value);
        }
        for &id in &order {
            let n = &nodes[id as usize];
            if n.is_leaf() {
                continue;
            }
            let scale = |c: u32| {
                let child = &nodes[c as usize];
                if child.is_leaf() {
                    child.value * weight
                } else {
                    1.0
                }
            };
            let mut descent = [0; 2];
            for (side, c) in [n.left, n.right].into_iter().enumerate() {
                descent[side] = if nodes[c as usize].is_leaf() {
                    self.values.push(nodes[c as usize].value);
                    LEAF | (self.values.len() - 1) as u32
                } else {
                    split_index[c as usize]
                };
            }
            self.descent.push(descent);
            self.splits.push(LevelSplit {
                zero: [zero[n.left as usize], zero[n.right as usize]],
                scale: [scale(n.left), scale(n.right)],
                left_max: if n.strict {
                    below(n.threshold)
                } else {
                    n.threshold
                },
                at: slot[id as usize],
                replaces: slot[replaces[n.left as usize] as usize],
                column: n.column,
                missing_left: n.missing_left as u8,
            });
        }
        let splits = start..self.splits.len();
        self.largest.0 = self.largest.0.max(nodes.len());
        self.largest.1 = self.largest.1.max(splits.len());
        self.trees.push(LevelTree {
            splits,
            nodes: nodes.len(),
            index,
            lone_leaf,
        });
    }

    /// The largest leaf count a group's values may index (2^31 - 1; [`LEAF`] marks leaves).
    pub(super) fn has_room_for(&self, leaves: usize) -> bool {
        self.values.len() + leaves < LEAF as usize
    }

    /// Adds the group's contributions for row `x` to `out` (one per encoded column), and
    /// writes the value of the leaf `x` reaches in each of its trees to `reached` (by the tree's
    /// place in the ensemble).
    pub(super) fn explain_into(&self, x: &[f64], out: &mut [f64], reached: &mut [f64]) {
        SCRATCH.with(|scratch| {
            let scratch = &mut *scratch.borrow_mut();
            match self.points {
                1 => self.run::<1>(x, out, reached, scratch),
                2 => self.run::<2>(x, out, reached, scratch),
                4 => self.run::<4>(x, out, reached, scratch),
                _ => self.run::<8>(x, out, reached, scratch),
            }
        })
    }

    fn run<const Q: usize>(
        &self,
        x: &[f64],
        out: &mut [f64],
        reached: &mut [f64],
        s: &mut Scratch,
    ) {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: `run_avx2` needs AVX2, and the processor has just been found to have it.
            unsafe { self.run_avx2::<Q>(x, out, reached, s) };
            return;
        }
        self.passes::<Q>(x, out, reached, s)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    fn run_avx2<const Q: usize>(
        &self,
        x: &[f64],
        out: &mut [f64],
        reached: &mut [f64],
        s: &mut Scratch,
    ) {
        self.passes::<Q>(x, out, reached, s)
    }

    #[inline(always)]
    fn passes<const Q: usize>(
        &self,
        x: &[f64],
        out: &mut [f64],
        reached: &mut [f64],
        scratch: &mut Scratch,
    ) {
        let (n, splits) = self.largest;
        scratch.shares.clear();
        scratch.shares.resize(out.len() * Q, 0.0);
        if scratch.lanes.len() < n * 3 * Q {
            scratch.lanes.resize(n * 3 * Q, 0.0);
        }
        if scratch.hot.len() < n {
            scratch.hot.resize(n, 0);
        }
        if scratch.dir.len() < splits {
            scratch.dir.resize(splits, 0);
        }
        let (shares, _) = scratch.shares.as_chunks_mut::<Q>();
        let (lanes, _) = scratch.lanes.as_chunks_mut::<Q>();
        let (slots, _) = lanes.as_chunks_mut::<3>();
        let mut u = [0.0; Q];
        u.copy_from_slice(&self.u[..Q]);
        for tree in &self.trees {
            let splits = &self.splits[tree.splits.clone()];
            let (slots, hot) = (&mut slots[..tree.nodes], &mut scratch.hot[..tree.nodes]);
            let dir = &mut scratch.dir[..splits.len()];
            tree_passes(splits, x, &u, slots, hot, dir, shares);
            reached[tree.index] = self.reached(tree, |k| dir[k] == 1);
        }
        for (o, lane) in out.iter_mut().zip(shares.iter()) {
            let mut sum = 0.0;
            for (w, share) in self.w.iter().zip(lane) {
                sum += w * share;
            }
            *o += sum;
        }
    }

    /// The value of the leaf the row reached in `tree`, found by following the directions the
    /// down pass took at each split (`went_left(k)` at the k-th): a few steps through memory
    /// just written.
    #[inline(always)]
    fn reached(&self, tree: &LevelTree, went_left: impl Fn(usize) -> bool) -> f64 {
        if tree.splits.is_empty() {
            return self.values[tree.lone_leaf as usize];
        }
        let descent = &self.descent[tree.splits.clone()];
        let mut k = 0;
        loop {
            let next = descent[k][usize::from(!went_left(k))];
            if next & LEAF != 0 {
                return self.values[(next & !LEAF) as usize];
            }
            k = next as usize;
        }
    }
}

/// Both passes over one tree; `slots` and `hot` hold its nodes' working values by slot, `dir`
/// gets the direction the row takes at each split.
#[inline(always)]
fn tree_passes<const Q: usize>(
    splits: &[LevelSplit],
    x: &[f64],
    u: &[f64; Q],
    slots: &mut [[[f64; Q]; 3]],
    hot: &mut [u8],
    dir: &mut [u8],
    shares: &mut [[f64; Q]],
) {
    if splits.is_empty() {
        return; // a lone leaf is all base value
    }
    // A tree of n splits has 2n + 1 nodes; saying so lets the compiler drop bounds checks.
    let nodes = 2 * splits.len() + 1;
    let (slots, hot, dir) = (
        &mut slots[..nodes],
        &mut hot[..nodes],
        &mut dir[..splits.len()],
    );
    // The root stands for every column not split on yet: hot, g = 1, coefficient 0.
    slots[0] = [[1.0; Q], [1.0; Q], [0.0; Q]];
    hot[0] = 1;
    for (k, (s, dir)) in splits.iter().zip(dir.iter_mut()).enumerate() {
        let (at, left, m) = (s.at as usize, 2 * k + 1, s.replaces as usize);
        // A child's edge is hot if the column was hot before this split and the row goes there.
        let went_left = s.goes_left(x);
        *dir = went_left;
        let before = hot[m];
        let h = [before & went_left, before & (went_left ^ 1)];
        hot[left..left + 2].copy_from_slice(&h);
        let from = slots[at][PRODUCT];
        let replaced = slots[m][INV];
        let children = &mut slots[left..left + 2];
        for (side, child) in children.iter_mut().enumerate() {
            let z = s.zero[side];
            let oz = h[side] as f64 - z;
            let scale = s.scale[side];
            let mut next = [[0.0; Q]; 3];
            for r in 0..Q {
                let g = z + oz * u[r];
                // g is 0 only on a cold edge of zero cover: nothing below it counts, and 1/g
                // must stay finite so that the zeros stay zeros.
                let inv = 1.0 / if g == 0.0 { 1.0 } else { g };
                next[PRODUCT][r] = from[r] * g * replaced[r] * scale;
                next[INV][r] = inv;
                next[COEF][r] = oz * inv;
            }
            *child = next;
        }
    }
    for k in (0..splits.len()).rev() {
        let s = &splits[k];
        let (at, left, m) = (s.at as usize, 2 * k + 1, s.replaces as usize);
        let replaced = slots[m][COEF];
        let (l_coef, l_below) = (slots[left][COEF], slots[left][PRODUCT]);
        let (r_coef, r_below) = (slots[left + 1][COEF], slots[left + 1][PRODUCT]);
        let share = &mut shares[s.column as usize];
        let mut below = [0.0; Q];
        for q in 0..Q {
            share[q] +=
                (l_coef[q] - replaced[q]) * l_below[q] + (r_coef[q] - replaced[q]) * r_below[q];
            below[q] = l_below[q] + r_below[q];
        }
        // The split's product is no longer needed: its children are done.
        slots[at][PRODUCT] = below;
    }
}

/// For each node, the node whose incoming edge its own incoming edge replaces on the path: the
/// child end of the last edge above on the same column (by path position), or the root (0).
fn replaced_edges(nodes: &[Node], pos: &[u8]) -> Vec<u32> {
    let mut replaces = vec![0u32; nodes.len()];
    let mut stack = vec![(0u32, [0u32; super::QUADRATURE_MAX_DEPTH + 1])];
    while let Some((id, last)) = stack.pop() {
        let n = &nodes[id as usize];
        if n.is_leaf() {
            continue;
        }
        let p = pos[id as usize] as usize;
        for child in [n.left, n.right] {
            replaces[child as usize] = last[p];
            let mut next = last;
            next[p] = child;
            stack.push((child, next));
        }
    }
    replaces
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::explain::paths::TreePaths;
    use crate::model::forest::LEAF;
    use crate::model::{Ensemble, Tree};
    use crate::rng::Rng;

    /// `x < t` and `x <= below(t)` agree for every float x, at the edges of the number line too.
    #[test]
    fn strict_thresholds_become_inclusive() {
        let edges = [
            0.0,
            -0.0,
            f64::from_bits(1),
            -f64::from_bits(1),
            1.0,
            -1.0,
            0.1,
            f64::MAX,
            f64::MIN,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        for t in edges {
            let b = below(t);
            for x in edges.iter().chain(&[b, f64::NAN]) {
                assert_eq!(*x < t, *x <= b, "x {x} t {t} below {b}");
            }
        }
    }

    fn grow(rng: &mut Rng, nodes: &mut Vec<Node>, depth: usize) -> (u32, f64) {
        let id = nodes.len() as u32;
        let mut node = Node {
            column: LEAF,
            left: 0,
            right: 0,
            strict: rng.bernoulli(0.5),
            missing_left: rng.bernoulli(0.5),
            threshold: rng.below(5) as f64 / 4.0,
            value: rng.unit() - 0.5,
            cover: if rng.bernoulli(0.1) {
                0.0
            } else {
                1.0 + rng.below(9) as f64
            },
        };
        nodes.push(node);
        if depth == 0 || rng.bernoulli(0.2) {
            return (id, node.cover);
        }
        node.column = rng.below(4) as u32;
        node.value = 0.0;
        let (left, l) = grow(rng, nodes, depth - 1);
        let (right, r) = grow(rng, nodes, depth - 1);
        (node.left, node.right, node.cover) = (left, right, l + r);
        nodes[id as usize] = node;
        (id, node.cover)
    }

    /// Thirty random trees of depth 7 on 4 columns in one group, and the ensemble they form.
    pub(super) fn sample_group(seed: u64) -> (LevelGroup, Ensemble) {
        let mut rng = Rng::new(seed);
        let trees: Vec<Tree> = (0..30)
            .map(|_| {
                let mut nodes = Vec::new();
                grow(&mut rng, &mut nodes, 7);
                Tree { nodes, depth: 7 }
            })
            .collect();
        let ensemble = Ensemble {
            aggregation: crate::artifact::spec::Aggregation::SumLogOdds,
            initial_value: 0.0,
            trees,
        };
        let paths = TreePaths::new(&ensemble);
        let mut group = LevelGroup::new(4);
        for (tree, paths) in ensemble.trees.iter().zip(&paths.trees) {
            let zero = super::super::edge_zero_fractions(&tree.nodes, &paths.pos);
            group.push(group.tree_count(), &tree.nodes, &paths.pos, &zero, 1.0);
        }
        (group, ensemble)
    }

    /// Rows on the thresholds' grid, a tenth of the values missing.
    pub(super) fn sample_rows(seed: u64, rows: usize) -> Vec<f64> {
        let mut rng = Rng::new(seed);
        (0..rows * 4)
            .map(|_| {
                if rng.bernoulli(0.1) {
                    f64::NAN
                } else {
                    rng.below(5) as f64 / 4.0
                }
            })
            .collect()
    }

    pub(super) fn bits(v: &[f64]) -> Vec<u64> {
        v.iter().map(|f| f.to_bits()).collect()
    }

    /// The AVX2 build and the portable build of the passes give the same bits.
    #[test]
    fn both_builds_agree_bit_for_bit() {
        let (group, ensemble) = sample_group(11);
        for x in sample_rows(12, 50).chunks(4) {
            let (mut fast, mut portable) = (vec![0.0; 4], vec![0.0; 4]);
            let (mut fast_leaves, mut portable_leaves) = (vec![0.0; 30], vec![0.0; 30]);
            group.explain_into(x, &mut fast, &mut fast_leaves);
            let scratch = &mut Scratch::default();
            group.passes::<4>(x, &mut portable, &mut portable_leaves, scratch);
            assert_eq!(bits(&fast), bits(&portable));
            assert_eq!(bits(&fast_leaves), bits(&portable_leaves));
            // The leaves reached are the leaves the model's own walk reaches.
            let walked: Vec<f64> = ensemble.trees.iter().map(|t| t.leaf(x).value).collect();
            assert_eq!(bits(&fast_leaves), bits(&walked));
        }
    }
}
