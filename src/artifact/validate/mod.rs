//! Semantic checks of an artifact, and compilation into a [`LoadedModel`].
//! Every failure names the JSON path and the rule broken.

use super::spec::*;
use super::{ArtifactError, LoadedModel};
use crate::features::{Column, Field, FieldType, FieldValue, Missing, Schema};
use crate::model::{forest, Ensemble, Logistic, Node, Scorer, Tree};
use crate::policy::{Policy, Rule, Scaling};
use crate::reasons::{vague_text, Reason, ReasonTable};

/// Deepest tree accepted: path bit sets are 64 bits wide.
pub const MAX_TREE_DEPTH: usize = 60;
/// Largest background sample accepted (interventional cost grows with it, per request).
pub const MAX_BACKGROUND_ROWS: usize = 2_000;
/// Most encoded columns a model may have (tree nodes store the column in 16 bits).
pub const MAX_COLUMNS: usize = 65_535;
/// Largest number of principal reasons a policy may ask for.
pub const MAX_REASONS_LIMIT: usize = 8;

mod explanation;
mod stability;

type Result<T> = std::result::Result<T, ArtifactError>;

fn fail<T>(path: impl Into<String>, rule: &str, message: impl Into<String>) -> Result<T> {
    Err(ArtifactError::new(path, rule, message))
}

pub fn compile(spec: ArtifactSpec, sha256: String) -> Result<LoadedModel> {
    if spec.format != FORMAT_TAG {
        return fail("$.format", "format", format!("must be \"{FORMAT_TAG}\""));
    }
    if spec.format_version != FORMAT_VERSION {
        return fail(
            "$.format_version",
            "format",
            format!(
                "this build reads version {FORMAT_VERSION}, got {}",
                spec.format_version
            ),
        );
    }
    check_identity(&spec.identity)?;
    let reasons = compile_reasons(&spec.reasons)?;
    let review_reasons = compile_review_reasons(&spec.review_reasons, &reasons)?;
    let is_trees = matches!(spec.model, ModelSpec::TreeEnsemble(_));
    let schema = compile_schema(&spec.features, &reasons, is_trees)?;
    let scorer = compile_model(&spec.model, &schema, spec.explanation.method)?;
    let policy = compile_policy(&spec.policy, &schema, &reasons)?;
    check_reason_use(&spec, &schema, &reasons)?;
    let (explainer, background, alternate) =
        explanation::compile(&spec.explanation, &schema, &scorer, &policy)?;
    check_monotone(&spec.features, &spec.model)?;
    let stability = match spec.stability {
        Some(s) => Some(stability::check(s, &spec.features)?),
        None => None,
    };
    Ok(LoadedModel {
        identity: spec.identity.clone(),
        sha256,
        schema,
        scorer,
        explainer,
        reference: spec.explanation.reference.clone(),
        reasons,
        review_reasons,
        policy,
        background,
        alternate,
        stability,
        provenance: spec.provenance,
    })
}

fn check_identity(id: &IdentitySpec) -> Result<()> {
    for (name, v) in [
        ("model_id", &id.model_id),
        ("version", &id.version),
        ("created_at", &id.created_at),
        ("producer", &id.producer),
        ("score_provider", &id.score_provider),
    ] {
        if v.trim().is_empty() {
            return fail(
                format!("$.identity.{name}"),
                "required",
                "must not be empty",
            );
        }
    }
    if !is_token(&id.model_id, 64) {
        return fail(
            "$.identity.model_id",
            "token",
            "use 1-64 of a-z, A-Z, 0-9, '-', '_', '.'",
        );
    }
    Ok(())
}

fn is_token(s: &str, max: usize) -> bool {
    !s.is_empty()
        && s.len() <= max
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'))
}

fn compile_reasons(specs: &[ReasonSpec]) -> Result<ReasonTable> {
    if specs.is_empty() {
        return fail(
            "$.reasons",
            "required",
            "the reason table must not be empty",
        );
    }
    let mut reasons = Vec::new();
    for (i, r) in specs.iter().enumerate() {
        let at = format!("$.reasons[{i}]");
        if !is_token(&r.code, 16) {
            return fail(
                format!("{at}.code"),
                "token",
                "use 1-16 of a-z, A-Z, 0-9, '-', '_', '.'",
            );
        }
        if reasons.iter().any(|x: &Reason| x.code == r.code) {
            return fail(
                format!("{at}.code"),
                "unique",
                format!("code {} is defined twice", r.code),
            );
        }
        if let Some(why) = vague_text(&r.text) {
            return fail(format!("{at}.text"), "specific", why);
        }
        reasons.push(Reason {
            code: r.code.clone(),
            text: r.text.trim().to_string(),
            inquiry: r.inquiry,
        });
    }
    if reasons.iter().filter(|r| r.inquiry).count() > 1 {
        return fail(
            "$.reasons",
            "inquiry",
            "at most one reason may be marked inquiry",
        );
    }
    Ok(ReasonTable { reasons })
}

/// The manual-review reasons: codes and texts as specific as the model's, no code in both lists.
fn compile_review_reasons(specs: &[ReasonSpec], model: &ReasonTable) -> Result<Vec<Reason>> {
    let mut out: Vec<Reason> = Vec::new();
    for (i, r) in specs.iter().enumerate() {
        let at = format!("$.review_reasons[{i}]");
        if !is_token(&r.code, 16) {
            return fail(
                format!("{at}.code"),
                "token",
                "use 1-16 of a-z, A-Z, 0-9, '-', '_', '.'",
            );
        }
        if model.index(&r.code).is_some() || out.iter().any(|x| x.code == r.code) {
            return fail(
                format!("{at}.code"),
                "unique",
                format!(
                    "code {} is defined twice (codes are shared with $.reasons)",
                    r.code
                ),
            );
        }
        if let Some(why) = vague_text(&r.text) {
            return fail(format!("{at}.text"), "specific", why);
        }
        if r.inquiry {
            return fail(
                format!("{at}.inquiry"),
                "inquiry",
                "the inquiries factor is a model reason",
            );
        }
        out.push(Reason {
            code: r.code.clone(),
            text: r.text.trim().to_string(),
            inquiry: false,
        });
    }
    Ok(out)
}

/// The schema alone (for tools that read data against a model's fields before a model exists).
pub fn schema_from_specs(
    specs: &[FieldSpec],
    reasons: &[ReasonSpec],
    is_trees: bool,
) -> Result<Schema> {
    compile_schema(specs, &compile_reasons(reasons)?, is_trees)
}

fn compile_schema(specs: &[FieldSpec], reasons: &ReasonTable, is_trees: bool) -> Result<Schema> {
    if specs.is_empty() {
        return fail("$.features", "required", "a model needs at least one field");
    }
    let mut fields: Vec<Field> = Vec::new();
    let mut columns: Vec<Column> = Vec::new();
    for (i, f) in specs.iter().enumerate() {
        let at = format!("$.features[{i}]");
        if !f
            .name
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_')
            || f.name.is_empty()
            || f.name.len() > 64
        {
            return fail(format!("{at}.name"), "token", "use 1-64 of a-z, 0-9, '_'");
        }
        if fields.iter().any(|x| x.name == f.name) {
            return fail(
                format!("{at}.name"),
                "unique",
                format!("field {} is defined twice", f.name),
            );
        }
        let ty = field_type(f, &at)?;
        check_bounds(f, &ty, &at)?;
        if f.monotone.is_some() && (f.kind == FieldKind::Category || !f.scored) {
            return fail(
                format!("{at}.monotone"),
                "monotone",
                "a risk direction applies to scored number, count and boolean fields",
            );
        }
        let reason = match (f.scored, &f.reason) {
            (true, None) => {
                return fail(
                    format!("{at}.reason"),
                    "reason_table",
                    "a scored field needs a reason code",
                )
            }
            (true, Some(code)) => Some(reasons.index(code).ok_or_else(|| {
                ArtifactError::new(
                    format!("{at}.reason"),
                    "reason_table",
                    format!("reason code {code} is not in $.reasons"),
                )
            })?),
            (false, Some(_)) => {
                return fail(
                    format!("{at}.reason"),
                    "reason_table",
                    "a field that is not scored has no reason code",
                )
            }
            (false, None) => None,
        };
        let start = columns.len();
        if f.scored {
            for (name, level) in Schema::column_names(&f.name, &ty) {
                columns.push(Column {
                    name,
                    field: i,
                    level,
                });
            }
        }
        let missing = match &f.missing {
            MissingSpec::Reject(_) => Missing::Reject,
            MissingSpec::TreeDefault(_) if !is_trees => {
                return fail(
                    format!("{at}.missing"),
                    "missing_policy",
                    "tree_default needs a tree_ensemble model; use impute or reject",
                )
            }
            MissingSpec::TreeDefault(_) => Missing::TreeDefault,
            MissingSpec::Impute(ImputeSpec { value }) => Missing::Impute(value.clone()),
        };
        fields.push(Field {
            name: f.name.clone(),
            ty,
            unit: f.unit.clone(),
            min: f.min,
            max: f.max,
            missing,
            scored: f.scored,
            reason,
            columns: start..columns.len(),
        });
    }
    let schema = Schema { fields, columns };
    // Imputed values must themselves be valid values of their field.
    for (i, f) in schema.fields.iter().enumerate() {
        if let Missing::Impute(v) = &f.missing {
            if v.is_null() {
                return fail(
                    format!("$.features[{i}].missing.value"),
                    "impute",
                    "the imputed value must not be null",
                );
            }
            schema.check_value(i, v).map_err(|(rule, msg)| {
                ArtifactError::new(format!("$.features[{i}].missing.value"), rule, msg)
            })?;
        }
    }
    if schema.columns.is_empty() {
        return fail("$.features", "required", "no field is scored");
    }
    if schema.columns.len() > MAX_COLUMNS {
        return fail(
            "$.features",
            "size",
            format!(
                "{} encoded columns; at most {MAX_COLUMNS}",
                schema.columns.len()
            ),
        );
    }
    Ok(schema)
}

fn field_type(f: &FieldSpec, at: &str) -> Result<FieldType> {
    match f.kind {
        FieldKind::Category => {
            if f.levels.len() < 2 {
                return fail(
                    format!("{at}.levels"),
                    "levels",
                    "a category needs at least two levels",
                );
            }
            for (j, l) in f.levels.iter().enumerate() {
                if l.is_empty() || f.levels[..j].contains(l) {
                    return fail(
                        format!("{at}.levels[{j}]"),
                        "levels",
                        "levels must be non-empty and distinct",
                    );
                }
            }
            let Some(base) = &f.base_level else {
                return fail(
                    format!("{at}.base_level"),
                    "required",
                    "a category names the base level dropped in n-1 dummy coding",
                );
            };
            let Some(base) = f.levels.iter().position(|l| l == base) else {
                return fail(
                    format!("{at}.base_level"),
                    "levels",
                    format!("base level \"{base}\" is not one of the levels"),
                );
            };
            Ok(FieldType::Category {
                levels: f.levels.clone(),
                base,
            })
        }
        other => {
            if !f.levels.is_empty() {
                return fail(
                    format!("{at}.levels"),
                    "levels",
                    "only category fields have levels",
                );
            }
            if f.base_level.is_some() {
                return fail(
                    format!("{at}.base_level"),
                    "levels",
                    "only category fields have a base level",
                );
            }
            Ok(match other {
                FieldKind::Number => FieldType::Number,
                FieldKind::Count => FieldType::Count,
                _ => FieldType::Boolean,
            })
        }
    }
}

fn check_bounds(f: &FieldSpec, ty: &FieldType, at: &str) -> Result<()> {
    let numeric = matches!(ty, FieldType::Number | FieldType::Count);
    for (name, v) in [("min", f.min), ("max", f.max)] {
        if let Some(v) = v {
            if !numeric {
                return fail(
                    format!("{at}.{name}"),
                    "range",
                    "only number and count fields have a range",
                );
            }
            if !v.is_finite() {
                return fail(format!("{at}.{name}"), "finite", "must be a finite number");
            }
        }
    }
    if *ty == FieldType::Count {
        for (name, v) in [("min", f.min), ("max", f.max)] {
            if v.is_some_and(|v| v.fract() != 0.0) {
                return fail(
                    format!("{at}.{name}"),
                    "integer",
                    "a count field's bounds are whole numbers",
                );
            }
        }
    }
    if let (Some(lo), Some(hi)) = (f.min, f.max) {
        if lo > hi {
            return fail(
                format!("{at}.max"),
                "range",
                format!("max {hi} is below min {lo}"),
            );
        }
    }
    Ok(())
}

/// The model body alone, checked and compiled against `schema` (covers not required), for tools
/// that score before the rest of an artifact exists (import).
pub fn scorer_from_spec(spec: &ModelSpec, schema: &Schema) -> Result<Scorer> {
    compile_model(spec, schema, ExplainMethod::TreeInterventional)
}

fn compile_model(spec: &ModelSpec, schema: &Schema, method: ExplainMethod) -> Result<Scorer> {
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
    let digest = super::sha256_hex(&bytes);
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

fn compile_policy(spec: &PolicySpec, schema: &Schema, reasons: &ReasonTable) -> Result<Policy> {
    let (a, d) = (spec.approve_below, spec.decline_at_or_above);
    if !(a.is_finite() && a > 0.0 && a <= 1.0) {
        return fail(
            "$.policy.approve_below",
            "cutoff",
            "must be a probability in (0, 1]",
        );
    }
    if !(d.is_finite() && d <= 1.0) || d < a {
        return fail(
            "$.policy.decline_at_or_above",
            "cutoff_order",
            format!("must be a probability at or above approve_below ({a}) and at most 1"),
        );
    }
    let s = &spec.scaling;
    if !(s.pdo.is_finite() && s.pdo > 0.0) {
        return fail(
            "$.policy.scaling.pdo",
            "scaling",
            "points to double the odds must be positive",
        );
    }
    if !(s.odds.is_finite() && s.odds > 0.0) {
        return fail(
            "$.policy.scaling.odds",
            "scaling",
            "good:bad odds must be positive",
        );
    }
    if !s.points.is_finite() {
        return fail(
            "$.policy.scaling.points",
            "finite",
            "must be a finite number",
        );
    }
    // A score disclosure states the range of possible scores (FCRA 15 U.S.C. 1681g(f)(1)(B)).
    for (name, v) in [("min_score", s.min_score), ("max_score", s.max_score)] {
        if v.is_none() {
            return fail(
                format!("$.policy.scaling.{name}"),
                "required",
                "a score disclosure states the range of possible scores (FCRA 1681g(f)(1)(B)): give min_score and max_score",
            );
        }
    }
    for (name, v) in [("min_score", s.min_score), ("max_score", s.max_score)] {
        if v.is_some_and(|v| v.fract() != 0.0 || v.abs() > 1e9) {
            return fail(
                format!("$.policy.scaling.{name}"),
                "integer",
                "scores are whole numbers: give the range's ends as whole numbers",
            );
        }
    }
    if let (Some(lo), Some(hi)) = (s.min_score, s.max_score) {
        if !(lo.is_finite() && hi.is_finite()) || lo >= hi {
            return fail(
                "$.policy.scaling.max_score",
                "range",
                "max_score must be above min_score (a range of one score discloses nothing)",
            );
        }
    }
    if spec.max_reasons == 0 || spec.max_reasons > MAX_REASONS_LIMIT {
        return fail("$.policy.max_reasons", "range", format!("must be 1 to {MAX_REASONS_LIMIT} (Regulation B comment 9(b)(2)-1: more than four are not likely helpful)"));
    }
    let mut rules = Vec::new();
    for (i, r) in spec.rules.iter().enumerate() {
        let at = format!("$.policy.rules[{i}]");
        let reason = reasons.index(&r.code).ok_or_else(|| {
            ArtifactError::new(
                format!("{at}.code"),
                "reason_table",
                format!("reason code {} is not in $.reasons", r.code),
            )
        })?;
        let field = schema.field_index(&r.field).ok_or_else(|| {
            ArtifactError::new(
                format!("{at}.field"),
                "known_field",
                format!("{} is not a field", r.field),
            )
        })?;
        let value = match (r.test, &r.value) {
            (RuleTest::Missing, None) => FieldValue::Missing,
            (RuleTest::Missing, Some(_)) => {
                return fail(
                    format!("{at}.value"),
                    "rule",
                    "a missing test takes no value",
                )
            }
            (_, None) => return fail(format!("{at}.value"), "required", "this test needs a value"),
            (_, Some(v)) => schema
                .check_value(field, v)
                .map_err(|(rule, msg)| ArtifactError::new(format!("{at}.value"), rule, msg))?,
        };
        let ordered = matches!(
            r.test,
            RuleTest::Greater | RuleTest::GreaterOrEqual | RuleTest::Less | RuleTest::LessOrEqual
        );
        if ordered && !matches!(value, FieldValue::Number(_)) {
            return fail(
                format!("{at}.test"),
                "rule",
                "ordering tests need a number or count field",
            );
        }
        rules.push(Rule {
            reason,
            field,
            test: r.test,
            value,
            given: r.value.clone(),
            action: r.action,
        });
    }
    Ok(Policy {
        approve_below: a,
        decline_at_or_above: d,
        scaling: Scaling::new(s.points, s.odds, s.pdo, s.min_score, s.max_score),
        max_reasons: spec.max_reasons,
        inquiry_extra: spec.inquiry_extra,
        rules,
    })
}

/// Every code is used, and every unscored field is read by some rule.
fn check_reason_use(spec: &ArtifactSpec, schema: &Schema, reasons: &ReasonTable) -> Result<()> {
    for (i, r) in reasons.reasons.iter().enumerate() {
        let by_field = schema.fields.iter().any(|f| f.reason == Some(i));
        let by_rule = spec.policy.rules.iter().any(|x| x.code == r.code);
        if !by_field && !by_rule {
            return fail(
                format!("$.reasons[{i}].code"),
                "unused",
                format!("reason code {} is used by no field and no rule", r.code),
            );
        }
    }
    for (i, f) in schema.fields.iter().enumerate() {
        if !f.scored && !spec.policy.rules.iter().any(|r| r.field == f.name) {
            return fail(
                format!("$.features[{i}].scored"),
                "unused",
                format!("field {} is neither scored nor read by a rule", f.name),
            );
        }
    }
    Ok(())
}

/// A logistic slope must not contradict a field's stated risk direction: a model whose risk
/// falls with delinquencies would give reasons no reviewer could defend.
fn check_monotone(fields: &[FieldSpec], model: &ModelSpec) -> Result<()> {
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
