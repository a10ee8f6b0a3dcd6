//! The identity and reasons sections: ids and versions as tokens, reason codes and their
//! texts (specific, not vague), the review reasons, and every reason a field or rule names.

use super::{fail, Result};
use crate::artifact::spec::*;
use crate::features::Schema;
use crate::reasons::{vague_text, Reason, ReasonTable};

pub(super) fn check_identity(id: &IdentitySpec) -> Result<()> {
    for (name, v) in [
        ("model_id", &id.model_id),
        ("version", &id.version),
        ("created_at", &id.created_at),
        ("producer", &id.producer),
        ("score_provider", &id.score_provider),
    ] {
        if v.trim().is_empty() {
            return fail(
                format!("$.identity.{name}"),
                "required",
                "must not be empty",
            );
        }
    }
    if !is_token(&id.model_id, 64) {
        return fail(
            "$.identity.model_id",
            "token",
            "use 1-64 of a-z, A-Z, 0-9, '-', '_', '.'",
        );
    }
    Ok(())
}

fn is_token(s: &str, max: usize) -> bool {
    !s.is_empty()
        && s.len() <= max
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'))
}

pub(super) fn compile_reasons(specs: &[ReasonSpec]) -> Result<ReasonTable> {
    if specs.is_empty() {
        return fail(
            "$.reasons",
            "required",
            "the reason table must not be empty",
        );
    }
    let mut reasons = Vec::new();
    for (i, r) in specs.iter().enumerate() {
        let at = format!("$.reasons[{i}]");
        if !is_token(&r.code, 16) {
            return fail(
                format!("{at}.code"),
                "token",
                "use 1-16 of a-z, A-Z, 0-9, '-', '_', '.'",
            );
        }
        if reasons.iter().any(|x: &Reason| x.code == r.code) {
            return fail(
                format!("{at}.code"),
                "unique",
                format!("code {} is defined twice", r.code),
            );
        }
        if let Some(why) = vague_text(&r.text) {
            return fail(format!("{at}.text"), "specific", why);
        }
        reasons.push(Reason {
            code: r.code.clone(),
            text: r.text.trim().to_string(),
            inquiry: r.inquiry,
        });
    }
    if reasons.iter().filter(|r| r.inquiry).count() > 1 {
        return fail(
            "$.reasons",
            "inquiry",
            "at most one reason may be marked inquiry",
        );
    }
    Ok(ReasonTable { reasons })
}

/// The manual-review reasons: codes and texts as specific as the model's, no code in both lists.
pub(super) fn compile_review_reasons(
    specs: &[ReasonSpec],
    model: &ReasonTable,
) -> Result<Vec<Reason>> {
    let mut out: Vec<Reason> = Vec::new();
    for (i, r) in specs.iter().enumerate() {
        let at = format!("$.review_reasons[{i}]");
        if !is_token(&r.code, 16) {
            return fail(
                format!("{at}.code"),
                "token",
                "use 1-16 of a-z, A-Z, 0-9, '-', '_', '.'",
            );
        }
        if model.index(&r.code).is_some() || out.iter().any(|x| x.code == r.code) {
            return fail(
                format!("{at}.code"),
                "unique",
                format!(
                    "code {} is defined twice (codes are shared with $.reasons)",
                    r.code
                ),
            );
        }
        if let Some(why) = vague_text(&r.text) {
            return fail(format!("{at}.text"), "specific", why);
        }
        if r.inquiry {
            return fail(
                format!("{at}.inquiry"),
                "inquiry",
                "the inquiries factor is a model reason",
            );
        }
        out.push(Reason {
            code: r.code.clone(),
            text: r.text.trim().to_string(),
            inquiry: false,
        });
    }
    Ok(out)
}

/// Every code is used, and every unscored field is read by some rule.
pub(super) fn check_reason_use(
    spec: &ArtifactSpec,
    schema: &Schema,
    reasons: &ReasonTable,
) -> Result<()> {
    for (place, r) in reasons.indexed() {
        let i = place.get();
        let by_field = schema.fields.iter().any(|f| f.reason == Some(place));
        let by_rule = spec.policy.rules.iter().any(|x| x.code == r.code);
        if !by_field && !by_rule {
            return fail(
                format!("$.reasons[{i}].code"),
                "unused",
                format!("reason code {} is used by no field and no rule", r.code),
            );
        }
    }
    for (i, f) in schema.fields.iter().enumerate() {
        if !f.scored && !spec.policy.rules.iter().any(|r| r.field == f.name) {
            return fail(
                format!("$.features[{i}].scored"),
                "unused",
                format!("field {} is neither scored nor read by a rule", f.name),
            );
        }
    }
    Ok(())
}
