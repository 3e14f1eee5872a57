//! Tables of named columns read from CSV, and their encoding for a network.

mod build;
mod dates;
mod encoder;
mod profile;
mod split;

use build::TableBuilder;
pub use build::{MISSING_MARKERS, STRAY_SHARE, TYPING_ROWS};
pub use dates::{civil_from_days, date_parts, parse_iso_date, DateParts};

pub use encoder::{
    Cell, CellOutcome, CellProblem, ColumnNote, Encoder, EncoderSpec, FeatureEncoding, Impute,
    LevelIndex, Slot, TargetEncoding, UnseenPolicy, DEFAULT_MAX_LEVELS, DEFAULT_MIN_LEVEL_ROWS,
    MISSING_LEVEL, OTHER_LEVEL,
};
pub use split::{holdout, kfold, stratified_kfold};

use serde::{Deserialize, Serialize};
use std::io::Read;
use std::path::Path;
use thiserror::Error;

/// A problem with input data, naming where it is.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum DataError {
    /// The file could not be opened or read.
    #[error("{source_name}: {message}")]
    Io {
        /// File name (or "stdin").
        source_name: String,
        /// What went wrong.
        message: String,
    },
    /// A cell, row or column is not usable.
    #[error("{source_name}: line {line}, column '{column}': {message}")]
    Cell {
        /// File name.
        source_name: String,
        /// 1-based line in the file (the header is line 1).
        line: u64,
        /// Column name.
        column: String,
        /// What is wrong.
        message: String,
    },
    /// A problem with the table as a whole (missing column, no rows, ragged rows).
    #[error("{source_name}: {message}")]
    Table {
        /// File name.
        source_name: String,
        /// What is wrong.
        message: String,
    },
}

/// The values of one column: numbers (NaN marks a missing cell) or text (None: missing).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum ColumnData {
    /// Numeric cells.
    Number(Vec<f64>),
    /// Text cells.
    Text(Vec<Option<String>>),
}

/// One named column.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Column {
    /// Header name.
    pub name: String,
    /// Cells.
    pub data: ColumnData,
}

impl Column {
    /// True if cell `row` is missing.
    pub fn is_missing(&self, row: usize) -> bool {
        match &self.data {
            ColumnData::Number(v) => v[row].is_nan(),
            ColumnData::Text(v) => v[row].is_none(),
        }
    }
}

/// How to read a CSV file.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct ReadOptions {
    /// Columns to read as text even if their cells look like numbers (e.g. postcodes).
    pub text_columns: Vec<String>,
    /// Treat "NaN", "inf" and friends as missing cells instead of refusing them.
    pub allow_non_finite: bool,
    /// Field separator; None: detected from the header line (comma, semicolon or tab).
    pub separator: Option<u8>,
    /// Read numbers with a decimal comma ("0,5") even where a thousands separator would also
    /// fit ("6,520" is then 6.52).
    pub decimal_comma: bool,
    /// Columns read as text when the file has them (a model's categories and dates); unlike
    /// `text_columns`, a name the file lacks is not an error here.
    pub model_text_columns: Vec<String>,
}

/// A table read from CSV: named, typed columns and the file line of every row.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    /// Where it came from (file name or "stdin"), for error messages.
    pub source: String,
    /// Columns in file order.
    pub columns: Vec<Column>,
    /// File line of each row (1-based; the header is line 1).
    pub lines: Vec<u64>,
}

impl Table {
    /// Reads a CSV file with a header row.
    pub fn read_path(path: &Path, options: &ReadOptions) -> Result<Table, DataError> {
        let name = path.display().to_string();
        let file = std::fs::File::open(path).map_err(|e| DataError::Io {
            source_name: name.clone(),
            message: format!("cannot open: {e}"),
        })?;
        Table::read(std::io::BufReader::new(file), &name, options)
    }

    /// Reads CSV with a header row from any reader, row by row: the raw text is never held
    /// whole, only the parsed cells. A column's type comes from the non-empty cells of its first
    /// [`TYPING_ROWS`] rows (the typing sample): numeric if every one of them is a number or a
    /// missing-value marker ([`MISSING_MARKERS`], read as empty), text if more than
    /// [`STRAY_SHARE`] of them are not numbers, and an error naming the first stray lines and
    /// values in between (a numeric column with a few damaged cells). After the sample, a cell
    /// that does not fit its column's type is an error naming its line.
    pub fn read(
        reader: impl Read,
        source: &str,
        options: &ReadOptions,
    ) -> Result<Table, DataError> {
        // The separator: given, or the most frequent of comma, semicolon and tab in the header.
        let mut reader = std::io::BufReader::new(reader);
        let mut header = Vec::new();
        std::io::BufRead::read_until(&mut reader, b'\n', &mut header).map_err(|e| {
            DataError::Io {
                source_name: source.to_string(),
                message: format!("cannot read: {e}"),
            }
        })?;
        let separator = options
            .separator
            .unwrap_or_else(|| detect_separator(&header));
        let mut csv = csv::ReaderBuilder::new()
            .has_headers(true)
            .delimiter(separator)
            .trim(csv::Trim::All)
            .flexible(true)
            .from_reader(std::io::Read::chain(&header[..], reader));
        let table_error = |message: String| DataError::Table {
            source_name: source.to_string(),
            message,
        };
        let headers = csv
            .headers()
            .map_err(|e| table_error(format!("cannot read the header row: {e}")))?
            .clone();
        if headers.is_empty() || headers.iter().all(|h| h.is_empty()) {
            return Err(table_error("the file is empty: no header row".to_string()));
        }
        for (i, h) in headers.iter().enumerate() {
            if h.is_empty() {
                return Err(table_error(format!("column {} has an empty name", i + 1)));
            }
            if headers.iter().take(i).any(|other| other == h) {
                return Err(table_error(format!("column name '{h}' appears twice")));
            }
        }
        if let Some(unknown) = options
            .text_columns
            .iter()
            .find(|t| !headers.iter().any(|h| h == t.as_str()))
        {
            return Err(table_error(format!(
                "--text-columns names '{unknown}', which is not a column; the columns are: {}",
                list_some(headers.iter(), 30)
            )));
        }
        let mut builder = TableBuilder::new(source, &headers, options);
        let mut record = csv::StringRecord::new();
        loop {
            match csv.read_record(&mut record) {
                Ok(false) => break,
                Ok(true) => {}
                Err(e) => {
                    let line = e.position().map_or(0, |p| p.line());
                    let message = match e.kind() {
                        csv::ErrorKind::Utf8 { .. } => format!(
                            "line {line}: the text is not valid UTF-8; re-encode the file as UTF-8"
                        ),
                        _ => format!("line {line}: {e}"),
                    };
                    return Err(table_error(message));
                }
            }
            let line = record.position().map_or(0, |p| p.line());
            if record.len() != headers.len() {
                return Err(table_error(field_count_message(
                    &record,
                    line,
                    headers.len(),
                )));
            }
            builder.push(&record, line)?;
        }
        builder.finish()
    }

    /// A table of the given rows only (in the order given).
    pub fn select(&self, rows: &[usize]) -> Table {
        let columns = self
            .columns
            .iter()
            .map(|c| Column {
                name: c.name.clone(),
                data: match &c.data {
                    ColumnData::Number(v) => {
                        ColumnData::Number(rows.iter().map(|&r| v[r]).collect())
                    }
                    ColumnData::Text(v) => {
                        ColumnData::Text(rows.iter().map(|&r| v[r].clone()).collect())
                    }
                },
            })
            .collect();
        Table {
            source: self.source.clone(),
            columns,
            lines: rows.iter().map(|&r| self.lines[r]).collect(),
        }
    }

    /// Number of data rows.
    pub fn rows(&self) -> usize {
        self.lines.len()
    }

    /// The column called `name`, or an error listing the columns there are.
    pub fn column(&self, name: &str) -> Result<&Column, DataError> {
        self.columns
            .iter()
            .find(|c| c.name == name)
            .ok_or_else(|| DataError::Table {
                source_name: self.source.clone(),
                message: format!(
                    "no column named '{name}'; the columns are: {}{}",
                    list_some(self.columns.iter().map(|c| c.name.as_str()), 30),
                    separator_hint(&self.columns)
                ),
            })
    }

    /// A cell error at `row` of `column`.
    pub fn cell_error(&self, row: usize, column: &str, message: impl Into<String>) -> DataError {
        DataError::Cell {
            source_name: self.source.clone(),
            line: self.lines.get(row).copied().unwrap_or(0),
            column: column.to_string(),
            message: message.into(),
        }
    }
}

/// Strict, locale-independent number parsing: Rust's grammar ("1e-3", "-0.5", "+2", ".5"), no
/// thousands separators or decimal commas. Non-finite spellings ("NaN", "inf") parse to a
/// non-finite value, which the caller decides about.
pub fn parse_number(text: &str) -> Option<f64> {
    text.parse::<f64>().ok()
}

/// At most `limit` items joined by ", ", then "and N more" for the rest.
pub fn list_some<S: AsRef<str>>(items: impl IntoIterator<Item = S>, limit: usize) -> String {
    let mut items = items.into_iter();
    let shown: Vec<String> = items
        .by_ref()
        .take(limit)
        .map(|s| s.as_ref().to_string())
        .collect();
    match items.count() {
        0 => shown.join(", "),
        more => format!("{} and {more} more", shown.join(", ")),
    }
}

/// The most frequent of comma, semicolon and tab outside quotes in a header line (comma on
/// a tie or when there is none).
fn detect_separator(header: &[u8]) -> u8 {
    let mut counts = [0usize; 3];
    let mut quoted = false;
    for &b in header {
        match b {
            b'"' => quoted = !quoted,
            b',' if !quoted => counts[0] += 1,
            b';' if !quoted => counts[1] += 1,
            b'\t' if !quoted => counts[2] += 1,
            _ => {}
        }
    }
    let best = (0..3).max_by_key(|&i| (counts[i], 3 - i)).unwrap_or(0);
    if counts[best] == 0 {
        b','
    } else {
        [b',', b';', b'\t'][best]
    }
}

/// A hint when a one-column header looks like it holds several names split by another
/// separator.
fn separator_hint(columns: &[Column]) -> &'static str {
    match columns {
        [only] if only.name.contains(';') => {
            " (the header holds semicolons: set the separator with --separator ';')"
        }
        [only] if only.name.contains('\t') => {
            " (the header holds tabs: set the separator with --separator tab)"
        }
        _ => "",
    }
}

/// The message for a record whose field count differs from the header's, with a hint when a
/// quoted field runs across lines (the usual sign of a quote that is never closed).
fn field_count_message(record: &csv::StringRecord, line: u64, expected: usize) -> String {
    let mut message = format!(
        "line {line}: {} fields where the header has {expected}",
        record.len()
    );
    if let Some(field) = record.iter().find(|f| f.contains('\n')) {
        let spans = field.matches('\n').count() as u64;
        message += &format!(
            "; a quoted field starting on line {line} runs on to line {}: a quote (\") is probably \
             never closed",
            line + spans
        );
    }
    message
}
