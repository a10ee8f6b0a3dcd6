//! An ONNX graph -> the chain of stages [`GraphModel`] runs. The probability output is found
//! (a ZipMap's input, or the one float output), trailing casts dropped, and its ancestors split
//! into ai.onnx.ml stages run natively and runs of standard operators handed to tract. Nodes that
//! feed only the label output are not read. Anything else is refused, naming the node.

use super::{front, GraphModel, Norm, Segment, Stage, Summary, Svm, CHUNK};
use crate::onnx::{node_label, pb, Attrs, OnnxError};
use std::collections::{HashMap, HashSet};
use std::sync::Arc;
use tract_onnx::prelude::*;

const ML: &str = "ai.onnx.ml";

/// Standard operators a run handed to tract may hold: arithmetic, activations, shape plumbing.
const STANDARD: &[&str] = &[
    "Abs",
    "Add",
    "BatchNormalization",
    "Cast",
    "Clip",
    "Concat",
    "Constant",
    "Div",
    "Dropout",
    "Elu",
    "Erf",
    "Exp",
    "Flatten",
    "Gather",
    "Gemm",
    "HardSigmoid",
    "Identity",
    "LeakyRelu",
    "Log",
    "LogSoftmax",
    "MatMul",
    "Max",
    "Min",
    "Mul",
    "Neg",
    "Pow",
    "Reciprocal",
    "ReduceMax",
    "ReduceMean",
    "ReduceSum",
    "Relu",
    "Reshape",
    "Selu",
    "Sigmoid",
    "Slice",
    "Softmax",
    "Softplus",
    "Sqrt",
    "Squeeze",
    "Sub",
    "Tanh",
    "Transpose",
    "Unsqueeze",
];

fn is_default(n: &pb::NodeProto) -> bool {
    n.domain.is_empty() || n.domain == "ai.onnx"
}

/// Compiles the graph of `model` for evaluation.
pub fn compile(model: &pb::ModelProto) -> Result<GraphModel, OnnxError> {
    let graph = model
        .graph
        .as_ref()
        .ok_or_else(|| OnnxError::new("file", "holds no graph"))?;
    let constants: HashSet<&str> = (graph.initializer.iter().map(|t| t.name.as_str()))
        .chain(
            (graph.node.iter())
                .filter(|n| n.op_type == "Constant")
                .flat_map(|n| n.output.iter().map(String::as_str)),
        )
        .collect();
    let inputs: Vec<&pb::ValueInfoProto> = (graph.input.iter())
        .filter(|i| !constants.contains(i.name.as_str()))
        .collect();
    let [input] = inputs.as_slice() else {
        return Err(OnnxError::new(
            "graph",
            format!(
                "has {} inputs; plumbline reads models with one input holding every column",
                inputs.len()
            ),
        ));
    };
    let width = float_input_width(input)?;
    let producer: HashMap<&str, &pb::NodeProto> = (graph.node.iter())
        .flat_map(|n| n.output.iter().map(move |o| (o.as_str(), n)))
        .collect();

    let (output_name, mut tensor, zipmap) = probability_output(graph, &producer)?;
    if let Some(z) = zipmap {
        crate::onnx::check_binary_labels(&Attrs::new(z))?;
    }
    // Trailing Identity and float casts change nothing.
    while let Some(n) = producer.get(tensor) {
        let float_cast = n.op_type == "Cast" && matches!(Attrs::new(n).int("to", 0), 1 | 11);
        if is_default(n) && (n.op_type == "Identity" || float_cast) && n.input.len() == 1 {
            tensor = n.input[0].as_str();
        } else {
            break;
        }
    }

    // The probability's ancestors, in the graph's (topological) order.
    let mut needed: HashSet<&str> = HashSet::new();
    let mut stack = vec![tensor];
    while let Some(t) = stack.pop() {
        if let Some(n) = producer.get(t) {
            if needed.insert(n.output[0].as_str()) {
                stack.extend(n.input.iter().map(String::as_str).filter(|i| !i.is_empty()));
            }
        }
    }
    let path: Vec<&pb::NodeProto> = (graph.node.iter())
        .filter(|n| needed.contains(n.output[0].as_str()) && n.op_type != "Constant")
        .collect();
    if path.is_empty() {
        return Err(OnnxError::new(
            format!("output \"{output_name}\""),
            "is the input itself",
        ));
    }

    let mut summary = Summary {
        output: output_name.to_string(),
        ..Summary::default()
    };
    for n in &path {
        match summary
            .operators
            .iter_mut()
            .find(|(op, _)| *op == n.op_type)
        {
            Some((_, c)) => *c += 1,
            None => summary.operators.push((n.op_type.clone(), 1)),
        }
    }
    let used: HashSet<&str> = path
        .iter()
        .flat_map(|n| n.input.iter().map(String::as_str))
        .collect();
    summary.parameters = (graph.initializer.iter())
        .filter(|t| used.contains(t.name.as_str()))
        .map(|t| t.dims.iter().product::<i64>().max(1) as usize)
        .sum();

    // Split into stages: ai.onnx.ml operators natively, runs of standard operators in tract.
    let mut stages = Vec::new();
    let mut current = input.name.as_str();
    let mut current_width = width;
    let mut run: Vec<&pb::NodeProto> = Vec::new();
    // The first run handed to tract: (its nodes, from, to, input width, stage index).
    type Run<'a> = (Vec<&'a pb::NodeProto>, &'a str, &'a str, usize, usize);
    let mut first_run: Option<Run> = None;
    for n in &path {
        if is_default(n) {
            if !STANDARD.contains(&n.op_type.as_str()) {
                return Err(OnnxError::new(
                    node_label(n),
                    "is not an operator plumbline evaluates (arithmetic, activations, MatMul, Gemm, Softmax, shape operators; Scaler, Normalizer, SVMClassifier)",
                ));
            }
            run.push(n);
            continue;
        }
        let Some(first) = n.input.first() else {
            return Err(OnnxError::new(node_label(n), "has no input"));
        };
        if !run.is_empty() {
            let seg = segment(model, &run, current, first, current_width, &constants)?;
            if first_run.is_none() {
                first_run = Some((
                    run.clone(),
                    current,
                    first.as_str(),
                    current_width,
                    stages.len(),
                ));
            }
            current_width = seg.out_width;
            stages.push(Stage::Tract(seg));
            run.clear();
        }
        if first != current || n.domain != ML {
            return Err(OnnxError::new(
                node_label(n),
                "does not follow the chain from the input to the probability",
            ));
        }
        let a = Attrs::new(n);
        let (stage, out) = match n.op_type.as_str() {
            "Scaler" => {
                a.only(&["offset", "scale"])?;
                let scale = a.reals("scale")?.unwrap_or_default();
                let offset = a.reals("offset")?.unwrap_or_else(|| vec![0.0; scale.len()]);
                if scale.len() != offset.len() || (scale.len() != 1 && scale.len() != current_width) {
                    return Err(a.err("scale", format!("{} values for {current_width} columns", scale.len())));
                }
                let cols = offset.iter().zip(&scale).map(|(&o, &s)| (o as f32, s as f32)).collect();
                (Stage::Scaler(cols), 0)
            }
            "Normalizer" => {
                a.only(&["norm"])?;
                let norm = match a.string("norm", "MAX")?.as_str() {
                    "MAX" => Norm::Max,
                    "L1" => Norm::L1,
                    "L2" => Norm::L2,
                    other => return Err(a.err("norm", format!("unknown norm {other}"))),
                };
                (Stage::Normalizer(norm), 0)
            }
            "SVMClassifier" => {
                let svm = Svm::read(&a)?;
                if svm.width != current_width {
                    return Err(a.err(
                        "support_vectors",
                        format!("vectors of {} values for {current_width} columns", svm.width),
                    ));
                }
                summary.parameters += svm.parameters();
                summary.support_vectors = Some(svm.support_vectors());
                current_width = 2;
                (Stage::Svm(Arc::new(svm)), 1)
            }
            _ => {
                return Err(OnnxError::new(
                    node_label(n),
                    "is not an ai.onnx.ml operator plumbline evaluates in a graph (Scaler, Normalizer, SVMClassifier)",
                ))
            }
        };
        stages.push(stage);
        current = n.output.get(out).map(String::as_str).unwrap_or("");
    }
    if !run.is_empty() {
        let seg = segment(model, &run, current, tensor, current_width, &constants)?;
        if first_run.is_none() {
            first_run = Some((run.clone(), current, tensor, current_width, stages.len()));
        }
        current_width = seg.out_width;
        stages.push(Stage::Tract(seg));
        current = tensor;
    }
    if current != tensor {
        return Err(OnnxError::new(
            format!("output \"{output_name}\""),
            "is not reached along one chain of operators from the input",
        ));
    }
    if !(1..=2).contains(&current_width) {
        return Err(OnnxError::new(
            format!("output \"{output_name}\""),
            format!("has {current_width} columns; a binary model writes one or two probabilities"),
        ));
    }
    let front = first_run.and_then(|(nodes, from, to, w, at)| {
        front::detect(model, &stages, at, &nodes, from, to, w, &constants)
    });
    let model = GraphModel {
        width,
        front,
        stages,
        out_width: current_width,
        positive: current_width - 1,
        summary,
    };
    // A trial row: the graph runs and writes a probability.
    let p = model
        .probabilities(&vec![0.0; width], 1)
        .map_err(|e| OnnxError::new("graph", e))?;
    if !p.first().is_some_and(|p| p.is_finite()) {
        return Err(OnnxError::new(
            "graph",
            "writes no finite probability for a row of zeros",
        ));
    }
    Ok(model)
}

/// Columns of a float input `[rows, columns]`.
fn float_input_width(input: &pb::ValueInfoProto) -> Result<usize, OnnxError> {
    use pb::tensor_shape_proto::dimension::Value as Dim;
    use pb::type_proto::Value;
    let at = format!("input \"{}\"", input.name);
    let Some(Value::TensorType(t)) = input.r#type.as_ref().and_then(|t| t.value.as_ref()) else {
        return Err(OnnxError::new(at, "is not a tensor"));
    };
    if t.elem_type != pb::tensor_proto::DataType::Float as i32 {
        return Err(OnnxError::new(
            at,
            "must be float (float32) for a graph model; export the network with float32 inputs",
        ));
    }
    match t.shape.as_ref().map(|s| s.dim.as_slice()) {
        Some([_, d]) => match d.value {
            Some(Dim::DimValue(n)) if n > 0 => Ok(n as usize),
            _ => Err(OnnxError::new(at, "must state its number of columns")),
        },
        _ => Err(OnnxError::new(at, "must have the shape [rows, columns]")),
    }
}

type Output<'a> = (&'a str, &'a str, Option<&'a pb::NodeProto>);

/// The output holding the probabilities: a ZipMap's input, else the one float output.
fn probability_output<'a>(
    graph: &'a pb::GraphProto,
    producer: &HashMap<&str, &'a pb::NodeProto>,
) -> Result<Output<'a>, OnnxError> {
    let mut zipped = Vec::new();
    let mut floats = Vec::new();
    for out in &graph.output {
        let mut name = out.name.as_str();
        // Through Identity and Cast to a ZipMap, if there is one.
        let mut zip = None;
        while let Some(n) = producer.get(name) {
            if n.op_type == "ZipMap" && n.domain == ML {
                zip = Some(*n);
                break;
            }
            if is_default(n)
                && matches!(n.op_type.as_str(), "Identity" | "Cast")
                && n.input.len() == 1
            {
                name = n.input[0].as_str();
            } else {
                break;
            }
        }
        if let Some(z) = zip {
            zipped.push((out.name.as_str(), z.input[0].as_str(), Some(z)));
            continue;
        }
        use pb::type_proto::Value;
        if let Some(Value::TensorType(t)) = out.r#type.as_ref().and_then(|t| t.value.as_ref()) {
            if t.elem_type == pb::tensor_proto::DataType::Float as i32
                || t.elem_type == pb::tensor_proto::DataType::Double as i32
            {
                floats.push((out.name.as_str(), out.name.as_str(), None));
            }
        }
    }
    match (zipped.as_slice(), floats.as_slice()) {
        ([one], _) | ([], [one]) => Ok(*one),
        ([], []) => Err(OnnxError::new("graph", "has no float or ZipMap output to read probabilities from")),
        (z, f) => Err(OnnxError::new(
            "graph",
            format!(
                "has several probability-like outputs ({}); plumbline cannot tell which is the probability",
                z.iter().chain(f).map(|o| o.0).collect::<Vec<_>>().join(", ")
            ),
        )),
    }
}

/// A run of standard operators from tensor `from` to tensor `to`, as its own small model.
pub(super) fn segment(
    model: &pb::ModelProto,
    run: &[&pb::NodeProto],
    from: &str,
    to: &str,
    in_width: usize,
    constants: &HashSet<&str>,
) -> Result<Segment, OnnxError> {
    let graph = model.graph.as_ref().expect("checked by the caller");
    let mut known: HashSet<&str> = HashSet::from([from]);
    for n in run {
        for i in n.input.iter().filter(|i| !i.is_empty()) {
            if !known.contains(i.as_str()) && !constants.contains(i.as_str()) {
                return Err(OnnxError::new(
                    node_label(n),
                    format!("reads \"{i}\", which is not on the chain from the input"),
                ));
            }
        }
        known.extend(n.output.iter().map(String::as_str));
    }
    let used: HashSet<&str> = run
        .iter()
        .flat_map(|n| n.input.iter().map(String::as_str))
        .collect();
    let constant_nodes = (graph.node.iter())
        .filter(|n| n.op_type == "Constant" && n.output.iter().any(|o| used.contains(o.as_str())));
    let float = |name: &str| pb::ValueInfoProto {
        name: name.to_string(),
        r#type: Some(pb::TypeProto {
            denotation: String::new(),
            value: Some(pb::type_proto::Value::TensorType(pb::type_proto::Tensor {
                elem_type: pb::tensor_proto::DataType::Float as i32,
                shape: None,
            })),
        }),
        doc_string: String::new(),
    };
    let sub = pb::ModelProto {
        graph: Some(pb::GraphProto {
            node: constant_nodes
                .cloned()
                .chain(run.iter().map(|n| (*n).clone()))
                .collect(),
            name: "plumbline-segment".into(),
            initializer: (graph.initializer.iter())
                .filter(|t| used.contains(t.name.as_str()))
                .cloned()
                .collect(),
            input: vec![float(from)],
            output: vec![pb::ValueInfoProto {
                r#type: None,
                ..float(to)
            }],
            ..Default::default()
        }),
        ..model.clone()
    };
    let at = || {
        format!(
            "operators {}",
            run.iter()
                .map(|n| n.op_type.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        )
    };
    let plan = |rows: usize| -> Result<Arc<TypedSimplePlan>, OnnxError> {
        let fail = |e: TractError| OnnxError::new(at(), format!("tract cannot evaluate them: {e}"));
        tract_onnx::onnx()
            .model_for_proto_model(&sub)
            .map_err(fail)?
            .with_input_fact(0, f32::fact([rows, in_width]).into())
            .map_err(fail)?
            .into_optimized()
            .map_err(fail)?
            .into_runnable()
            .map_err(fail)
    };
    let (one, chunk) = (plan(1)?, plan(CHUNK)?);
    let probe = super::run_plan(&one, &vec![0.0; in_width], 1, in_width)
        .map_err(|e| OnnxError::new(at(), e))?;
    Ok(Segment {
        one,
        chunk,
        in_width,
        out_width: probe.len(),
    })
}
