//! Bringing in a model built elsewhere: an ONNX-ML file, as skl2onnx and onnxmltools write them
//! for scikit-learn, LightGBM and XGBoost, read into plumbline's own model structures so the same
//! exact explanations (linear terms, TreeSHAP), validation and reasons apply.
//!
//! This stage sits beside `train`, before `artifact`: it writes the same spec types through the
//! same artifact assembly (reference populations, stability bins, validation before writing) and
//! reaches into no other stage's internals. The reference CSV stands in for what the file lacks:
//! node covers for path-dependent TreeSHAP, the Regulation B reference populations, the
//! development bins, and a first measure of the model on those rows.
//!
//! An imported model needs its own validation and model-risk review; import proves only that
//! plumbline computes what onnxruntime computes, and explains it exactly.

mod any;
pub mod boundary;
mod covers;
mod graph;
mod linear;
mod trees;

pub use crate::onnx::Source;
pub use covers::Covers;
pub use graph::Head;

use crate::artifact::spec::{ModelSpec, TreeEnsembleSpec};
use crate::train::spec::{TrainError, TrainingSpec};
use crate::train::{dataset, reference};
use graph::Step;
use serde_json::{json, Value};

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ImportError {
    #[error("spec: {0}")]
    Spec(String),
    #[error("reference data: {0}")]
    Data(String),
    #[error("ONNX model, {at}: {message}")]
    Model { at: String, message: String },
    #[error("the imported artifact does not validate: {0}")]
    Artifact(String),
}

impl ImportError {
    pub fn model(at: impl Into<String>, message: impl Into<String>) -> Self {
        ImportError::Model {
            at: at.into(),
            message: message.into(),
        }
    }
}

impl From<crate::onnx::OnnxError> for ImportError {
    fn from(e: crate::onnx::OnnxError) -> Self {
        ImportError::Model {
            at: e.at,
            message: e.message,
        }
    }
}

impl From<TrainError> for ImportError {
    fn from(e: TrainError) -> Self {
        match e {
            TrainError::Spec(s) => ImportError::Spec(s),
            TrainError::Data(s) => ImportError::Data(s),
            TrainError::Fit(s) => ImportError::Data(s),
            TrainError::Artifact(s) => ImportError::Artifact(s),
        }
    }
}

/// How the model operator's positive-class score becomes the probability of default.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Link {
    /// probability = scale * score.
    Probability { scale: f64 },
    /// probability = logistic(scale * score).
    LogOdds { scale: f64 },
}

/// Folds the graph's steps after the operator (whose own transform applied a logistic or not).
fn fold(logistic: bool, steps: &[Step], output: &str) -> Result<Link, ImportError> {
    let (mut logistic, mut scale) = (logistic, 1.0);
    let at = || format!("output \"{output}\"");
    for step in steps {
        match (step, logistic) {
            // onnxmltools multiplies LightGBM probabilities by a constant 1.
            (Step::Scale(c), _) if *c == 1.0 => {}
            (Step::Scale(c), false) => scale *= c,
            (Step::Scale(_), true) => {
                return Err(ImportError::model(
                    at(),
                    "scales a probability after the logistic; the result is not a probability",
                ))
            }
            (Step::Sigmoid, false) => logistic = true,
            (Step::Sigmoid, true) => {
                return Err(ImportError::model(
                    at(),
                    "applies the logistic function twice",
                ))
            }
        }
    }
    if scale <= 0.0 {
        return Err(ImportError::model(
            at(),
            "scales the scores by a negative number, which turns the risk around",
        ));
    }
    Ok(if logistic {
        Link::LogOdds { scale }
    } else {
        Link::Probability { scale }
    })
}

/// Binary models only, labelled 0 and 1 (1 = defaulted), so column 1 is the default probability.
fn check_labels(a: &crate::onnx::Attrs) -> Result<(), ImportError> {
    Ok(crate::onnx::check_binary_labels(a)?)
}

/// What the import runs with.
#[derive(Debug, Clone, Default)]
pub struct ImportOptions {
    pub covers: Covers,
    /// Graph models: the explanation background as CSV text (the spec's fields; the target
    /// column may be absent). Without it, a seeded stratified sample of the reference rows.
    pub background: Option<String>,
    /// Graph models: estimate contributions by sampling when exact enumeration is over budget.
    pub approximate: bool,
}

/// What the import measured and noticed, for the person running it.
#[derive(Debug, Clone)]
pub struct ImportReport {
    pub source: Source,
    /// The model operator read, or the graph's operators.
    pub operator: String,
    pub rows: usize,
    pub base_rate: f64,
    /// On the reference rows; `None` when they hold one class only.
    pub auc: Option<f64>,
    pub ks: Option<f64>,
    pub brier: f64,
    pub notes: Vec<String>,
}

/// Settings of a training spec that import does not use.
const TRAINING_ONLY: &[&str] = &["kind", "l2", "forest"];

/// What kind of model the file holds: one operator read into our structures, or a graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    Trees,
    Linear,
    Graph,
}

fn kind_of(graph: &crate::onnx::pb::GraphProto) -> Kind {
    let has = |op: &str| (graph.node.iter()).any(|n| n.domain == "ai.onnx.ml" && n.op_type == op);
    if has("TreeEnsembleClassifier") || has("TreeEnsembleRegressor") {
        Kind::Trees
    } else if has("LinearClassifier") {
        Kind::Linear
    } else {
        Kind::Graph
    }
}

/// The model body read from the file, with what provenance records of it.
struct Body {
    spec: ModelSpec,
    notes: Vec<String>,
    operator: String,
    onnx: Value,
    /// Graph models: the compiled graph (scored in batches) .
    graph: Option<std::sync::Arc<crate::model::graph::GraphModel>>,
}

/// Trees or a logistic model, read into our structures.
fn operators(
    graph: &crate::onnx::pb::GraphProto,
    names: &[String],
    options: &ImportOptions,
) -> Result<Body, ImportError> {
    let shape = graph::read(graph)?;
    if let Some(w) = shape.width.filter(|&w| w != names.len()) {
        return Err(ImportError::model(
            format!("input \"{}\"", shape.input_name),
            format!(
                "has {w} columns; the spec's features encode to {} ({}), in the order they are listed",
                names.len(),
                names.join(", ")
            ),
        ));
    }
    let (spec, notes) = if shape.kind != Head::LinearClassifier {
        let link = fold(trees::head_link(&shape)?, &shape.steps, &shape.output_name)?;
        let t = trees::read(&shape, names, link)?;
        if options.covers == Covers::Hessian
            && t.aggregation != crate::artifact::spec::Aggregation::SumLogOdds
        {
            return Err(ImportError::Spec(
                "hessian covers need a boosted log-odds model; use row covers for forests".into(),
            ));
        }
        let spec = ModelSpec::TreeEnsemble(TreeEnsembleSpec {
            aggregation: t.aggregation,
            initial_value: t.initial_value,
            trees: t.trees,
        });
        (spec, t.notes)
    } else {
        if options.covers != Covers::Rows {
            return Err(ImportError::Spec(
                "covers apply to tree ensembles; a logistic model has none".into(),
            ));
        }
        let form = linear::head_link(&shape)?;
        let link = fold(form.logistic, &shape.steps, &shape.output_name)?;
        let l = linear::read(&shape, names.len(), &form, link)?;
        let coefficients = names.iter().cloned().zip(l.coefficients).collect();
        let spec = ModelSpec::Logistic(crate::artifact::spec::LogisticSpec {
            intercept: l.intercept,
            coefficients,
        });
        (spec, l.notes)
    };
    Ok(Body {
        spec,
        notes,
        operator: format!("{:?}", shape.kind),
        onnx: json!({
            "operator": shape.kind, "input": shape.input_name, "output": shape.output_name,
            "input_precision": match shape.precision {
                boundary::Precision::Float32 => "float32",
                boundary::Precision::Float64 => "float64",
            },
            "scaler": shape.scaler.is_some(), "zipmap": shape.zipmap,
        }),
        graph: None,
    })
}

/// Reads an ONNX model against a training spec and a reference CSV; returns the artifact text
/// (written only by the caller, and only because it validated) and a report.
pub fn import(
    onnx_bytes: &[u8],
    spec_text: &str,
    csv: &str,
    options: &ImportOptions,
) -> Result<(String, ImportReport), ImportError> {
    import_with(onnx_bytes, spec_text, csv, options, &crate::progress::Quiet)
}

/// As [`import`], naming each stage to `progress`.
pub fn import_with(
    onnx_bytes: &[u8],
    spec_text: &str,
    csv: &str,
    options: &ImportOptions,
    progress: &dyn crate::progress::Progress,
) -> Result<(String, ImportReport), ImportError> {
    progress.stage("reading the model", None);
    let raw: Value =
        serde_json::from_str(spec_text).map_err(|e| ImportError::Spec(e.to_string()))?;
    let ignored: Vec<&str> = TRAINING_ONLY
        .iter()
        .copied()
        .filter(|k| raw.get(k).is_some())
        .collect();
    let mut notes: Vec<String> = (ignored.iter())
        .map(|k| format!("spec setting \"{k}\" is for training and is ignored by import"))
        .collect();
    let spec: TrainingSpec =
        serde_json::from_value(raw).map_err(|e| ImportError::Spec(e.to_string()))?;
    crate::train::draft::check_no_placeholders(&spec)?;

    let (model, source) = crate::onnx::decode(onnx_bytes)?;
    let Some(graph_proto) = model.graph.as_ref() else {
        return Err(ImportError::model("file", "holds no graph"));
    };
    let kind = kind_of(graph_proto);
    let schema =
        crate::artifact::schema_from_specs(&spec.features, &spec.reasons, kind == Kind::Trees)
            .map_err(|e| ImportError::Spec(e.to_string()))?;
    let names: Vec<String> = schema.columns.iter().map(|c| c.name.clone()).collect();
    if kind != Kind::Graph && (options.background.is_some() || options.approximate) {
        return Err(ImportError::Spec(
            "--background and --approximate are for graph models (neural networks, SVMs); trees and logistic models are explained exactly by their own methods".into(),
        ));
    }
    let mut body = match kind {
        Kind::Graph => {
            if options.covers != Covers::Rows {
                return Err(ImportError::Spec("covers apply to tree ensembles".into()));
            }
            let (spec, graph) = any::body(onnx_bytes, &model, &names)?;
            let s = &graph.summary;
            let ops: Vec<String> = s
                .operators
                .iter()
                .map(|(o, n)| format!("{o} x{n}"))
                .collect();
            Body {
                spec: ModelSpec::OnnxGraph(spec),
                notes: vec![format!(
                    "graph kept whole and evaluated: {}; {} parameters{}",
                    ops.join(", "),
                    s.parameters,
                    s.support_vectors
                        .map_or(String::new(), |n| format!(", {n} support vectors"))
                )],
                operator: format!("graph ({})", ops.join(", ")),
                onnx: json!({
                    "operators": s.operators, "parameters": s.parameters,
                    "support_vectors": s.support_vectors, "output": s.output,
                    "input_precision": "float32",
                }),
                graph: Some(std::sync::Arc::new(graph)),
            }
        }
        _ => operators(graph_proto, &names, options)?,
    };
    let invalid = |e: crate::ArtifactError| ImportError::Artifact(e.to_string());
    let scorer = crate::artifact::scorer_from_spec(&body.spec, &schema).map_err(invalid)?;

    progress.stage("checking the reference rows", None);
    let data = dataset::read_csv(csv, &schema, &spec.target)
        .map_err(|e| ImportError::Data(e.to_string()))?;
    let (x, y) = (&data.columns, &data.defaulted);
    progress.stage("scoring the reference rows and counting covers", None);
    if let (crate::model::Scorer::Trees(ensemble), ModelSpec::TreeEnsemble(tree_body)) =
        (&scorer, &mut body.spec)
    {
        let covers = covers::count(ensemble, x, options.covers);
        for (tree, cover) in tree_body.trees.iter_mut().zip(covers) {
            for (node, c) in tree.nodes.iter_mut().zip(cover) {
                node.cover = Some(c);
            }
        }
        body.notes.push(options.covers.words().to_string());
    }
    let score = |rows: &[&[f64]]| -> Vec<f64> {
        match &body.graph {
            Some(g) => {
                let flat: Vec<f32> = rows
                    .iter()
                    .flat_map(|r| r.iter().map(|&v| v as f32))
                    .collect();
                g.probabilities(&flat, rows.len())
                    .unwrap_or_else(|_| vec![f64::NAN; rows.len()])
            }
            None => (rows.iter())
                .map(|r| scorer.probability_and_log_odds(scorer.raw(r)).0)
                .collect(),
        }
    };
    let all: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
    let p = score(&all);
    if let Some(i) = p.iter().position(|v| !v.is_finite()) {
        return Err(ImportError::Data(format!(
            "row {}: the model's output is not a finite number",
            i + 1
        )));
    }

    // Graph models: the background sample and how contributions are computed.
    let fields = schema.fields.iter().filter(|f| f.scored).count();
    let explicit = match &options.background {
        Some(text) => Some(
            dataset::read_rows(text, &schema, None)
                .map_err(|e| ImportError::Data(format!("background: {e}")))?,
        ),
        None => None,
    };
    let (mode, sample) = if kind == Kind::Graph {
        let (mode, sample) = any::plan(
            fields,
            explicit.as_ref().map(|d| d.applicants.len()),
            options.approximate,
        )?;
        body.notes.push(match &explicit {
            Some(d) => format!("explanation background: the {} rows of --background", d.applicants.len()),
            None => format!("explanation background: a seeded sample of at most {sample} reference rows per population, stratified by outcome (seed {})", any::SEED),
        });
        body.notes.push(match &mode {
            crate::explain::shapley::Mode::Exact => format!("exact interventional Shapley values: all {} coalitions of {fields} fields per background row", 1u64 << fields),
            crate::explain::shapley::Mode::Sampled { permutations, .. } => format!("estimated interventional Shapley values: {permutations} seeded permutations per background row, standard errors reported"),
        });
        (Some(mode), sample)
    } else {
        (None, 0)
    };
    progress.stage("reference populations, notes and checks", None);
    let mut primary_done = false;
    let (explanation, reference_notes) = reference::explanation(
        &spec.reference,
        &p,
        spec.policy.approve_below,
        |population, label, rows| match (kind, &mode) {
            (Kind::Trees, _) => reference::tree_section(population, label, rows, &data.applicants),
            (Kind::Linear, _) => reference::linear_section(population, label, rows, x, &names),
            (_, mode) => {
                let mode = mode.as_ref().expect("graph models have a plan");
                // The explicit background is the primary population's; others are sampled.
                let background = match (&explicit, primary_done) {
                    (Some(d), false) => d.applicants.clone(),
                    _ => any::stratified(rows, y, sample, any::SEED)
                        .into_iter()
                        .map(|i| data.applicants[i].clone())
                        .collect(),
                };
                primary_done = true;
                any::section(population, label, background, mode)
            }
        },
    )?;
    notes.extend(body.notes.iter().cloned());
    notes.extend(reference_notes);
    if kind != Kind::Linear {
        notes.extend(crate::train::monotone::forest_notes(
            &spec.features,
            &names,
            x,
            score,
        ));
    }

    let positives = y.iter().filter(|&&d| d).count();
    let base_rate = positives as f64 / y.len() as f64;
    let auc = crate::evaluate::auc(&p, y);
    let ks = crate::evaluate::ks(&p, y);
    let brier = p
        .iter()
        .zip(y)
        .map(|(p, &d)| (p - f64::from(u8::from(d))).powi(2))
        .sum::<f64>()
        / y.len() as f64;
    let mut onnx = json!({
        "sha256": source.sha256, "producer_name": source.producer_name,
        "producer_version": source.producer_version, "ir_version": source.ir_version,
        "opsets": source.opsets, "graph_name": source.graph_name,
    });
    if let (Some(o), Some(extra)) = (onnx.as_object_mut(), body.onnx.as_object()) {
        o.extend(extra.clone());
    }
    let provenance = json!({
        "method": format!("imported from ONNX ({}); {}", body.operator, body.notes.join("; ")),
        "onnx": onnx,
        "covers": if kind == Kind::Trees { json!(options.covers) } else { Value::Null },
        "background_sha256": explicit.as_ref().map(|d| d.sha256.clone()),
        "rows": y.len(), "base_rate": base_rate, "data_sha256": data.sha256,
        "reference_auc": auc, "reference_ks": ks, "reference_brier": brier,
        "ignored_spec_settings": ignored,
    });
    let producer = format!(
        "plumbline {} import ({} {})",
        crate::VERSION,
        source.producer_name,
        source.producer_version
    );
    let model_json =
        serde_json::to_value(&body.spec).map_err(|e| ImportError::Artifact(e.to_string()))?;
    let text = crate::train::build::assemble(
        &spec,
        &data,
        "reference rows given at import (development or training data)",
        &producer,
        model_json,
        explanation,
        provenance,
    )?;
    Ok((
        text,
        ImportReport {
            source,
            operator: body.operator,
            rows: y.len(),
            base_rate,
            auc,
            ks,
            brier,
            notes,
        },
    ))
}
