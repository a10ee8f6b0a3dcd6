//! Artifact bytes -> [`ArtifactSpec`], with exact JSON paths in every shape error.
//!
//! The model body is read as one flat struct (`kind` plus the keys of either kind) rather than
//! a `kind`-tagged enum, because serde loses the path inside tagged enums and a bad node deep in
//! a 500-tree ensemble must be named exactly. Arrays standing in for objects are refused by
//! [`super::canonical`], which reads the bytes first.

use super::spec::*;
use super::ArtifactError;
use serde::Deserialize;
use serde_json::Value;
use std::collections::BTreeMap;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Envelope {
    format: String,
    format_version: u32,
    identity: IdentitySpec,
    features: Vec<FieldSpec>,
    model: ModelBody,
    explanation: ExplanationSpec,
    reasons: Vec<ReasonSpec>,
    #[serde(default)]
    review_reasons: Vec<ReasonSpec>,
    policy: PolicySpec,
    #[serde(default)]
    stability: Option<StabilitySpec>,
    #[serde(default)]
    provenance: Option<Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ModelBody {
    kind: String,
    intercept: Option<f64>,
    coefficients: Option<BTreeMap<String, f64>>,
    aggregation: Option<Aggregation>,
    initial_value: Option<f64>,
    trees: Option<Vec<TreeSpec>>,
    onnx: Option<String>,
    sha256: Option<String>,
}

/// Just the version, read first so an older file is refused with what changed, not with the
/// shape errors its old names would cause.
#[derive(Deserialize)]
struct Version {
    format_version: Option<u32>,
}

pub fn parse(bytes: &[u8]) -> Result<ArtifactSpec, ArtifactError> {
    if let Ok(Version {
        format_version: Some(1),
    }) = serde_json::from_slice::<Version>(bytes)
    {
        return Err(ArtifactError::new(
            "$.format_version",
            "format",
            format!(
                "version 1 artifacts are not read by this build (version {FORMAT_VERSION}): version 2 names the path-dependent method \"tree_cover_weighted\" (was \"tree_path_dependent\") and the ensemble's \"initial_value\" (was \"base_score\"), and requires identity.score_provider and policy.scaling.min_score / max_score; retrain or re-import, or edit those four and set format_version 2"
            ),
        ));
    }
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let e: Envelope = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let inner = e.path().to_string();
        let path = match inner.as_str() {
            "." => "$".to_string(),
            p if p.starts_with('[') => format!("${p}"),
            p => format!("$.{p}"),
        };
        ArtifactError::new(path, "shape", e.into_inner().to_string())
    })?;
    let model = model_spec(e.model)?;
    Ok(ArtifactSpec {
        format: e.format,
        format_version: e.format_version,
        identity: e.identity,
        features: e.features,
        model,
        explanation: e.explanation,
        reasons: e.reasons,
        review_reasons: e.review_reasons,
        policy: e.policy,
        stability: e.stability,
        provenance: e.provenance,
    })
}

fn model_spec(m: ModelBody) -> Result<ModelSpec, ArtifactError> {
    let stray = |present: &[(&str, bool)], kind: &str| -> Result<(), ArtifactError> {
        match present.iter().find(|(_, p)| *p) {
            Some((key, _)) => Err(ArtifactError::new(
                format!("$.model.{key}"),
                "shape",
                format!("unknown field `{key}` for a {kind} model"),
            )),
            None => Ok(()),
        }
    };
    let need = |key: &str| ArtifactError::new("$.model", "shape", format!("missing field `{key}`"));
    match m.kind.as_str() {
        "logistic" => {
            stray(
                &[
                    ("aggregation", m.aggregation.is_some()),
                    ("initial_value", m.initial_value.is_some()),
                    ("trees", m.trees.is_some()),
                    ("onnx", m.onnx.is_some()),
                    ("sha256", m.sha256.is_some()),
                ],
                "logistic",
            )?;
            Ok(ModelSpec::Logistic(LogisticSpec {
                intercept: m.intercept.ok_or_else(|| need("intercept"))?,
                coefficients: m.coefficients.ok_or_else(|| need("coefficients"))?,
            }))
        }
        "tree_ensemble" => {
            stray(
                &[
                    ("intercept", m.intercept.is_some()),
                    ("coefficients", m.coefficients.is_some()),
                    ("onnx", m.onnx.is_some()),
                    ("sha256", m.sha256.is_some()),
                ],
                "tree_ensemble",
            )?;
            Ok(ModelSpec::TreeEnsemble(TreeEnsembleSpec {
                aggregation: m.aggregation.ok_or_else(|| need("aggregation"))?,
                initial_value: m.initial_value.unwrap_or(0.0),
                trees: m.trees.ok_or_else(|| need("trees"))?,
            }))
        }
        "onnx_graph" => {
            stray(
                &[
                    ("intercept", m.intercept.is_some()),
                    ("coefficients", m.coefficients.is_some()),
                    ("aggregation", m.aggregation.is_some()),
                    ("initial_value", m.initial_value.is_some()),
                    ("trees", m.trees.is_some()),
                ],
                "onnx_graph",
            )?;
            Ok(ModelSpec::OnnxGraph(OnnxGraphSpec {
                onnx: m.onnx.ok_or_else(|| need("onnx"))?,
                sha256: m.sha256.ok_or_else(|| need("sha256"))?,
            }))
        }
        other => Err(ArtifactError::new(
            "$.model.kind",
            "shape",
            format!(
                "unknown model kind \"{other}\"; expected logistic, tree_ensemble or onnx_graph"
            ),
        )),
    }
}
