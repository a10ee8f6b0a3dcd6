//! Model artifacts: our own JSON format (documented in models/README.md), loaded, digested and
//! validated into a [`LoadedModel`] ready to decide.

mod canonical;
mod digest;
mod parse;
pub mod spec;
mod validate;

pub use validate::{schema_from_specs, scorer_from_spec, MAX_TREE_DEPTH};

pub use digest::{canonical_json, sha256_hex};

use crate::explain::Explainer;
use crate::features::Schema;
use crate::model::Scorer;
use crate::policy::Policy;
use crate::reasons::ReasonTable;
use spec::{IdentitySpec, Population, ReferenceSpec, StabilitySpec};
use std::path::Path;

/// A problem with an artifact: where in the JSON, which rule, and what to do.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{path}: {message} [{rule}]")]
pub struct ArtifactError {
    /// JSONPath-style location, e.g. `$.model.trees[3].nodes[7].left`.
    pub path: String,
    pub rule: String,
    pub message: String,
}

impl ArtifactError {
    pub fn new(path: impl Into<String>, rule: &str, message: impl Into<String>) -> Self {
        ArtifactError {
            path: path.into(),
            rule: rule.to_string(),
            message: message.into(),
        }
    }
}

/// An artifact's alternate reference population, compiled; decisions use the primary one.
#[derive(Debug, Clone)]
pub struct AlternateReference {
    pub reference: ReferenceSpec,
    pub explainer: Explainer,
    pub background: Vec<Vec<f64>>,
}

/// A validated model, compiled for scoring and explanation.
#[derive(Debug, Clone)]
pub struct LoadedModel {
    pub identity: IdentitySpec,
    /// SHA-256 of the artifact's canonical JSON bytes, lower-case hex.
    pub sha256: String,
    pub schema: Schema,
    pub scorer: Scorer,
    pub explainer: Explainer,
    pub reference: ReferenceSpec,
    pub reasons: ReasonTable,
    /// The lender's manual-review reasons (for final actions on referrals).
    pub review_reasons: Vec<crate::reasons::Reason>,
    pub policy: Policy,
    /// Encoded rows of the artifact's background sample (empty when it has none).
    pub background: Vec<Vec<f64>>,
    /// The second reference population, when the artifact carries one.
    pub alternate: Option<AlternateReference>,
    /// Development-sample bins for stability monitoring, when the artifact carries them.
    pub stability: Option<StabilitySpec>,
    /// The artifact's `provenance` object, as written.
    pub provenance: Option<serde_json::Value>,
}

impl LoadedModel {
    /// Reads, digests and validates an artifact file.
    pub fn from_path(path: &Path) -> Result<Self, ArtifactError> {
        let bytes = std::fs::read(path).map_err(|e| {
            ArtifactError::new(
                "$",
                "readable",
                format!("cannot read {}: {e}", path.display()),
            )
        })?;
        Self::from_slice(&bytes)
    }

    /// Parses, digests and validates artifact bytes.
    pub fn from_slice(bytes: &[u8]) -> Result<Self, ArtifactError> {
        // Two streaming passes over the bytes, no JSON tree in memory: the canonical form (which
        // also checks JSON syntax and object shapes), then the typed read.
        let sha256 = sha256_hex(&canonical::canonicalize(bytes)?);
        let spec = parse::parse(bytes)?;
        validate::compile(spec, sha256)
    }

    /// Digests and validates an already-parsed artifact.
    pub fn from_value(value: &serde_json::Value) -> Result<Self, ArtifactError> {
        Self::from_slice(canonical_json(value).as_bytes())
    }

    /// Number of encoded model columns.
    pub fn width(&self) -> usize {
        self.schema.columns.len()
    }

    /// This model explained against its alternate reference population, if it carries one.
    pub fn explained_against_alternate(&self) -> Option<LoadedModel> {
        let population = self.alternate.as_ref()?.reference.population;
        self.explained_against(population)
    }

    /// This model explained against `population`: itself when that is the primary reference,
    /// a copy with the alternate swapped in when the artifact carries it, else `None`.
    pub fn explained_against(&self, population: Population) -> Option<LoadedModel> {
        if self.reference.population == population {
            return Some(self.clone());
        }
        let alt = self.alternate.as_ref()?;
        if alt.reference.population != population {
            return None;
        }
        let mut m = self.clone();
        m.alternate = None;
        m.reference = alt.reference.clone();
        m.explainer = alt.explainer.clone();
        m.background = alt.background.clone();
        Some(m)
    }
}
