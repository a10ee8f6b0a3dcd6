//! The graph's shape, as exporters write it: one input, optionally casts and a Scaler, one model
//! operator, and a chain of elementwise steps from its scores to the probability output (the
//! label output's chain is followed only to check it starts at the same operator). Anything else
//! on those paths is refused, naming the node.

use super::boundary::{Affine, Precision};
use super::ImportError;
use crate::onnx::pb;
use crate::onnx::{node_label, tensor_values, Attrs};
use std::collections::HashMap;

/// The ONNX-ML operators that hold a whole model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum Head {
    TreeEnsembleClassifier,
    TreeEnsembleRegressor,
    LinearClassifier,
}

/// An elementwise step between the model operator and the probability output.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Step {
    /// Multiplication by a constant (Mul, or Div by its reciprocal).
    Scale(f64),
    /// The logistic function (Sigmoid).
    Sigmoid,
}

/// What the import reads from the graph.
#[derive(Debug)]
pub struct Shape<'a> {
    pub input_name: String,
    /// Precision of the values the Scaler or the model operator receives.
    pub precision: Precision,
    /// Columns of the input, when its shape states them.
    pub width: Option<usize>,
    /// Per-column Scaler in front of the model operator (one entry broadcast to all columns).
    pub scaler: Option<Vec<Affine>>,
    pub head: &'a pb::NodeProto,
    pub kind: Head,
    /// Steps from the operator's score output to the probability output, in order.
    pub steps: Vec<Step>,
    pub output_name: String,
    /// Whether the probability output is a ZipMap (a sequence of label -> probability maps).
    pub zipmap: bool,
}

/// A node met while tracing an output back to the model operator.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Traced {
    Step(Step),
    Cast { to_int: bool },
}

const ML: &str = "ai.onnx.ml";

fn is_default_domain(node: &pb::NodeProto) -> bool {
    node.domain.is_empty() || node.domain == "ai.onnx"
}

/// The graph's one real input: not an initializer.
fn the_input(graph: &pb::GraphProto) -> Result<&pb::ValueInfoProto, ImportError> {
    let constants: Vec<&str> = graph.initializer.iter().map(|t| t.name.as_str()).collect();
    let inputs: Vec<&pb::ValueInfoProto> = (graph.input.iter())
        .filter(|i| !constants.contains(&i.name.as_str()))
        .collect();
    match inputs.as_slice() {
        [one] => Ok(one),
        [] => Err(ImportError::model("graph", "has no input")),
        many => Err(ImportError::model(
            "graph",
            format!(
                "has {} inputs ({}); plumbline reads models with one input holding every column",
                many.len(),
                many.iter()
                    .map(|i| i.name.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        )),
    }
}

/// Precision and width of the input tensor.
fn input_type(input: &pb::ValueInfoProto) -> Result<(Precision, Option<usize>), ImportError> {
    use pb::type_proto::Value;
    let at = format!("input \"{}\"", input.name);
    let Some(Value::TensorType(t)) = input.r#type.as_ref().and_then(|t| t.value.as_ref()) else {
        return Err(ImportError::model(at, "is not a tensor"));
    };
    let precision = match pb::tensor_proto::DataType::try_from(t.elem_type) {
        Ok(pb::tensor_proto::DataType::Float) => Precision::Float32,
        Ok(pb::tensor_proto::DataType::Double) => Precision::Float64,
        _ => {
            return Err(ImportError::model(
                at,
                format!(
                    "has element type {}; plumbline reads float or double inputs",
                    t.elem_type
                ),
            ))
        }
    };
    use pb::tensor_shape_proto::dimension::Value as Dim;
    let width = match t.shape.as_ref().map(|s| s.dim.as_slice()) {
        None => None,
        Some([_, d]) => match d.value {
            Some(Dim::DimValue(n)) if n > 0 => Some(n as usize),
            _ => None,
        },
        Some(dims) => {
            return Err(ImportError::model(
                at,
                format!(
                    "has {} dimensions; plumbline reads [rows, columns] inputs",
                    dims.len()
                ),
            ))
        }
    };
    Ok((precision, width))
}

/// Constants by name: initializers and Constant nodes' values.
fn constants(graph: &pb::GraphProto) -> HashMap<&str, &pb::TensorProto> {
    let mut c: HashMap<&str, &pb::TensorProto> = (graph.initializer.iter())
        .map(|t| (t.name.as_str(), t))
        .collect();
    for n in graph.node.iter().filter(|n| n.op_type == "Constant") {
        if let (Some(out), Some(t)) = (
            n.output.first(),
            n.attribute
                .iter()
                .find(|a| a.name == "value")
                .and_then(|a| a.t.as_ref()),
        ) {
            c.insert(out.as_str(), t);
        }
    }
    c
}

/// One scalar constant (shape [] or [1]), if `name` is one.
fn scalar(
    consts: &HashMap<&str, &pb::TensorProto>,
    name: &str,
) -> Result<Option<f64>, ImportError> {
    let Some(t) = consts.get(name) else {
        return Ok(None);
    };
    let (_, v) = tensor_values(t, &format!("constant \"{name}\""))?;
    match v.as_slice() {
        [x] if x.is_finite() && *x != 0.0 => Ok(Some(*x)),
        _ => Err(ImportError::model(
            format!("constant \"{name}\""),
            "must be one finite, non-zero number to scale the scores",
        )),
    }
}

/// Reads the graph's shape; `graph` is the model's graph.
pub fn read(graph: &pb::GraphProto) -> Result<Shape<'_>, ImportError> {
    let input = the_input(graph)?;
    let (input_precision, width) = input_type(input)?;
    let consts = constants(graph);
    let mut producer: HashMap<&str, &pb::NodeProto> = HashMap::new();
    for n in &graph.node {
        for o in &n.output {
            if producer.insert(o.as_str(), n).is_some() {
                return Err(ImportError::model(
                    node_label(n),
                    format!("output \"{o}\" is produced twice"),
                ));
            }
        }
    }
    let head_kind = |n: &pb::NodeProto| match (n.domain.as_str(), n.op_type.as_str()) {
        (ML, "TreeEnsembleClassifier") => Some(Head::TreeEnsembleClassifier),
        (ML, "TreeEnsembleRegressor") => Some(Head::TreeEnsembleRegressor),
        (ML, "LinearClassifier") => Some(Head::LinearClassifier),
        _ => None,
    };

    // Every output, traced back to the model operator.
    let mut traced = Vec::new();
    for out in &graph.output {
        let mut name = out.name.as_str();
        let mut steps = Vec::new();
        let mut zipmap = false;
        let head = loop {
            let Some(&n) = producer.get(name) else {
                return Err(ImportError::model(
                    format!("output \"{}\"", out.name),
                    "is not computed from the model operator",
                ));
            };
            if head_kind(n).is_some() {
                break n;
            }
            let at = node_label(n);
            let refuse = |why: &str| ImportError::model(&at, why.to_string());
            name = match (is_default_domain(n), n.op_type.as_str(), n.input.as_slice()) {
                (true, "Identity", [x]) => x,
                (true, "Cast", [x]) => {
                    let to = Attrs::new(n).int("to", 0);
                    if to != pb::tensor_proto::DataType::Float as i64
                        && to != pb::tensor_proto::DataType::Double as i64
                        && to != pb::tensor_proto::DataType::Int64 as i64
                    {
                        return Err(refuse("casts to a type other than float, double or int64"));
                    }
                    steps.push(Traced::Cast {
                        to_int: to == pb::tensor_proto::DataType::Int64 as i64,
                    });
                    x
                }
                (true, "Sigmoid", [x]) => {
                    steps.push(Traced::Step(Step::Sigmoid));
                    x
                }
                (true, op @ ("Mul" | "Div"), [a, b]) => {
                    let (c, x) = match (scalar(&consts, a)?, scalar(&consts, b)?) {
                        (None, Some(c)) => (c, a),
                        (Some(c), None) if op == "Mul" => (c, b),
                        _ => return Err(refuse("must scale the scores by one constant")),
                    };
                    steps.push(Traced::Step(Step::Scale(if op == "Div" {
                        1.0 / c
                    } else {
                        c
                    })));
                    x
                }
                (false, "ZipMap", [x]) if n.domain == ML => {
                    super::check_labels(&Attrs::new(n))?;
                    zipmap = true;
                    x
                }
                _ => {
                    return Err(refuse(
                        "is not an operator plumbline reads between the model and its outputs \
                         (Identity, Cast, Mul or Div by a constant, Sigmoid, ZipMap)",
                    ))
                }
            };
        };
        let index = head.output.iter().position(|o| o == name).unwrap_or(0);
        steps.reverse();
        traced.push((out.name.clone(), head, index, steps, zipmap));
    }
    let Some(&(_, head, ..)) = traced.first() else {
        return Err(ImportError::model("graph", "has no output"));
    };
    if traced.iter().any(|t| !std::ptr::eq(t.1, head)) {
        return Err(ImportError::model(
            "graph",
            "holds more than one model operator; plumbline reads one per file",
        ));
    }
    let kind = head_kind(head).unwrap_or(Head::TreeEnsembleClassifier);
    // Classifiers write labels first and scores second; the regressor writes its scores only.
    let score_index = if kind == Head::TreeEnsembleRegressor {
        0
    } else {
        1
    };
    let mut scores = traced.into_iter().filter(|t| t.2 == score_index);
    let Some((output_name, _, _, steps, zipmap)) = scores.next() else {
        return Err(ImportError::model(
            node_label(head),
            "its scores reach no graph output",
        ));
    };
    if steps.contains(&Traced::Cast { to_int: true }) {
        return Err(ImportError::model(
            format!("output \"{output_name}\""),
            "casts the scores to integers",
        ));
    }
    let arithmetic = |s: Vec<Traced>| -> Vec<Step> {
        (s.into_iter())
            .filter_map(|t| match t {
                Traced::Step(s) => Some(s),
                Traced::Cast { .. } => None,
            })
            .collect()
    };
    let steps = arithmetic(steps);
    for (other, _, _, s, _) in scores {
        if arithmetic(s) != steps {
            return Err(ImportError::model(
                format!("output \"{other}\""),
                format!("computes other probabilities than output \"{output_name}\""),
            ));
        }
    }

    // From the model operator back to the graph input.
    let (scaler, precision) = prefix(head, &producer, input, input_precision, width)?;
    Ok(Shape {
        input_name: input.name.clone(),
        precision,
        width,
        scaler,
        head,
        kind,
        steps,
        output_name,
        zipmap,
    })
}

type Prefix = (Option<Vec<Affine>>, Precision);

/// Casts and at most one Scaler between the input and the model operator.
fn prefix(
    head: &pb::NodeProto,
    producer: &HashMap<&str, &pb::NodeProto>,
    input: &pb::ValueInfoProto,
    input_precision: Precision,
    width: Option<usize>,
) -> Result<Prefix, ImportError> {
    let [first] = head.input.as_slice() else {
        return Err(ImportError::model(node_label(head), "must have one input"));
    };
    // Walk back, then replay forwards to know the precision each step sees.
    let mut chain = Vec::new();
    let mut name = first.as_str();
    while name != input.name {
        let Some(&n) = producer.get(name) else {
            return Err(ImportError::model(
                node_label(head),
                format!("reads \"{name}\", which is neither the input nor computed from it"),
            ));
        };
        let ok = matches!(
            (n.domain.as_str(), n.op_type.as_str()),
            ("" | "ai.onnx", "Identity" | "Cast") | (ML, "Scaler")
        );
        if !ok || n.input.len() != 1 {
            return Err(ImportError::model(
                node_label(n),
                "is not an operator plumbline reads in front of the model (Identity, Cast, Scaler)",
            ));
        }
        chain.push(n);
        name = n.input[0].as_str();
    }
    let mut precision = input_precision;
    let mut scaler: Option<(Vec<Affine>, Precision)> = None;
    for n in chain.into_iter().rev() {
        match n.op_type.as_str() {
            "Cast" => match pb::tensor_proto::DataType::try_from(Attrs::new(n).int("to", 0) as i32)
            {
                Ok(pb::tensor_proto::DataType::Float) => precision = Precision::Float32,
                Ok(pb::tensor_proto::DataType::Double) => {}
                _ => {
                    return Err(ImportError::model(
                        node_label(n),
                        "casts the input to a type other than float or double",
                    ))
                }
            },
            "Scaler" => {
                if scaler.is_some() {
                    return Err(ImportError::model(node_label(n), "is a second Scaler"));
                }
                scaler = Some((read_scaler(n, width)?, precision));
                // The Scaler writes float32.
                precision = Precision::Float32;
            }
            _ => {}
        }
    }
    Ok(match scaler {
        // Splits behind a Scaler are worked out from the Scaler's own input precision.
        Some((affine, seen)) => (Some(affine), seen),
        None => (None, precision),
    })
}

fn read_scaler(n: &pb::NodeProto, width: Option<usize>) -> Result<Vec<Affine>, ImportError> {
    let a = Attrs::new(n);
    a.only(&["offset", "scale"])?;
    let scale = a.reals("scale")?.unwrap_or_default();
    let offset = a.reals("offset")?.unwrap_or_else(|| vec![0.0; scale.len()]);
    if scale.is_empty() || scale.len() != offset.len() {
        return Err(a
            .err(
                "scale",
                format!(
                    "has {} values and offset {}; both must have one per column, or one",
                    scale.len(),
                    offset.len()
                ),
            )
            .into());
    }
    if let Some(w) = width {
        if scale.len() != 1 && scale.len() != w {
            return Err(a
                .err(
                    "scale",
                    format!("has {} values for an input of {w} columns", scale.len()),
                )
                .into());
        }
    }
    for (j, (&s, &o)) in scale.iter().zip(&offset).enumerate() {
        if !s.is_finite() || s == 0.0 || !o.is_finite() {
            return Err(a
                .err(
                    "scale",
                    format!(
                    "column {j}: scale {s} and offset {o} must be finite and the scale non-zero"
                ),
                )
                .into());
        }
    }
    Ok((offset.iter().zip(&scale))
        .map(|(&o, &s)| Affine {
            offset: o as f32,
            scale: s as f32,
        })
        .collect())
}
