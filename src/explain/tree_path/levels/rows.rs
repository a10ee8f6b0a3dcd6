//! The level-order kernel for many rows: a block of rows explained per pass over each tree, for
//! `plumbline score` and replay against a model (through `decide::decide_requests`).
//!
//! What depends only on the tree and on whether an edge is hot (g, 1/g and the coefficient at
//! each quadrature point, for a hot and for a cold edge) is tabulated once per tree for the whole
//! block, so no row divides; at each split every row of the block takes its turn, picking its
//! table entries by its own hot bits (an index, not a branch) and multiplying, while the split,
//! its tables and the rows' values stay in the nearest cache. The lanes are the quadrature
//! points, as in the single-row kernel, and each row's arithmetic is that kernel's, operation
//! for operation and in the same order: a row explained here gets the same bits as explained
//! alone (the tests hold both to that), so a decision in a batch equals the same decision made
//! alone.

use super::{LevelGroup, LevelSplit};
use std::cell::RefCell;

/// Rows explained per pass over the trees: each tree's tables serve this many.
const BLOCK: usize = 64;

/// Most working memory per thread for a block's products and shares; a block of very large
/// trees or very wide rows takes fewer rows (the same bits: a row's arithmetic is its own).
const SCRATCH_BUDGET: usize = 32 << 20;

/// Rows per block for trees of `nodes` nodes, `width` columns and `points` quadrature points.
fn rows_per_block(nodes: usize, width: usize, points: usize) -> usize {
    let per_row = (nodes.saturating_add(width))
        .saturating_mul(points)
        .saturating_mul(std::mem::size_of::<f64>());
    (SCRATCH_BUDGET / per_row.max(1)).clamp(1, BLOCK)
}

/// Where an edge's values sit in its table: by hotness (the hot bit is the index), then by
/// quantity.
const G: usize = 0;
const INV: usize = 1;
const COEF: usize = 2;

/// Per-thread working memory, grown to the largest tree and widest row met.
#[derive(Default)]
struct Scratch {
    /// Per node: [cold, hot] x [g, 1/g, coefficient] x points.
    tables: Vec<f64>,
    /// The block's values by column, then row.
    columns: Vec<f64>,
    /// Per column and row of the block, each point's share before the rule's weights.
    shares: Vec<f64>,
    /// Per node and row, each point's product (then the sum below the node).
    products: Vec<f64>,
    /// Per node and row: is the edge into the node hot; per split and row: did the row go left.
    hot: Vec<u8>,
    dir: Vec<u8>,
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// Many rows and where their results go (see [`LevelGroup::explain_rows_into`]).
struct Many<'a> {
    rows: &'a [f64],
    width: usize,
    out: &'a mut [f64],
    reached: &'a mut [f64],
    trees: usize,
}

impl LevelGroup {
    /// For each of the `rows` (row after row, `width` values each), adds the group's
    /// contributions to its row of `out` (`width` each), and writes the value of the leaf it
    /// reaches in each of the group's trees to its row of `reached` (`trees` each, by the tree's
    /// place in the ensemble).
    pub(in crate::explain::tree_path) fn explain_rows_into(
        &self,
        rows: &[f64],
        width: usize,
        out: &mut [f64],
        reached: &mut [f64],
        trees: usize,
    ) {
        let many = Many {
            rows,
            width,
            out,
            reached,
            trees,
        };
        SCRATCH.with(|scratch| {
            let scratch = &mut *scratch.borrow_mut();
            match self.points {
                1 => self.rows_run::<1>(many, scratch),
                2 => self.rows_run::<2>(many, scratch),
                4 => self.rows_run::<4>(many, scratch),
                _ => self.rows_run::<8>(many, scratch),
            }
        })
    }

    fn rows_run<const Q: usize>(&self, many: Many, scratch: &mut Scratch) {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: `rows_avx2` needs AVX2, and the processor has just been found to have it.
            unsafe { self.rows_avx2::<Q>(many, scratch) };
            return;
        }
        self.rows_blocks::<Q>(many, scratch)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    fn rows_avx2<const Q: usize>(&self, many: Many, scratch: &mut Scratch) {
        self.rows_blocks::<Q>(many, scratch)
    }

    #[inline(always)]
    fn rows_blocks<const Q: usize>(&self, many: Many, s: &mut Scratch) {
        let Many {
            rows,
            width,
            out,
            reached,
            trees,
        } = many;
        let count = rows.len().checked_div(width).unwrap_or(0);
        if count == 0 {
            return;
        }
        let (nodes, splits) = self.largest;
        let per_block = rows_per_block(nodes, width, Q);
        let grow = |v: &mut Vec<f64>, n: usize| v.resize(v.len().max(n), 0.0);
        grow(&mut s.tables, nodes * 6 * Q);
        grow(&mut s.products, nodes * per_block * Q);
        s.hot.resize(s.hot.len().max(nodes * per_block), 0);
        s.dir.resize(s.dir.len().max(splits * per_block), 0);
        let mut u = [0.0; Q];
        u.copy_from_slice(&self.u[..Q]);
        for first in (0..count).step_by(per_block) {
            let n = (count - first).min(per_block);
            let block = &rows[first * width..(first + n) * width];
            s.columns.clear();
            for c in 0..width {
                s.columns.extend(block.iter().skip(c).step_by(width));
            }
            s.shares.clear();
            s.shares.resize(n * width * Q, 0.0);
            let (shares, _) = s.shares.as_chunks_mut::<Q>();
            for tree in &self.trees {
                let splits = &self.splits[tree.splits.clone()];
                let (tables, _) = s.tables[..tree.nodes * 6 * Q].as_chunks_mut::<Q>();
                let (tables, _) = tables.as_chunks_mut::<3>();
                let (tables, _) = tables.as_chunks_mut::<2>();
                edge_tables(splits, &u, tables);
                let (products, _) = s.products[..tree.nodes * n * Q].as_chunks_mut::<Q>();
                let hot = &mut s.hot[..tree.nodes * n];
                let dir = &mut s.dir[..splits.len() * n];
                let block = Block {
                    columns: &s.columns,
                    n,
                };
                tree_passes_rows(splits, tables, block, products, hot, dir, shares);
                for r in 0..n {
                    let row = first + r;
                    reached[row * trees + tree.index] = self.reached(tree, |k| dir[k * n + r] == 1);
                }
            }
            let outs = out[first * width..(first + n) * width].chunks_exact_mut(width);
            for (r, out) in outs.enumerate() {
                for (c, o) in out.iter_mut().enumerate() {
                    let mut sum = 0.0;
                    for (w, lane) in self.w.iter().zip(&shares[c * n + r]) {
                        sum += w * lane;
                    }
                    *o += sum;
                }
            }
        }
    }
}

/// A block of `n` rows, by column: column c's values are `columns[c * n..(c + 1) * n]`.
#[derive(Clone, Copy)]
struct Block<'a> {
    columns: &'a [f64],
    n: usize,
}

/// Per node of one tree: g, 1/g and the coefficient at each point, for a cold (index 0) and a
/// hot (index 1) edge into it, as the single-row kernel computes them (the root: 1/g = 1,
/// coefficient 0, either way).
#[inline(always)]
fn edge_tables<const Q: usize>(
    splits: &[LevelSplit],
    u: &[f64; Q],
    tables: &mut [[[[f64; Q]; 3]; 2]],
) {
    tables[0] = [[[1.0; Q], [1.0; Q], [0.0; Q]]; 2];
    for (k, s) in splits.iter().enumerate() {
        for side in 0..2 {
            let z = s.zero[side];
            let table = &mut tables[2 * k + 1 + side];
            for (o, entry) in table.iter_mut().enumerate() {
                let oz = o as f64 - z;
                for r in 0..Q {
                    let g = z + oz * u[r];
                    let inv = 1.0 / if g == 0.0 { 1.0 } else { g };
                    entry[G][r] = g;
                    entry[INV][r] = inv;
                    entry[COEF][r] = oz * inv;
                }
            }
        }
    }
}

/// Both passes over one tree for a block of rows: `products` and `hot` by node then row, `dir`
/// by split then row, `shares` by column then row.
#[inline(always)]
fn tree_passes_rows<const Q: usize>(
    splits: &[LevelSplit],
    tables: &[[[[f64; Q]; 3]; 2]],
    block: Block,
    products: &mut [[f64; Q]],
    hot: &mut [u8],
    dir: &mut [u8],
    shares: &mut [[f64; Q]],
) {
    if splits.is_empty() {
        return;
    }
    let Block { columns, n } = block;
    products[..n].fill([1.0; Q]);
    hot[..n].fill(1);
    for (k, s) in splits.iter().enumerate() {
        let (at, left, m) = (s.at as usize, 2 * k + 1, s.replaces as usize);
        let (tm, tl, tr) = (&tables[m], &tables[left], &tables[left + 1]);
        let (scale_l, scale_r) = (s.scale[0], s.scale[1]);
        let x = &columns[s.column as usize * n..][..n];
        // Where each row goes, and the hotness of both children's edges.
        let went = &mut dir[k * n..][..n];
        for (went, &x) in went.iter_mut().zip(x) {
            *went = (x <= s.left_max) as u8 | (x.is_nan() as u8 & s.missing_left);
        }
        let (before, after) = hot.split_at_mut(left * n);
        let before = &before[m * n..][..n];
        let (hl, hr) = after[..2 * n].split_at_mut(n);
        for r in 0..n {
            hl[r] = before[r] & went[r];
            hr[r] = before[r] & (went[r] ^ 1);
        }
        // Everything this split reads sits before its children's slots.
        let (done, children) = products.split_at_mut(left * n);
        let from = &done[at * n..][..n];
        let (pl, pr) = children[..2 * n].split_at_mut(n);
        for r in 0..n {
            let rep = &tm[usize::from(before[r] & 1)][INV];
            let gl = &tl[usize::from(hl[r] & 1)][G];
            let gr = &tr[usize::from(hr[r] & 1)][G];
            for q in 0..Q {
                pl[r][q] = from[r][q] * gl[q] * rep[q] * scale_l;
                pr[r][q] = from[r][q] * gr[q] * rep[q] * scale_r;
            }
        }
    }
    for k in (0..splits.len()).rev() {
        let s = &splits[k];
        let (at, left, m) = (s.at as usize, 2 * k + 1, s.replaces as usize);
        let (tm, tl, tr) = (&tables[m], &tables[left], &tables[left + 1]);
        let (done, children) = products.split_at_mut(left * n);
        let (pl, pr) = children[..2 * n].split_at(n);
        let below = &mut done[at * n..][..n];
        let (hl, hr) = (&hot[left * n..][..n], &hot[(left + 1) * n..][..n]);
        let hm = &hot[m * n..][..n];
        let shares = &mut shares[s.column as usize * n..][..n];
        for r in 0..n {
            let cl = &tl[usize::from(hl[r] & 1)][COEF];
            let cr = &tr[usize::from(hr[r] & 1)][COEF];
            let cm = &tm[usize::from(hm[r] & 1)][COEF];
            for q in 0..Q {
                shares[r][q] += (cl[q] - cm[q]) * pl[r][q] + (cr[q] - cm[q]) * pr[r][q];
                below[r][q] = pl[r][q] + pr[r][q];
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::super::tests::{bits, sample_group, sample_rows};
    use super::*;

    /// The AVX2 build and the portable build of the many-rows passes give the same bits, and
    /// each row the bits the single-row kernel gives it (70 rows: a block and a part of one).
    #[test]
    fn many_rows_agree_with_one_row_and_across_builds() {
        let (group, _) = sample_group(21);
        let rows = sample_rows(22, 70);
        let (mut fast, mut portable) = (vec![0.0; rows.len()], vec![0.0; rows.len()]);
        let (mut fast_leaves, mut portable_leaves) = (vec![0.0; 70 * 30], vec![0.0; 70 * 30]);
        group.explain_rows_into(&rows, 4, &mut fast, &mut fast_leaves, 30);
        let many = Many {
            rows: &rows,
            width: 4,
            out: &mut portable,
            reached: &mut portable_leaves,
            trees: 30,
        };
        group.rows_blocks::<4>(many, &mut Scratch::default());
        assert_eq!(bits(&fast), bits(&portable));
        assert_eq!(bits(&fast_leaves), bits(&portable_leaves));
        for (i, x) in rows.chunks(4).enumerate() {
            let (mut alone, mut leaves) = (vec![0.0; 4], vec![0.0; 30]);
            group.explain_into(x, &mut alone, &mut leaves);
            assert_eq!(bits(&fast[i * 4..i * 4 + 4]), bits(&alone), "row {i}");
            assert_eq!(
                bits(&fast_leaves[i * 30..i * 30 + 30]),
                bits(&leaves),
                "row {i}"
            );
        }
    }

    /// Small trees take whole blocks; very large trees or wide rows take fewer rows, never
    /// none, and stay within the working-memory budget.
    #[test]
    fn blocks_shrink_for_very_large_trees() {
        assert_eq!(rows_per_block(127, 10, 4), BLOCK);
        assert_eq!(rows_per_block(4_095, 30, 8), BLOCK);
        let large = rows_per_block(200_001, 50, 8);
        assert!((1..BLOCK).contains(&large), "{large}");
        assert!(large * (200_001 + 50) * 8 * 8 <= SCRATCH_BUDGET);
        assert_eq!(rows_per_block(usize::MAX / 64, 1, 8), 1);
    }
}
