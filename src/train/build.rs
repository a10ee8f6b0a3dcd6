//! Training spec + CSV -> a validated logistic artifact, with stratified cross-validation and
//! the provenance model-risk review asks for. Written only once the result loads cleanly.

use super::dataset::{read_csv, Dataset};
use super::logistic::{self, LogisticFit};
pub use super::spec::{ModelKind, ReferenceChoice, TrainError, TrainingSpec};
use super::{reference, Rng};
use crate::evaluate::stability;
use crate::features::Schema;
use crate::progress::Progress;
use serde_json::{json, Value};

/// Mean leaf value over trees, the forest's probability of default, for each of `rows`.
fn forest_scores(
    trees: &[crate::artifact::spec::TreeSpec],
    names: &[String],
    rows: &[&[f64]],
) -> Vec<f64> {
    // (column index, threshold, left, right, leaf value) per node; usize::MAX marks a leaf.
    type Flat = (usize, f64, usize, usize, f64);
    let compiled: Vec<Vec<Flat>> = trees
        .iter()
        .map(|t| {
            t.nodes
                .iter()
                .map(|n| match (&n.column, n.threshold, n.left, n.right) {
                    (Some(c), Some(thr), Some(l), Some(r)) => (
                        names.iter().position(|v| v == c).unwrap_or(0),
                        thr,
                        l,
                        r,
                        0.0,
                    ),
                    _ => (usize::MAX, 0.0, 0, 0, n.value.unwrap_or(0.0)),
                })
                .collect()
        })
        .collect();
    rows.iter()
        .map(|x| {
            let total: f64 = compiled
                .iter()
                .map(|t| {
                    let mut n = 0;
                    while t[n].0 != usize::MAX {
                        n = if x[t[n].0] <= t[n].1 { t[n].2 } else { t[n].3 };
                    }
                    t[n].4
                })
                .sum();
            total / compiled.len().max(1) as f64
        })
        .collect()
}

/// What training measured, for the person running it.
#[derive(Debug, Clone)]
pub struct TrainReport {
    pub rows: usize,
    pub base_rate: f64,
    pub cv_auc: Vec<f64>,
    /// The logistic fit (coefficients and standard errors); `None` for forests.
    pub fit: Option<LogisticFit>,
    pub columns: Vec<String>,
    /// Things the person training should know (a missing alternate population, a forest
    /// that breaks a stated risk direction).
    pub notes: Vec<String>,
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

/// Stratified k-fold cross-validated AUC: `fit_score(train, test)` fits on the train rows and
/// returns scores for the test rows.
fn cross_validate(
    y: &[bool],
    folds: usize,
    seed: u64,
    mut fit_score: impl FnMut(&[usize], &[usize]) -> Result<Vec<f64>, TrainError>,
) -> Result<Vec<f64>, TrainError> {
    let fold = stratified_folds(y, folds, seed);
    (0..folds)
        .map(|f| {
            let (train, test): (Vec<usize>, Vec<usize>) = (0..y.len()).partition(|&i| fold[i] != f);
            let scores = fit_score(&train, &test)?;
            let truth: Vec<bool> = test.iter().map(|&i| y[i]).collect();
            crate::evaluate::auc(&scores, &truth)
                .ok_or_else(|| TrainError::Fit(format!("fold {f} holds one class only")))
        })
        .collect()
}

/// Who the stability bins of a trained model describe.
const FITTED_ON: &str = "training data the model was fitted on";

/// Provenance with the cross-validation results added.
fn with_cv(mut provenance: Value, cv_auc: &[f64]) -> Value {
    let (auc_mean, auc_sd) = mean_sd(cv_auc);
    provenance["folds"] = json!(cv_auc.len());
    provenance["cv_auc_mean"] = json!(auc_mean);
    provenance["cv_auc_sd"] = json!(auc_sd);
    provenance
}

/// The artifact around a model body: identity, the spec's fields, reasons and policy,
/// development-sample stability bins and provenance; validated by loading it before it is
/// returned. Shared by training and import, so both write artifacts the same way.
pub fn assemble(
    spec: &TrainingSpec,
    data: &Dataset,
    bins_label: &str,
    producer: &str,
    model: Value,
    explanation: Value,
    mut provenance: Value,
) -> Result<String, TrainError> {
    // The outcome column, so `evaluate` reads the same one by default.
    provenance["target"] = json!(spec.target);
    let mut artifact = json!({
        "format": crate::artifact::spec::FORMAT_TAG,
        "format_version": crate::artifact::spec::FORMAT_VERSION,
        "identity": {
            "model_id": spec.model_id, "version": spec.version, "description": spec.description,
            "created_at": spec.created_at, "producer": producer,
            "score_provider": spec.score_provider,
        },
        "features": spec.features,
        "model": model,
        "explanation": explanation,
        "reasons": spec.reasons,
        "policy": spec.policy,
        "provenance": provenance,
    });
    if !spec.review_reasons.is_empty() {
        artifact["review_reasons"] = json!(spec.review_reasons);
    }
    let invalid = |e: crate::ArtifactError| TrainError::Artifact(e.to_string());
    let loaded = crate::LoadedModel::from_value(&artifact).map_err(invalid)?;
    let scores: Vec<f64> = (data.columns.iter())
        .map(|x| {
            let (_, log_odds) = loaded.scorer.probability_and_log_odds(loaded.scorer.raw(x));
            loaded.policy.scaling.score(log_odds) as f64
        })
        .collect();
    let bins = stability::develop(bins_label, &spec.features, &data.applicants, &scores);
    artifact["stability"] =
        serde_json::to_value(bins).map_err(|e| TrainError::Artifact(e.to_string()))?;
    crate::LoadedModel::from_value(&artifact).map_err(invalid)?;
    serde_json::to_string_pretty(&artifact)
        .map(|t| t + "\n")
        .map_err(|e| TrainError::Artifact(e.to_string()))
}

/// The checks and reading both kinds share: the fold count, the spec's fields (as for a tree
/// model when `trees`), and the CSV read against them; with the encoded column names.
fn prepare(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    trees: bool,
) -> Result<(Dataset, Vec<String>), TrainError> {
    if !(2..=20).contains(&folds) {
        return Err(TrainError::Spec("folds must be 2 to 20".into()));
    }
    let schema: Schema = crate::artifact::schema_from_specs(&spec.features, &spec.reasons, trees)
        .map_err(|e| TrainError::Spec(e.to_string()))?;
    let data = read_csv(csv, &schema, &spec.target).map_err(|e| TrainError::Data(e.to_string()))?;
    let names = schema.columns.iter().map(|c| c.name.clone()).collect();
    Ok((data, names))
}

pub fn train_logistic(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
) -> Result<(String, TrainReport), TrainError> {
    logistic_with(spec, csv, folds, seed, &crate::progress::Quiet)
}

fn logistic_with(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
    progress: &dyn Progress,
) -> Result<(String, TrainReport), TrainError> {
    progress.stage("reading the training rows", None);
    let (data, names) = prepare(spec, csv, folds, false)?;
    progress.stage("fitting (each fold, then all rows)", Some(folds as u64 + 1));
    let (x, y) = (&data.columns, &data.defaulted);
    let fit_err = |e: logistic::FitError| match e {
        logistic::FitError::Constant(j) => TrainError::Fit(format!(
            "column {} is constant in the data; drop it from the spec",
            names[j]
        )),
        other => TrainError::Fit(other.to_string()),
    };
    let model = logistic::fit(x, y, spec.l2).map_err(fit_err)?;
    progress.advance(1);

    let cv_auc = cross_validate(y, folds, seed, |train, test| {
        let xs: Vec<Vec<f64>> = train.iter().map(|&i| x[i].clone()).collect();
        let ys: Vec<bool> = train.iter().map(|&i| y[i]).collect();
        let m = logistic::fit(&xs, &ys, spec.l2).map_err(fit_err)?;
        progress.advance(1);
        Ok(test.iter().map(|&i| m.log_odds(&x[i])).collect())
    })?;
    progress.stage("reference populations, stability bins, checks", None);

    let p: Vec<f64> = (x.iter())
        .map(|r| crate::model::sigmoid(model.log_odds(r)))
        .collect();
    let (explanation, notes) = reference::explanation(
        &spec.reference,
        &p,
        spec.policy.approve_below,
        |population, label, rows| reference::linear_section(population, label, rows, x, &names),
    )?;
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
    let text = assemble(
        spec,
        &data,
        FITTED_ON,
        &format!("plumbline {} train", crate::VERSION),
        json!({"kind": "logistic", "intercept": model.coefficients[0], "coefficients": coefficients}),
        explanation,
        with_cv(
            json!({
                "rows": y.len(), "base_rate": base_rate, "data_sha256": data.sha256, "seed": seed, "l2": spec.l2,
                "std_errors": std_errors,
                "method": "maximum likelihood (IRLS); Wald standard errors",
            }),
            &cv_auc,
        ),
    )?;
    Ok((
        text,
        TrainReport {
            rows: y.len(),
            base_rate,
            cv_auc,
            fit: Some(model),
            columns: names,
            notes,
        },
    ))
}

/// Trains the kind the spec names.
pub fn train(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
) -> Result<(String, TrainReport), TrainError> {
    train_with(spec, csv, folds, seed, &crate::progress::Quiet)
}

/// As [`train`], reporting each fit (one per fold, then on all rows) to `progress`.
pub fn train_with(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
    progress: &dyn Progress,
) -> Result<(String, TrainReport), TrainError> {
    super::draft::check_no_placeholders(spec)?;
    match spec.kind {
        ModelKind::Logistic => logistic_with(spec, csv, folds, seed, progress),
        ModelKind::Forest => forest_with(spec, csv, folds, seed, progress),
    }
}

/// A random forest (smartcore, re-counted covers); path-dependent TreeSHAP against all
/// applicants, or interventional TreeSHAP against applicants just inside the approve cutoff.
pub fn train_forest(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
) -> Result<(String, TrainReport), TrainError> {
    forest_with(spec, csv, folds, seed, &crate::progress::Quiet)
}

fn forest_with(
    spec: &TrainingSpec,
    csv: &str,
    folds: usize,
    seed: u64,
    progress: &dyn Progress,
) -> Result<(String, TrainReport), TrainError> {
    let params = spec.forest.ok_or_else(|| {
        TrainError::Spec(
            "kind forest needs \"forest\": {\"trees\", \"max_depth\", \"min_samples_leaf\"}".into(),
        )
    })?;
    if !(1..=1000).contains(&params.trees)
        || !(1..=40).contains(&params.max_depth)
        || params.min_samples_leaf == 0
    {
        return Err(TrainError::Spec(
            "forest: trees 1-1000, max_depth 1-40, min_samples_leaf at least 1".into(),
        ));
    }
    progress.stage("reading the training rows", None);
    let (data, names) = prepare(spec, csv, folds, true)?;
    let (x, y) = (&data.columns, &data.defaulted);
    let positives = y.iter().filter(|&&d| d).count();
    if positives == 0 || positives == y.len() {
        return Err(TrainError::Fit(format!(
            "the outcome has one class only ({} rows); a default model needs both",
            y.len()
        )));
    }
    progress.stage(
        "fitting forests (all rows, then each fold)",
        Some(folds as u64 + 1),
    );
    let trees = super::forest::fit(x, y, &names, params, seed).map_err(TrainError::Fit)?;
    progress.advance(1);

    let cv_auc = cross_validate(y, folds, seed, |train, test| {
        let xs: Vec<Vec<f64>> = train.iter().map(|&i| x[i].clone()).collect();
        let ys: Vec<bool> = train.iter().map(|&i| y[i]).collect();
        let m = super::forest::fit(&xs, &ys, &names, params, seed).map_err(TrainError::Fit)?;
        progress.advance(1);
        let rows: Vec<&[f64]> = test.iter().map(|&i| x[i].as_slice()).collect();
        Ok(forest_scores(&m, &names, &rows))
    })?;

    progress.stage(
        "reference populations, partial dependence, stability bins, checks",
        None,
    );
    let all: Vec<&[f64]> = x.iter().map(Vec::as_slice).collect();
    let p = forest_scores(&trees, &names, &all);
    let (explanation, mut notes) = reference::explanation(
        &spec.reference,
        &p,
        spec.policy.approve_below,
        |population, label, rows| {
            reference::tree_section(population, label, rows, &data.applicants)
        },
    )?;
    notes.extend(super::monotone::forest_notes(
        &spec.features,
        &names,
        x,
        |rows| forest_scores(&trees, &names, rows),
    ));
    let base_rate = positives as f64 / y.len() as f64;
    let text = assemble(
        spec,
        &data,
        FITTED_ON,
        &format!(
            "plumbline {} train (smartcore 0.4 random forest, covers re-counted)",
            crate::VERSION
        ),
        json!({"kind": "tree_ensemble", "aggregation": "mean_probability", "trees": trees}),
        explanation,
        with_cv(
            json!({
                "rows": y.len(), "base_rate": base_rate, "data_sha256": data.sha256, "seed": seed, "forest": params,
                "method": "smartcore random forest; node covers and leaf default rates re-counted on the training rows",
            }),
            &cv_auc,
        ),
    )?;

    Ok((
        text,
        TrainReport {
            rows: y.len(),
            base_rate,
            cv_auc,
            fit: None,
            columns: names,
            notes,
        },
    ))
}
