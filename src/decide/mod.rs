//! The decision pipeline, as one function: check -> encode -> score -> explain -> reasons ->
//! policy -> decision. The HTTP service and the command line both call [`decide_request`], so
//! the same input and model give the same bytes everywhere.

use crate::artifact::spec::{Population, RuleAction};
use crate::artifact::LoadedModel;
use crate::explain::{self, Method};
use crate::features::{Encoded, FieldError, InputError, MissingTreatment};
use crate::model::Space;
use crate::policy::Outcome;
use crate::reasons::{PrincipalReason, ReasonIndex, ReasonLimits};
use serde::Serialize;
use serde_json::Value;

mod envelope;

pub use envelope::{Envelope, ModelSelector, MAX_APPLICATION_ID, MAX_IDEMPOTENCY_KEY};

/// Which model made a decision: id, version and artifact digest.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ModelRef {
    pub id: String,
    pub version: String,
    pub sha256: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Decision {
    pub application_id: String,
    pub model: ModelRef,
    pub outcome: Outcome,
    pub probability_of_default: f64,
    /// Natural log of the odds of default, p / (1 - p).
    pub log_odds: f64,
    pub score: i64,
    /// The range of possible scores and who provides them, as a score disclosure states them
    /// (FCRA 15 U.S.C. 1681g(f)(1)(B), (E)).
    pub score_scale: ScoreScale,
    /// Principal reasons, most important first; empty when approved.
    pub reasons: Vec<PrincipalReason>,
    /// The key factors that adversely affected the score, as a credit-score disclosure lists
    /// them (FCRA 15 U.S.C. 1681g(f)(1)(C), (9)): the model's adverse factors, at most four, then
    /// the inquiries factor if it was adverse but not among them. Rule reasons are not score
    /// factors. Empty when approved.
    pub score_factors: Vec<PrincipalReason>,
    pub rules_fired: Vec<FiredRule>,
    pub contributions: ContributionReport,
    /// Fields that were missing and what was done about each.
    #[schema(value_type = Vec<MissingFieldDoc>)]
    pub missing: Vec<MissingField>,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ScoreScale {
    pub min: i64,
    pub max: i64,
    /// The lender, or the model's owner (the artifact's `identity.score_provider`).
    pub provider: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct FiredRule {
    pub code: String,
    pub field: String,
    pub action: RuleAction,
}

/// Exact contributions: `base_value + sum(fields[].contribution) = output`, in `space`.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ContributionReport {
    pub space: Space,
    pub method: Method,
    pub reference: ReferenceRef,
    pub base_value: f64,
    pub output: f64,
    /// One entry per scored field in schema order; category dummies are summed into their field.
    pub fields: Vec<FieldContribution>,
    /// Present when the contributions are estimated (sampled), not exact: how, from how much.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub estimate: Option<Estimate>,
}

/// How estimated contributions were sampled; each field then carries its standard error.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Estimate {
    /// Always "seeded permutations with their reverses, every background row".
    pub sampling: &'static str,
    pub permutations: usize,
    pub background_rows: usize,
    pub seed: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct ReferenceRef {
    pub population: Population,
    pub label: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct FieldContribution {
    pub field: String,
    /// The value as given (null when missing).
    pub value: Value,
    pub contribution: f64,
    /// Standard error of an estimated contribution (absent when exact).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub standard_error: Option<f64>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MissingField {
    pub field: String,
    #[serde(flatten)]
    pub treatment: MissingTreatment,
}

/// A missing field as the JSON shows it: one complete object per treatment (a flattened enum
/// would be an `allOf` over a `oneOf`, which generated clients cannot type).
#[derive(Serialize, utoipa::ToSchema)]
#[serde(tag = "treatment", rename_all = "snake_case")]
#[schema(as = MissingField)]
#[allow(dead_code)]
pub enum MissingFieldDoc {
    /// Replaced by the artifact's stated value before scoring.
    Imputed { field: String, value: Value },
    /// Sent to each tree node's missing side.
    TreeDefault { field: String },
}

/// Decides a request envelope (see [`Envelope`]) with this model; a `model` selector in the
/// request must name this model.
pub fn decide_request(model: &LoadedModel, request: &Value) -> Result<Decision, InputError> {
    let mut envelope = Envelope::parse(request)?;
    check_selector(model, &mut envelope);
    decide_envelope(model, &envelope)
}

/// A `model` selector in the request must name this model.
fn check_selector(model: &LoadedModel, envelope: &mut Envelope<'_>) {
    if let Some(selector) = &envelope.model {
        if !selector.matches(model) {
            envelope.errors.push(FieldError {
                field: "model".into(),
                rule: "unknown_model",
                message: format!(
                    "this model is {} version {}; the request asks for {}",
                    model.identity.model_id,
                    model.identity.version,
                    selector.describe()
                ),
            });
        }
    }
}

/// Decides a parsed envelope, reporting envelope and applicant problems together. An envelope
/// with problems is refused whatever its applicant: the applicant is checked (its problems
/// named too) but not scored, as [`decide_requests`] does.
pub fn decide_envelope(
    model: &LoadedModel,
    envelope: &Envelope<'_>,
) -> Result<Decision, InputError> {
    let encoded = prepare(model, envelope)?;
    let applicant = envelope.applicant.as_deref().unwrap_or(&Value::Null);
    let id = envelope.application_id.as_deref().unwrap_or("");
    decide_encoded(model, id, applicant, encoded)
}

/// The envelope's applicant, checked and encoded; the envelope's problems and the applicant's
/// are reported together, and an envelope with problems is refused whatever its applicant.
fn prepare(model: &LoadedModel, envelope: &Envelope<'_>) -> Result<Encoded, InputError> {
    let encoded =
        (envelope.applicant.as_deref()).map(|a| model.schema.check_and_encode(a, "applicant"));
    let mut errors = envelope.errors.clone();
    if let Some(Err(e)) = &encoded {
        errors.extend(e.errors.iter().cloned());
    }
    match encoded {
        Some(Ok(encoded)) if errors.is_empty() => Ok(encoded),
        _ => Err(InputError { errors }),
    }
}

/// A decision whose numbers overflow (a huge value in a field with no `max`) cannot be given,
/// explained or recorded: it is refused as input, naming the field whose contribution
/// overflowed (or the applicant, when the sum did).
fn not_finite(model: &LoadedModel, by_column: &[f64], outputs: [f64; 4]) -> Result<(), InputError> {
    if outputs.iter().chain(by_column).all(|v| v.is_finite()) {
        return Ok(());
    }
    let field = (model.schema.fields.iter())
        .find(|f| by_column[f.columns.clone()].iter().any(|c| !c.is_finite()))
        .map_or_else(
            || "applicant".to_string(),
            |f| format!("applicant.{}", f.name),
        );
    Err(InputError::one(
        &field,
        "finite_output",
        "the model's output for this applicant is not a finite number (a value far outside what the model was built on); give the field a max in the artifact, or check the value",
    ))
}

/// Decides one applicant object.
pub fn decide(
    model: &LoadedModel,
    application_id: &str,
    applicant: &Value,
) -> Result<Decision, InputError> {
    let encoded = model.schema.check_and_encode(applicant, "applicant")?;
    decide_encoded(model, application_id, applicant, encoded)
}

/// Decides one applicant already checked and encoded.
fn decide_encoded(
    model: &LoadedModel,
    application_id: &str,
    applicant: &Value,
    encoded: Encoded,
) -> Result<Decision, InputError> {
    let x = &encoded.columns;
    let mut by_column = vec![0.0; x.len()];
    let mut errors = Vec::new();
    // The model's raw output, from the explainer when it found it on the way (the same bits).
    let raw = match (model.explainer).explain_scored(x, &mut by_column, &mut errors) {
        Some(raw) => raw,
        None => model.scorer.raw(x),
    };
    let explained = Explained {
        by_column,
        errors,
        raw,
    };
    decide_explained(model, application_id, applicant, encoded, explained)
}

/// Decides many requests (as [`decide_request`] each): every request is checked and encoded,
/// then all valid applicants are explained together (tree ensembles take them in blocks per
/// pass over each tree), then each is decided. Each answer is bit for bit the one
/// [`decide_request`] gives for that request alone.
pub fn decide_requests(
    model: &LoadedModel,
    requests: &[Value],
) -> Vec<Result<Decision, InputError>> {
    let prepared: Vec<Result<(Envelope<'_>, Encoded), InputError>> = (requests.iter())
        .map(|request| {
            let mut envelope = Envelope::parse(request)?;
            check_selector(model, &mut envelope);
            let encoded = prepare(model, &envelope)?;
            Ok((envelope, encoded))
        })
        .collect();
    let width = model.width();
    let rows: Vec<f64> = (prepared.iter().flatten())
        .flat_map(|(_, e)| e.columns.iter().copied())
        .collect();
    let mut by_column = vec![0.0; rows.len()];
    let mut errors = Vec::new();
    let raws = (model.explainer).explain_rows_scored(&rows, width, &mut by_column, &mut errors);
    let mut row = 0;
    (prepared.into_iter())
        .map(|p| {
            let (envelope, encoded) = p?;
            let at = row * width..(row + 1) * width;
            let raw = match &raws {
                Some(raws) => raws[row],
                None => model.scorer.raw(&encoded.columns),
            };
            row += 1;
            let explained = Explained {
                by_column: by_column[at.clone()].to_vec(),
                errors: errors.get(at).map(<[f64]>::to_vec).unwrap_or_default(),
                raw,
            };
            let applicant = envelope.applicant.as_deref().unwrap_or(&Value::Null);
            let id = envelope.application_id.as_deref().unwrap_or("");
            decide_explained(model, id, applicant, encoded, explained)
        })
        .collect()
}

/// An applicant's contributions by column, their standard errors when estimated, and the
/// model's raw output.
struct Explained {
    by_column: Vec<f64>,
    errors: Vec<f64>,
    raw: f64,
}

/// The rest of the pipeline once an applicant is explained: reasons, policy, the decision.
fn decide_explained(
    model: &LoadedModel,
    application_id: &str,
    applicant: &Value,
    encoded: Encoded,
    explained: Explained,
) -> Result<Decision, InputError> {
    let Explained {
        by_column,
        errors,
        raw,
    } = explained;
    let (probability, log_odds) = model.scorer.probability_and_log_odds(raw);
    let base = model.explainer.base_value();
    not_finite(model, &by_column, [raw, probability, log_odds, base])?;
    debug_assert!(
        explain::is_additive(base, &by_column, raw),
        "contributions do not add up: base {base} + {:?} != {raw}",
        by_column
    );

    let schema = &model.schema;
    let mut fields = Vec::new();
    let mut by_code = model.reasons.zero_sums();
    for f in schema.fields.iter().filter(|f| f.scored) {
        let c: f64 = by_column[f.columns.clone()].iter().sum();
        if let Some(r) = f.reason {
            by_code[r] += c;
        }
        fields.push(FieldContribution {
            field: f.name.clone(),
            value: given_value(applicant, &f.name),
            contribution: c,
            standard_error: (!errors.is_empty()).then(|| errors[f.columns.clone()].iter().sum()),
        });
    }

    let policy = &model.policy;
    let fired = policy.fired(&encoded.values);
    let outcome = fired
        .iter()
        .map(|&r| Outcome::from(policy[r].action))
        .fold(policy.model_outcome(probability), Outcome::max);
    let score_factors = if outcome == Outcome::Approve {
        Vec::new()
    } else {
        model.reasons.score_factors(&by_code)
    };
    let reasons = if outcome == Outcome::Approve {
        Vec::new()
    } else {
        let rule_codes: Vec<ReasonIndex> = fired.iter().map(|&r| policy[r].reason).collect();
        let limits = ReasonLimits {
            max_reasons: policy.max_reasons,
            inquiry_extra: policy.inquiry_extra,
        };
        model.reasons.principal(&by_code, &rule_codes, limits)
    };

    Ok(Decision {
        application_id: application_id.to_string(),
        model: ModelRef {
            id: model.identity.model_id.clone(),
            version: model.identity.version.clone(),
            sha256: model.sha256.clone(),
        },
        outcome,
        probability_of_default: probability,
        log_odds,
        score: policy.scaling.score(log_odds),
        score_scale: ScoreScale {
            // Required whole numbers (checked at load).
            min: policy.scaling.min_score.unwrap_or(f64::NAN) as i64,
            max: policy.scaling.max_score.unwrap_or(f64::NAN) as i64,
            provider: model.identity.score_provider.clone(),
        },
        reasons,
        score_factors,
        rules_fired: fired
            .iter()
            .map(|&r| {
                let rule = &policy[r];
                FiredRule {
                    code: model.reasons[rule.reason].code.clone(),
                    field: schema[rule.field].name.clone(),
                    action: rule.action,
                }
            })
            .collect(),
        contributions: ContributionReport {
            space: model.scorer.space(),
            method: model.explainer.method(),
            reference: ReferenceRef {
                population: model.reference.population,
                label: model.reference.label.clone(),
            },
            base_value: base,
            output: raw,
            fields,
            estimate: estimate(&model.explainer),
        },
        missing: encoded
            .missing
            .into_iter()
            .map(|(i, treatment)| MissingField {
                field: schema[i].name.clone(),
                treatment,
            })
            .collect(),
    })
}

fn estimate(explainer: &explain::Explainer) -> Option<Estimate> {
    let explain::Explainer::Shapley(e) = explainer else {
        return None;
    };
    match e.mode() {
        explain::shapley::Mode::Exact => None,
        explain::shapley::Mode::Sampled { permutations, seed } => Some(Estimate {
            sampling: "seeded permutations with their reverses, every background row",
            permutations: *permutations,
            background_rows: e.background_rows(),
            seed: *seed,
        }),
    }
}

fn given_value(applicant: &Value, name: &str) -> Value {
    applicant.get(name).cloned().unwrap_or(Value::Null)
}
