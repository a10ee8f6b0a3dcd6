//! `plumbline inspect`: what a model artifact holds, for a person (text) or a program (JSON).

use super::load;
use crate::artifact::LoadedModel;
use crate::explain::Explainer;
use crate::features::{FieldType, Missing};
use crate::model::Scorer;
use serde_json::json;
use std::fmt::Write;
use std::path::Path;

pub fn run(path: &Path, as_json: bool) -> i32 {
    let model = match load(path) {
        Ok(m) => m,
        Err(code) => return code,
    };
    if as_json {
        if let Err(code) = super::print_pretty(&summary(&model)) {
            return code;
        }
    } else {
        print!("{}", text(&model));
    }
    0
}

/// The name a value has in JSON (snake_case enums, comparison symbols).
fn json_name<T: serde::Serialize>(v: &T) -> String {
    match serde_json::to_value(v) {
        Ok(serde_json::Value::String(s)) => s,
        Ok(other) => other.to_string(),
        Err(_) => String::new(),
    }
}

fn missing_text(m: &Missing) -> String {
    match m {
        Missing::Reject => "required".into(),
        Missing::Impute(v) => format!("impute {v}"),
        Missing::TreeDefault => "tree default side".into(),
    }
}

fn type_text(t: &FieldType) -> String {
    match t {
        FieldType::Category { levels, base } => {
            format!("category [{}], base {}", levels.join(", "), levels[*base])
        }
        other => other.name().into(),
    }
}

/// Trees, depth and leaves, or coefficients.
fn model_lines(model: &LoadedModel) -> Vec<String> {
    match &model.scorer {
        Scorer::Logistic(m) => {
            let mut v = vec![format!("logistic regression, intercept {}", m.intercept)];
            for (c, b) in model.schema.columns.iter().zip(&m.coefficients) {
                v.push(format!("  {:<32} {b:>+14.6e}", c.name));
            }
            v
        }
        Scorer::Graph(g) => {
            let s = &g.summary;
            let ops: Vec<String> = (s.operators.iter())
                .map(|(op, n)| {
                    if *n == 1 {
                        op.clone()
                    } else {
                        format!("{op} x{n}")
                    }
                })
                .collect();
            let mut v = vec![
                format!(
                    "ONNX graph, evaluated (probability from output \"{}\")",
                    s.output
                ),
                format!("  operators: {}", ops.join(", ")),
                format!("  parameters: {}", s.parameters),
            ];
            if let Some(n) = s.support_vectors {
                v.push(format!("  support vectors: {n}"));
            }
            v
        }
        Scorer::Trees(e) => {
            let leaves: usize = e.trees.iter().map(|t| t.leaves()).sum();
            let mean_depth =
                e.trees.iter().map(|t| t.depth).sum::<usize>() as f64 / e.trees.len() as f64;
            vec![
                format!(
                    "tree ensemble, {}, base score {}",
                    json_name(&e.aggregation),
                    e.initial_value
                ),
                format!(
                    "  trees {}, leaves {leaves}, depth max {} mean {mean_depth:.2}",
                    e.trees.len(),
                    e.max_depth()
                ),
            ]
        }
    }
}

fn explain_line(model: &LoadedModel) -> String {
    let space = crate::explain::space_name(model.scorer.space());
    let extra = match &model.explainer {
        Explainer::PathDependent(p) => {
            let (quadrature, per_leaf) = p.algorithm_counts();
            format!(", {quadrature} trees by quadrature, {per_leaf} per leaf")
        }
        Explainer::Interventional(i) => format!(", background of {} rows", i.background_rows()),
        Explainer::Linear(_) => String::new(),
        Explainer::Shapley(e) => {
            let how = match e.mode() {
                crate::explain::shapley::Mode::Exact => {
                    format!("all {} coalitions", 1u64 << e.fields())
                }
                crate::explain::shapley::Mode::Sampled { permutations, seed } => {
                    format!("{permutations} permutations per row (seed {seed}), estimated with standard errors")
                }
            };
            format!(
                ", {} fields, background of {} rows, {how}: {} model evaluations per decision",
                e.fields(),
                e.background_rows(),
                e.evaluations()
            )
        }
    };
    format!(
        "{} against {} \"{}\", base value {} ({space}){extra}",
        json_name(&model.explainer.method()),
        json_name(&model.reference.population),
        model.reference.label,
        model.explainer.base_value()
    )
}

/// Where an imported model came from, from its provenance (`None` for models trained here).
fn import_lines(model: &LoadedModel) -> Option<Vec<String>> {
    let p = model.provenance.as_ref()?;
    let o = p.get("onnx")?;
    let s = |v: &serde_json::Value| v.as_str().unwrap_or("?").to_string();
    let opsets: Vec<String> = (o["opsets"].as_array().into_iter().flatten())
        .map(|x| {
            let d = x["domain"].as_str().unwrap_or("");
            format!(
                "{} {}",
                if d.is_empty() { "ai.onnx" } else { d },
                x["version"]
            )
        })
        .collect();
    let mut opsets = opsets;
    opsets.dedup();
    let mut v = vec![
        format!(
            "ONNX file sha256 {}, written by {} {}",
            s(&o["sha256"]),
            s(&o["producer_name"]),
            s(&o["producer_version"])
        ),
        format!(
            "graph \"{}\", IR version {}, opsets {}",
            s(&o["graph_name"]),
            o["ir_version"],
            opsets.join(", ")
        ),
        if o.get("operator").is_some() {
            format!(
                "operator {} on {} input \"{}\"{}; probability from output \"{}\"",
                s(&o["operator"]),
                s(&o["input_precision"]),
                s(&o["input"]),
                if o["scaler"] == true {
                    " through a Scaler"
                } else {
                    ""
                },
                s(&o["output"])
            )
        } else {
            format!(
                "graph kept whole and evaluated (tract; Scaler, Normalizer, SVMClassifier natively), {} input; probability from output \"{}\"",
                s(&o["input_precision"]),
                s(&o["output"])
            )
        },
    ];
    if let Some(b) = p["background_sha256"].as_str() {
        v.push(format!(
            "explanation background: the --background file, sha256 {b}"
        ));
    }
    if let Some(c) = p["covers"].as_str() {
        v.push(format!(
            "covers: {c} (recounted on the {} reference rows)",
            p["rows"]
        ));
    }
    let metric = |k: &str| {
        p[k].as_f64()
            .map_or("n/a".to_string(), |x| format!("{x:.4}"))
    };
    v.push(format!(
        "on the reference rows: AUC {}, KS {}, Brier {}",
        metric("reference_auc"),
        metric("reference_ks"),
        metric("reference_brier")
    ));
    v.push("an imported model needs its own validation and model-risk review".into());
    Some(v)
}

fn text(model: &LoadedModel) -> String {
    let mut s = String::new();
    let id = &model.identity;
    let _ = writeln!(s, "model      {} version {}", id.model_id, id.version);
    let _ = writeln!(s, "sha256     {}", model.sha256);
    let _ = writeln!(s, "created    {} by {}", id.created_at, id.producer);
    let _ = writeln!(s, "about      {}", id.description);
    let _ = writeln!(
        s,
        "\nfields ({} fields, {} encoded columns)",
        model.schema.fields.len(),
        model.schema.columns.len()
    );
    for f in &model.schema.fields {
        let range = match (f.min, f.max) {
            (None, None) => String::new(),
            (lo, hi) => format!(
                " range [{}, {}]",
                lo.map_or("-".into(), |v| v.to_string()),
                hi.map_or("-".into(), |v| v.to_string())
            ),
        };
        let reason = f.reason.map_or("policy only".to_string(), |r| {
            format!("reason {}", model.reasons[r].code)
        });
        let unit = if f.unit.is_empty() {
            String::new()
        } else {
            format!(" ({})", f.unit)
        };
        let _ = writeln!(
            s,
            "  {}{unit}: {}{range}; missing: {}; {reason}",
            f.name,
            type_text(&f.ty),
            missing_text(&f.missing)
        );
    }
    let _ = writeln!(s, "\nmodel");
    for line in model_lines(model) {
        let _ = writeln!(s, "  {line}");
    }
    if let Some(lines) = import_lines(model) {
        let _ = writeln!(s, "\nimported");
        for line in lines {
            let _ = writeln!(s, "  {line}");
        }
    }
    let _ = writeln!(s, "\nexplanations\n  {}", explain_line(model));
    if let Some(alt) = model.explained_against_alternate() {
        let _ = writeln!(s, "  alternate, for review: {}", explain_line(&alt));
    }
    match &model.stability {
        Some(st) => {
            let _ = writeln!(
                s,
                "\nstability bins: {} fields and the score, from the {} ({} rows)",
                st.fields.len(),
                st.label,
                st.rows
            );
        }
        None => {
            let _ = writeln!(
                s,
                "\nstability bins: none (population stability cannot be checked)"
            );
        }
    }
    let p = &model.policy;
    let sc = &p.scaling;
    let _ = writeln!(s, "\npolicy");
    let _ = writeln!(
        s,
        "  approve when PD < {}; decline when PD >= {}; refer between",
        p.approve_below, p.decline_at_or_above
    );
    let _ = writeln!(
        s,
        "  score = {:.4} + {:.4} * ln(good:bad odds)  ({} points at {}:1, PDO {})",
        sc.offset, sc.factor, sc.points, sc.odds, sc.pdo
    );
    let _ = writeln!(
        s,
        "  at most {} reasons{}",
        p.max_reasons,
        if p.inquiry_extra {
            ", plus an inquiries reason as an extra"
        } else {
            ""
        }
    );
    for r in &p.rules {
        let value = r.given.clone();
        let _ = writeln!(
            s,
            "  rule {}: {} {} {} -> {}",
            model.reasons[r.reason].code,
            model.schema[r.field].name,
            json_name(&r.test),
            value.map_or(String::new(), |v| v.to_string()),
            json_name(&r.action)
        );
    }
    let _ = writeln!(s, "\nreasons");
    for r in &model.reasons.reasons {
        let _ = writeln!(
            s,
            "  {:<8} {}{}",
            r.code,
            r.text,
            if r.inquiry { "  [inquiry]" } else { "" }
        );
    }
    if !model.review_reasons.is_empty() {
        let _ = writeln!(
            s,
            "\nreview reasons (an underwriter's final action on a referral)"
        );
        for r in &model.review_reasons {
            let _ = writeln!(s, "  {:<8} {}", r.code, r.text);
        }
    }
    let _ = writeln!(s, "\nModel output is decision support; the lender remains responsible for ECOA/Regulation B, FCRA and local law.");
    s
}

fn summary(model: &LoadedModel) -> serde_json::Value {
    let id = &model.identity;
    json!({
        "model_id": id.model_id,
        "version": id.version,
        "sha256": model.sha256,
        "created_at": id.created_at,
        "producer": id.producer,
        "fields": model.schema.fields.iter().map(|f| json!({
            "name": f.name, "kind": f.ty.name(), "unit": f.unit, "min": f.min, "max": f.max,
            "missing": missing_text(&f.missing), "scored": f.scored,
            "reason": f.reason.map(|r| model.reasons[r].code.clone()),
            "columns": model.schema.columns[f.columns.clone()].iter().map(|c| c.name.clone()).collect::<Vec<_>>(),
        })).collect::<Vec<_>>(),
        "model": model_lines(model),
        "explanation": explain_line(model),
        "alternate_explanation": model.explained_against_alternate().map(|m| explain_line(&m)),
        "stability": model.stability.as_ref().map(|st| json!({"label": st.label, "rows": st.rows, "fields": st.fields.keys().collect::<Vec<_>>()})),
        "policy": {
            "approve_below": model.policy.approve_below,
            "decline_at_or_above": model.policy.decline_at_or_above,
            "score_factor": model.policy.scaling.factor,
            "score_offset": model.policy.scaling.offset,
            "max_reasons": model.policy.max_reasons,
            "inquiry_extra": model.policy.inquiry_extra,
        },
        "reasons": model.reasons.reasons.iter().map(|r| json!({"code": r.code, "text": r.text, "inquiry": r.inquiry})).collect::<Vec<_>>(),
        "imported": import_lines(model),
        "provenance": model.provenance,
    })
}
