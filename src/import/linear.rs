//! ONNX-ML LinearClassifier (scikit-learn LogisticRegression as skl2onnx writes it), with a
//! Scaler in front folded into the coefficients on the raw fields:
//! `w . ((x - offset) * scale) + b = (w * scale) . x + (b - sum w * scale * offset)`.
//!
//! onnxruntime computes the same sum in float32; the folded float64 model differs from it by
//! that rounding only (a few float32 ulps of the largest term), never in form.

use super::graph::Shape;
use super::{ImportError, Link};
use crate::onnx::Attrs;

/// The log-odds of default as `intercept + coefficients . x`, one coefficient per column.
pub struct Linear {
    pub intercept: f64,
    pub coefficients: Vec<f64>,
    pub notes: Vec<String>,
}

/// How the head's positive-class output is formed before any later step: the coefficient rows
/// to subtract (`(positive, Some(negative))` for a softmax) and whether a logistic is applied.
pub struct HeadForm {
    pub softmax: bool,
    pub logistic: bool,
}

pub fn head_link(shape: &Shape) -> Result<HeadForm, ImportError> {
    let a = Attrs::new(shape.head);
    super::check_labels(&a)?;
    let classes = a.reals("intercepts")?.map_or(0, |v| v.len());
    match (a.string("post_transform", "NONE")?.as_str(), classes) {
        ("LOGISTIC", 1 | 2) => Ok(HeadForm {
            softmax: false,
            logistic: true,
        }),
        ("SOFTMAX", 2) => Ok(HeadForm {
            softmax: true,
            logistic: true,
        }),
        ("NONE", 1 | 2) => Ok(HeadForm {
            softmax: false,
            logistic: false,
        }),
        (other, n) => Err(a.err(
            "post_transform",
            format!("{other} with {n} intercepts is not read; plumbline reads LOGISTIC (one or two classes), SOFTMAX (two) or NONE followed by a Sigmoid"),
        ).into()),
    }
}

pub fn read(
    shape: &Shape,
    width: usize,
    form: &HeadForm,
    link: Link,
) -> Result<Linear, ImportError> {
    let a = Attrs::new(shape.head);
    a.only(&[
        "coefficients",
        "intercepts",
        "classlabels_ints",
        "classlabels_strings",
        "multi_class",
        "post_transform",
    ])?;
    super::check_labels(&a)?;
    let Link::LogOdds { scale } = link else {
        return Err(a.err(
            "post_transform",
            "the output is the raw linear score, not a probability; a logistic model needs LOGISTIC or a Sigmoid",
        ).into());
    };
    let w = a.reals("coefficients")?.unwrap_or_default();
    let b = a.reals("intercepts")?.unwrap_or_default();
    if w.len() != b.len() * width {
        return Err(a
            .err(
                "coefficients",
                format!(
                    "holds {} values: {} classes of {} columns would be {}",
                    w.len(),
                    b.len(),
                    width,
                    b.len() * width
                ),
            )
            .into());
    }
    if w.iter().chain(&b).any(|v| !v.is_finite()) {
        return Err(a.err("coefficients", "must be finite").into());
    }
    // The positive class is the last row; a softmax of two measures it against the first.
    let last = b.len() - 1;
    let mut coefficients: Vec<f64> = w[last * width..].to_vec();
    let mut intercept = b[last];
    if form.softmax {
        for (c, w0) in coefficients.iter_mut().zip(&w[..width]) {
            *c -= w0;
        }
        intercept -= b[0];
    }
    let mut notes = vec![format!(
        "logistic model read from LinearClassifier ({} class row{}{})",
        b.len(),
        if b.len() == 1 { "" } else { "s" },
        if form.softmax {
            ", softmax: log-odds are the difference of the two rows"
        } else {
            ""
        }
    )];
    if let Some(s) = &shape.scaler {
        for (j, c) in coefficients.iter_mut().enumerate() {
            let aff = if s.len() == 1 { s[0] } else { s[j] };
            let folded = *c * aff.scale as f64;
            intercept -= folded * aff.offset as f64;
            *c = folded;
        }
        notes.push("the Scaler in front folded into coefficients on the raw fields".into());
    }
    for c in coefficients.iter_mut() {
        *c *= scale;
    }
    intercept *= scale;
    if scale != 1.0 {
        notes.push(format!(
            "coefficients multiplied by {scale}, as the graph scales the scores"
        ));
    }
    Ok(Linear {
        intercept,
        coefficients,
        notes,
    })
}
