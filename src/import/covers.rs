//! Node covers recounted on the reference rows. ONNX exporters drop the training weight that
//! reached each node (they write 1.0 hit rates), and path-dependent TreeSHAP needs it (Lundberg,
//! Erion, Lee 2018). Two weightings, the ones the reference libraries use:
//!
//! - `rows`: each reference row counts 1 — LightGBM's `internal_count`, scikit-learn's
//!   `weighted_n_node_samples` (trees fitted without bootstrap or subsampling);
//! - `hessian`: each row counts p(1 - p) at the margin before the tree, the second derivative of
//!   the log-loss — XGBoost's `cover` for `binary:logistic` (boosted log-odds models only).

use crate::model::{sigmoid, Ensemble};

/// How reference rows weigh in a node's cover.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, clap::ValueEnum)]
#[serde(rename_all = "snake_case")]
pub enum Covers {
    /// Each reference row weighs 1 (LightGBM, scikit-learn).
    #[default]
    Rows,
    /// Each row weighs p(1 - p) at the margin before the tree (XGBoost).
    Hessian,
}

impl Covers {
    pub fn words(self) -> &'static str {
        match self {
            Covers::Rows => "node covers counted on the reference rows (each row weighs 1)",
            Covers::Hessian => {
                "node covers summed over the reference rows as p(1 - p) at the margin before each tree (log-loss hessian)"
            }
        }
    }
}

/// Cover of every node of every tree (same indices as the ensemble's nodes).
pub fn count(ensemble: &Ensemble, rows: &[Vec<f64>], weighting: Covers) -> Vec<Vec<f64>> {
    let mut covers: Vec<Vec<f64>> = (ensemble.trees.iter())
        .map(|t| vec![0.0; t.nodes.len()])
        .collect();
    for x in rows {
        let mut margin = ensemble.initial_value;
        for (tree, cover) in ensemble.trees.iter().zip(covers.iter_mut()) {
            let w = match weighting {
                Covers::Rows => 1.0,
                Covers::Hessian => {
                    let p = sigmoid(margin);
                    p * (1.0 - p)
                }
            };
            let mut n = 0usize;
            loop {
                cover[n] += w;
                let node = &tree.nodes[n];
                if node.is_leaf() {
                    margin += node.value;
                    break;
                }
                n = node.child(x[node.column as usize]) as usize;
            }
        }
    }
    covers
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::artifact::spec::Aggregation;
    use crate::model::{Node, Tree};

    fn stump(value_left: f64, value_right: f64) -> Tree {
        let leaf = |v| Node {
            column: crate::model::forest::LEAF,
            left: 0,
            right: 0,
            strict: false,
            missing_left: false,
            threshold: 0.0,
            value: v,
            cover: f64::NAN,
        };
        Tree {
            nodes: vec![
                Node {
                    column: 0,
                    left: 1,
                    right: 2,
                    strict: false,
                    missing_left: true,
                    threshold: 0.5,
                    value: 0.0,
                    cover: f64::NAN,
                },
                leaf(value_left),
                leaf(value_right),
            ],
            depth: 1,
        }
    }

    // Hand-worked: rows 0, 1, NaN; the NaN goes left (missing side).
    #[test]
    fn rows_count_each_row_once_per_tree() {
        let e = Ensemble {
            aggregation: Aggregation::SumLogOdds,
            initial_value: 0.0,
            trees: vec![stump(-1.0, 1.0)],
        };
        let rows = vec![vec![0.0], vec![1.0], vec![f64::NAN]];
        assert_eq!(count(&e, &rows, Covers::Rows), vec![vec![3.0, 2.0, 1.0]]);
    }

    // Hand-worked: base margin 0 gives p = 1/2, weight 1/4 in the first tree; the row at 1.0
    // then has margin 2 in the second tree, weight s(2)(1 - s(2)).
    #[test]
    fn hessian_weights_follow_the_margin() {
        let e = Ensemble {
            aggregation: Aggregation::SumLogOdds,
            initial_value: 0.0,
            trees: vec![stump(-2.0, 2.0), stump(0.0, 0.0)],
        };
        let c = count(&e, &[vec![1.0]], Covers::Hessian);
        assert_eq!(c[0], vec![0.25, 0.0, 0.25]);
        let p = sigmoid(2.0);
        assert_eq!(c[1], vec![p * (1.0 - p), 0.0, p * (1.0 - p)]);
    }
}
