//! CSV input as spreadsheets write it (RFC 4180, read by the csv crate): quoted cells holding
//! commas, quotes or line breaks, a UTF-8 byte-order mark, CRLF line ends. Cells are trimmed and
//! blank lines skipped. Every CSV the command line or the service reads (training, reference and
//! background rows, evaluation data, group-membership uploads, records exports) goes through
//! here, so a file saved from a spreadsheet reads the same everywhere.

/// A problem with the file's CSV itself (not its values): where and what.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{}{message}", row.map(|r| format!("row {r}: ")).unwrap_or_default())]
pub struct CsvError {
    /// Data row, numbered from 1 after the header; `None` for the header or the file.
    pub row: Option<usize>,
    pub message: String,
}

/// The header and an iterator over the data rows, numbered from 1.
pub struct Table<'a> {
    pub header: Vec<String>,
    records: csv::StringRecordsIntoIter<&'a [u8]>,
    row: usize,
}

/// Opens `text` as CSV with a header row; an empty file is an error.
pub fn read(text: &str) -> Result<Table<'_>, CsvError> {
    let mut reader = csv::ReaderBuilder::new()
        .flexible(true)
        .trim(csv::Trim::All)
        .has_headers(true)
        .from_reader(text.as_bytes());
    let header: Vec<String> = reader
        .headers()
        .map_err(|e| CsvError {
            row: None,
            message: format!("header: {}", plain(&e)),
        })?
        .iter()
        .map(str::to_string)
        .collect();
    if header.iter().all(String::is_empty) {
        return Err(CsvError {
            row: None,
            message: "the file is empty".into(),
        });
    }
    Ok(Table {
        header,
        records: reader.into_records(),
        row: 0,
    })
}

impl Table<'_> {
    /// Index of the column named `name`.
    pub fn column(&self, name: &str) -> Option<usize> {
        self.header.iter().position(|h| h == name)
    }
}

impl Iterator for Table<'_> {
    /// (row number from 1, cells)
    type Item = Result<(usize, csv::StringRecord), CsvError>;

    fn next(&mut self) -> Option<Self::Item> {
        let record = self.records.next()?;
        self.row += 1;
        let row = self.row;
        Some(record.map(|r| (row, r)).map_err(|e| CsvError {
            row: Some(row),
            message: plain(&e),
        }))
    }
}

/// The csv crate's message without its byte offsets.
fn plain(e: &csv::Error) -> String {
    match e.kind() {
        csv::ErrorKind::Utf8 { .. } => "is not UTF-8 text".into(),
        csv::ErrorKind::UnequalLengths {
            expected_len, len, ..
        } => format!("{len} cells, the header has {expected_len}"),
        _ => e.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // As a spreadsheet saves it: a byte-order mark, CRLF, a quoted cell with a comma and a
    // doubled quote, a blank line.
    #[test]
    fn reads_what_spreadsheets_write() {
        let text = "\u{feff}id,note\r\n1,\"a, b\"\r\n\r\n2,\"say \"\"hi\"\"\"\r\n";
        let mut t = read(text).unwrap();
        assert_eq!(t.header, ["id", "note"]);
        let (n, r) = t.next().unwrap().unwrap();
        assert_eq!((n, &r[1]), (1, "a, b"));
        let (n, r) = t.next().unwrap().unwrap();
        assert_eq!((n, &r[1]), (2, "say \"hi\""));
        assert!(t.next().is_none());
        assert!(read("").is_err());
    }
}
