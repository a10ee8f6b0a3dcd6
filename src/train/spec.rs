//! The training spec (what `draft-spec` writes and `train` and `import` read) and the errors
//! of building a model from it. Its own module so that drafting, reference populations and
//! import depend on the spec, not on the fitting code.

use crate::artifact::spec::{FieldSpec, PolicySpec, Population, ReasonSpec};
use serde::Deserialize;

/// The training spec: the artifact's fields, reasons and policy, plus how to fit.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TrainingSpec {
    pub model_id: String,
    pub version: String,
    pub description: String,
    /// Written into the artifact as given (a fixed value keeps rebuilds byte-identical).
    pub created_at: String,
    /// Who provides the score (the lender, or the model's owner), named in score disclosures.
    pub score_provider: String,
    /// Outcome column: 1 = defaulted, 0 = repaid.
    pub target: String,
    pub features: Vec<FieldSpec>,
    pub reasons: Vec<ReasonSpec>,
    /// The lender's manual-review reasons for final actions on referrals (optional).
    #[serde(default)]
    pub review_reasons: Vec<ReasonSpec>,
    pub policy: PolicySpec,
    pub reference: ReferenceChoice,
    /// L2 penalty on standardised slopes (logistic); 0 = maximum likelihood.
    #[serde(default)]
    pub l2: f64,
    /// `logistic` (default) or `forest`.
    #[serde(default)]
    pub kind: ModelKind,
    /// Forest settings (kind `forest`).
    #[serde(default)]
    pub forest: Option<super::forest::ForestParams>,
}

#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "snake_case")]
pub enum ModelKind {
    #[default]
    Logistic,
    Forest,
}

impl ModelKind {
    /// The name a training spec and `--kind` use.
    pub fn name(self) -> &'static str {
        match self {
            ModelKind::Logistic => "logistic",
            ModelKind::Forest => "forest",
        }
    }
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceChoice {
    pub population: Population,
    pub label: String,
    /// For `near_approve_cutoff`: applicants with fitted PD in [approve_below - band, approve_below).
    #[serde(default = "default_band")]
    pub band: f64,
    /// Also carry the other population as the alternate (default true).
    #[serde(default = "default_alternate")]
    pub alternate: bool,
    /// Words for the alternate population (default: written from its size and band).
    #[serde(default)]
    pub alternate_label: Option<String>,
}

fn default_alternate() -> bool {
    true
}

fn default_band() -> f64 {
    0.02
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TrainError {
    #[error("spec: {0}")]
    Spec(String),
    #[error("data: {0}")]
    Data(String),
    #[error("fit: {0}")]
    Fit(String),
    #[error("the trained artifact does not validate: {0}")]
    Artifact(String),
}
