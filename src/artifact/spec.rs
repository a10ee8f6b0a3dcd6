//! The on-disk model artifact, exactly as written in JSON.
//!
//! These types mirror the file one to one so that a deserialisation error can name the JSON path.
//! Semantic rules (indices in range, reason table complete, cutoffs ordered, ...) are checked in
//! [`super::validate`], which turns a spec into a [`crate::LoadedModel`].

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Tag written in every artifact so that a stray JSON file is not mistaken for a model.
pub const FORMAT_TAG: &str = "plumbline.model";
/// The one format version this build reads.
pub const FORMAT_VERSION: u32 = 2;

#[derive(Debug, Clone, Serialize)]
pub struct ArtifactSpec {
    pub format: String,
    pub format_version: u32,
    pub identity: IdentitySpec,
    pub features: Vec<FieldSpec>,
    pub model: ModelSpec,
    pub explanation: ExplanationSpec,
    pub reasons: Vec<ReasonSpec>,
    /// The lender's reasons for an underwriter's decision on a referral (manual review), beside
    /// the model's reason table; a final action's reasons come from either list.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub review_reasons: Vec<ReasonSpec>,
    pub policy: PolicySpec,
    /// Distributions of the inputs and the score on the development data, for stability checks.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stability: Option<StabilitySpec>,
    /// Free-form facts about how the model was built (rows, base rate, CV AUC, data digest, seed).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub provenance: Option<serde_json::Value>,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IdentitySpec {
    pub model_id: String,
    pub version: String,
    pub description: String,
    /// RFC 3339 timestamp, as written by the producer.
    pub created_at: String,
    /// Name and version of the program that wrote the file.
    pub producer: String,
    /// Who provides the credit score, as a score disclosure names it (FCRA 15 U.S.C.
    /// 1681g(f)(1)(E)): the lender, or the model's owner.
    pub score_provider: String,
}

/// One applicant input field.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FieldSpec {
    pub name: String,
    pub kind: FieldKind,
    #[serde(default)]
    pub unit: String,
    /// Inclusive lower bound (number and count fields).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min: Option<f64>,
    /// Inclusive upper bound (number and count fields).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max: Option<f64>,
    /// Category levels, in encoding order (category fields only).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub levels: Vec<String>,
    /// The level dropped for n-1 dummy coding (category fields only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub base_level: Option<String>,
    pub missing: MissingSpec,
    /// `false` for a field used only by policy rule checks, never by the model.
    #[serde(default = "yes")]
    pub scored: bool,
    /// Reason code this field's contribution is reported under (scored fields only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// How the risk of default moves as the value rises, where the business knows it
    /// (number, count and boolean fields). Enforced on logistic coefficients.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub monotone: Option<Monotone>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Monotone {
    /// A higher value never lowers the risk of default.
    Increasing,
    /// A higher value never raises the risk of default.
    Decreasing,
}

fn yes() -> bool {
    true
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FieldKind {
    /// A real number.
    Number,
    /// A non-negative whole number (inquiries, delinquencies, months).
    Count,
    /// true / false, encoded 1 / 0.
    Boolean,
    /// One of a fixed list of levels, encoded as n-1 dummies.
    Category,
}

/// What a missing (absent or `null`) value does.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "policy", rename_all = "snake_case")]
pub enum MissingSpec {
    /// The field is required; a missing value is an input error.
    Reject(NoOptions),
    /// Replace by a stated value before encoding (the value is echoed in every decision).
    Impute(ImputeSpec),
    /// Tree models only: every split on this field sends a missing value its node's missing side.
    TreeDefault(NoOptions),
}

/// A missing-value policy that takes no options (and refuses any).
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NoOptions {}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ImputeSpec {
    pub value: serde_json::Value,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ModelSpec {
    Logistic(LogisticSpec),
    TreeEnsemble(TreeEnsembleSpec),
    OnnxGraph(OnnxGraphSpec),
}

/// A model kept as an ONNX graph (neural network, support-vector machine), embedded whole so
/// the artifact stays the one file a service loads; evaluated by `model::graph`.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OnnxGraphSpec {
    /// The ONNX file's bytes, base64 (RFC 4648, standard alphabet, padded).
    pub onnx: String,
    /// SHA-256 of those bytes, lower-case hex; checked when the artifact loads.
    pub sha256: String,
}

/// log-odds of default = intercept + sum(coefficient * encoded column).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LogisticSpec {
    pub intercept: f64,
    /// Keyed by encoded column name (`field` or `field=level`).
    pub coefficients: BTreeMap<String, f64>,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TreeEnsembleSpec {
    pub aggregation: Aggregation,
    /// Added to the sum of tree outputs (`sum_log_odds`, `sum_probability`; must be 0 for
    /// `mean_probability`).
    #[serde(default)]
    pub initial_value: f64,
    pub trees: Vec<TreeSpec>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Aggregation {
    /// Random forest: each leaf holds a probability of default; the model averages them.
    MeanProbability,
    /// Boosted trees: leaves hold log-odds increments; the model sums them plus `initial_value`.
    SumLogOdds,
    /// Forests as ONNX exporters write them: each leaf holds its tree's share of the probability
    /// of default (already divided by the number of trees); the model sums them plus `initial_value`.
    SumProbability,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TreeSpec {
    /// Node 0 is the root.
    pub nodes: Vec<NodeSpec>,
}

/// A split node (column, threshold, comparison, missing, left, right) or a leaf (value).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct NodeSpec {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<f64>,
    /// `<=` or `<`: a value satisfying `value COMPARISON threshold` goes left.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub comparison: Option<Comparison>,
    /// Where a missing value goes at this split.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub missing: Option<Side>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub left: Option<usize>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub right: Option<usize>,
    /// Leaf output (probability or log-odds increment, by the ensemble's aggregation).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value: Option<f64>,
    /// Training rows (or weight) reaching this node; needed for path-dependent TreeSHAP.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cover: Option<f64>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Comparison {
    #[serde(rename = "<=")]
    LessOrEqual,
    #[serde(rename = "<")]
    Less,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Side {
    Left,
    Right,
}

/// Against which population contributions are measured, and how.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ExplanationSpec {
    pub method: ExplainMethod,
    pub reference: ReferenceSpec,
    /// Mean of each encoded column over the reference population (logistic).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mean: Option<BTreeMap<String, f64>>,
    /// Reference applicants, as applicant JSON objects (interventional TreeSHAP; logistic may
    /// use their mean instead of `mean`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub background: Vec<serde_json::Map<String, serde_json::Value>>,
    /// Permutations per background row (`shapley_sampled` only; even: each with its reverse).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub samples: Option<usize>,
    /// Seed of those permutations (`shapley_sampled` only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub seed: Option<u64>,
    /// The other population of comment 9(b)(2)-5, carried so that reviewers can compare the
    /// reasons each gives; decisions use the primary one above.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub alternate: Option<Box<ExplanationSpec>>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ExplainMethod {
    /// beta_j * (x_j - reference_j), in log-odds.
    Linear,
    /// Path-dependent TreeSHAP: conditioning on the training population through node covers.
    TreeCoverWeighted,
    /// TreeSHAP against the background sample (Lundberg et al. 2020).
    TreeInterventional,
    /// Any model: exact interventional Shapley values over fields against the background, by
    /// enumerating every coalition.
    ShapleyInterventional,
    /// Any model: the same values estimated from `samples` seeded permutations per background
    /// row, with standard errors.
    ShapleySampled,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceSpec {
    pub population: Population,
    /// Who exactly, in words (e.g. "approved applications 2025-Q3 with PD in [0.06, 0.08)").
    pub label: String,
}

/// The two example methods of Regulation B, Official Interpretation comment 9(b)(2)-5.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema, clap::ValueEnum,
)]
#[serde(rename_all = "snake_case")]
#[value(rename_all = "snake_case")]
pub enum Population {
    AllApplicants,
    NearApproveCutoff,
}

impl Population {
    /// The name an artifact and `--reference` use.
    pub fn name(self) -> &'static str {
        match self {
            Population::AllApplicants => "all_applicants",
            Population::NearApproveCutoff => "near_approve_cutoff",
        }
    }
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReasonSpec {
    pub code: String,
    /// Specific, applicant-facing statement of the reason.
    pub text: String,
    /// Marks the inquiries reason, which FCRA 15 U.S.C. 1681g(f)(9) lists beyond the usual limit.
    #[serde(default)]
    pub inquiry: bool,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PolicySpec {
    /// Approve when probability of default is strictly below this.
    pub approve_below: f64,
    /// Decline when probability of default is at or above this; refer in between.
    pub decline_at_or_above: f64,
    pub scaling: ScalingSpec,
    #[serde(default = "four")]
    pub max_reasons: usize,
    /// Add the inquiry reason as one extra when it is adverse but outside the top `max_reasons`
    /// (default true: 15 U.S.C. 1681g(f)(9) requires it in credit-score disclosures; turn it off
    /// only where that rule does not apply, on counsel's advice).
    #[serde(default = "yes_policy")]
    pub inquiry_extra: bool,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub rules: Vec<RuleSpec>,
}

fn four() -> usize {
    4
}

fn yes_policy() -> bool {
    true
}

/// score = offset + factor * ln(good:bad odds), factor = pdo / ln 2, anchored at `points` for `odds`.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ScalingSpec {
    pub points: f64,
    pub odds: f64,
    pub pdo: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min_score: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_score: Option<f64>,
}

/// A policy rule check: `field TEST value` triggers `action` with its own reason code.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RuleSpec {
    pub code: String,
    pub field: String,
    pub test: RuleTest,
    /// Compared value (omitted for `missing`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value: Option<serde_json::Value>,
    pub action: RuleAction,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum RuleTest {
    #[serde(rename = ">")]
    Greater,
    #[serde(rename = ">=")]
    GreaterOrEqual,
    #[serde(rename = "<")]
    Less,
    #[serde(rename = "<=")]
    LessOrEqual,
    #[serde(rename = "==")]
    Equal,
    #[serde(rename = "!=")]
    NotEqual,
    #[serde(rename = "missing")]
    Missing,
}

#[derive(
    Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize, utoipa::ToSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum RuleAction {
    Refer,
    Decline,
}

/// Development-sample distributions: per field and for the score, bin edges with the share of
/// applicants in each bin, so that later data can be compared (population stability index).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StabilitySpec {
    /// Which applicants the shares describe, in words.
    pub label: String,
    pub rows: u64,
    /// Keyed by field name.
    pub fields: BTreeMap<String, BinnedSpec>,
    /// The score scale's distribution (bins over the score, not the probability).
    pub score: BinnedSpec,
}

/// Either numeric bins (`edges` and `shares`) or category `levels`, plus the missing share.
///
/// Numeric bin i holds edges[i-1] <= value < edges[i]; the first bin is open below, the last
/// open above, so there is one more share than edges. Shares and `missing` sum to 1.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct BinnedSpec {
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub edges: Vec<f64>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub shares: Vec<f64>,
    /// Share per category level (category fields).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub levels: BTreeMap<String, f64>,
    /// Share of applicants with no value (absent or null).
    #[serde(default)]
    pub missing: f64,
}
