//! The policy section: cutoffs, rules and score scaling.

use super::{fail, Result, MAX_REASONS_LIMIT};
use crate::artifact::spec::*;
use crate::artifact::ArtifactError;
use crate::features::{FieldValue, Schema};
use crate::policy::{Policy, Rule, Scaling};
use crate::reasons::ReasonTable;

pub(super) fn compile_policy(
    spec: &PolicySpec,
    schema: &Schema,
    reasons: &ReasonTable,
) -> Result<Policy> {
    let (a, d) = (spec.approve_below, spec.decline_at_or_above);
    if !(a.is_finite() && a > 0.0 && a <= 1.0) {
        return fail(
            "$.policy.approve_below",
            "cutoff",
            "must be a probability in (0, 1]",
        );
    }
    if !(d.is_finite() && d <= 1.0) || d < a {
        return fail(
            "$.policy.decline_at_or_above",
            "cutoff_order",
            format!("must be a probability at or above approve_below ({a}) and at most 1"),
        );
    }
    let s = &spec.scaling;
    if !(s.pdo.is_finite() && s.pdo > 0.0) {
        return fail(
            "$.policy.scaling.pdo",
            "scaling",
            "points to double the odds must be positive",
        );
    }
    if !(s.odds.is_finite() && s.odds > 0.0) {
        return fail(
            "$.policy.scaling.odds",
            "scaling",
            "good:bad odds must be positive",
        );
    }
    if !s.points.is_finite() {
        return fail(
            "$.policy.scaling.points",
            "finite",
            "must be a finite number",
        );
    }
    // A score disclosure states the range of possible scores (FCRA 15 U.S.C. 1681g(f)(1)(B)).
    for (name, v) in [("min_score", s.min_score), ("max_score", s.max_score)] {
        if v.is_none() {
            return fail(
                format!("$.policy.scaling.{name}"),
                "required",
                "a score disclosure states the range of possible scores (FCRA 1681g(f)(1)(B)): give min_score and max_score",
            );
        }
    }
    for (name, v) in [("min_score", s.min_score), ("max_score", s.max_score)] {
        if v.is_some_and(|v| v.fract() != 0.0 || v.abs() > 1e9) {
            return fail(
                format!("$.policy.scaling.{name}"),
                "integer",
                "scores are whole numbers: give the range's ends as whole numbers",
            );
        }
    }
    if let (Some(lo), Some(hi)) = (s.min_score, s.max_score) {
        if !(lo.is_finite() && hi.is_finite()) || lo >= hi {
            return fail(
                "$.policy.scaling.max_score",
                "range",
                "max_score must be above min_score (a range of one score discloses nothing)",
            );
        }
    }
    if spec.max_reasons == 0 || spec.max_reasons > MAX_REASONS_LIMIT {
        return fail("$.policy.max_reasons", "range", format!("must be 1 to {MAX_REASONS_LIMIT} (Regulation B comment 9(b)(2)-1: more than four are not likely helpful)"));
    }
    let mut rules = Vec::new();
    for (i, r) in spec.rules.iter().enumerate() {
        let at = format!("$.policy.rules[{i}]");
        let reason = reasons.index(&r.code).ok_or_else(|| {
            ArtifactError::new(
                format!("{at}.code"),
                "reason_table",
                format!("reason code {} is not in $.reasons", r.code),
            )
        })?;
        let field = schema.field_index(&r.field).ok_or_else(|| {
            ArtifactError::new(
                format!("{at}.field"),
                "known_field",
                format!("{} is not a field", r.field),
            )
        })?;
        let value = match (r.test, &r.value) {
            (RuleTest::Missing, None) => FieldValue::Missing,
            (RuleTest::Missing, Some(_)) => {
                return fail(
                    format!("{at}.value"),
                    "rule",
                    "a missing test takes no value",
                )
            }
            (_, None) => return fail(format!("{at}.value"), "required", "this test needs a value"),
            (_, Some(v)) => schema
                .check_value(field, v)
                .map_err(|(rule, msg)| ArtifactError::new(format!("{at}.value"), rule, msg))?,
        };
        let ordered = matches!(
            r.test,
            RuleTest::Greater | RuleTest::GreaterOrEqual | RuleTest::Less | RuleTest::LessOrEqual
        );
        if ordered && !matches!(value, FieldValue::Number(_)) {
            return fail(
                format!("{at}.test"),
                "rule",
                "ordering tests need a number or count field",
            );
        }
        rules.push(Rule {
            reason,
            field,
            test: r.test,
            value,
            given: r.value.clone(),
            action: r.action,
        });
    }
    Ok(Policy {
        approve_below: a,
        decline_at_or_above: d,
        scaling: Scaling::new(s.points, s.odds, s.pdo, s.min_score, s.max_score),
        max_reasons: spec.max_reasons,
        inquiry_extra: spec.inquiry_extra,
        rules,
    })
}
