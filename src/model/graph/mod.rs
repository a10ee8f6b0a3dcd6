//! Models kept as ONNX graphs (neural networks, support-vector machines): evaluated, not read
//! into trees or coefficients. Standard-domain operators run in tract, a pure-Rust ONNX runtime;
//! the ai.onnx.ml operators it lacks (Scaler, Normalizer, SVMClassifier) run natively, written to
//! compute what onnxruntime computes and checked against it (tests/pipeline/onnx_import.rs).
//!
//! A graph is a chain of stages from the input to the probability tensor; the runtime's input is
//! float32, so rows are cast as onnxruntime's callers cast them. Output: the class-1 probability,
//! as a float64 of the float32 the graph computes.

mod compile;
mod front;
mod svm;

pub use compile::compile;
pub use front::Front;
pub use svm::{Kernel, Svm};

use std::sync::Arc;
use tract_onnx::prelude::*;

/// Rows per tract run when evaluating many (explanations): large enough to amortise a run,
/// small enough to stay in cache.
pub const CHUNK: usize = 1024;

/// A support-vector classifier and the Scaler columns in front of it, if any.
pub type ScaledSvm<'a> = (Option<&'a [(f32, f32)]>, &'a Svm);

/// A compiled graph.
#[derive(Clone)]
pub struct GraphModel {
    /// Columns of the input.
    pub width: usize,
    stages: Vec<Stage>,
    /// Columns of the last stage's output, and which one is the class-1 probability.
    out_width: usize,
    positive: usize,
    pub summary: Summary,
    /// The first layer folded into an affine map, when the graph starts with one.
    front: Option<Front>,
}

/// What `inspect` shows about a graph.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Summary {
    /// Operator types on the path to the probability, with counts, in first-seen order.
    pub operators: Vec<(String, usize)>,
    /// Numbers in the constants and attributes the path uses.
    pub parameters: usize,
    pub output: String,
    /// Support vectors, for a support-vector classifier (its cost grows with them).
    pub support_vectors: Option<usize>,
}

impl std::fmt::Debug for GraphModel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("GraphModel")
            .field("width", &self.width)
            .field("stages", &self.stages.len())
            .field("summary", &self.summary)
            .finish()
    }
}

#[derive(Clone)]
enum Stage {
    /// ai.onnx.ml Scaler: `(x - offset) * scale` in float32, per column (one entry: all).
    Scaler(Vec<(f32, f32)>),
    /// ai.onnx.ml Normalizer.
    Normalizer(Norm),
    /// ai.onnx.ml SVMClassifier, writing [p0, p1].
    Svm(Arc<Svm>),
    /// A run of standard operators, one tensor in and one out.
    Tract(Segment),
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Norm {
    Max,
    L1,
    L2,
}

/// Tract plans for one row (a decision's probability) and for [`CHUNK`] rows (explanations,
/// import). The two may round differently in the last float32 bit; explanations take the model
/// output and the background's from the one-row plan, so contributions add up to the decision's
/// probability exactly (see `explain::shapley`).
#[derive(Clone)]
struct Segment {
    one: Arc<TypedSimplePlan>,
    chunk: Arc<TypedSimplePlan>,
    in_width: usize,
    out_width: usize,
}

impl Segment {
    /// Rows of `in_width` values -> rows of `out_width` values.
    fn run(&self, input: &[f32]) -> Result<Vec<f32>, String> {
        let rows = input.len() / self.in_width.max(1);
        if rows == 1 {
            let out = run_plan(&self.one, input, 1, self.in_width)?;
            if out.len() != self.out_width {
                return Err(format!("the graph wrote {} values for one row", out.len()));
            }
            return Ok(out);
        }
        let mut out = Vec::with_capacity(rows * self.out_width);
        for block in input.chunks(CHUNK * self.in_width) {
            let n = block.len() / self.in_width;
            let full = if n == CHUNK {
                run_plan(&self.chunk, block, CHUNK, self.in_width)?
            } else {
                // A partial chunk: padded with zeros, the padding's output dropped.
                let mut padded = block.to_vec();
                padded.resize(CHUNK * self.in_width, 0.0);
                run_plan(&self.chunk, &padded, CHUNK, self.in_width)?
            };
            if full.len() != CHUNK * self.out_width {
                return Err(format!(
                    "the graph wrote {} values for {CHUNK} rows",
                    full.len()
                ));
            }
            out.extend_from_slice(&full[..n * self.out_width]);
        }
        Ok(out)
    }
}

/// Runs a tract plan on `rows` rows of `width` float32 values; its output as float32 (a float64
/// output is narrowed, as a Cast to float would).
fn run_plan(
    plan: &Arc<TypedSimplePlan>,
    input: &[f32],
    rows: usize,
    width: usize,
) -> Result<Vec<f32>, String> {
    let text = |e: TractError| e.to_string();
    let x = Tensor::from_shape(&[rows, width], input).map_err(text)?;
    let out = plan.run(tvec!(x.into())).map_err(text)?;
    let first = out.first().ok_or("the graph wrote no output")?;
    let view = first.try_as_plain_ram().map_err(text)?;
    if let Ok(v) = view.as_slice::<f32>() {
        return Ok(v.to_vec());
    }
    let v = view.as_slice::<f64>().map_err(text)?;
    Ok(v.iter().map(|&x| x as f32).collect())
}

impl Stage {
    fn apply(
        &self,
        input: Vec<f32>,
        rows: usize,
        width: usize,
    ) -> Result<(Vec<f32>, usize), String> {
        match self {
            Stage::Scaler(cols) => {
                let mut x = input;
                for row in x.chunks_exact_mut(width) {
                    for (j, v) in row.iter_mut().enumerate() {
                        let (o, s) = if cols.len() == 1 { cols[0] } else { cols[j] };
                        *v = (*v - o) * s;
                    }
                }
                Ok((x, width))
            }
            // As onnxruntime's Normalizer: a zero norm leaves the row as it is; L2 divides the
            // squares, then takes the root with the value's sign.
            Stage::Normalizer(norm) => {
                let mut x = input;
                for row in x.chunks_exact_mut(width) {
                    match norm {
                        Norm::Max | Norm::L1 => {
                            let d = match norm {
                                Norm::Max => row.iter().copied().fold(f32::MIN, f32::max),
                                _ => row.iter().map(|v| v.abs()).sum(),
                            };
                            if d != 0.0 {
                                row.iter_mut().for_each(|v| *v /= d);
                            }
                        }
                        Norm::L2 => {
                            let sum: f32 = row.iter().map(|v| v * v).sum();
                            if sum != 0.0 {
                                for v in row.iter_mut() {
                                    let r = (*v * *v / sum).sqrt();
                                    *v = if *v < 0.0 { -r } else { r };
                                }
                            }
                        }
                    }
                }
                Ok((x, width))
            }
            Stage::Svm(svm) => {
                let mut out = Vec::with_capacity(rows * 2);
                for z in input.chunks_exact(width) {
                    let p = svm.probability(svm.decision(z)) as f32;
                    out.extend([1.0 - p, p]);
                }
                Ok((out, 2))
            }
            Stage::Tract(seg) => Ok((seg.run(&input)?, seg.out_width)),
        }
    }
}

impl GraphModel {
    /// The class-1 probability of each of `rows` rows (`x` holds them one after another).
    pub fn probabilities(&self, x: &[f32], rows: usize) -> Result<Vec<f64>, String> {
        let mut data = x.to_vec();
        let mut width = self.width;
        for stage in &self.stages {
            let (next, w) =
                (stage.apply(data, rows, width)).map_err(|e| format!("the graph failed: {e}"))?;
            data = next;
            width = w;
        }
        debug_assert_eq!(width, self.out_width);
        Ok(data
            .chunks_exact(self.out_width)
            .map(|r| r[self.positive] as f64)
            .collect())
    }

    /// The class-1 probability of one row of encoded columns (cast to float32 as onnxruntime's
    /// callers do). NaN if the runtime fails, which compile-time checks make unreachable.
    pub fn probability(&self, x: &[f64]) -> f64 {
        let row: Vec<f32> = x.iter().map(|&v| v as f32).collect();
        self.probabilities(&row, 1)
            .ok()
            .and_then(|p| p.first().copied())
            .unwrap_or(f64::NAN)
    }

    /// The folded first layer, when the graph starts with one (explanations walk coalitions
    /// through it).
    pub fn front(&self) -> Option<&Front> {
        self.front.as_ref()
    }

    /// The class-1 probability of rows given as first-layer pre-activations (`hidden` values
    /// each), through the stages after the first layer.
    pub fn probabilities_after_front(
        &self,
        pre: Vec<f32>,
        rows: usize,
    ) -> Result<Vec<f64>, String> {
        let front = self
            .front
            .as_ref()
            .ok_or("the graph has no folded first layer")?;
        let mut data = pre;
        let mut width = front.hidden;
        for stage in &front.rest {
            let (next, w) = stage.apply(data, rows, width)?;
            data = next;
            width = w;
        }
        if width != self.out_width {
            return Err(format!("the layers after the first write {width} columns"));
        }
        Ok(data
            .chunks_exact(self.out_width)
            .map(|r| r[self.positive] as f64)
            .collect())
    }

    /// The support-vector classifier, when the graph's model is one (explanations factor its
    /// RBF kernel over fields), with the Scaler in front of it.
    pub fn as_svm(&self) -> Option<ScaledSvm<'_>> {
        match self.stages.as_slice() {
            [Stage::Svm(s)] => Some((None, s)),
            [Stage::Scaler(c), Stage::Svm(s)] => Some((Some(c), s)),
            _ => None,
        }
    }
}
