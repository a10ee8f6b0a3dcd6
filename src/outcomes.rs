//! Loading observed outcomes: a lender's file of which applications went on to default, read
//! row by row (CSV, a JSON array, or JSON lines) and written to the store in groups, so memory
//! holds one group whatever the file's size.
//!
//! Every row is accounted for: stored, a duplicate of what is stored, a conflict with it, an
//! application with no recorded decision, or a bad row named with its field and rule. Rows
//! stored before a fault later in the file stay stored; loading the same file again is safe,
//! since its rows then count as duplicates.

use crate::records::observed::GROUP;
use crate::records::{normalise_time, ObservedOutcome, OutcomeInsert, Store, StoreError};
use serde::Serialize;
use serde_json::Value;
use std::io::Read;

/// Longest application id accepted (as a decision's).
const MAX_APPLICATION_ID: usize = crate::decide::MAX_APPLICATION_ID;
/// Rows named in a summary at most; the rest are counted.
pub const MOST_NAMED: usize = 100;
/// The columns (CSV) or keys (JSON) a row holds.
pub const COLUMNS: [&str; 3] = ["application_id", "defaulted", "observed_at"];

/// How the rows are written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// A header line naming the columns, then one row per line.
    Csv,
    /// One array of objects.
    Json,
    /// One object per line.
    JsonLines,
}

impl Format {
    /// The rule a row that cannot be read breaks.
    pub fn rule(self) -> &'static str {
        match self {
            Format::Csv => "csv",
            Format::Json => "json_array",
            Format::JsonLines => "json_lines",
        }
    }

    /// The format a media type names (`text/csv`, `application/json`, `application/x-ndjson`).
    pub fn from_media_type(media: &str) -> Option<Format> {
        match media.to_ascii_lowercase().as_str() {
            "text/csv" => Some(Format::Csv),
            "application/json" => Some(Format::Json),
            "application/x-ndjson" => Some(Format::JsonLines),
            _ => None,
        }
    }
}

/// A row that was not stored, and why.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct RowNotLoaded {
    /// 1 for the first data row (the CSV header is not counted).
    pub row: u64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub application_id: Option<String>,
    /// The field at fault (bad rows only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub field: Option<String>,
    /// `duplicate`, `conflict`, `unknown_application`, or the rule a bad row broke.
    pub rule: String,
    pub message: String,
}

/// What a load did, row by row counted.
#[derive(Debug, Clone, Default, PartialEq, Serialize, utoipa::ToSchema)]
pub struct LoadSummary {
    pub rows: u64,
    pub stored: u64,
    /// The application already had this very outcome.
    pub duplicates: u64,
    /// The application already had a different outcome, which is kept.
    pub conflicts: u64,
    /// No decision of the application is recorded.
    pub unknown_applications: u64,
    pub bad_rows: u64,
    /// CSV columns other than the three, not read.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub ignored_columns: Vec<String>,
    /// The first rows not stored (duplicates excepted), with why; `more_not_named` counts
    /// the rest.
    pub not_loaded: Vec<RowNotLoaded>,
    pub more_not_named: u64,
}

impl LoadSummary {
    /// Names a row not stored, keeping the first [`MOST_NAMED`] by row (bad rows are named as
    /// read, the others when their group is written, up to a group later).
    fn note(&mut self, r: RowNotLoaded) {
        self.not_loaded.push(r);
        if self.not_loaded.len() > MOST_NAMED {
            let last = (self.not_loaded.iter().enumerate())
                .max_by_key(|(_, n)| n.row)
                .map_or(0, |(i, _)| i);
            self.not_loaded.swap_remove(last);
            self.more_not_named += 1;
        }
    }

    /// The named rows in row order.
    fn in_order(mut self) -> Self {
        self.not_loaded.sort_by_key(|r| r.row);
        self
    }
}

/// Why a load stopped before the end of the file. Rows counted in `so_far` stay as it says.
#[derive(Debug, thiserror::Error)]
pub enum LoadError {
    /// The CSV header cannot be read, lacks a column (`required`) or names one twice (`unique`).
    #[error("{message}")]
    Header { rule: &'static str, message: String },
    /// The text cannot be read as the format at all from this row on.
    #[error("row {row}: {message}")]
    Syntax {
        row: u64,
        message: String,
        so_far: Box<LoadSummary>,
    },
    #[error("{error}")]
    Store {
        error: StoreError,
        so_far: Box<LoadSummary>,
    },
}

/// One row's fields as given, before checking.
struct Given {
    application_id: Option<Value>,
    defaulted: Option<Value>,
    observed_at: Option<Value>,
}

/// The loader: checks rows, groups them, writes each group, counts every answer.
struct Loader<'a> {
    store: &'a dyn Store,
    loaded_by: String,
    loaded_at: String,
    now: String,
    /// The rows queued for the next write, and their row numbers.
    group: Vec<ObservedOutcome>,
    group_rows: Vec<u64>,
    summary: LoadSummary,
    progress: &'a mut dyn FnMut(&LoadSummary),
}

/// A value as a message quotes it: JSON, cut to 64 characters (a row may hold anything).
fn shown(v: &Value) -> String {
    cut(&v.to_string())
}

fn cut(text: &str) -> String {
    match text.char_indices().nth(64) {
        Some((i, _)) => format!("{}...", &text[..i]),
        None => text.to_string(),
    }
}

fn bad(row: u64, id: Option<&str>, field: &str, rule: &str, message: String) -> RowNotLoaded {
    RowNotLoaded {
        row,
        application_id: id.map(|i| i.chars().take(MAX_APPLICATION_ID).collect()),
        field: Some(cut(field)),
        rule: rule.into(),
        message,
    }
}

impl Loader<'_> {
    /// Checks a row and queues it, writing the group when it is full.
    fn row(&mut self, row: u64, given: Given) -> Result<(), StoreError> {
        self.summary.rows += 1;
        match self.check(row, given) {
            Ok(outcome) => {
                self.group.push(outcome);
                self.group_rows.push(row);
                if self.group.len() >= GROUP {
                    self.flush()?;
                }
            }
            Err(problem) => {
                self.summary.bad_rows += 1;
                self.summary.note(problem);
            }
        }
        Ok(())
    }

    fn check(&self, row: u64, given: Given) -> Result<ObservedOutcome, RowNotLoaded> {
        let id = match given.application_id {
            Some(Value::String(s)) if !s.is_empty() && s.chars().count() <= MAX_APPLICATION_ID => s,
            Some(Value::String(s)) if s.is_empty() => {
                return Err(bad(
                    row,
                    None,
                    "application_id",
                    "required",
                    "is empty".into(),
                ))
            }
            Some(Value::String(_)) => {
                return Err(bad(
                    row,
                    None,
                    "application_id",
                    "max_length",
                    format!("is longer than {MAX_APPLICATION_ID} characters"),
                ))
            }
            None | Some(Value::Null) => {
                return Err(bad(
                    row,
                    None,
                    "application_id",
                    "required",
                    "is missing".into(),
                ))
            }
            Some(v) => {
                return Err(bad(
                    row,
                    None,
                    "application_id",
                    "type",
                    format!("expected a string, got {}", shown(&v)),
                ))
            }
        };
        let defaulted = match &given.defaulted {
            Some(Value::Bool(b)) => *b,
            Some(Value::Number(n)) if n.as_u64() == Some(0) => false,
            Some(Value::Number(n)) if n.as_u64() == Some(1) => true,
            Some(Value::String(s)) if s.trim() == "0" => false,
            Some(Value::String(s)) if s.trim() == "1" => true,
            None | Some(Value::Null) => {
                return Err(bad(
                    row,
                    Some(&id),
                    "defaulted",
                    "required",
                    "is missing".into(),
                ))
            }
            Some(v) => {
                return Err(bad(
                    row,
                    Some(&id),
                    "defaulted",
                    "zero_or_one",
                    format!("{} is not 0 (did not default) or 1 (defaulted)", shown(v)),
                ))
            }
        };
        let observed_at = match &given.observed_at {
            Some(Value::String(s)) => normalise_time(s.trim(), false).map_err(|_| {
                bad(row, Some(&id), "observed_at", "rfc3339", format!("{} is not an RFC 3339 UTC time (2027-06-30T00:00:00Z) or a date (2027-06-30)", shown(&Value::String(s.clone()))))
            })?,
            None | Some(Value::Null) => {
                return Err(bad(row, Some(&id), "observed_at", "required", "is missing".into()))
            }
            Some(v) => {
                return Err(bad(row, Some(&id), "observed_at", "type", format!("expected a time as text, got {}", shown(v))))
            }
        };
        if observed_at > self.now {
            return Err(bad(
                row,
                Some(&id),
                "observed_at",
                "not_future",
                format!("{observed_at} is later than now"),
            ));
        }
        Ok(ObservedOutcome {
            application_id: id,
            defaulted,
            observed_at,
            loaded_at: self.loaded_at.clone(),
            loaded_by: self.loaded_by.clone(),
        })
    }

    /// Writes the queued group and counts its answers.
    fn flush(&mut self) -> Result<(), StoreError> {
        if self.group.is_empty() {
            return Ok(());
        }
        let answers = match self.store.insert_outcomes(&self.group) {
            Ok(a) => a,
            Err(e) => {
                // Not written: the summary counts only the rows it can account for.
                self.summary.rows -= self.group.len() as u64;
                self.group.clear();
                self.group_rows.clear();
                return Err(e);
            }
        };
        let rows = self.group_rows.drain(..);
        for ((row, o), answer) in rows.zip(self.group.drain(..)).zip(answers) {
            let s = &mut self.summary;
            let (rule, message) = match answer {
                OutcomeInsert::Inserted => {
                    s.stored += 1;
                    continue;
                }
                OutcomeInsert::Duplicate => {
                    s.duplicates += 1;
                    continue;
                }
                OutcomeInsert::Conflict {
                    defaulted,
                    observed_at,
                } => {
                    s.conflicts += 1;
                    ("conflict", format!("the application already has an outcome (defaulted {}, observed {observed_at}), which is kept", u8::from(defaulted)))
                }
                OutcomeInsert::UnknownApplication => {
                    s.unknown_applications += 1;
                    (
                        "unknown_application",
                        "no decision of this application is recorded".to_string(),
                    )
                }
            };
            s.note(RowNotLoaded {
                row,
                application_id: Some(o.application_id),
                field: None,
                rule: rule.into(),
                message,
            });
        }
        (self.progress)(&self.summary);
        Ok(())
    }

    fn stopped(&mut self, error: StoreError) -> LoadError {
        LoadError::Store {
            error,
            so_far: Box::new(std::mem::take(&mut self.summary).in_order()),
        }
    }

    fn syntax(&mut self, row: u64, message: String) -> LoadError {
        // What was checked before the fault is still written.
        if let Err(e) = self.flush() {
            return self.stopped(e);
        }
        LoadError::Syntax {
            row,
            message,
            so_far: Box::new(std::mem::take(&mut self.summary).in_order()),
        }
    }
}

/// Loads the rows `reader` holds in `format` into `store`, as `loaded_by`; `progress` sees the
/// summary after each group written.
pub fn load(
    reader: &mut dyn Read,
    format: Format,
    store: &dyn Store,
    loaded_by: &str,
    progress: &mut dyn FnMut(&LoadSummary),
) -> Result<LoadSummary, LoadError> {
    let now = crate::records::now();
    let mut loader = Loader {
        store,
        loaded_by: loaded_by.into(),
        loaded_at: now.clone(),
        now,
        group: Vec::with_capacity(GROUP),
        group_rows: Vec::with_capacity(GROUP),
        summary: LoadSummary::default(),
        progress,
    };
    match format {
        Format::Csv => load_csv(reader, &mut loader)?,
        Format::Json => load_json_array(reader, &mut loader)?,
        Format::JsonLines => load_json_lines(reader, &mut loader)?,
    }
    if let Err(e) = loader.flush() {
        return Err(loader.stopped(e));
    }
    Ok(loader.summary.in_order())
}

fn load_csv(reader: &mut dyn Read, loader: &mut Loader<'_>) -> Result<(), LoadError> {
    // Flexible: a row with too few or too many cells is a bad row of its own, not the end; read
    // as bytes, so a cell that is not UTF-8 is a bad row too.
    let mut csv = csv::ReaderBuilder::new().flexible(true).from_reader(reader);
    let header = |rule, message| LoadError::Header { rule, message };
    let names: Vec<String> = csv
        .headers()
        .map_err(|e| header("csv", format!("the header line cannot be read: {e}")))?
        .iter()
        .map(|h| h.trim().trim_start_matches('\u{feff}').to_string())
        .collect();
    let mut at = [0usize; 3];
    for (k, column) in COLUMNS.iter().enumerate() {
        let found: Vec<usize> = (0..names.len()).filter(|&i| names[i] == *column).collect();
        match found[..] {
            [i] => at[k] = i,
            [] => {
                let need = COLUMNS.join(", ");
                let why = format!("the header lacks the column `{column}` (it needs {need})");
                return Err(header("required", why));
            }
            _ => {
                let why = format!("the header names `{column}` more than once");
                return Err(header("unique", why));
            }
        }
    }
    loader.summary.ignored_columns = (names.iter())
        .filter(|n| !COLUMNS.contains(&n.as_str()))
        .cloned()
        .collect();
    let mut record = csv::ByteRecord::new();
    let mut row = 0u64;
    loop {
        row += 1;
        match csv.read_byte_record(&mut record) {
            Ok(false) => return Ok(()),
            Ok(true) => {}
            Err(e) => return Err(loader.syntax(row, format!("cannot be read as CSV: {e}"))),
        }
        let text = |k: usize| record.get(at[k]).map(|c| std::str::from_utf8(c));
        let id = text(0).and_then(Result::ok).filter(|c| !c.is_empty());
        let fault = if record.len() != names.len() {
            let message = format!(
                "has {} cells where the header names {}",
                record.len(),
                names.len()
            );
            Some(bad(row, id, "row", "cells", message))
        } else {
            (0..3)
                .find(|&k| matches!(text(k), Some(Err(_))))
                .map(|k| bad(row, id, COLUMNS[k], "utf8", "is not UTF-8 text".into()))
        };
        if let Some(fault) = fault {
            loader.summary.rows += 1;
            loader.summary.bad_rows += 1;
            loader.summary.note(fault);
            continue;
        }
        let cell = |k: usize| {
            (text(k).and_then(Result::ok))
                .filter(|c| !c.trim().is_empty())
                .map(|c| Value::String(c.to_string()))
        };
        let given = Given {
            application_id: text(0)
                .and_then(Result::ok)
                .map(|c| Value::String(c.to_string())),
            defaulted: cell(1),
            observed_at: cell(2),
        };
        if let Err(e) = loader.row(row, given) {
            return Err(loader.stopped(e));
        }
    }
}

/// One row of a JSON body: an object with the three keys (others are refused by name).
fn given_of(row: u64, value: Value) -> Result<Given, RowNotLoaded> {
    let Value::Object(mut map) = value else {
        return Err(RowNotLoaded {
            row,
            application_id: None,
            field: None,
            rule: "type".into(),
            message: format!(
                "expected an object with {}, got {}",
                COLUMNS.join(", "),
                shown(&value)
            ),
        });
    };
    if let Some(other) = map.keys().find(|k| !COLUMNS.contains(&k.as_str())) {
        return Err(bad(
            row,
            map.get("application_id").and_then(Value::as_str),
            other,
            "unknown_field",
            format!("is not one of {}", COLUMNS.join(", ")),
        ));
    }
    Ok(Given {
        application_id: map.remove("application_id"),
        defaulted: map.remove("defaulted"),
        observed_at: map.remove("observed_at"),
    })
}

fn json_row(loader: &mut Loader<'_>, row: u64, value: Value) -> Result<(), StoreError> {
    match given_of(row, value) {
        Ok(given) => loader.row(row, given),
        Err(problem) => {
            loader.summary.rows += 1;
            loader.summary.bad_rows += 1;
            loader.summary.note(problem);
            Ok(())
        }
    }
}

fn load_json_lines(reader: &mut dyn Read, loader: &mut Loader<'_>) -> Result<(), LoadError> {
    let values =
        serde_json::Deserializer::from_reader(std::io::BufReader::new(reader)).into_iter::<Value>();
    for (i, value) in values.enumerate() {
        let row = i as u64 + 1;
        let value = value.map_err(|e| loader.syntax(row, format!("is not JSON: {e}")))?;
        if let Err(e) = json_row(loader, row, value) {
            return Err(loader.stopped(e));
        }
    }
    Ok(())
}

/// Reads the array element by element, each handed to the loader as it is parsed.
struct Rows<'l, 'a> {
    loader: &'l mut Loader<'a>,
    failed: Option<StoreError>,
    row: u64,
}

impl<'de> serde::de::Visitor<'de> for &mut Rows<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        write!(f, "an array of outcome objects")
    }

    fn visit_seq<A: serde::de::SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        while let Some(value) = seq.next_element::<Value>()? {
            self.row += 1;
            if let Err(e) = json_row(self.loader, self.row, value) {
                self.failed = Some(e);
                return Err(serde::de::Error::custom("the store failed"));
            }
        }
        Ok(())
    }
}

fn load_json_array(reader: &mut dyn Read, loader: &mut Loader<'_>) -> Result<(), LoadError> {
    let mut de = serde_json::Deserializer::from_reader(std::io::BufReader::new(reader));
    let mut rows = Rows {
        loader,
        failed: None,
        row: 0,
    };
    let read = serde::Deserializer::deserialize_seq(&mut de, &mut rows).and_then(|()| de.end());
    if let Some(e) = rows.failed.take() {
        return Err(rows.loader.stopped(e));
    }
    let row = rows.row + 1;
    read.map_err(|e| {
        rows.loader
            .syntax(row, format!("is not part of a JSON array of objects: {e}"))
    })
}
