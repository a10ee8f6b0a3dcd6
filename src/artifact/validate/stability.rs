//! The stability section: development-sample bins that later data is compared with.

use super::{fail, Result};
use crate::artifact::spec::{BinnedSpec, FieldKind, FieldSpec, StabilitySpec};

/// Shares (with the missing share) must sum to 1 within this.
const SHARE_SUM_TOLERANCE: f64 = 1e-6;

pub(super) fn check(spec: StabilitySpec, fields: &[FieldSpec]) -> Result<StabilitySpec> {
    let at = "$.stability";
    if spec.label.trim().is_empty() {
        return fail(
            format!("{at}.label"),
            "required",
            "say in words which applicants the shares describe",
        );
    }
    if spec.rows == 0 {
        return fail(format!("{at}.rows"), "positive", "must be at least 1");
    }
    for (name, binned) in &spec.fields {
        let path = format!("{at}.fields.{name}");
        let Some(field) = fields.iter().find(|f| &f.name == name) else {
            return fail(
                path,
                "known_field",
                format!("{name} is not a field of this model"),
            );
        };
        match field.kind {
            FieldKind::Category => check_levels(binned, field, &path)?,
            _ => check_numeric(binned, &path)?,
        }
    }
    check_numeric(&spec.score, &format!("{at}.score"))?;
    Ok(spec)
}

fn check_share(v: f64, path: String) -> Result<()> {
    if !(v.is_finite() && (0.0..=1.0).contains(&v)) {
        return fail(path, "share", "must be a number from 0 to 1");
    }
    Ok(())
}

fn check_sum(total: f64, path: &str) -> Result<()> {
    if (total - 1.0).abs() > SHARE_SUM_TOLERANCE {
        return fail(
            path,
            "shares_sum",
            format!("shares and missing must sum to 1 (within {SHARE_SUM_TOLERANCE}); they sum to {total}"),
        );
    }
    Ok(())
}

fn check_numeric(b: &BinnedSpec, path: &str) -> Result<()> {
    if !b.levels.is_empty() {
        return fail(
            format!("{path}.levels"),
            "kind",
            "levels are for category fields; numeric values use edges and shares",
        );
    }
    for (i, e) in b.edges.iter().enumerate() {
        if !e.is_finite() {
            return fail(
                format!("{path}.edges[{i}]"),
                "finite",
                "must be a finite number",
            );
        }
        if i > 0 && *e <= b.edges[i - 1] {
            return fail(
                format!("{path}.edges[{i}]"),
                "increasing",
                "edges must be strictly increasing",
            );
        }
    }
    if b.shares.len() != b.edges.len() + 1 {
        return fail(
            format!("{path}.shares"),
            "count",
            format!(
                "{} edges make {} bins, but there are {} shares",
                b.edges.len(),
                b.edges.len() + 1,
                b.shares.len()
            ),
        );
    }
    for (i, &s) in b.shares.iter().enumerate() {
        check_share(s, format!("{path}.shares[{i}]"))?;
    }
    check_share(b.missing, format!("{path}.missing"))?;
    check_sum(b.shares.iter().sum::<f64>() + b.missing, path)
}

fn check_levels(b: &BinnedSpec, field: &FieldSpec, path: &str) -> Result<()> {
    if !b.edges.is_empty() || !b.shares.is_empty() {
        return fail(
            path,
            "kind",
            "a category field is binned by its levels, not edges and shares",
        );
    }
    for level in &field.levels {
        let Some(&s) = b.levels.get(level) else {
            return fail(
                format!("{path}.levels"),
                "complete",
                format!("level {level} has no share"),
            );
        };
        check_share(s, format!("{path}.levels.{level}"))?;
    }
    if let Some(extra) = b.levels.keys().find(|l| !field.levels.contains(l)) {
        return fail(
            format!("{path}.levels.{extra}"),
            "known_level",
            format!("{extra} is not a level of {}", field.name),
        );
    }
    check_share(b.missing, format!("{path}.missing"))?;
    check_sum(b.levels.values().sum::<f64>() + b.missing, path)
}
