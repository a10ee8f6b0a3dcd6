//! Group membership uploads: one label per application, or probabilities over several groups
//! (proxy methods such as BISG give these). Probabilities are carried as exact integers in
//! billionths, so the four-fifths comparison is exact arithmetic on the counts. Protected
//! attributes live only here, in memory, for one report; they are never model inputs and never
//! written into decision records.

/// One whole membership, in billionths.
pub const WHOLE: u64 = 1_000_000_000;
/// Default tolerance for probabilities summing to 1.
pub const SUM_TOLERANCE: f64 = 0.001;
/// Most groups in one dimension.
pub const MAX_GROUPS: usize = 64;

#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Kind {
    Labels,
    Probabilities,
}

impl Kind {
    pub fn name(self) -> &'static str {
        match self {
            Kind::Labels => "labels",
            Kind::Probabilities => "probabilities",
        }
    }
}

/// One group dimension (e.g. race and ethnicity, or sex): its groups and each application's
/// membership weights.
#[derive(Debug, Clone)]
pub struct Dimension {
    pub name: String,
    pub kind: Kind,
    pub groups: Vec<String>,
    pub members: Members,
}

/// Each application's membership weights (group index, billionths), held compactly because an
/// upload may hold millions of rows: the ids in one text, the weights in flat lists, found by
/// binary search over an index sorted by id. A label row costs its id's bytes and ten more.
#[derive(Debug, Clone)]
pub struct Members {
    ids: String,
    /// Where each member's id ends in `ids`.
    ends: Vec<u32>,
    weights: Weights,
    /// Member indices ordered by id (built by `seal`).
    by_id: Vec<u32>,
}

#[derive(Debug, Clone)]
enum Weights {
    /// One whole membership per application: its group.
    Labels(Vec<u16>),
    /// Where each member's shares end in `shares`, and (group, billionths) pairs.
    Shares {
        ends: Vec<u32>,
        shares: Vec<(u16, u32)>,
    },
}

impl Members {
    fn new(kind: Kind) -> Self {
        Members {
            ids: String::new(),
            ends: Vec::new(),
            weights: match kind {
                Kind::Labels => Weights::Labels(Vec::new()),
                Kind::Probabilities => Weights::Shares {
                    ends: Vec::new(),
                    shares: Vec::new(),
                },
            },
            by_id: Vec::new(),
        }
    }

    /// Members from (application id, weights) pairs, as a caller that already holds them
    /// would give them; `Err` names an id given twice.
    pub fn from_pairs<S: AsRef<str>>(
        kind: Kind,
        pairs: impl IntoIterator<Item = (S, Vec<(u16, u64)>)>,
    ) -> Result<Members, String> {
        let mut m = Members::new(kind);
        for (id, weights) in pairs {
            m.push(id.as_ref(), &weights)?;
        }
        match m.seal() {
            Some(row) => Err(format!("application {} is given twice", m.id(row - 1))),
            None => Ok(m),
        }
    }

    pub fn len(&self) -> usize {
        self.ends.len()
    }

    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }

    /// The application id of member `i` (upload order).
    pub fn id(&self, i: usize) -> &str {
        let start = if i == 0 { 0 } else { self.ends[i - 1] as usize };
        &self.ids[start..self.ends[i] as usize]
    }

    /// Member `i`'s weights: (group index, billionths), groups with no share left out.
    pub fn weights(&self, i: usize) -> impl Iterator<Item = (u16, u64)> + '_ {
        let (label, shares) = match &self.weights {
            Weights::Labels(groups) => (Some((groups[i], WHOLE)), &[][..]),
            Weights::Shares { ends, shares } => {
                let start = if i == 0 { 0 } else { ends[i - 1] as usize };
                (None, &shares[start..ends[i] as usize])
            }
        };
        (label.into_iter()).chain(shares.iter().map(|&(g, w)| (g, u64::from(w))))
    }

    /// The member whose application id is `id`.
    pub fn find(&self, id: &str) -> Option<usize> {
        (self
            .by_id
            .binary_search_by(|&i| self.id(i as usize).cmp(id)))
        .ok()
        .map(|k| self.by_id[k] as usize)
    }

    fn push(&mut self, id: &str, weights: &[(u16, u64)]) -> Result<(), String> {
        let too_big = |_| "the upload holds more application-id text than 4 GiB".to_string();
        self.ids.push_str(id);
        self.ends
            .push(u32::try_from(self.ids.len()).map_err(too_big)?);
        match &mut self.weights {
            Weights::Labels(groups) => groups.push(weights.first().map_or(0, |w| w.0)),
            Weights::Shares { ends, shares } => {
                // Billionths of at most one whole fit in 32 bits.
                shares.extend(weights.iter().map(|&(g, w)| (g, w.min(WHOLE) as u32)));
                ends.push(u32::try_from(shares.len()).map_err(too_big)?);
            }
        }
        Ok(())
    }

    /// Builds the id index and frees the lists' spare room; the first row (from 1) whose id an
    /// earlier row already holds, if any.
    fn seal(&mut self) -> Option<usize> {
        self.ids.shrink_to_fit();
        self.ends.shrink_to_fit();
        match &mut self.weights {
            Weights::Labels(g) => g.shrink_to_fit(),
            Weights::Shares { ends, shares } => {
                ends.shrink_to_fit();
                shares.shrink_to_fit();
            }
        }
        let mut by_id: Vec<u32> = (0..self.len() as u32).collect();
        // Stable: among equal ids the earlier row comes first.
        by_id.sort_by(|&a, &b| self.id(a as usize).cmp(self.id(b as usize)));
        let repeat = (by_id.windows(2))
            .filter(|w| self.id(w[0] as usize) == self.id(w[1] as usize))
            .map(|w| w[1] as usize + 1)
            .min();
        self.by_id = by_id;
        repeat
    }
}

/// A problem with the upload: where (dimension and row numbered from 1, and the field), which
/// rule.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}{}{field}: {message} [{rule}]", dimension.map(|d| format!("dimension {}, ", d + 1)).unwrap_or_default(), row.map(|r| format!("row {r}, ")).unwrap_or_default())]
pub struct UploadError {
    /// The JSON upload's dimension (from 0); `None` for a CSV upload.
    pub dimension: Option<usize>,
    pub row: Option<usize>,
    pub field: String,
    pub rule: &'static str,
    pub message: String,
}

fn err(
    row: Option<usize>,
    field: &str,
    rule: &'static str,
    message: impl Into<String>,
) -> UploadError {
    UploadError {
        dimension: None,
        row,
        field: field.to_string(),
        rule,
        message: message.into(),
    }
}

/// A decimal text as exact billionths (at most 9 decimals).
fn billionths(text: &str) -> Option<u64> {
    let (whole, frac) = text.trim().split_once('.').unwrap_or((text.trim(), ""));
    if whole.is_empty() && frac.is_empty()
        || frac.len() > 9
        || !frac.chars().all(|c| c.is_ascii_digit())
    {
        return None;
    }
    let whole: u64 = if whole.is_empty() {
        0
    } else {
        whole.parse().ok()?
    };
    let frac: u64 = if frac.is_empty() {
        0
    } else {
        format!("{frac:0<9}").parse().ok()?
    };
    whole.checked_mul(WHOLE)?.checked_add(frac)
}

/// A JSON number as billionths (rounded to the nearest; decimal inputs of up to 9 places are exact).
fn billionths_of(v: f64) -> Option<u64> {
    (v.is_finite() && (0.0..=1.0 + 1e-9).contains(&v)).then(|| (v * WHOLE as f64).round() as u64)
}

#[derive(Debug)]
struct Builder {
    dim: Dimension,
}

impl Builder {
    fn new(name: &str, kind: Kind) -> Self {
        Builder {
            dim: Dimension {
                name: name.to_string(),
                kind,
                groups: Vec::new(),
                members: Members::new(kind),
            },
        }
    }

    fn group(&mut self, name: &str, row: usize) -> Result<u16, UploadError> {
        if let Some(i) = self.dim.groups.iter().position(|g| g == name) {
            return Ok(i as u16);
        }
        if name.trim().is_empty() || name.chars().count() > 64 {
            return Err(err(
                Some(row),
                "group",
                "group_name",
                "a group name is 1-64 characters",
            ));
        }
        if self.dim.groups.len() >= MAX_GROUPS {
            return Err(err(
                Some(row),
                "group",
                "max_groups",
                format!("at most {MAX_GROUPS} groups per dimension"),
            ));
        }
        self.dim.groups.push(name.to_string());
        Ok((self.dim.groups.len() - 1) as u16)
    }

    fn add(&mut self, row: usize, id: &str, weights: &[(u16, u64)]) -> Result<(), UploadError> {
        if id.trim().is_empty() {
            return Err(err(
                Some(row),
                "application_id",
                "required",
                "every row needs an application id",
            ));
        }
        (self.dim.members.push(id, weights)).map_err(|m| err(Some(row), "row", "size", m))
    }

    /// Checks what needs every row (probabilities summing to one, ids appearing once).
    fn finish(mut self, tolerance: f64) -> Result<Dimension, UploadError> {
        if self.dim.members.is_empty() {
            return Err(err(
                None,
                &self.dim.name,
                "not_empty",
                "the upload holds no memberships",
            ));
        }
        if self.dim.kind == Kind::Probabilities {
            for i in 0..self.dim.members.len() {
                let sum: u64 = self.dim.members.weights(i).map(|w| w.1).sum();
                let off = (sum as f64 - WHOLE as f64).abs() / WHOLE as f64;
                if off > tolerance {
                    return Err(err(
                        Some(i + 1),
                        "probabilities",
                        "sum_to_one",
                        format!(
                            "the probabilities sum to {}, not 1 (tolerance {tolerance})",
                            sum as f64 / WHOLE as f64,
                        ),
                    ));
                }
            }
        }
        if let Some(row) = self.dim.members.seal() {
            let id = self.dim.members.id(row - 1).to_string();
            return Err(err(
                Some(row),
                "application_id",
                "unique",
                format!(
                    "application {id} appears twice in dimension {}",
                    self.dim.name
                ),
            ));
        }
        Ok(self.dim)
    }
}

/// A CSV upload for one dimension: `application_id,group` (labels) or `application_id,G1,G2,...`
/// (probabilities per group, summing to 1 within `tolerance`).
pub fn from_csv(text: &str, dimension: &str, tolerance: f64) -> Result<Dimension, UploadError> {
    let table = crate::tabular::read(text).map_err(|e| match e.row {
        None if e.message == "the file is empty" => {
            err(None, "file", "not_empty", "the upload is empty")
        }
        row => err(row, "file", "csv", e.message),
    })?;
    let owned_header = table.header.clone();
    let header: Vec<&str> = owned_header.iter().map(String::as_str).collect();
    if header.first() != Some(&"application_id") || header.len() < 2 {
        return Err(err(
            None,
            "header",
            "columns",
            "the header must be application_id,group or application_id,<group>,<group>,...",
        ));
    }
    let labels = header.len() == 2 && header[1] == "group";
    let mut b = Builder::new(
        dimension,
        if labels {
            Kind::Labels
        } else {
            Kind::Probabilities
        },
    );
    if !labels {
        for name in &header[1..] {
            if b.dim.groups.iter().any(|g| g == name) {
                return Err(err(
                    None,
                    name,
                    "unique_group",
                    format!("group {name} is a column twice"),
                ));
            }
            b.group(name, 0)?;
        }
    }
    for record in table {
        let (row, record) = record.map_err(|e| err(e.row, "row", "csv", e.message))?;
        let cells: Vec<&str> = record.iter().collect();
        if cells.len() != header.len() {
            return Err(err(
                Some(row),
                "row",
                "cells",
                format!(
                    "{} cells, the header has {}{}",
                    cells.len(),
                    header.len(),
                    if cells.iter().any(|c| c.contains('\n')) {
                        " (a quote opened in this row is not closed)"
                    } else {
                        ""
                    }
                ),
            ));
        }
        let weights = if labels {
            vec![(b.group(cells[1], row)?, WHOLE)]
        } else {
            let mut w = Vec::new();
            for (i, cell) in cells[1..].iter().enumerate() {
                let v = billionths(cell).filter(|&v| v <= WHOLE).ok_or_else(|| {
                    err(
                        Some(row),
                        header[i + 1],
                        "probability",
                        format!("\"{cell}\" is not a probability from 0 to 1 (at most 9 decimals)"),
                    )
                })?;
                if v > 0 {
                    w.push((i as u16, v));
                }
            }
            w
        };
        b.add(row, cells[0], &weights)?;
    }
    b.finish(tolerance)
}

/// A JSON upload, `{"dimensions": [{"name": "...", "rows": [{"application_id": "...", "group":
/// "..."} or {"application_id": "...", "probabilities": {"G": p, ...}}, ...]}, ...]}`, read row
/// by row as it is parsed (never as a JSON tree). [`Upload::finish`] checks what needs every row.
#[derive(Debug, Default)]
pub struct Upload {
    dims: Vec<Builder>,
    /// The first fault in a row; the rows after it are skipped, not built.
    fault: Option<UploadError>,
}

impl Upload {
    /// The dimensions, or the upload's first fault.
    pub fn finish(self, tolerance: f64) -> Result<Vec<Dimension>, UploadError> {
        if let Some(f) = self.fault {
            return Err(f);
        }
        if self.dims.is_empty() {
            return Err(err(None, "dimensions", "required", "an upload is {\"dimensions\": [{\"name\", \"rows\"}, ...]} with at least one dimension"));
        }
        (self.dims.into_iter().enumerate())
            .map(|(d, b)| {
                b.finish(tolerance).map_err(|e| UploadError {
                    dimension: Some(d),
                    ..e
                })
            })
            .collect()
    }
}

/// A JSON upload read from `reader` (a file, or a request body as it arrives).
pub fn from_json(
    reader: impl std::io::Read,
    tolerance: f64,
) -> Result<Vec<Dimension>, UploadError> {
    let mut de = serde_json::Deserializer::from_reader(std::io::BufReader::new(reader));
    let upload: Upload = serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let at = e.path().to_string();
        err(
            None,
            if at == "." { "upload" } else { &at },
            "shape",
            e.into_inner().to_string(),
        )
    })?;
    de.end()
        .map_err(|e| err(None, "upload", "shape", e.to_string()))?;
    upload.finish(tolerance)
}

mod reading {
    //! The upload's serde visitors: each row goes straight into its dimension's builder.

    use super::{err, Builder, Kind, Upload, UploadError, MAX_GROUPS, WHOLE};
    use serde::de::{self, DeserializeSeed, IgnoredAny, MapAccess, SeqAccess, Visitor};
    use serde::{Deserialize, Deserializer};
    use std::fmt;

    impl<'de> Deserialize<'de> for Upload {
        fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
            d.deserialize_map(UploadVisitor)
        }
    }

    struct UploadVisitor;

    impl<'de> Visitor<'de> for UploadVisitor {
        type Value = Upload;
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("an object {\"dimensions\": [...]}")
        }
        fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Upload, A::Error> {
            let mut upload = Upload::default();
            while let Some(key) = map.next_key::<String>()? {
                match key.as_str() {
                    "dimensions" => map.next_value_seed(Dimensions(&mut upload))?,
                    other => return Err(de::Error::unknown_field(other, &["dimensions"])),
                }
            }
            Ok(upload)
        }
    }

    struct Dimensions<'u>(&'u mut Upload);

    impl<'de> DeserializeSeed<'de> for Dimensions<'_> {
        type Value = ();
        fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
            d.deserialize_seq(self)
        }
    }

    impl<'de> Visitor<'de> for Dimensions<'_> {
        type Value = ();
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("a list of dimensions")
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
            loop {
                let d = self.0.dims.len();
                let mut slot = Dim {
                    name: None,
                    builder: None,
                    fault: None,
                };
                if seq.next_element_seed(&mut slot)?.is_none() {
                    return Ok(());
                }
                let fault = slot.fault.take().or_else(|| match &slot.name {
                    Some(n) if !n.trim().is_empty() => None,
                    _ => Some(err(None, "name", "required", "each dimension needs a name")),
                });
                let fault = fault.or_else(|| {
                    (slot.builder.is_none())
                        .then(|| err(None, "rows", "required", "each dimension needs rows"))
                });
                if let Some(f) = fault {
                    self.0.fault.get_or_insert(UploadError {
                        dimension: Some(d),
                        ..f
                    });
                    // Skip what follows cheaply; the first fault is the answer.
                    while seq.next_element::<IgnoredAny>()?.is_some() {}
                    return Ok(());
                }
                let mut b = slot
                    .builder
                    .take()
                    .unwrap_or_else(|| Builder::new("", Kind::Labels));
                b.dim.name = slot.name.take().unwrap_or_default();
                self.0.dims.push(b);
            }
        }
    }

    /// One dimension object: its name and rows, in either order.
    struct Dim {
        name: Option<String>,
        builder: Option<Builder>,
        fault: Option<UploadError>,
    }

    impl<'de> DeserializeSeed<'de> for &mut Dim {
        type Value = ();
        fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
            d.deserialize_map(self)
        }
    }

    impl<'de> Visitor<'de> for &mut Dim {
        type Value = ();
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("a dimension {\"name\", \"rows\"}")
        }
        fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
            while let Some(key) = map.next_key::<String>()? {
                match key.as_str() {
                    "name" => self.name = Some(map.next_value()?),
                    "rows" => map.next_value_seed(Rows(self))?,
                    other => return Err(de::Error::unknown_field(other, &["name", "rows"])),
                }
            }
            Ok(())
        }
    }

    struct Rows<'d>(&'d mut Dim);

    impl<'de> DeserializeSeed<'de> for Rows<'_> {
        type Value = ();
        fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
            d.deserialize_seq(self)
        }
    }

    impl<'de> Visitor<'de> for Rows<'_> {
        type Value = ();
        fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
            f.write_str("a list of rows")
        }
        fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
            let mut row = 0;
            while let Some(r) = seq.next_element::<Row>()? {
                row += 1;
                // The first row says which kind of upload this is.
                let b = self.0.builder.get_or_insert_with(|| {
                    Builder::new(
                        "",
                        if r.probabilities.is_some() {
                            Kind::Probabilities
                        } else {
                            Kind::Labels
                        },
                    )
                });
                if let Err(e) = add(b, row, r) {
                    self.0.fault = Some(e);
                    while seq.next_element::<IgnoredAny>()?.is_some() {}
                    break;
                }
            }
            // An empty list still makes a (then empty, so refused) dimension.
            self.0
                .builder
                .get_or_insert_with(|| Builder::new("", Kind::Labels));
            Ok(())
        }
    }

    fn add(b: &mut Builder, row: usize, r: Row) -> Result<(), UploadError> {
        let weights = match (b.dim.kind, r.group, r.probabilities) {
            (Kind::Labels, Some(g), None) => vec![(b.group(&g, row)?, WHOLE)],
            (Kind::Probabilities, None, Some(Shares(mut p))) => {
                // In the order of the group names, as the CSV form's columns may not be.
                p.sort_by(|a, b| a.0.cmp(&b.0));
                if let Some(w) = p.windows(2).find(|w| w[0].0 == w[1].0) {
                    return Err(err(
                        Some(row),
                        &format!("probabilities.{}", w[0].0),
                        "unique_group",
                        "a group appears twice in the row",
                    ));
                }
                let mut w = Vec::with_capacity(p.len());
                for (g, v) in p {
                    let v = super::billionths_of(v).ok_or_else(|| {
                        err(
                            Some(row),
                            &format!("probabilities.{g}"),
                            "probability",
                            "must be a number from 0 to 1",
                        )
                    })?;
                    let i = b.group(&g, row)?;
                    if v > 0 {
                        w.push((i, v));
                    }
                }
                w
            }
            _ => return Err(err(
                Some(row),
                "group",
                "one_kind",
                "every row of a dimension gives a group label, or every row gives probabilities",
            )),
        };
        b.add(
            row,
            r.application_id.as_deref().unwrap_or_default(),
            &weights,
        )
    }

    /// One upload row (any other field is refused by name).
    #[derive(Deserialize)]
    #[serde(deny_unknown_fields)]
    struct Row {
        application_id: Option<String>,
        group: Option<String>,
        probabilities: Option<Shares>,
    }

    /// A row's probabilities by group name, at most `MAX_GROUPS` of them.
    struct Shares(Vec<(String, f64)>);

    impl<'de> Deserialize<'de> for Shares {
        fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
            struct V;
            impl<'de> Visitor<'de> for V {
                type Value = Shares;
                fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                    write!(f, "an object of at most {MAX_GROUPS} group probabilities")
                }
                fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Shares, A::Error> {
                    let mut out = Vec::new();
                    while let Some(entry) = map.next_entry::<String, f64>()? {
                        if out.len() == MAX_GROUPS {
                            return Err(de::Error::custom(format!(
                                "at most {MAX_GROUPS} groups per dimension"
                            )));
                        }
                        out.push(entry);
                    }
                    Ok(Shares(out))
                }
            }
            d.deserialize_map(V)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decimals_are_exact_billionths() {
        assert_eq!(billionths("0.1134"), Some(113_400_000));
        assert_eq!(billionths("1"), Some(WHOLE));
        assert_eq!(billionths(".5"), Some(500_000_000));
        assert_eq!(billionths("0.1234567891"), None, "more than 9 decimals");
        assert_eq!(billionths("-0.1"), None);
        assert_eq!(billionths_of(0.7), Some(700_000_000));
    }

    #[test]
    fn rows_that_do_not_sum_to_one_are_named() {
        let e = from_csv(
            "application_id,a,b\nFH-1,0.5,0.5\nFH-2,0.5,0.4\n",
            "x",
            SUM_TOLERANCE,
        )
        .unwrap_err();
        assert_eq!((e.row, e.rule), (Some(2), "sum_to_one"));
        let e = from_csv("application_id,group\n", "x", SUM_TOLERANCE).unwrap_err();
        assert_eq!(e.rule, "not_empty");
    }
}
