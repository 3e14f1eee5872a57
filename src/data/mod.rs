//! Tables of named columns read from CSV, and their encoding for a network.

#[cfg(feature = "tables")]
mod build;
#[cfg(feature = "tables")]
mod csv_read;
mod dates;
mod encoder;
mod profile;
mod split;

#[cfg(feature = "tables")]
pub use build::{MISSING_MARKERS, STRAY_SHARE, TYPING_ROWS};
pub use dates::{civil_from_days, date_parts, parse_iso_date, DateParts};

pub use encoder::{
    Cell, CellOutcome, CellProblem, ColumnNote, Encoder, EncoderSpec, FeatureEncoding, Fnv1a,
    Impute, LevelIndex, LevelMap, Slot, TargetEncoding, UnseenPolicy, DEFAULT_MAX_LEVELS,
    DEFAULT_MIN_LEVEL_ROWS, MISSING_LEVEL, OTHER_LEVEL,
};
pub use split::{holdout, kfold, stratified_kfold};

use serde::{Deserialize, Serialize};
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
