//! ai.onnx.ml SVMClassifier, binary, with Platt probabilities: what onnxruntime computes (its
//! kernel is not in tract). onnxruntime's steps, kept here in the same float32 arithmetic where
//! the result depends on it: the decision value `sum_m coef_m K(z, sv_m) + rho`, then
//! `r = 1 - logistic(A f + B)` clamped to [1e-7, 1 - 1e-7], then libsvm's pairwise coupling
//! iteration (Wu, Lin, Weng 2004), which for two classes stops within 0.005/2 of its fixed point
//! and so is not simply `r`. The kernel value itself is computed in float64 (onnxruntime: float32),
//! so that the RBF kernel's product over fields is exact for explanations.

use crate::onnx::{Attrs, OnnxError};

#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Kernel {
    Linear,
    Poly { gamma: f64, coef0: f64, degree: f64 },
    Rbf { gamma: f64 },
    Sigmoid { gamma: f64, coef0: f64 },
}

/// A binary support-vector classifier with probabilities.
#[derive(Debug, Clone, PartialEq)]
pub struct Svm {
    pub kernel: Kernel,
    /// Support vectors, row-major, `width` values each.
    pub vectors: Vec<f64>,
    pub width: usize,
    pub coefficients: Vec<f64>,
    pub rho: f64,
    pub prob_a: f32,
    pub prob_b: f32,
}

impl Svm {
    pub fn read(a: &Attrs) -> Result<Svm, OnnxError> {
        a.only(&[
            "classlabels_ints",
            "classlabels_strings",
            "coefficients",
            "kernel_params",
            "kernel_type",
            "post_transform",
            "prob_a",
            "prob_b",
            "rho",
            "support_vectors",
            "vectors_per_class",
        ])?;
        let labels = a.ints("classlabels_ints");
        let strings = a.strings("classlabels_strings")?;
        let binary = labels == [0, 1] || strings == ["0", "1"];
        if !binary {
            return Err(a.err(
                "classlabels_ints",
                "plumbline reads binary support-vector classifiers labelled 0 and 1",
            ));
        }
        if a.string("post_transform", "NONE")? != "NONE" {
            return Err(a.err("post_transform", "only NONE is read"));
        }
        let (pa, pb) = (
            a.reals("prob_a")?.unwrap_or_default(),
            a.reals("prob_b")?.unwrap_or_default(),
        );
        let ([prob_a], [prob_b]) = (pa.as_slice(), pb.as_slice()) else {
            return Err(a.err(
                "prob_a",
                "no Platt probabilities: train with SVC(probability=True); decision values are not probabilities",
            ));
        };
        let per_class = a.ints("vectors_per_class");
        let vectors = a.reals("support_vectors")?.unwrap_or_default();
        let coefficients = a.reals("coefficients")?.unwrap_or_default();
        let count: i64 = per_class.iter().sum();
        if per_class.len() != 2 || count <= 0 || coefficients.len() != count as usize {
            return Err(a.err(
                "vectors_per_class",
                format!(
                    "{per_class:?} with {} coefficients: a binary classifier has one coefficient per support vector",
                    coefficients.len()
                ),
            ));
        }
        if vectors.is_empty() || vectors.len() % count as usize != 0 {
            return Err(a.err(
                "support_vectors",
                format!("{} values for {count} vectors", vectors.len()),
            ));
        }
        let width = vectors.len() / count as usize;
        let params = a.reals("kernel_params")?.unwrap_or_default();
        let p = |i: usize| params.get(i).copied().unwrap_or(0.0);
        let kernel = match a.string("kernel_type", "LINEAR")?.as_str() {
            "LINEAR" => Kernel::Linear,
            "POLY" => Kernel::Poly {
                gamma: p(0),
                coef0: p(1),
                degree: p(2),
            },
            "RBF" => Kernel::Rbf { gamma: p(0) },
            "SIGMOID" => Kernel::Sigmoid {
                gamma: p(0),
                coef0: p(1),
            },
            other => return Err(a.err("kernel_type", format!("unknown kernel {other}"))),
        };
        let rho = a.reals("rho")?.unwrap_or_default();
        let [rho] = rho.as_slice() else {
            return Err(a.err("rho", "a binary classifier has one rho"));
        };
        if vectors
            .iter()
            .chain(&coefficients)
            .chain(&params)
            .chain([rho, prob_a, prob_b])
            .any(|v| !v.is_finite())
        {
            return Err(a.err("coefficients", "all numbers must be finite"));
        }
        Ok(Svm {
            kernel,
            vectors,
            width,
            coefficients,
            rho: *rho,
            prob_a: *prob_a as f32,
            prob_b: *prob_b as f32,
        })
    }

    pub fn parameters(&self) -> usize {
        self.vectors.len() + self.coefficients.len() + 3
    }

    pub fn support_vectors(&self) -> usize {
        self.coefficients.len()
    }

    /// The decision value for one (scaled) input row.
    pub fn decision(&self, z: &[f32]) -> f64 {
        let mut f = self.rho;
        for (m, sv) in self.vectors.chunks_exact(self.width).enumerate() {
            let k = match self.kernel {
                Kernel::Rbf { gamma } => {
                    let d: f64 = z.iter().zip(sv).map(|(&a, b)| (a as f64 - b).powi(2)).sum();
                    (-gamma * d).exp()
                }
                Kernel::Linear => dot(z, sv),
                Kernel::Poly {
                    gamma,
                    coef0,
                    degree,
                } => (gamma * dot(z, sv) + coef0).powf(degree),
                Kernel::Sigmoid { gamma, coef0 } => (gamma * dot(z, sv) + coef0).tanh(),
            };
            f += self.coefficients[m] * k;
        }
        f
    }

    /// The class-1 probability onnxruntime writes for decision value `f`.
    pub fn probability(&self, f: f64) -> f64 {
        let r = 1.0 - logistic32(f as f32 * self.prob_a + self.prob_b);
        let r = r.clamp(1.0e-7, 1.0 - 1.0e-7);
        couple(r, 1.0 - r)[1] as f64
    }
}

fn dot(z: &[f32], sv: &[f64]) -> f64 {
    z.iter().zip(sv).map(|(&a, b)| a as f64 * b).sum()
}

/// onnxruntime's float32 logistic: `1 / (1 + exp(-|v|))`, mirrored for negative `v`.
fn logistic32(v: f32) -> f32 {
    let e = 1.0 / (1.0 + (-v.abs()).exp());
    if v < 0.0 {
        1.0 - e
    } else {
        e
    }
}

/// libsvm's pairwise coupling for two classes (multiclass_probability, as onnxruntime runs it
/// in float32): `r01` is P(class 0 beats 1), `r10` the reverse.
fn couple(r01: f32, r10: f32) -> [f32; 2] {
    const K: usize = 2;
    // r[i][j] with r[0][1] = r01, r[1][0] = r10.
    let r = [[0.0f32, r01], [r10, 0.0]];
    let mut q = [[0.0f32; K]; K];
    for i in 0..K {
        for j in 0..i {
            q[i][i] += r[j][i] * r[j][i];
            q[i][j] = q[j][i];
        }
        for j in i + 1..K {
            q[i][i] += r[j][i] * r[j][i];
            q[i][j] = -r[j][i] * r[i][j];
        }
    }
    let mut p = [1.0f32 / K as f32; K];
    let eps = 0.005f32 / K as f32;
    let mut qp = [0.0f32; K];
    for _ in 0..100 {
        let mut pqp = 0.0f32;
        for i in 0..K {
            qp[i] = 0.0;
            for j in 0..K {
                qp[i] += q[i][j] * p[j];
            }
            pqp += p[i] * qp[i];
        }
        let max_error = (0..K).map(|i| (qp[i] - pqp).abs()).fold(0.0f32, f32::max);
        if max_error < eps {
            break;
        }
        for i in 0..K {
            let diff = (-qp[i] + pqp) / q[i][i];
            p[i] += diff;
            pqp = (pqp + diff * (diff * q[i][i] + 2.0 * qp[i])) / (1.0 + diff) / (1.0 + diff);
            for j in 0..K {
                qp[j] = (qp[j] + diff * q[i][j]) / (1.0 + diff);
                p[j] /= 1.0 + diff;
            }
        }
    }
    p
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: close to even odds the coupling stops at once (|r10 - r01| < 0.01 gives an
    // error of |d|/4 < 0.0025), so the probability is exactly 1/2.
    #[test]
    fn coupling_plateau_near_one_half() {
        assert_eq!(couple(0.503, 0.497), [0.5, 0.5]);
        let p = couple(0.9, 0.1);
        assert!((p[0] - 0.9).abs() < 0.01 && (p[0] + p[1] - 1.0).abs() < 1e-6);
    }
}
