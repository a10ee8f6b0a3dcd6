//! Random forests: fitted by smartcore, then re-counted by us. smartcore's trees keep only the
//! majority class in a leaf and no usable cover, so every training row is passed down each
//! fitted tree to count each node's cover and each leaf's default rate. The forest then averages
//! leaf probabilities, and path-dependent TreeSHAP has true covers. The re-count works on any
//! tree structure, so imported trees can reuse it ([`recount`]).

use crate::artifact::spec::{Comparison, NodeSpec, Side, TreeSpec};
use serde_json::Value;
use smartcore::ensemble::random_forest_classifier::{
    RandomForestClassifier, RandomForestClassifierParameters,
};
use smartcore::linalg::basic::matrix::DenseMatrix;

/// Forest settings.
#[derive(Debug, Clone, Copy, PartialEq, serde::Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct ForestParams {
    pub trees: u16,
    pub max_depth: u16,
    pub min_samples_leaf: usize,
}

/// A tree as structure only: per node either a split (column, `<=` threshold, children) or a leaf.
#[derive(Debug, Clone, PartialEq)]
pub enum Shape {
    Split {
        column: usize,
        threshold: f64,
        left: usize,
        right: usize,
    },
    Leaf,
}

/// Covers and leaf default rates from passing `rows` down `shape`; nodes no row reaches get the
/// overall default rate as their leaf value (and cover 0).
pub fn recount(
    shape: &[Shape],
    rows: &[Vec<f64>],
    defaulted: &[bool],
    names: &[String],
) -> TreeSpec {
    let mut cover = vec![0usize; shape.len()];
    let mut bad = vec![0usize; shape.len()];
    for (x, &d) in rows.iter().zip(defaulted) {
        let mut n = 0;
        loop {
            cover[n] += 1;
            match &shape[n] {
                Shape::Leaf => {
                    bad[n] += usize::from(d);
                    break;
                }
                Shape::Split {
                    column,
                    threshold,
                    left,
                    right,
                } => {
                    n = if x[*column] <= *threshold {
                        *left
                    } else {
                        *right
                    }
                }
            }
        }
    }
    let base = defaulted.iter().filter(|&&d| d).count() as f64 / defaulted.len().max(1) as f64;
    let nodes = shape
        .iter()
        .enumerate()
        .map(|(i, s)| match s {
            Shape::Leaf => NodeSpec {
                column: None,
                threshold: None,
                comparison: None,
                missing: None,
                left: None,
                right: None,
                value: Some(if cover[i] == 0 {
                    base
                } else {
                    bad[i] as f64 / cover[i] as f64
                }),
                cover: Some(cover[i] as f64),
            },
            Shape::Split {
                column,
                threshold,
                left,
                right,
            } => NodeSpec {
                column: Some(names[*column].clone()),
                threshold: Some(*threshold),
                comparison: Some(Comparison::LessOrEqual),
                missing: Some(Side::Left),
                left: Some(*left),
                right: Some(*right),
                value: None,
                cover: Some(cover[i] as f64),
            },
        })
        .collect();
    TreeSpec { nodes }
}

/// Fits a forest and returns its trees re-counted on the training rows.
pub fn fit(
    rows: &[Vec<f64>],
    defaulted: &[bool],
    names: &[String],
    params: ForestParams,
    seed: u64,
) -> Result<Vec<TreeSpec>, String> {
    if rows.iter().flatten().any(|v| !v.is_finite()) {
        return Err("forests are fitted on complete rows: give every field a reject or impute missing policy".into());
    }
    let x = DenseMatrix::from_2d_vec(&rows.to_vec()).map_err(|e| e.to_string())?;
    let y: Vec<u32> = defaulted.iter().map(|&d| u32::from(d)).collect();
    let p = RandomForestClassifierParameters::default()
        .with_n_trees(params.trees)
        .with_max_depth(params.max_depth)
        .with_min_samples_leaf(params.min_samples_leaf)
        .with_seed(seed);
    let forest = RandomForestClassifier::fit(&x, &y, p).map_err(|e| e.to_string())?;
    // smartcore keeps tree structure private; its serde form is the stable way to read it.
    let value = serde_json::to_value(&forest).map_err(|e| e.to_string())?;
    let trees = value["trees"]
        .as_array()
        .ok_or("no trees in the fitted forest")?;
    trees
        .iter()
        .map(|t| {
            let nodes = t["nodes"].as_array().ok_or("a fitted tree has no nodes")?;
            let shape = nodes
                .iter()
                .map(shape_of)
                .collect::<Result<Vec<_>, String>>()?;
            Ok(recount(&shape, rows, defaulted, names))
        })
        .collect()
}

fn shape_of(n: &Value) -> Result<Shape, String> {
    let child = |k: &str| n[k].as_u64().map(|v| v as usize);
    match (child("true_child"), child("false_child")) {
        (Some(left), Some(right)) => Ok(Shape::Split {
            column: n["split_feature"].as_u64().ok_or("split without feature")? as usize,
            threshold: n["split_value"].as_f64().ok_or("split without value")?,
            left,
            right,
        }),
        (None, None) => Ok(Shape::Leaf),
        _ => Err("a node with one child".into()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: split x0 <= 0.5; rows x0 = 0, 0, 1, 1, 1 with defaults 1, 0, 0, 0, 1.
    // Left leaf: cover 2, rate 1/2; right leaf: cover 3, rate 1/3; root cover 5.
    #[test]
    fn recount_counts_covers_and_rates() {
        let shape = [
            Shape::Split {
                column: 0,
                threshold: 0.5,
                left: 1,
                right: 2,
            },
            Shape::Leaf,
            Shape::Leaf,
        ];
        let rows: Vec<Vec<f64>> = [0.0, 0.0, 1.0, 1.0, 1.0].iter().map(|&v| vec![v]).collect();
        let t = recount(
            &shape,
            &rows,
            &[true, false, false, false, true],
            &["x0".into()],
        );
        assert_eq!(t.nodes[0].cover, Some(5.0));
        assert_eq!((t.nodes[1].cover, t.nodes[1].value), (Some(2.0), Some(0.5)));
        assert_eq!(
            (t.nodes[2].cover, t.nodes[2].value),
            (Some(3.0), Some(1.0 / 3.0))
        );
    }
}
