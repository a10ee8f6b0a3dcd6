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

pub mod boundary;
mod covers;
mod graph;
mod linear;
mod trees;

pub use crate::onnx::Source;
pub use covers::Covers;
pub use graph::Head;

use crate::artifact::spec::{ModelSpec, TreeEnsembleSpec};
use crate::train::build::{TrainError, TrainingSpec};
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
    let ints = a.ints("classlabels_int64s");
    let ints = if ints.is_empty() {
        a.ints("classlabels_ints")
    } else {
        ints
    };
    let strings = a.strings("classlabels_strings")?;
    let (name, labels): (&str, Vec<String>) = if !strings.is_empty() {
        ("classlabels_strings", strings)
    } else if a.has("classlabels_ints") {
        (
            "classlabels_ints",
            ints.iter().map(|i| i.to_string()).collect(),
        )
    } else {
        (
            "classlabels_int64s",
            ints.iter().map(|i| i.to_string()).collect(),
        )
    };
    match labels.len() {
        2 if labels == ["0", "1"] => Ok(()),
        2 => Err(a.err(
            name,
            format!("labels {labels:?}: plumbline reads models whose classes are 0 and 1 (1 = defaulted); relabel the outcome before training"),
        ).into()),
        n => Err(a.err(
            name,
            format!("{n} classes: plumbline reads binary default models only (multiclass is refused)"),
        ).into()),
    }
}

/// What the import ran with.
#[derive(Debug, Clone, Copy, Default)]
pub struct ImportOptions {
    pub covers: Covers,
}

/// What the import measured and noticed, for the person running it.
#[derive(Debug, Clone)]
pub struct ImportReport {
    pub source: Source,
    pub operator: Head,
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

/// Reads an ONNX model against a training spec and a reference CSV; returns the artifact text
/// (written only by the caller, and only because it validated) and a report.
pub fn import(
    onnx_bytes: &[u8],
    spec_text: &str,
    csv: &str,
    options: &ImportOptions,
) -> Result<(String, ImportReport), ImportError> {
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
    let shape = graph::read(graph_proto)?;
    let is_trees = shape.kind != Head::LinearClassifier;
    let schema = crate::artifact::schema_from_specs(&spec.features, &spec.reasons, is_trees)
        .map_err(|e| ImportError::Spec(e.to_string()))?;
    let names: Vec<String> = schema.columns.iter().map(|c| c.name.clone()).collect();
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
    if !is_trees && options.covers != Covers::Rows {
        return Err(ImportError::Spec(
            "covers apply to tree ensembles; a logistic model has none".into(),
        ));
    }

    let (mut model_spec, body_notes) = if is_trees {
        let link = fold(trees::head_link(&shape)?, &shape.steps, &shape.output_name)?;
        let t = trees::read(&shape, &names, link)?;
        if options.covers == Covers::Hessian
            && t.aggregation != crate::artifact::spec::Aggregation::SumLogOdds
        {
            return Err(ImportError::Spec(
                "hessian covers need a boosted log-odds model; use row covers for forests".into(),
            ));
        }
        let spec = ModelSpec::TreeEnsemble(TreeEnsembleSpec {
            aggregation: t.aggregation,
            base_score: t.base_score,
            trees: t.trees,
        });
        (spec, t.notes)
    } else {
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
    let mut model_notes = body_notes;
    let invalid = |e: crate::ArtifactError| ImportError::Artifact(e.to_string());
    let scorer = crate::artifact::scorer_from_spec(&model_spec, &schema).map_err(invalid)?;

    let data = dataset::read_csv(csv, &schema, &spec.target)
        .map_err(|e| ImportError::Data(e.to_string()))?;
    let (x, y) = (&data.columns, &data.defaulted);
    if let (crate::model::Scorer::Trees(ensemble), ModelSpec::TreeEnsemble(body)) =
        (&scorer, &mut model_spec)
    {
        let covers = covers::count(ensemble, x, options.covers);
        for (tree, cover) in body.trees.iter_mut().zip(covers) {
            for (node, c) in tree.nodes.iter_mut().zip(cover) {
                node.cover = Some(c);
            }
        }
        model_notes.push(options.covers.words().to_string());
    }
    notes.extend(model_notes.iter().cloned());
    let probability = |r: &[f64]| scorer.probability_and_log_odds(scorer.raw(r)).0;
    let p: Vec<f64> = x.iter().map(|r| probability(r)).collect();
    if let Some(i) = p.iter().position(|v| !v.is_finite()) {
        return Err(ImportError::Data(format!(
            "row {}: the model's output is not a finite number",
            i + 1
        )));
    }

    let (explanation, reference_notes) = reference::explanation(
        &spec.reference,
        &p,
        spec.policy.approve_below,
        |population, label, rows| {
            if is_trees {
                reference::tree_section(population, label, rows, &data.applicants)
            } else {
                reference::linear_section(population, label, rows, x, &names)
            }
        },
    )?;
    notes.extend(reference_notes);
    if is_trees {
        notes.extend(crate::train::monotone::forest_notes(
            &spec.features,
            &names,
            x,
            |rows| rows.iter().map(|r| probability(r)).collect(),
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
    let provenance = json!({
        "method": format!("imported from ONNX ({:?}); {}", shape.kind, model_notes.join("; ")),
        "onnx": {
            "sha256": source.sha256, "producer_name": source.producer_name,
            "producer_version": source.producer_version, "ir_version": source.ir_version,
            "opsets": source.opsets, "graph_name": source.graph_name,
            "operator": shape.kind, "input": shape.input_name, "output": shape.output_name,
            "input_precision": match shape.precision {
                boundary::Precision::Float32 => "float32",
                boundary::Precision::Float64 => "float64",
            },
            "scaler": shape.scaler.is_some(), "zipmap": shape.zipmap,
        },
        "covers": if is_trees { json!(options.covers) } else { Value::Null },
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
        serde_json::to_value(&model_spec).map_err(|e| ImportError::Artifact(e.to_string()))?;
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
            operator: shape.kind,
            rows: y.len(),
            base_rate,
            auc,
            ks,
            brier,
            notes,
        },
    ))
}
