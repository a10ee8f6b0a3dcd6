//! JSON -> [`ArtifactSpec`], with exact JSON paths in every shape error.
//!
//! Two things the derived deserialisers get wrong for us are handled here: serde accepts a JSON
//! array in place of a struct (fields by position), which an artifact must never do; and errors
//! inside the `kind`-tagged model body lose their path, so the body is parsed on its own.

use super::spec::*;
use super::ArtifactError;
use serde::de::DeserializeOwned;
use serde::Deserialize;
use serde_json::Value;

/// Everything but the model body, which is parsed separately.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct Envelope {
    format: String,
    format_version: u32,
    identity: IdentitySpec,
    features: Vec<FieldSpec>,
    model: Value,
    explanation: ExplanationSpec,
    reasons: Vec<ReasonSpec>,
    policy: PolicySpec,
    #[serde(default)]
    provenance: Option<Value>,
}

pub fn parse(value: &Value) -> Result<ArtifactSpec, ArtifactError> {
    require_objects(value)?;
    let e: Envelope = at("$", value)?;
    let model = parse_model(&e.model)?;
    Ok(ArtifactSpec {
        format: e.format,
        format_version: e.format_version,
        identity: e.identity,
        features: e.features,
        model,
        explanation: e.explanation,
        reasons: e.reasons,
        policy: e.policy,
        provenance: e.provenance,
    })
}

fn parse_model(value: &Value) -> Result<ModelSpec, ArtifactError> {
    let Some(obj) = value.as_object() else {
        return Err(ArtifactError::new(
            "$.model",
            "shape",
            "must be an object with a kind",
        ));
    };
    let mut body = obj.clone();
    let kind = body.remove("kind");
    let body = Value::Object(body);
    match kind.as_ref().and_then(Value::as_str) {
        Some("logistic") => Ok(ModelSpec::Logistic(at("$.model", &body)?)),
        Some("tree_ensemble") => Ok(ModelSpec::TreeEnsemble(at("$.model", &body)?)),
        Some(other) => Err(ArtifactError::new(
            "$.model.kind",
            "shape",
            format!("unknown model kind \"{other}\"; expected logistic or tree_ensemble"),
        )),
        None => Err(ArtifactError::new(
            "$.model.kind",
            "shape",
            "required: logistic or tree_ensemble",
        )),
    }
}

/// Deserialises `value`, reporting errors at `prefix` + the path inside it.
fn at<T: DeserializeOwned>(prefix: &str, value: &Value) -> Result<T, ArtifactError> {
    serde_path_to_error::deserialize(value).map_err(|e| {
        let inner = e.path().to_string();
        let path = match inner.as_str() {
            "." => prefix.to_string(),
            p if p.starts_with('[') => format!("{prefix}{p}"),
            p => format!("{prefix}.{p}"),
        };
        ArtifactError::new(path, "shape", e.into_inner().to_string())
    })
}

/// Every place the format has an object must hold an object (not an array of its fields).
fn require_objects(v: &Value) -> Result<(), ArtifactError> {
    fn object(v: Option<&Value>, path: &str) -> Result<(), ArtifactError> {
        match v {
            Some(Value::Object(_)) | None => Ok(()),
            Some(_) => Err(ArtifactError::new(path, "shape", "must be a JSON object")),
        }
    }
    fn each(
        v: &Value,
        key: &str,
        path: &str,
        f: &dyn Fn(&Value, &str) -> Result<(), ArtifactError>,
    ) -> Result<(), ArtifactError> {
        if let Some(Value::Array(items)) = v.get(key) {
            for (i, item) in items.iter().enumerate() {
                let p = format!("{path}.{key}[{i}]");
                object(Some(item), &p)?;
                f(item, &p)?;
            }
        }
        Ok(())
    }
    let none = |_: &Value, _: &str| Ok(());
    object(Some(v), "$")?;
    object(v.get("identity"), "$.identity")?;
    each(v, "features", "$", &|f, p| {
        object(f.get("missing"), &format!("{p}.missing"))
    })?;
    object(v.get("model"), "$.model")?;
    if let Some(m) = v.get("model") {
        each(m, "trees", "$.model", &|t, p| each(t, "nodes", p, &none))?;
    }
    object(v.get("explanation"), "$.explanation")?;
    if let Some(e) = v.get("explanation") {
        object(e.get("reference"), "$.explanation.reference")?;
        each(e, "background", "$.explanation", &none)?;
    }
    each(v, "reasons", "$", &none)?;
    object(v.get("policy"), "$.policy")?;
    if let Some(p) = v.get("policy") {
        object(p.get("scaling"), "$.policy.scaling")?;
        each(p, "rules", "$.policy", &none)?;
    }
    Ok(())
}
