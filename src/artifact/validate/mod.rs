//! Semantic checks of an artifact, and compilation into a [`LoadedModel`].
//! Every failure names the JSON path and the rule broken.

use super::spec::*;
use super::{ArtifactError, LoadedModel};

/// Deepest tree accepted: path bit sets are 64 bits wide.
pub const MAX_TREE_DEPTH: usize = 60;
/// Largest background sample accepted (interventional cost grows with it, per request).
pub const MAX_BACKGROUND_ROWS: usize = 2_000;
/// Most encoded columns a model may have (tree nodes store the column in 16 bits).
pub const MAX_COLUMNS: usize = 65_535;
/// Largest number of principal reasons a policy may ask for.
pub const MAX_REASONS_LIMIT: usize = 8;

mod explanation;
mod fields;
mod model;
mod policy;
mod reasons;
mod stability;

use fields::compile_schema;
pub use fields::schema_from_specs;
pub use model::scorer_from_spec;
use model::{check_monotone, compile_model};
use policy::compile_policy;
use reasons::{check_identity, check_reason_use, compile_reasons, compile_review_reasons};

type Result<T> = std::result::Result<T, ArtifactError>;

fn fail<T>(path: impl Into<String>, rule: &str, message: impl Into<String>) -> Result<T> {
    Err(ArtifactError::new(path, rule, message))
}

pub fn compile(spec: ArtifactSpec, sha256: String) -> Result<LoadedModel> {
    if spec.format != FORMAT_TAG {
        return fail("$.format", "format", format!("must be \"{FORMAT_TAG}\""));
    }
    if spec.format_version != FORMAT_VERSION {
        return fail(
            "$.format_version",
            "format",
            format!(
                "this build reads version {FORMAT_VERSION}, got {}",
                spec.format_version
            ),
        );
    }
    check_identity(&spec.identity)?;
    let reasons = compile_reasons(&spec.reasons)?;
    let review_reasons = compile_review_reasons(&spec.review_reasons, &reasons)?;
    let is_trees = matches!(spec.model, ModelSpec::TreeEnsemble(_));
    let schema = compile_schema(&spec.features, &reasons, is_trees)?;
    let scorer = compile_model(&spec.model, &schema, spec.explanation.method)?;
    let policy = compile_policy(&spec.policy, &schema, &reasons)?;
    check_reason_use(&spec, &schema, &reasons)?;
    let (explainer, background, alternate) =
        explanation::compile(&spec.explanation, &schema, &scorer, &policy)?;
    check_monotone(&spec.features, &spec.model)?;
    let stability = match spec.stability {
        Some(s) => Some(stability::check(s, &spec.features)?),
        None => None,
    };
    Ok(LoadedModel {
        identity: spec.identity.clone(),
        sha256,
        schema,
        scorer,
        explainer,
        reference: spec.explanation.reference.clone(),
        reasons,
        review_reasons,
        policy,
        background,
        alternate,
        stability,
        provenance: spec.provenance,
    })
}
