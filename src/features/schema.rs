//! The validated, compiled form of the artifact's `features` list.

use crate::reasons::ReasonIndex;
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
    /// Its entry in the reason table (scored fields only).
    pub reason: Option<ReasonIndex>,
    /// Encoded columns of this field: `start..start + width` (empty when not scored).
    pub columns: std::ops::Range<usize>,
}

/// One encoded model column and the field it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// `field` for numbers, counts and booleans; `field=level` for category dummies.
    pub name: String,
    pub field: FieldIndex,
    /// For a category dummy, the level index it indicates.
    pub level: Option<usize>,
}

/// Fields in artifact order and the encoded columns of the scored ones.
#[derive(Debug, Clone, PartialEq)]
pub struct Schema {
    pub fields: Vec<Field>,
    pub columns: Vec<Column>,
}

/// A field's place in the schema (artifact order). Its own type, so that a reason's or a rule's
/// place cannot be used where a field's is meant.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct FieldIndex(usize);

impl FieldIndex {
    /// The field at place `i`; only the schema's builders and tests name places by number.
    pub(crate) fn new(i: usize) -> Self {
        FieldIndex(i)
    }

    /// The place as a number, for per-field arrays and messages.
    pub fn get(self) -> usize {
        self.0
    }
}

impl std::ops::Index<FieldIndex> for Schema {
    type Output = Field;
    fn index(&self, i: FieldIndex) -> &Field {
        &self.fields[i.0]
    }
}

/// An applicant's checked values (one per schema field, in order) are read by field place.
impl std::ops::Index<FieldIndex> for [super::FieldValue] {
    type Output = super::FieldValue;
    fn index(&self, i: FieldIndex) -> &super::FieldValue {
        &self[i.0]
    }
}

impl Schema {
    pub fn field_index(&self, name: &str) -> Option<FieldIndex> {
        self.fields
            .iter()
            .position(|f| f.name == name)
            .map(FieldIndex)
    }

    /// Each field with its place.
    pub fn indexed_fields(&self) -> impl Iterator<Item = (FieldIndex, &Field)> {
        (self.fields.iter().enumerate()).map(|(i, f)| (FieldIndex(i), f))
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
