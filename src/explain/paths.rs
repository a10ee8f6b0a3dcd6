//! Root-to-leaf path facts shared by both TreeSHAP variants.
//!
//! Along a path, each distinct column gets a *position* (0, 1, ...) in order of first use, so a
//! row's status on a path fits in a bit set. A column split on twice keeps one position: the row
//! must satisfy both splits (bits are ANDed) and the cover ratios multiply.

use crate::model::{Ensemble, Tree};

/// Path facts of one tree.
#[derive(Debug, Clone)]
pub struct PathTree {
    /// Per node: the position of its column on the path to it (splits only).
    pub pos: Vec<u8>,
    /// Per node: index into `leaves` (leaves only; `u32::MAX` for splits).
    pub leaf_index: Vec<u32>,
    pub leaves: Vec<PathLeaf>,
    /// Column of each position, leaf after leaf (`leaves[i].start ..`).
    pub cols: Vec<u32>,
    /// Zero fraction of each position: product of child/parent cover ratios of the splits on that
    /// column along the path (NaN when the artifact has no covers).
    pub zero: Vec<f64>,
}

#[derive(Debug, Clone, Copy)]
pub struct PathLeaf {
    /// Leaf value already multiplied by the ensemble's tree weight (1/n for forests).
    pub value: f64,
    /// Number of distinct columns on the path.
    pub k: u8,
    /// Offset of this leaf's positions in `cols` / `zero`.
    pub start: u32,
}

impl PathLeaf {
    pub fn range(&self) -> std::ops::Range<usize> {
        self.start as usize..self.start as usize + self.k as usize
    }
}

/// Path facts for every tree of an ensemble.
#[derive(Debug, Clone)]
pub struct TreePaths {
    pub trees: Vec<PathTree>,
}

impl TreePaths {
    pub fn new(ensemble: &Ensemble) -> Self {
        let w = ensemble.tree_weight();
        TreePaths {
            trees: ensemble.trees.iter().map(|t| PathTree::new(t, w)).collect(),
        }
    }
}

impl PathTree {
    fn new(tree: &Tree, weight: f64) -> Self {
        let n = tree.nodes.len();
        let mut out = PathTree {
            pos: vec![0; n],
            leaf_index: vec![u32::MAX; n],
            leaves: Vec::new(),
            cols: Vec::new(),
            zero: Vec::new(),
        };
        // (node, path so far as (column, zero fraction) per position)
        let mut stack: Vec<(u32, Vec<(u32, f64)>)> = vec![(0, Vec::new())];
        while let Some((id, path)) = stack.pop() {
            let node = &tree.nodes[id as usize];
            if node.is_leaf() {
                out.leaf_index[id as usize] = out.leaves.len() as u32;
                out.leaves.push(PathLeaf {
                    value: node.value * weight,
                    k: path.len() as u8,
                    start: out.cols.len() as u32,
                });
                out.cols.extend(path.iter().map(|p| p.0));
                out.zero.extend(path.iter().map(|p| p.1));
                continue;
            }
            let p = path
                .iter()
                .position(|&(c, _)| c == node.column)
                .unwrap_or(path.len());
            out.pos[id as usize] = p as u8;
            for child in [node.right, node.left] {
                let ratio = cover_ratio(tree.nodes[child as usize].cover, node.cover);
                let mut next = path.clone();
                if p == next.len() {
                    next.push((node.column, ratio));
                } else {
                    next[p].1 *= ratio;
                }
                stack.push((child, next));
            }
        }
        out
    }
}

/// child / parent cover; a zero-cover parent passes no weight on.
fn cover_ratio(child: f64, parent: f64) -> f64 {
    if parent == 0.0 {
        0.0
    } else {
        child / parent
    }
}
