//! Path-dependent TreeSHAP for very deep trees: the per-leaf closed form in elementary symmetric
//! polynomials, O(leaves x depth^2), for trees with more distinct columns on a path than the
//! quadrature kernels take.

use crate::explain::paths::PathTree;
use crate::explain::weights::{shapley, MAX_PATH_COLUMNS};
use crate::model::Node;

/// Per-leaf closed form for deep trees: with H the hot columns of a path (h of k) and e_m the
/// elementary symmetric polynomials of their zero fractions, a cold column gets
/// `-v prod_cold(z) sum_s w(s,k) e_{h-s}(z_H)` and a hot column i
/// `(1 - z_i) v prod_cold(z) sum_s w(s,k) e_{h-1-s}(z_{H\i})`, w(s,k) = s!(k-1-s)!/k!.
/// Leaf values in `paths` already carry the tree weight.
pub(super) fn per_leaf_into(nodes: &[Node], paths: &PathTree, x: &[f64], out: &mut [f64]) {
    let mut stack = [(0u32, 0u64); MAX_PATH_COLUMNS + 2];
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
    let mut e = [0.0f64; MAX_PATH_COLUMNS + 1];
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
    let mut without = [0.0f64; MAX_PATH_COLUMNS + 1];
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
