//! The explanation section: the reference population(s) contributions are measured from,
//! compiled into explainers. Paths are parameterised so the alternate population's errors
//! name `$.explanation.alternate...`.

use super::{fail, Result, MAX_BACKGROUND_ROWS};
use crate::artifact::spec::{ExplainMethod, ExplanationSpec};
use crate::artifact::{AlternateReference, ArtifactError};
use crate::explain::{Explainer, InterventionalExplainer, LinearExplainer, PathExplainer};
use crate::features::Schema;
use crate::model::{sigmoid, Scorer};
use crate::policy::Policy;

/// The primary explainer with its encoded background, and the alternate population if any.
pub(super) type Compiled = (Explainer, Vec<Vec<f64>>, Option<AlternateReference>);

pub(super) fn compile(
    spec: &ExplanationSpec,
    schema: &Schema,
    scorer: &Scorer,
    policy: &Policy,
) -> Result<Compiled> {
    let at = "$.explanation";
    let (explainer, background) = compile_one(spec, at, schema, scorer)?;
    check_base_below_decline(scorer, &explainer, policy, at)?;
    let alternate = match &spec.alternate {
        None => None,
        Some(alt) => {
            let at = "$.explanation.alternate";
            if alt.alternate.is_some() {
                return fail(
                    format!("{at}.alternate"),
                    "nesting",
                    "an artifact carries at most one alternate reference population",
                );
            }
            if alt.reference.population == spec.reference.population {
                return fail(
                    format!("{at}.reference.population"),
                    "distinct",
                    "the alternate population must differ from the primary one",
                );
            }
            let (explainer, background) = compile_one(alt, at, schema, scorer)?;
            check_base_below_decline(scorer, &explainer, policy, at)?;
            Some(AlternateReference {
                reference: alt.reference.clone(),
                explainer,
                background,
            })
        }
    };
    Ok((explainer, background, alternate))
}

fn compile_one(
    spec: &ExplanationSpec,
    at: &str,
    schema: &Schema,
    scorer: &Scorer,
) -> Result<(Explainer, Vec<Vec<f64>>)> {
    if spec.reference.label.trim().is_empty() {
        return fail(
            format!("{at}.reference.label"),
            "required",
            "say in words which applicants the reference population holds",
        );
    }
    if spec.background.len() > MAX_BACKGROUND_ROWS {
        return fail(
            format!("{at}.background"),
            "size",
            format!("at most {MAX_BACKGROUND_ROWS} rows"),
        );
    }
    let background = spec
        .background
        .iter()
        .enumerate()
        .map(|(i, row)| {
            let path = format!("{at}.background[{i}]");
            schema
                .check_and_encode(&serde_json::Value::Object(row.clone()), &path)
                .map(|e| e.columns)
                .map_err(|e| {
                    let first = &e.errors[0];
                    ArtifactError::new(first.field.clone(), first.rule, first.message.clone())
                })
        })
        .collect::<Result<Vec<_>>>()?;
    if spec.method != ExplainMethod::ShapleySampled {
        for (key, present) in [
            ("samples", spec.samples.is_some()),
            ("seed", spec.seed.is_some()),
        ] {
            if present {
                return fail(
                    format!("{at}.{key}"),
                    "method",
                    "only shapley_sampled takes samples and a seed",
                );
            }
        }
    }
    if spec.mean.is_some() && !matches!(scorer, Scorer::Logistic(_)) {
        return fail(format!("{at}.mean"), "method", "a reference mean is used only by linear explanations; tree explanations use covers or the background");
    }
    let explainer = match (scorer, spec.method) {
        (Scorer::Logistic(m), ExplainMethod::Linear) => {
            let reference = match (&spec.mean, background.is_empty()) {
                (Some(mean), _) => {
                    let mut r = vec![f64::NAN; schema.columns.len()];
                    for (name, &v) in mean {
                        let at = format!("{at}.mean.{name}");
                        let c = schema.column_index(name).ok_or_else(|| {
                            ArtifactError::new(
                                &at,
                                "known_column",
                                format!("{name} is not an encoded column"),
                            )
                        })?;
                        if !v.is_finite() {
                            return fail(at, "finite", "must be a finite number");
                        }
                        r[c] = v;
                    }
                    if let Some(c) = r.iter().position(|v| v.is_nan()) {
                        return fail(
                            format!("{at}.mean"),
                            "complete",
                            format!("column {} has no reference mean", schema.columns[c].name),
                        );
                    }
                    r
                }
                (None, false) => (0..schema.columns.len())
                    .map(|c| background.iter().map(|b| b[c]).sum::<f64>() / background.len() as f64)
                    .collect(),
                (None, true) => {
                    return fail(
                        format!("{at}.mean"),
                        "required",
                        "a linear explanation needs the reference mean or a background sample",
                    )
                }
            };
            Ok(Explainer::Linear(LinearExplainer::new(m, reference)))
        }
        (Scorer::Trees(e), ExplainMethod::TreeCoverWeighted) => {
            Ok(Explainer::PathDependent(PathExplainer::new(e)))
        }
        (Scorer::Trees(e), ExplainMethod::TreeInterventional) => {
            if background.is_empty() {
                return fail(
                    format!("{at}.background"),
                    "required",
                    "interventional explanations need a background sample",
                );
            }
            Ok(Explainer::Interventional(InterventionalExplainer::new(
                e,
                &background,
            )))
        }
        (Scorer::Graph(g), ExplainMethod::ShapleyInterventional | ExplainMethod::ShapleySampled) => {
            shapley(spec, at, schema, g, &background)
        }
        (Scorer::Graph(_), _) => fail(
            format!("{at}.method"),
            "method",
            "a graph model is explained by shapley_interventional or shapley_sampled",
        ),
        (_, ExplainMethod::ShapleyInterventional | ExplainMethod::ShapleySampled) => fail(
            format!("{at}.method"),
            "method",
            "Shapley enumeration is for graph models; logistic and tree models have exact methods of their own",
        ),
        (Scorer::Logistic(_), _) => fail(
            format!("{at}.method"),
            "method",
            "a logistic model is explained by the linear method",
        ),
        (Scorer::Trees(_), _) => fail(
            format!("{at}.method"),
            "method",
            "a tree ensemble is explained by tree_cover_weighted or tree_interventional",
        ),
    };
    explainer.map(|e| (e, background))
}

/// Exact or sampled Shapley values of a graph model, within the per-decision budget.
fn shapley(
    spec: &ExplanationSpec,
    at: &str,
    schema: &Schema,
    model: &std::sync::Arc<crate::model::graph::GraphModel>,
    background: &[Vec<f64>],
) -> Result<Explainer> {
    use crate::explain::shapley::{self, Mode, MAX_EVALUATIONS, MAX_EXACT_FIELDS};
    if background.is_empty() {
        return fail(
            format!("{at}.background"),
            "required",
            "Shapley explanations need a background sample",
        );
    }
    let groups: Vec<_> = (schema.fields.iter())
        .filter(|f| f.scored)
        .map(|f| f.columns.clone())
        .collect();
    let mode = match spec.method {
        ExplainMethod::ShapleyInterventional => {
            if groups.len() > MAX_EXACT_FIELDS {
                return fail(
                    format!("{at}.method"),
                    "budget",
                    format!("exact enumeration serves at most {MAX_EXACT_FIELDS} fields; this model scores {}; use shapley_sampled", groups.len()),
                );
            }
            Mode::Exact
        }
        _ => {
            let Some(permutations) = spec.samples.filter(|&k| k >= 2) else {
                return fail(
                    format!("{at}.samples"),
                    "required",
                    "shapley_sampled needs samples: permutations per background row, at least 2",
                );
            };
            let Some(seed) = spec.seed else {
                return fail(
                    format!("{at}.seed"),
                    "required",
                    "shapley_sampled needs a seed, so every decision is reproducible",
                );
            };
            Mode::Sampled { permutations, seed }
        }
    };
    let cost = shapley::evaluations(groups.len(), background.len(), &mode);
    if cost > MAX_EVALUATIONS {
        return fail(
            format!("{at}.background"),
            "budget",
            format!(
                "{cost} model evaluations per decision ({} fields, {} background rows); at most {MAX_EVALUATIONS}: use fewer rows{}",
                groups.len(),
                background.len(),
                if mode == Mode::Exact { ", or shapley_sampled" } else { " or samples" }
            ),
        );
    }
    let explainer = crate::explain::ShapleyExplainer::new(model.clone(), background, groups, mode)
        .map_err(|e| ArtifactError::new(format!("{at}.background"), "onnx", e))?;
    Ok(Explainer::Shapley(explainer))
}

/// A declined applicant must have at least one adverse contribution, which holds when the
/// reference population itself scores below the decline cutoff.
fn check_base_below_decline(
    scorer: &Scorer,
    explainer: &Explainer,
    policy: &Policy,
    at: &str,
) -> Result<()> {
    let base = explainer.base_value();
    if !base.is_finite() {
        return fail(format!("{at}.reference"), "finite", format!("the reference population's model output is not finite ({base}); check coefficients and reference values"));
    }
    let p = match scorer.space() {
        crate::model::Space::LogOdds => sigmoid(base),
        crate::model::Space::Probability => base,
    };
    if p >= policy.decline_at_or_above {
        return fail(
            format!("{at}.reference"),
            "reference_below_decline",
            format!("the reference population's probability of default ({p:.6}) is at or above the decline cutoff, so a declined applicant could be given no reasons"),
        );
    }
    Ok(())
}
