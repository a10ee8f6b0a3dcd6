//! Shared test helpers: a seeded generator of random tree ensembles and rows.
#![allow(dead_code)]

pub mod proxy;
pub mod server;
pub mod stores;

use plumbline::artifact::spec::Aggregation;
use plumbline::model::{forest::LEAF, Ensemble, Node, Tree};

/// The library's seeded generator (SplitMix64), so test ensembles are reproducible.
pub use plumbline::train::Rng;

/// A random tree over `columns` columns, at most `max_depth` deep; thresholds on a grid of
/// quarter steps in [0, 1] so that ties with row values occur; covers are whole numbers
/// (occasionally zero at a leaf).
pub fn random_tree(
    rng: &mut Rng,
    columns: usize,
    max_depth: usize,
    probability_leaves: bool,
) -> Tree {
    let mut nodes = Vec::new();
    grow(rng, &mut nodes, columns, 0, max_depth, probability_leaves);
    let depth = depth_of(&nodes, 0);
    Tree { nodes, depth }
}

fn grow(
    rng: &mut Rng,
    nodes: &mut Vec<Node>,
    columns: usize,
    depth: usize,
    max_depth: usize,
    prob: bool,
) -> (u32, f64) {
    let id = nodes.len();
    let leaf = depth == max_depth || (depth > 0 && rng.unit() < 0.25);
    nodes.push(Node {
        column: LEAF,
        left: 0,
        right: 0,
        strict: false,
        missing_left: false,
        threshold: 0.0,
        value: 0.0,
        cover: 0.0,
    });
    if leaf {
        let value = if prob {
            rng.unit()
        } else {
            rng.unit() * 2.0 - 1.0
        };
        let cover = if rng.unit() < 0.05 {
            0.0
        } else {
            1.0 + rng.below(40) as f64
        };
        nodes[id].value = value;
        nodes[id].cover = cover;
        return (id as u32, cover);
    }
    let column = rng.below(columns) as u32;
    let threshold = rng.below(5) as f64 / 4.0;
    let strict = rng.unit() < 0.5;
    let missing_left = rng.unit() < 0.5;
    let (left, cl) = grow(rng, nodes, columns, depth + 1, max_depth, prob);
    let (right, cr) = grow(rng, nodes, columns, depth + 1, max_depth, prob);
    // Keep the root's cover positive.
    let cover = if cl + cr == 0.0 && depth == 0 {
        1.0
    } else {
        cl + cr
    };
    if cover != cl + cr {
        nodes[right as usize].cover = 1.0;
    }
    nodes[id] = Node {
        column,
        left,
        right,
        strict,
        missing_left,
        threshold,
        value: 0.0,
        cover: cl + cr + if cover != cl + cr { 1.0 } else { 0.0 },
    };
    (id as u32, nodes[id].cover)
}

fn depth_of(nodes: &[Node], id: usize) -> usize {
    let n = &nodes[id];
    if n.is_leaf() {
        0
    } else {
        1 + depth_of(nodes, n.left as usize).max(depth_of(nodes, n.right as usize))
    }
}

pub fn random_ensemble(
    rng: &mut Rng,
    trees: usize,
    columns: usize,
    max_depth: usize,
    aggregation: Aggregation,
) -> Ensemble {
    let prob = aggregation == Aggregation::MeanProbability;
    Ensemble {
        aggregation,
        initial_value: if prob { 0.0 } else { rng.unit() - 0.5 },
        trees: (0..trees)
            .map(|_| random_tree(rng, columns, max_depth, prob))
            .collect(),
    }
}

/// A random row on the threshold grid (so some values sit exactly on a threshold), with NaN
/// (missing) now and then.
pub fn random_row(rng: &mut Rng, columns: usize) -> Vec<f64> {
    (0..columns)
        .map(|_| {
            if rng.unit() < 0.1 {
                f64::NAN
            } else {
                rng.below(9) as f64 / 8.0
            }
        })
        .collect()
}
