//! Export formats for a range of records, one line at a time: JSON lines (the full record, as
//! GET /v1/decisions/{id} shows it) or CSV (one summary row per decision, for spreadsheets).

use super::{Record, StoreError};

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    JsonLines,
    Csv,
}

impl Format {
    pub fn parse(s: &str) -> Option<Format> {
        match s {
            "jsonl" | "ndjson" => Some(Format::JsonLines),
            "csv" => Some(Format::Csv),
            _ => None,
        }
    }

    pub fn content_type(self) -> &'static str {
        match self {
            Format::JsonLines => "application/x-ndjson",
            Format::Csv => "text/csv; charset=utf-8",
        }
    }

    /// The first line (CSV header), if the format has one.
    pub fn header(self) -> Option<&'static str> {
        match self {
            Format::JsonLines => None,
            Format::Csv => Some(
                "decision_id,application_id,idempotency_key,received_at,decided_at,model_id,model_version,model_sha256,outcome,probability_of_default,score,reason_codes,final_action,final_action_at,final_action_by,final_reason_codes\n",
            ),
        }
    }

    /// One record as one line, newline included.
    pub fn line(self, r: &Record) -> Result<String, StoreError> {
        match self {
            Format::JsonLines => Ok(r.view()? + "\n"),
            Format::Csv => {
                let cells = [
                    r.decision_id.clone(),
                    r.application_id.clone(),
                    r.idempotency_key.clone().unwrap_or_default(),
                    r.received_at.clone(),
                    r.decided_at.clone(),
                    r.model_id.clone(),
                    r.model_version.clone(),
                    r.model_sha256.clone(),
                    r.outcome.name().to_string(),
                    format!("{}", r.probability),
                    r.score.to_string(),
                    reason_codes(r).join(";"),
                    (r.final_action.as_ref())
                        .map_or(String::new(), |f| f.action.name().to_string()),
                    (r.final_action.as_ref()).map_or(String::new(), |f| f.decided_at.clone()),
                    (r.final_action.as_ref()).map_or(String::new(), |f| f.decided_by.clone()),
                    match &r.final_action {
                        None => String::new(),
                        Some(f) => (f.given_reasons()?.iter())
                            .map(|g| g.code.as_str())
                            .collect::<Vec<_>>()
                            .join(";"),
                    },
                ];
                let cells: Vec<String> = cells.iter().map(|c| csv_cell(c)).collect();
                Ok(cells.join(",") + "\n")
            }
        }
    }
}

/// RFC 4180 quoting where needed; a leading `=`, `+`, `-` or `@` is prefixed with `'` so that a
/// spreadsheet never runs an application id as a formula.
pub fn csv_cell(s: &str) -> String {
    let s = if s.starts_with(['=', '+', '-', '@']) {
        format!("'{s}")
    } else {
        s.to_string()
    };
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s
    }
}

/// One CSV line split into cells, the inverse of the writer above: RFC 4180 quotes undone and
/// the `'` put before a leading `=`, `+`, `-` or `@` removed.
pub fn csv_cells(line: &str) -> Vec<String> {
    let mut cells = Vec::new();
    let mut cell = String::new();
    let (mut quoted, mut chars) = (false, line.chars().peekable());
    while let Some(c) = chars.next() {
        match (c, quoted) {
            ('"', true) if chars.peek() == Some(&'"') => {
                cell.push('"');
                chars.next();
            }
            ('"', _) => quoted = !quoted,
            (',', false) => cells.push(std::mem::take(&mut cell)),
            (c, _) => cell.push(c),
        }
    }
    cells.push(cell);
    cells.into_iter().map(|c| unguard(&c).to_string()).collect()
}

/// A cell as written before the formula guard: the `'` put before a leading `=`, `+`, `-` or
/// `@` removed.
pub fn unguard(cell: &str) -> &str {
    match cell.strip_prefix('\'') {
        Some(rest) if rest.starts_with(['=', '+', '-', '@']) => rest,
        _ => cell,
    }
}

/// The reason codes of a recorded response, in the order given.
pub fn reason_codes(r: &Record) -> Vec<String> {
    let response: serde_json::Value = serde_json::from_str(&r.response).unwrap_or_default();
    response["reasons"]
        .as_array()
        .map(|a| {
            a.iter()
                .filter_map(|x| x["code"].as_str().map(String::from))
                .collect()
        })
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::csv_cell;

    #[test]
    fn csv_cells_are_quoted_and_never_formulas() {
        assert_eq!(csv_cell("FH-1"), "FH-1");
        assert_eq!(csv_cell("a,b"), "\"a,b\"");
        assert_eq!(csv_cell("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_cell("=HYPERLINK(1)"), "'=HYPERLINK(1)");
    }

    #[test]
    fn cells_read_back_as_written() {
        let cells = ["FH-1", "a,b", "say \"hi\"", "=HYPERLINK(1)", "-5", ""];
        let line: Vec<String> = cells.iter().map(|c| csv_cell(c)).collect();
        assert_eq!(super::csv_cells(&line.join(",")), cells);
    }
}
