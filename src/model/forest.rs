//! Tree ensembles: random forests (mean probability) and boosted trees (summed log-odds).

use super::Space;
use crate::artifact::spec::Aggregation;

/// Marks a leaf in [`Node::column`].
pub const LEAF: u32 = u32::MAX;

/// One node, split or leaf, laid out flat for cache-friendly traversal.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Node {
    /// Encoded column index, or [`LEAF`].
    pub column: u32,
    pub left: u32,
    pub right: u32,
    /// `true`: left when `x < threshold`; `false`: left when `x <= threshold`.
    pub strict: bool,
    pub missing_left: bool,
    pub threshold: f64,
    /// Leaf output (0 for splits).
    pub value: f64,
    /// Training cover (NaN when the artifact has none).
    pub cover: f64,
}

impl Node {
    #[inline]
    pub fn is_leaf(&self) -> bool {
        self.column == LEAF
    }

    /// Which child a value goes to; NaN (missing) follows the node's missing side.
    #[inline]
    pub fn goes_left(&self, x: f64) -> bool {
        if x.is_nan() {
            self.missing_left
        } else if self.strict {
            x < self.threshold
        } else {
            x <= self.threshold
        }
    }

    #[inline]
    pub fn child(&self, x: f64) -> u32 {
        if self.goes_left(x) {
            self.left
        } else {
            self.right
        }
    }
}

/// A validated tree: node 0 is the root, indices in range, no cycles.
#[derive(Debug, Clone, PartialEq)]
pub struct Tree {
    pub nodes: Vec<Node>,
    /// Longest root-to-leaf path, in splits.
    pub depth: usize,
}

impl Tree {
    /// The leaf a row reaches.
    #[inline]
    pub fn leaf(&self, x: &[f64]) -> &Node {
        let mut n = &self.nodes[0];
        while !n.is_leaf() {
            n = &self.nodes[n.child(x[n.column as usize]) as usize];
        }
        n
    }

    pub fn leaves(&self) -> usize {
        self.nodes.iter().filter(|n| n.is_leaf()).count()
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Ensemble {
    pub aggregation: Aggregation,
    pub initial_value: f64,
    pub trees: Vec<Tree>,
}

impl Ensemble {
    /// Raw output: mean leaf probability, or base score plus the summed leaves.
    pub fn raw(&self, x: &[f64]) -> f64 {
        let sum: f64 = self.trees.iter().map(|t| t.leaf(x).value).sum();
        self.finish(sum)
    }

    /// Turns a sum over trees into the ensemble's output.
    #[inline]
    pub fn finish(&self, sum: f64) -> f64 {
        finish(self.aggregation, self.initial_value, self.trees.len(), sum)
    }

    /// Scale applied to per-tree quantities (1/n for averaged forests, else 1).
    #[inline]
    pub fn tree_weight(&self) -> f64 {
        match self.aggregation {
            Aggregation::MeanProbability => 1.0 / self.trees.len() as f64,
            Aggregation::SumLogOdds | Aggregation::SumProbability => 1.0,
        }
    }

    pub fn space(&self) -> Space {
        match self.aggregation {
            Aggregation::MeanProbability | Aggregation::SumProbability => Space::Probability,
            Aggregation::SumLogOdds => Space::LogOdds,
        }
    }

    pub fn max_depth(&self) -> usize {
        self.trees.iter().map(|t| t.depth).max().unwrap_or(0)
    }
}

/// An ensemble's output from the sum of the leaves a row reaches in its `trees` trees (one
/// definition, for the model's own walk and for explainers that find those leaves on the way).
#[inline]
pub fn finish(aggregation: Aggregation, initial_value: f64, trees: usize, sum: f64) -> f64 {
    match aggregation {
        Aggregation::MeanProbability => sum / trees as f64,
        Aggregation::SumLogOdds | Aggregation::SumProbability => initial_value + sum,
    }
}
