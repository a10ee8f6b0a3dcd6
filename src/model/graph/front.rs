//! A network's first layer, folded into one affine map on the raw columns for explanations.
//!
//! When a graph starts (after an optional Scaler) with `MatMul` by a constant and `Add` of a
//! constant, or a `Gemm`, every hybrid row of the interventional game has first-layer
//! pre-activations `c + sum over fields of (the applicant's or the background row's) W_f z_f`:
//! one vector per field and row, so walking the coalitions in Gray-code order costs one vector
//! addition each instead of a matrix product. The rest of the graph then runs as usual. The
//! decision's own probability never goes through this path (see `explain::shapley`).

use super::compile::segment;
use super::Stage;
use crate::onnx::{pb, tensor_values};
use std::collections::HashSet;

/// The folded first layer and the stages after it.
#[derive(Clone)]
pub struct Front {
    /// `columns x hidden`, row-major by input column, the Scaler folded in.
    pub weights: Vec<f64>,
    pub bias: Vec<f64>,
    pub hidden: usize,
    pub(super) rest: Vec<Stage>,
}

fn constant(graph: &pb::GraphProto, name: &str) -> Option<(Vec<i64>, Vec<f64>)> {
    let t = graph.initializer.iter().find(|t| t.name == name)?;
    tensor_values(t, name).ok()
}

/// Finds the first layer in `run` (the first tract run, fed by stage `first` of `stages`).
#[allow(clippy::too_many_arguments)]
pub(super) fn detect(
    model: &pb::ModelProto,
    stages: &[Stage],
    first: usize,
    run: &[&pb::NodeProto],
    from: &str,
    to: &str,
    width: usize,
    constants: &HashSet<&str>,
) -> Option<Front> {
    let graph = model.graph.as_ref()?;
    let scaler = match &stages[..first] {
        [] => None,
        [Stage::Scaler(c)] => Some(c.clone()),
        _ => return None,
    };
    let mut k = 0;
    let mut t = from.to_string();
    while let Some(n) = run.get(k) {
        let float_cast =
            n.op_type == "Cast" && n.attribute.iter().any(|a| a.name == "to" && a.i == 1);
        if (n.op_type == "Identity" || float_cast) && n.input.first() == Some(&t) {
            t = n.output[0].clone();
            k += 1;
        } else {
            break;
        }
    }
    let n = run.get(k)?;
    let (weights, hidden, mut bias, mut out) = match n.op_type.as_str() {
        "MatMul" if n.input.first() == Some(&t) => {
            let (dims, w) = constant(graph, n.input.get(1)?)?;
            let [rows, h] = dims.as_slice() else {
                return None;
            };
            if *rows as usize != width {
                return None;
            }
            (w, *h as usize, vec![0.0; *h as usize], n.output[0].clone())
        }
        "Gemm" if n.input.first() == Some(&t) => {
            let attr = |name: &str| n.attribute.iter().find(|a| a.name == name);
            let (alpha, beta) = (
                attr("alpha").map_or(1.0, |a| a.f as f64),
                attr("beta").map_or(1.0, |a| a.f as f64),
            );
            if attr("transA").is_some_and(|a| a.i != 0) {
                return None;
            }
            let trans_b = attr("transB").is_some_and(|a| a.i != 0);
            let (dims, b) = constant(graph, n.input.get(1)?)?;
            let [r, c] = dims.as_slice() else { return None };
            let (rows, h) = if trans_b {
                (*c as usize, *r as usize)
            } else {
                (*r as usize, *c as usize)
            };
            if rows != width {
                return None;
            }
            let mut w = vec![0.0; width * h];
            for j in 0..width {
                for o in 0..h {
                    w[j * h + o] = alpha
                        * if trans_b {
                            b[o * width + j]
                        } else {
                            b[j * h + o]
                        };
                }
            }
            let bias = match n.input.get(2).filter(|s| !s.is_empty()) {
                None => vec![0.0; h],
                Some(name) => {
                    let (_, c) = constant(graph, name)?;
                    match c.len() {
                        1 => vec![beta * c[0]; h],
                        l if l == h => c.iter().map(|v| beta * v).collect(),
                        _ => return None,
                    }
                }
            };
            (w, h, bias, n.output[0].clone())
        }
        _ => return None,
    };
    k += 1;
    if n.op_type == "MatMul" {
        if let Some(add) = run.get(k).filter(|a| a.op_type == "Add") {
            let other = match add.input.as_slice() {
                [a, b] if *a == out => b,
                [a, b] if *b == out => a,
                _ => return None,
            };
            let (_, c) = constant(graph, other)?;
            match c.len() {
                1 => bias.iter_mut().for_each(|v| *v = c[0]),
                l if l == hidden => bias = c,
                _ => return None,
            }
            out = add.output[0].clone();
            k += 1;
        }
    }
    // The Scaler folded in: W'_j = s_j W_j, c' = c - sum_j o_j s_j W_j.
    let mut weights = weights;
    if let Some(cols) = scaler {
        for j in 0..width {
            let (o, s) = if cols.len() == 1 { cols[0] } else { cols[j] };
            for h in 0..hidden {
                let w = weights[j * hidden + h] * s as f64;
                weights[j * hidden + h] = w;
                bias[h] -= o as f64 * w;
            }
        }
    }
    let mut rest = Vec::new();
    if k < run.len() {
        rest.push(Stage::Tract(
            segment(model, &run[k..], &out, to, hidden, constants).ok()?,
        ));
    } else if out != to {
        return None;
    }
    rest.extend(stages[first + 1..].iter().cloned());
    Some(Front {
        weights,
        bias,
        hidden,
        rest,
    })
}
