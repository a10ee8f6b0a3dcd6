//! The model section: logistic weights, tree ensembles (shape, depth, covers) and embedded
//! graphs compiled into a scorer, and the stated monotone directions checked against the model.

use super::{fail, Result, MAX_TREE_DEPTH};
use crate::artifact::spec::*;
use crate::artifact::ArtifactError;
use crate::features::Schema;
use crate::model::{forest, Ensemble, Logistic, Node, Scorer, Tree};

/// The model body alone, checked and compiled against `schema` (covers not required), for tools
/// that score before the rest of an artifact exists (import).
pub fn scorer_from_spec(spec: &ModelSpec, schema: &Schema) -> Result<Scorer> {
    compile_model(spec, schema, ExplainMethod::TreeInterventional)
}

pub(super) fn compile_model(
    spec: &ModelSpec,
    schema: &Schema,
    method: ExplainMethod,
) -> Result<Scorer> {
    match spec {
        ModelSpec::Logistic(LogisticSpec {
            intercept,
            coefficients,
        }) => {
            if !intercept.is_finite() {
                return fail("$.model.intercept", "finite", "must be a finite number");
            }
            let mut coef = vec![f64::NAN; schema.columns.len()];
            for (name, &b) in coefficients {
                let at = format!("$.model.coefficients.{name}");
                let Some(c) = schema.column_index(name) else {
                    return fail(
                        at,
                        "known_column",
                        format!("{name} is not an encoded column of a scored field"),
                    );
                };
                if !b.is_finite() {
                    return fail(at, "finite", "must be a finite number");
                }
                coef[c] = b;
            }
            if let Some(c) = coef.iter().position(|b| b.is_nan()) {
                return fail(
                    "$.model.coefficients",
                    "complete",
                    format!(
                        "column {} has no coefficient (write 0 if it is meant to have none)",
                        schema.columns[c].name
                    ),
                );
            }
            Ok(Scorer::Logistic(Logistic {
                intercept: *intercept,
                coefficients: coef,
            }))
        }
        ModelSpec::OnnxGraph(g) => compile_graph(g, schema),
        ModelSpec::TreeEnsemble(TreeEnsembleSpec {
            aggregation,
            initial_value,
            trees,
        }) => {
            if trees.is_empty() {
                return fail(
                    "$.model.trees",
                    "required",
                    "an ensemble needs at least one tree",
                );
            }
            if !initial_value.is_finite() {
                return fail("$.model.initial_value", "finite", "must be a finite number");
            }
            if *aggregation == Aggregation::MeanProbability && *initial_value != 0.0 {
                return fail(
                    "$.model.initial_value",
                    "aggregation",
                    "mean_probability forests have no base score; use 0",
                );
            }
            if *aggregation == Aggregation::SumProbability && !(0.0..=1.0).contains(initial_value) {
                return fail(
                    "$.model.initial_value",
                    "probability",
                    "a sum_probability forest's base score is a probability in [0, 1]",
                );
            }
            let need_cover = method == ExplainMethod::TreeCoverWeighted;
            let trees = trees
                .iter()
                .enumerate()
                .map(|(t, tree)| compile_tree(tree, t, schema, *aggregation, need_cover))
                .collect::<Result<Vec<_>>>()?;
            Ok(Scorer::Trees(Ensemble {
                aggregation: *aggregation,
                initial_value: *initial_value,
                trees,
            }))
        }
    }
}

/// The embedded ONNX file: decoded, digest-checked, compiled, its input as wide as the schema.
fn compile_graph(g: &OnnxGraphSpec, schema: &Schema) -> Result<Scorer> {
    use base64::Engine;
    let bytes = base64::engine::general_purpose::STANDARD
        .decode(g.onnx.trim())
        .map_err(|e| ArtifactError::new("$.model.onnx", "base64", e.to_string()))?;
    let digest = crate::artifact::sha256_hex(&bytes);
    if digest != g.sha256 {
        return fail(
            "$.model.sha256",
            "digest",
            format!("the embedded ONNX file's SHA-256 is {digest}"),
        );
    }
    let (proto, _) = crate::onnx::decode(&bytes)
        .map_err(|e| ArtifactError::new("$.model.onnx", "onnx", e.to_string()))?;
    let model = crate::model::graph::compile(&proto)
        .map_err(|e| ArtifactError::new("$.model.onnx", "onnx", e.to_string()))?;
    if model.width != schema.columns.len() {
        return fail(
            "$.model.onnx",
            "columns",
            format!(
                "the graph's input has {} columns; the features encode to {}",
                model.width,
                schema.columns.len()
            ),
        );
    }
    Ok(Scorer::Graph(std::sync::Arc::new(model)))
}

fn compile_tree(
    spec: &TreeSpec,
    t: usize,
    schema: &Schema,
    agg: Aggregation,
    need_cover: bool,
) -> Result<Tree> {
    let at_tree = format!("$.model.trees[{t}]");
    if spec.nodes.is_empty() {
        return fail(
            format!("{at_tree}.nodes"),
            "required",
            "a tree needs at least one node",
        );
    }
    if spec.nodes.len() >= u32::MAX as usize {
        return fail(format!("{at_tree}.nodes"), "size", "too many nodes");
    }
    let mut nodes = Vec::with_capacity(spec.nodes.len());
    for (i, n) in spec.nodes.iter().enumerate() {
        let at = format!("{at_tree}.nodes[{i}]");
        let cover = match n.cover {
            Some(c) if !c.is_finite() || c < 0.0 => {
                return fail(format!("{at}.cover"), "cover", "must be a finite number, 0 or more")
            }
            Some(c) => c,
            None if need_cover => {
                return fail(format!("{at}.cover"), "cover", "path-dependent explanations need every node's cover; recompute covers from reference data or use tree_interventional")
            }
            None => f64::NAN,
        };
        let is_split = n.column.is_some()
            || n.left.is_some()
            || n.right.is_some()
            || n.threshold.is_some()
            || n.comparison.is_some()
            || n.missing.is_some();
        if let (Some(_), true) = (n.value, is_split) {
            return fail(at, "node", "a node is either a leaf (value) or a split (column, threshold, comparison, missing, left, right), not both");
        }
        if let Some(v) = n.value {
            if !v.is_finite() {
                return fail(format!("{at}.value"), "finite", "must be a finite number");
            }
            if agg != Aggregation::SumLogOdds && !(0.0..=1.0).contains(&v) {
                return fail(
                    format!("{at}.value"),
                    "probability",
                    "a forest leaf holds a probability (or a tree's share of one) in [0, 1]",
                );
            }
            nodes.push(Node {
                column: forest::LEAF,
                left: 0,
                right: 0,
                strict: false,
                missing_left: false,
                threshold: 0.0,
                value: v,
                cover,
            });
            continue;
        }
        let need = |name: &str| {
            ArtifactError::new(
                format!("{at}.{name}"),
                "required",
                format!("a split needs {name} (or give the leaf a value)"),
            )
        };
        let column = n.column.as_ref().ok_or_else(|| need("column"))?;
        let threshold = n.threshold.ok_or_else(|| need("threshold"))?;
        let comparison = n.comparison.ok_or_else(|| need("comparison"))?;
        let missing = n.missing.ok_or_else(|| need("missing"))?;
        let left = n.left.ok_or_else(|| need("left"))?;
        let right = n.right.ok_or_else(|| need("right"))?;
        let Some(c) = schema.column_index(column) else {
            return fail(
                format!("{at}.column"),
                "known_column",
                format!("{column} is not an encoded column of a scored field"),
            );
        };
        if !threshold.is_finite() {
            return fail(
                format!("{at}.threshold"),
                "finite",
                "must be a finite number",
            );
        }
        for (name, child) in [("left", left), ("right", right)] {
            if child >= spec.nodes.len() {
                return fail(
                    format!("{at}.{name}"),
                    "index",
                    format!(
                        "node {child} does not exist (the tree has {} nodes)",
                        spec.nodes.len()
                    ),
                );
            }
            if child == 0 || child == i {
                return fail(
                    format!("{at}.{name}"),
                    "acyclic",
                    format!("node {child} cannot be a child here (root or self)"),
                );
            }
        }
        if left == right {
            return fail(
                format!("{at}.right"),
                "acyclic",
                "left and right must be different nodes",
            );
        }
        nodes.push(Node {
            column: c as u32,
            left: left as u32,
            right: right as u32,
            strict: comparison == Comparison::Less,
            missing_left: missing == Side::Left,
            threshold,
            value: 0.0,
            cover,
        });
    }
    // Every node but the root has exactly one parent and is reached from the root.
    let mut parent = vec![usize::MAX; nodes.len()];
    for (i, n) in nodes.iter().enumerate() {
        if n.is_leaf() {
            continue;
        }
        for (name, child) in [("left", n.left as usize), ("right", n.right as usize)] {
            if parent[child] != usize::MAX {
                return fail(
                    format!("{at_tree}.nodes[{i}].{name}"),
                    "acyclic",
                    format!("node {child} already has parent {}", parent[child]),
                );
            }
            parent[child] = i;
        }
    }
    let mut depth = vec![usize::MAX; nodes.len()];
    depth[0] = 0;
    let mut stack = vec![0usize];
    let mut max_depth = 0;
    while let Some(i) = stack.pop() {
        max_depth = max_depth.max(depth[i]);
        if depth[i] > MAX_TREE_DEPTH {
            return fail(
                format!("{at_tree}.nodes[{i}]"),
                "depth",
                format!("trees deeper than {MAX_TREE_DEPTH} are not accepted"),
            );
        }
        let n = nodes[i];
        if !n.is_leaf() {
            for c in [n.left as usize, n.right as usize] {
                depth[c] = depth[i] + 1;
                stack.push(c);
            }
            if need_cover {
                let (l, r) = (nodes[n.left as usize].cover, nodes[n.right as usize].cover);
                if ((l + r) - n.cover).abs() > 1e-9 * n.cover.max(1.0) {
                    return fail(
                        format!("{at_tree}.nodes[{i}].cover"),
                        "cover",
                        format!(
                            "cover {} is not the sum of its children's covers {l} + {r}",
                            n.cover
                        ),
                    );
                }
            }
        }
    }
    if let Some(i) = depth.iter().position(|&d| d == usize::MAX) {
        return fail(
            format!("{at_tree}.nodes[{i}]"),
            "reachable",
            "node is not reachable from the root (node 0)",
        );
    }
    if need_cover && nodes[0].cover <= 0.0 {
        return fail(
            format!("{at_tree}.nodes[0].cover"),
            "cover",
            "the root's cover must be positive",
        );
    }
    Ok(Tree {
        nodes,
        depth: max_depth,
    })
}

/// A logistic slope must not contradict a field's stated risk direction: a model whose risk
/// falls with delinquencies would give reasons no reviewer could defend.
pub(super) fn check_monotone(fields: &[FieldSpec], model: &ModelSpec) -> Result<()> {
    let ModelSpec::Logistic(l) = model else {
        return Ok(());
    };
    for f in fields {
        let (Some(direction), Some(&b)) = (f.monotone, l.coefficients.get(&f.name)) else {
            continue;
        };
        let against = match direction {
            Monotone::Increasing => b < 0.0,
            Monotone::Decreasing => b > 0.0,
        };
        if against {
            return fail(
                format!("$.model.coefficients.{}", f.name),
                "monotone",
                format!(
                    "coefficient {b} contradicts the stated risk direction of {} ({}); \
                     refit without the field, bin it, or correct the direction",
                    f.name,
                    match direction {
                        Monotone::Increasing => "increasing",
                        Monotone::Decreasing => "decreasing",
                    }
                ),
            );
        }
    }
    Ok(())
}
