//! The validated, compiled form of the artifact's `features` list.

use serde_json::Value;

/// Kind of an input field, with what the kind needs (levels for categories).
#[derive(Debug, Clone, PartialEq)]
pub enum FieldType {
    Number,
    Count,
    Boolean,
    /// Levels in encoding order and the index of the base (dropped) level.
    Category {
        levels: Vec<String>,
        base: usize,
    },
}

impl FieldType {
    pub fn name(&self) -> &'static str {
        match self {
            FieldType::Number => "number",
            FieldType::Count => "count",
            FieldType::Boolean => "boolean",
            FieldType::Category { .. } => "category",
        }
    }
}

/// What a missing value does, as compiled.
#[derive(Debug, Clone, PartialEq)]
pub enum Missing {
    Reject,
    /// The stated replacement, already checked against the field's type and range.
    Impute(Value),
    TreeDefault,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Field {
    pub name: String,
    pub ty: FieldType,
    pub unit: String,
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub missing: Missing,
    pub scored: bool,
    /// Index into the reason table (scored fields only).
    pub reason: Option<usize>,
    /// Encoded columns of this field: `start..start + width` (empty when not scored).
    pub columns: std::ops::Range<usize>,
}

/// One encoded model column and the field it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// `field` for numbers, counts and booleans; `field=level` for category dummies.
    pub name: String,
    pub field: usize,
    /// For a category dummy, the level index it indicates.
    pub level: Option<usize>,
}

/// Fields in artifact order and the encoded columns of the scored ones.
#[derive(Debug, Clone, PartialEq)]
pub struct Schema {
    pub fields: Vec<Field>,
    pub columns: Vec<Column>,
}

impl Schema {
    pub fn field_index(&self, name: &str) -> Option<usize> {
        self.fields.iter().position(|f| f.name == name)
    }

    pub fn column_index(&self, name: &str) -> Option<usize> {
        self.columns.iter().position(|c| c.name == name)
    }

    /// Encoded column names for a field of this type (empty when not scored).
    pub fn column_names(name: &str, ty: &FieldType) -> Vec<(String, Option<usize>)> {
        match ty {
            FieldType::Category { levels, base } => levels
                .iter()
                .enumerate()
                .filter(|(i, _)| i != base)
                .map(|(i, l)| (format!("{name}={l}"), Some(i)))
                .collect(),
            _ => vec![(name.to_string(), None)],
        }
    }
}
