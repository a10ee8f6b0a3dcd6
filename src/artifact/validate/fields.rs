//! The features section: each field's type, bounds, missing-value treatment and encoding into
//! model columns.

use super::reasons::compile_reasons;
use super::{fail, Result, MAX_COLUMNS};
use crate::artifact::spec::*;
use crate::artifact::ArtifactError;
use crate::features::FieldIndex;
use crate::features::{Column, Field, FieldType, Missing, Schema};
use crate::reasons::ReasonTable;

/// The schema alone (for tools that read data against a model's fields before a model exists).
pub fn schema_from_specs(
    specs: &[FieldSpec],
    reasons: &[ReasonSpec],
    is_trees: bool,
) -> Result<Schema> {
    compile_schema(specs, &compile_reasons(reasons)?, is_trees)
}

pub(super) fn compile_schema(
    specs: &[FieldSpec],
    reasons: &ReasonTable,
    is_trees: bool,
) -> Result<Schema> {
    if specs.is_empty() {
        return fail("$.features", "required", "a model needs at least one field");
    }
    let mut fields: Vec<Field> = Vec::new();
    let mut columns: Vec<Column> = Vec::new();
    for (i, f) in specs.iter().enumerate() {
        let at = format!("$.features[{i}]");
        if !f
            .name
            .chars()
            .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_')
            || f.name.is_empty()
            || f.name.len() > 64
        {
            return fail(format!("{at}.name"), "token", "use 1-64 of a-z, 0-9, '_'");
        }
        if fields.iter().any(|x| x.name == f.name) {
            return fail(
                format!("{at}.name"),
                "unique",
                format!("field {} is defined twice", f.name),
            );
        }
        let ty = field_type(f, &at)?;
        check_bounds(f, &ty, &at)?;
        if f.monotone.is_some() && (f.kind == FieldKind::Category || !f.scored) {
            return fail(
                format!("{at}.monotone"),
                "monotone",
                "a risk direction applies to scored number, count and boolean fields",
            );
        }
        let reason = match (f.scored, &f.reason) {
            (true, None) => {
                return fail(
                    format!("{at}.reason"),
                    "reason_table",
                    "a scored field needs a reason code",
                )
            }
            (true, Some(code)) => Some(reasons.index(code).ok_or_else(|| {
                ArtifactError::new(
                    format!("{at}.reason"),
                    "reason_table",
                    format!("reason code {code} is not in $.reasons"),
                )
            })?),
            (false, Some(_)) => {
                return fail(
                    format!("{at}.reason"),
                    "reason_table",
                    "a field that is not scored has no reason code",
                )
            }
            (false, None) => None,
        };
        let start = columns.len();
        if f.scored {
            for (name, level) in Schema::column_names(&f.name, &ty) {
                columns.push(Column {
                    name,
                    field: FieldIndex::new(i),
                    level,
                });
            }
        }
        let missing = match &f.missing {
            MissingSpec::Reject(_) => Missing::Reject,
            MissingSpec::TreeDefault(_) if !is_trees => {
                return fail(
                    format!("{at}.missing"),
                    "missing_policy",
                    "tree_default needs a tree_ensemble model; use impute or reject",
                )
            }
            MissingSpec::TreeDefault(_) => Missing::TreeDefault,
            MissingSpec::Impute(ImputeSpec { value }) => Missing::Impute(value.clone()),
        };
        fields.push(Field {
            name: f.name.clone(),
            ty,
            unit: f.unit.clone(),
            min: f.min,
            max: f.max,
            missing,
            scored: f.scored,
            reason,
            columns: start..columns.len(),
        });
    }
    let schema = Schema { fields, columns };
    // Imputed values must themselves be valid values of their field.
    for (i, f) in schema.fields.iter().enumerate() {
        if let Missing::Impute(v) = &f.missing {
            if v.is_null() {
                return fail(
                    format!("$.features[{i}].missing.value"),
                    "impute",
                    "the imputed value must not be null",
                );
            }
            schema
                .check_value(FieldIndex::new(i), v)
                .map_err(|(rule, msg)| {
                    ArtifactError::new(format!("$.features[{i}].missing.value"), rule, msg)
                })?;
        }
    }
    if schema.columns.is_empty() {
        return fail("$.features", "required", "no field is scored");
    }
    if schema.columns.len() > MAX_COLUMNS {
        return fail(
            "$.features",
            "size",
            format!(
                "{} encoded columns; at most {MAX_COLUMNS}",
                schema.columns.len()
            ),
        );
    }
    Ok(schema)
}

fn field_type(f: &FieldSpec, at: &str) -> Result<FieldType> {
    match f.kind {
        FieldKind::Category => {
            if f.levels.len() < 2 {
                return fail(
                    format!("{at}.levels"),
                    "levels",
                    "a category needs at least two levels",
                );
            }
            for (j, l) in f.levels.iter().enumerate() {
                if l.is_empty() || f.levels[..j].contains(l) {
                    return fail(
                        format!("{at}.levels[{j}]"),
                        "levels",
                        "levels must be non-empty and distinct",
                    );
                }
            }
            let Some(base) = &f.base_level else {
                return fail(
                    format!("{at}.base_level"),
                    "required",
                    "a category names the base level dropped in n-1 dummy coding",
                );
            };
            let Some(base) = f.levels.iter().position(|l| l == base) else {
                return fail(
                    format!("{at}.base_level"),
                    "levels",
                    format!("base level \"{base}\" is not one of the levels"),
                );
            };
            Ok(FieldType::Category {
                levels: f.levels.clone(),
                base,
            })
        }
        other => {
            if !f.levels.is_empty() {
                return fail(
                    format!("{at}.levels"),
                    "levels",
                    "only category fields have levels",
                );
            }
            if f.base_level.is_some() {
                return fail(
                    format!("{at}.base_level"),
                    "levels",
                    "only category fields have a base level",
                );
            }
            Ok(match other {
                FieldKind::Number => FieldType::Number,
                FieldKind::Count => FieldType::Count,
                _ => FieldType::Boolean,
            })
        }
    }
}

fn check_bounds(f: &FieldSpec, ty: &FieldType, at: &str) -> Result<()> {
    let numeric = matches!(ty, FieldType::Number | FieldType::Count);
    for (name, v) in [("min", f.min), ("max", f.max)] {
        if let Some(v) = v {
            if !numeric {
                return fail(
                    format!("{at}.{name}"),
                    "range",
                    "only number and count fields have a range",
                );
            }
            if !v.is_finite() {
                return fail(format!("{at}.{name}"), "finite", "must be a finite number");
            }
        }
    }
    if *ty == FieldType::Count {
        for (name, v) in [("min", f.min), ("max", f.max)] {
            if v.is_some_and(|v| v.fract() != 0.0) {
                return fail(
                    format!("{at}.{name}"),
                    "integer",
                    "a count field's bounds are whole numbers",
                );
            }
        }
    }
    if let (Some(lo), Some(hi)) = (f.min, f.max) {
        if lo > hi {
            return fail(
                format!("{at}.max"),
                "range",
                format!("max {hi} is below min {lo}"),
            );
        }
    }
    Ok(())
}
