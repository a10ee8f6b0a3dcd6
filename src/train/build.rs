//! Training spec + CSV -> a validated logistic artifact, with stratified cross-validation and
//! the provenance model-risk review asks for. Written only once the result loads cleanly.

use super::dataset::{read_csv, Dataset};
use super::logistic::{self, LogisticFit};
use super::Rng;
use crate::artifact::spec::{FieldSpec, PolicySpec, Population, ReasonSpec};
use crate::features::Schema;
use serde::Deserialize;
use serde_json::{json, Value};

/// The training spec: the artifact's fields, reasons and policy, plus how to fit.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TrainingSpec {
    pub model_id: String,
    pub version: String,
    pub description: String,
    /// Written into the artifact as given (a fixed value keeps rebuilds byte-identical).
    pub created_at: String,
    /// Outcome column: 1 = defaulted, 0 = repaid.
    pub target: String,
    pub features: Vec<FieldSpec>,
    pub reasons: Vec<ReasonSpec>,
    pub policy: PolicySpec,
    pub reference: ReferenceChoice,
    /// L2 penalty on standardised slopes; 0 = maximum likelihood.
    #[serde(default)]
    pub l2: f64,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceChoice {
    pub population: Population,
    pub label: String,
    /// For `near_approve_cutoff`: applicants with fitted PD in [approve_below - band, approve_below).
    #[serde(default = "default_band")]
    pub band: f64,
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

/// What training measured, for the person running it.
#[derive(Debug, Clone)]
pub struct TrainReport {
    pub rows: usize,
    pub base_rate: f64,
    pub cv_auc: Vec<f64>,
    pub fit: LogisticFit,
    pub columns: Vec<String>,
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let m = v.iter().sum::<f64>() / v.len() as f64;
    let var = v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len().max(2) - 1) as f64;
    (m, var.sqrt())
}

/// Fold of each row: positives and negatives shuffled separately, then dealt round-robin, so
/// every fold keeps the base rate.
fn stratified_folds(y: &[bool], k: usize, seed: u64) -> Vec<usize> {
    let mut rng = Rng::new(seed);
    let mut fold = vec![0; y.len()];
    for class in [true, false] {
        let mut idx: Vec<usize> = (0..y.len()).filter(|&i| y[i] == class).collect();
        for i in (1..idx.len()).rev() {
            let j = (rng.next_u64() % (i as u64 + 1)) as usize;
            idx.swap(i, j);
        }
        for (n, i) in idx.into_iter().enumerate() {
            fold[i] = n % k;
        }
    }
    fold
}

pub fn train_logistic(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
) -> Result<(String, TrainReport), TrainError> {
    if !(2..=20).contains(&folds) {
        return Err(TrainError::Spec("folds must be 2 to 20".into()));
    }
    let schema: Schema = crate::artifact::schema_from_specs(&spec.features, &spec.reasons, false)
        .map_err(|e| TrainError::Spec(e.to_string()))?;
    let Dataset {
        columns: x,
        defaulted: y,
        sha256,
    } = read_csv(csv, &schema, &spec.target).map_err(|e| TrainError::Data(e.to_string()))?;
    let names: Vec<String> = schema.columns.iter().map(|c| c.name.clone()).collect();
    let fit_err = |e: logistic::FitError| match e {
        logistic::FitError::Constant(j) => TrainError::Fit(format!(
            "column {} is constant in the data; drop it from the spec",
            names[j]
        )),
        other => TrainError::Fit(other.to_string()),
    };
    let model = logistic::fit(&x, &y, spec.l2).map_err(fit_err)?;

    let fold = stratified_folds(&y, folds, seed);
    let mut cv_auc = Vec::with_capacity(folds);
    for f in 0..folds {
        let (train, test): (Vec<usize>, Vec<usize>) = (0..y.len()).partition(|&i| fold[i] != f);
        let xs: Vec<Vec<f64>> = train.iter().map(|&i| x[i].clone()).collect();
        let ys: Vec<bool> = train.iter().map(|&i| y[i]).collect();
        let m = logistic::fit(&xs, &ys, spec.l2).map_err(fit_err)?;
        let scores: Vec<f64> = test.iter().map(|&i| m.log_odds(&x[i])).collect();
        let truth: Vec<bool> = test.iter().map(|&i| y[i]).collect();
        cv_auc.push(
            crate::evaluate::auc(&scores, &truth)
                .ok_or_else(|| TrainError::Fit(format!("fold {f} holds one class only")))?,
        );
    }

    // Reference population for contributions (Regulation B comment 9(b)(2)-5).
    let cutoff = spec.policy.approve_below;
    let members: Vec<usize> = match spec.reference.population {
        Population::AllApplicants => (0..x.len()).collect(),
        Population::NearApproveCutoff => (0..x.len())
            .filter(|&i| {
                let p = crate::model::sigmoid(model.log_odds(&x[i]));
                p >= cutoff - spec.reference.band && p < cutoff
            })
            .collect(),
    };
    if members.len() < 30 {
        return Err(TrainError::Fit(format!(
            "only {} applicants in the reference population; widen reference.band",
            members.len()
        )));
    }
    let mean: serde_json::Map<String, Value> = names
        .iter()
        .enumerate()
        .map(|(c, n)| {
            (
                n.clone(),
                json!(members.iter().map(|&i| x[i][c]).sum::<f64>() / members.len() as f64),
            )
        })
        .collect();
    let coefficients: serde_json::Map<String, Value> = names
        .iter()
        .enumerate()
        .map(|(c, n)| (n.clone(), json!(model.coefficients[c + 1])))
        .collect();
    let std_errors: serde_json::Map<String, Value> =
        std::iter::once(("(intercept)".to_string(), json!(model.std_errors[0])))
            .chain(
                names
                    .iter()
                    .enumerate()
                    .map(|(c, n)| (n.clone(), json!(model.std_errors[c + 1]))),
            )
            .collect();
    let base_rate = y.iter().filter(|&&d| d).count() as f64 / y.len() as f64;
    let (auc_mean, auc_sd) = mean_sd(&cv_auc);
    let artifact = json!({
        "format": crate::artifact::spec::FORMAT_TAG,
        "format_version": crate::artifact::spec::FORMAT_VERSION,
        "identity": {
            "model_id": spec.model_id, "version": spec.version, "description": spec.description,
            "created_at": spec.created_at, "producer": format!("plumbline {} train", crate::VERSION),
        },
        "features": spec.features,
        "model": {"kind": "logistic", "intercept": model.coefficients[0], "coefficients": coefficients},
        "explanation": {
            "method": "linear",
            "reference": {"population": spec.reference.population, "label": spec.reference.label},
            "mean": mean,
        },
        "reasons": spec.reasons,
        "policy": spec.policy,
        "provenance": {
            "rows": y.len(), "base_rate": base_rate, "data_sha256": sha256, "seed": seed, "folds": folds,
            "cv_auc_mean": auc_mean, "cv_auc_sd": auc_sd, "l2": spec.l2,
            "reference_rows": members.len(), "std_errors": std_errors,
            "method": "maximum likelihood (IRLS); Wald standard errors",
        },
    });
    crate::LoadedModel::from_value(&artifact).map_err(|e| TrainError::Artifact(e.to_string()))?;
    let text = serde_json::to_string_pretty(&artifact)
        .map_err(|e| TrainError::Artifact(e.to_string()))?
        + "\n";
    Ok((
        text,
        TrainReport {
            rows: y.len(),
            base_rate,
            cv_auc,
            fit: model,
            columns: names,
        },
    ))
}
