//! ONNX-ML tree ensembles (TreeEnsembleClassifier, TreeEnsembleRegressor) into plumbline trees.
//!
//! Binary classifiers are read in the single-score form skl2onnx and onnxmltools write: every
//! leaf weight for one class id, the positive class's score is their sum plus `base_values[0]`,
//! then `post_transform` (NONE: the score is the probability; LOGISTIC: the score is log-odds).
//! Forms whose onnxruntime output is not the logistic or the sum of the scores (weights for both
//! classes with base values, two base values for one class) are refused, not guessed at.
//! Thresholds become the float64 boundaries of [`super::boundary`]; leaf weights are kept as the
//! float64 values of the stored float32 (or double) numbers.

use super::boundary::{self, Affine, Mode, Precision};
use super::graph::{Head, Shape};
use super::{ImportError, Link};
use crate::artifact::spec::{Aggregation, Comparison, NodeSpec, Side, TreeSpec};
use crate::onnx::Attrs;
use std::collections::HashMap;

/// The trees, how they combine, and words on how they were read.
pub struct Trees {
    pub aggregation: Aggregation,
    pub initial_value: f64,
    pub trees: Vec<TreeSpec>,
    pub notes: Vec<String>,
}

const NODE_ATTRS: &[&str] = &[
    "nodes_falsenodeids",
    "nodes_featureids",
    "nodes_hitrates",
    "nodes_hitrates_as_tensor",
    "nodes_missing_value_tracks_true",
    "nodes_modes",
    "nodes_nodeids",
    "nodes_treeids",
    "nodes_truenodeids",
    "nodes_values",
    "nodes_values_as_tensor",
    "post_transform",
    "base_values",
    "base_values_as_tensor",
];

/// The head's own link before the graph's later steps: the raw score, or its logistic.
pub fn head_link(shape: &Shape) -> Result<bool, ImportError> {
    let a = Attrs::new(shape.head);
    if shape.kind == Head::TreeEnsembleClassifier {
        super::check_labels(&a)?;
    }
    match a.string("post_transform", "NONE")?.as_str() {
        "NONE" => Ok(false),
        "LOGISTIC" if shape.kind == Head::TreeEnsembleClassifier => Ok(true),
        other => Err(a.err(
            "post_transform",
            format!(
                "{other} is not read for a binary default model; plumbline reads NONE and LOGISTIC{}",
                if shape.kind == Head::TreeEnsembleRegressor {
                    " (NONE only for a regressor: onnxruntime applies no logistic to one target)"
                } else {
                    ""
                }
            ),
        ).into()),
    }
}

/// Reads the ensemble; `columns` names the encoded columns, in the model's input order.
pub fn read(shape: &Shape, columns: &[String], link: Link) -> Result<Trees, ImportError> {
    let a = Attrs::new(shape.head);
    let leaf = match shape.kind {
        Head::TreeEnsembleClassifier => "class",
        _ => "target",
    };
    let mut known: Vec<String> = NODE_ATTRS.iter().map(|s| s.to_string()).collect();
    for k in ["ids", "nodeids", "treeids", "weights", "weights_as_tensor"] {
        known.push(format!("{leaf}_{k}"));
    }
    if shape.kind == Head::TreeEnsembleClassifier {
        known.extend(["classlabels_int64s".into(), "classlabels_strings".into()]);
    } else {
        known.extend(["n_targets".into(), "aggregate_function".into()]);
    }
    a.only(&known.iter().map(String::as_str).collect::<Vec<_>>())?;

    let mut notes = Vec::new();
    let base_values = a.reals("base_values")?.unwrap_or_default();
    let class_ids = a.ints(&format!("{leaf}_ids"));
    let average = match shape.kind {
        Head::TreeEnsembleClassifier => {
            super::check_labels(&a)?;
            let mut ids: Vec<i64> = class_ids.clone();
            ids.sort_unstable();
            ids.dedup();
            match ids.as_slice() {
                [0] => {}
                [1] if base_values.is_empty() => {}
                [1] => return Err(a.err("base_values", "with weights for class 1 only, onnxruntime adds base values unevenly; export in the single-score form (class id 0)").into()),
                [] => return Err(a.err("class_ids", "holds no leaf weights").into()),
                _ => return Err(a.err("class_ids", format!("weights for classes {ids:?}: plumbline reads the binary single-score form (one class id), where onnxruntime's probability is the logistic or the sum of the scores")).into()),
            }
            false
        }
        _ => {
            if a.int("n_targets", 1) != 1 || class_ids.iter().any(|&i| i != 0) {
                return Err(a
                    .err("n_targets", "plumbline reads regressors with one target")
                    .into());
            }
            match a.string("aggregate_function", "SUM")?.as_str() {
                "SUM" => false,
                "AVERAGE" => true,
                other => {
                    return Err(a
                        .err(
                            "aggregate_function",
                            format!("{other} is not read; plumbline reads SUM and AVERAGE"),
                        )
                        .into())
                }
            }
        }
    };
    if base_values.len() > 1 {
        return Err(a.err(
            "base_values",
            format!(
                "holds {} values; with one score, onnxruntime uses only the first, so the file is ambiguous",
                base_values.len()
            ),
        ).into());
    }
    let base = base_values.first().copied().unwrap_or(0.0);
    if !base.is_finite() {
        return Err(a.err("base_values", "must be finite").into());
    }

    let mut trees = structure(&a, shape, columns, leaf)?;
    let (aggregation, scale) = match (link, average) {
        (Link::LogOdds { scale }, false) => (Aggregation::SumLogOdds, scale),
        (Link::LogOdds { .. }, true) => {
            return Err(a
                .err(
                    "aggregate_function",
                    "AVERAGE followed by a logistic is not read; export the summed margin",
                )
                .into())
        }
        (Link::Probability { scale }, true) => {
            if base != 0.0 {
                return Err(a
                    .err("base_values", "an averaged forest has no base value")
                    .into());
            }
            (Aggregation::MeanProbability, scale)
        }
        (Link::Probability { scale }, false) => (Aggregation::SumProbability, scale),
    };
    if scale != 1.0 {
        notes.push(format!(
            "leaf weights and base value multiplied by {scale}, as the graph scales the scores"
        ));
    }
    for (t, tree) in trees.iter_mut().enumerate() {
        for (i, n) in tree.nodes.iter_mut().enumerate() {
            if let Some(v) = n.value.as_mut() {
                *v *= scale;
                if aggregation != Aggregation::SumLogOdds && !(0.0..=1.0).contains(v) {
                    return Err(a.err(
                        &format!("{leaf}_weights"),
                        format!(
                            "tree {t}, leaf {i} holds {v}: with no logistic after the trees the output is used as the probability, so leaves must lie in [0, 1]"
                        ),
                    ).into());
                }
            }
        }
    }
    let initial_value = base * scale;
    if aggregation == Aggregation::SumProbability && !(0.0..=1.0).contains(&initial_value) {
        return Err(a
            .err("base_values", "must be a probability in [0, 1]")
            .into());
    }
    notes.push(format!(
        "{} trees read from {}; thresholds rewritten to the float64 boundaries that give onnxruntime's branch on every input ({} input{})",
        trees.len(),
        shape.head.op_type,
        match shape.precision {
            Precision::Float32 => "float32",
            Precision::Float64 => "float64",
        },
        if shape.scaler.is_some() { ", through the Scaler" } else { "" }
    ));
    Ok(Trees {
        aggregation,
        initial_value,
        trees,
        notes,
    })
}

/// One ONNX node, as listed.
struct Listed {
    tree: i64,
    id: i64,
    feature: i64,
    mode: Option<Mode>,
    threshold: f64,
    yes: i64,
    no: i64,
    missing_yes: bool,
}

/// Nodes grouped into trees and rebuilt in pre-order (root 0), leaves holding their weights.
fn structure(
    a: &Attrs,
    shape: &Shape,
    columns: &[String],
    leaf: &str,
) -> Result<Vec<TreeSpec>, ImportError> {
    let treeids = a.ints("nodes_treeids");
    let n = treeids.len();
    let ids = a.ints("nodes_nodeids");
    let features = a.ints("nodes_featureids");
    let yes = a.ints("nodes_truenodeids");
    let no = a.ints("nodes_falsenodeids");
    let modes = a.strings("nodes_modes")?;
    let values = a.reals("nodes_values")?.unwrap_or_default();
    let tracks = a.ints("nodes_missing_value_tracks_true");
    for (name, len) in [
        ("nodes_nodeids", ids.len()),
        ("nodes_featureids", features.len()),
        ("nodes_truenodeids", yes.len()),
        ("nodes_falsenodeids", no.len()),
        ("nodes_modes", modes.len()),
        ("nodes_values", values.len()),
    ] {
        if len != n {
            return Err(a
                .err(
                    name,
                    format!("has {len} entries for {n} nodes (nodes_treeids)"),
                )
                .into());
        }
    }
    if !tracks.is_empty() && tracks.len() != n {
        return Err(a
            .err(
                "nodes_missing_value_tracks_true",
                format!("has {} entries for {n} nodes", tracks.len()),
            )
            .into());
    }
    let mut listed = Vec::with_capacity(n);
    for i in 0..n {
        let mode = match modes[i].as_str() {
            "LEAF" => None,
            "BRANCH_LEQ" => Some(Mode::Leq),
            "BRANCH_LT" => Some(Mode::Lt),
            "BRANCH_GTE" => Some(Mode::Gte),
            "BRANCH_GT" => Some(Mode::Gt),
            m @ ("BRANCH_EQ" | "BRANCH_NEQ" | "BRANCH_MEMBER") => {
                return Err(a.err(
                    "nodes_modes",
                    format!("node {i} is {m}: categorical (equality or set) splits are not read; encode categories as the spec's 0/1 dummy columns"),
                ).into())
            }
            m => return Err(a.err("nodes_modes", format!("node {i}: unknown mode {m}")).into()),
        };
        if mode.is_some() {
            let f = features[i];
            if f < 0 || f as usize >= columns.len() {
                return Err(a.err(
                    "nodes_featureids",
                    format!(
                        "node {i} splits on input column {f}; the spec's features encode to {} columns",
                        columns.len()
                    ),
                ).into());
            }
            if values[i].is_nan() {
                return Err(a
                    .err("nodes_values", format!("node {i} has a NaN threshold"))
                    .into());
            }
        }
        listed.push(Listed {
            tree: treeids[i],
            id: ids[i],
            feature: features[i],
            mode,
            threshold: values[i],
            yes: yes[i],
            no: no[i],
            missing_yes: tracks.get(i) == Some(&1),
        });
    }

    // Trees in order of first appearance; each tree's nodes listed together, root first.
    let mut order: Vec<i64> = Vec::new();
    for l in &listed {
        if order.last() != Some(&l.tree) {
            if order.contains(&l.tree) {
                return Err(a
                    .err(
                        "nodes_treeids",
                        format!("tree {} is listed in more than one run", l.tree),
                    )
                    .into());
            }
            order.push(l.tree);
        }
    }
    let weights = leaf_weights(a, &listed, leaf)?;
    let mut trees = Vec::with_capacity(order.len());
    let mut start = 0;
    for (t, &tree_id) in order.iter().enumerate() {
        let end = start
            + listed[start..]
                .iter()
                .take_while(|l| l.tree == tree_id)
                .count();
        let nodes = &listed[start..end];
        trees.push(one_tree(
            a, shape, columns, nodes, t, tree_id, &weights, start,
        )?);
        start = end;
    }
    Ok(trees)
}

/// Summed leaf weights by (tree id, node id).
fn leaf_weights(
    a: &Attrs,
    listed: &[Listed],
    leaf: &str,
) -> Result<HashMap<(i64, i64), f64>, ImportError> {
    let treeids = a.ints(&format!("{leaf}_treeids"));
    let nodeids = a.ints(&format!("{leaf}_nodeids"));
    let w = a.reals(&format!("{leaf}_weights"))?.unwrap_or_default();
    if nodeids.len() != treeids.len() || w.len() != treeids.len() {
        return Err(a
            .err(
                &format!("{leaf}_weights"),
                "leaf weight lists differ in length",
            )
            .into());
    }
    let leaves: HashMap<(i64, i64), bool> = (listed.iter())
        .map(|l| ((l.tree, l.id), l.mode.is_none()))
        .collect();
    let mut out = HashMap::new();
    for i in 0..w.len() {
        let key = (treeids[i], nodeids[i]);
        match leaves.get(&key) {
            Some(true) => {}
            Some(false) => {
                return Err(a
                    .err(
                        &format!("{leaf}_nodeids"),
                        format!(
                            "weight {i} is attached to node {} of tree {}, which is a split",
                            key.1, key.0
                        ),
                    )
                    .into())
            }
            None => {
                return Err(a
                    .err(
                        &format!("{leaf}_nodeids"),
                        format!(
                            "weight {i} is attached to node {} of tree {}, which does not exist",
                            key.1, key.0
                        ),
                    )
                    .into())
            }
        }
        if !w[i].is_finite() {
            return Err(a
                .err(
                    &format!("{leaf}_weights"),
                    format!("weight {i} is not finite"),
                )
                .into());
        }
        *out.entry(key).or_insert(0.0) += w[i];
    }
    Ok(out)
}

#[allow(clippy::too_many_arguments)]
fn one_tree(
    a: &Attrs,
    shape: &Shape,
    columns: &[String],
    nodes: &[Listed],
    t: usize,
    tree_id: i64,
    weights: &HashMap<(i64, i64), f64>,
    offset: usize,
) -> Result<TreeSpec, ImportError> {
    let at = |what: &str| a.err("nodes_nodeids", format!("tree {tree_id}: {what}"));
    let mut pos: HashMap<i64, usize> = HashMap::new();
    for (i, l) in nodes.iter().enumerate() {
        if pos.insert(l.id, i).is_some() {
            return Err(at(&format!("node id {} is listed twice", l.id)).into());
        }
    }
    let child = |l: &Listed, id: i64, which: &str| {
        pos.get(&id).copied().ok_or_else(|| {
            a.err(
                &format!("nodes_{which}nodeids"),
                format!(
                    "tree {tree_id}, node {}: child {id} does not exist in the tree (listed node {})",
                    l.id,
                    offset + pos[&l.id]
                ),
            )
        })
    };
    // Pre-order from the first listed node; every node reached exactly once.
    let mut new_index = vec![usize::MAX; nodes.len()];
    let mut out: Vec<NodeSpec> = Vec::with_capacity(nodes.len());
    let mut stack = vec![(0usize, usize::MAX, false, 0usize)]; // (node, parent slot, is left, depth)
    while let Some((i, parent, left, depth)) = stack.pop() {
        if new_index[i] != usize::MAX {
            return Err(at(&format!(
                "node {} is reached twice (a shared child or a cycle; or the first listed node is not the root)",
                nodes[i].id
            )).into());
        }
        if depth > crate::artifact::MAX_TREE_DEPTH {
            return Err(at(&format!(
                "deeper than {} splits",
                crate::artifact::MAX_TREE_DEPTH
            ))
            .into());
        }
        let me = out.len();
        new_index[i] = me;
        if parent != usize::MAX {
            let p = &mut out[parent];
            if left {
                p.left = Some(me);
            } else {
                p.right = Some(me);
            }
        }
        let l = &nodes[i];
        let Some(mode) = l.mode else {
            out.push(NodeSpec {
                column: None,
                threshold: None,
                comparison: None,
                missing: None,
                left: None,
                right: None,
                value: Some(weights.get(&(tree_id, l.id)).copied().unwrap_or(0.0)),
                cover: None,
            });
            continue;
        };
        let f = l.feature as usize;
        let scaler: Option<Affine> =
            shape
                .scaler
                .as_ref()
                .map(|s| if s.len() == 1 { s[0] } else { s[f] });
        let split = boundary::split(mode, l.threshold, shape.precision, scaler);
        let (yes, no) = (child(l, l.yes, "true")?, child(l, l.no, "false")?);
        if yes == no {
            return Err(at(&format!("node {} has the same child twice", l.id)).into());
        }
        let (left_child, right_child) = if split.true_below {
            (yes, no)
        } else {
            (no, yes)
        };
        let missing_child = if l.missing_yes { yes } else { no };
        out.push(NodeSpec {
            column: Some(columns[f].clone()),
            threshold: Some(split.below.at),
            comparison: Some(if split.below.strict {
                Comparison::Less
            } else {
                Comparison::LessOrEqual
            }),
            missing: Some(if missing_child == left_child {
                Side::Left
            } else {
                Side::Right
            }),
            left: None,
            right: None,
            value: None,
            cover: None,
        });
        // Right pushed first so the left subtree is numbered first (pre-order).
        stack.push((right_child, me, false, depth + 1));
        stack.push((left_child, me, true, depth + 1));
    }
    if let Some(i) = new_index.iter().position(|&v| v == usize::MAX) {
        return Err(at(&format!(
            "node {} is not reachable from the root (tree index {t})",
            nodes[i].id
        ))
        .into());
    }
    Ok(TreeSpec { nodes: out })
}
