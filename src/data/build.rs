//! Building a [`Table`] from CSV records: typing each column from a sample of its first rows,
//! then storing every later cell in its column's type.

use super::{list_some, parse_number, Column, ColumnData, DataError, ReadOptions, Table};

/// Rows whose cells decide each column's type (the typing sample).
pub const TYPING_ROWS: usize = 1000;

/// A column whose sample has more than this share of non-number cells (among its non-empty
/// cells) is text; a smaller, non-zero share is an error naming the stray cells. Common
/// practice, no source: a handful of damaged cells in a numeric column should be fixed, not
/// turn the column into categories.
pub const STRAY_SHARE: f64 = 0.05;

/// Cells read as empty in a numeric column (common spellings of "no value"). In a text column
/// they stay text, so a category called "NA" is not lost.
pub const MISSING_MARKERS: [&str; 10] = [
    "NA", "N/A", "n/a", "na", "null", "NULL", "Null", "None", "none", "?",
];

/// Stray cells listed in a typing error at most.
const STRAYS_SHOWN: usize = 5;

/// Accumulates typed columns row by row.
pub(super) struct TableBuilder<'a> {
    source: &'a str,
    names: Vec<String>,
    forced_text: Vec<bool>,
    allow_non_finite: bool,
    decimal_comma: bool,
    /// Per column: how its numbers are written, once decided.
    styles: Vec<NumberStyle>,
    /// Raw rows of the typing sample, until the types are decided.
    sample: Vec<(u64, Vec<String>)>,
    /// Per column: numeric (true) or text, once decided.
    numeric: Option<Vec<bool>>,
    numbers: Vec<Vec<f64>>,
    texts: Vec<Vec<Option<String>>>,
    lines: Vec<u64>,
}

impl<'a> TableBuilder<'a> {
    pub(super) fn new(
        source: &'a str,
        headers: &csv::StringRecord,
        options: &ReadOptions,
    ) -> TableBuilder<'a> {
        let names: Vec<String> = headers.iter().map(str::to_string).collect();
        let forced_text = names
            .iter()
            .map(|h| {
                options
                    .text_columns
                    .iter()
                    .chain(&options.model_text_columns)
                    .any(|t| t == h)
            })
            .collect();
        let width = names.len();
        TableBuilder {
            source,
            names,
            forced_text,
            allow_non_finite: options.allow_non_finite,
            decimal_comma: options.decimal_comma,
            styles: vec![NumberStyle::Plain; width],
            sample: Vec::new(),
            numeric: None,
            numbers: vec![Vec::new(); width],
            texts: vec![Vec::new(); width],
            lines: Vec::new(),
        }
    }

    /// Adds one record read at `line`.
    pub(super) fn push(&mut self, record: &csv::StringRecord, line: u64) -> Result<(), DataError> {
        if self.numeric.is_some() {
            return self.store(record.iter(), line);
        }
        self.sample
            .push((line, record.iter().map(str::to_string).collect()));
        if self.sample.len() >= TYPING_ROWS {
            self.decide()?;
        }
        Ok(())
    }

    /// The finished table.
    /// Rows pushed so far.
    pub(super) fn rows(&self) -> usize {
        self.lines.len() + self.sample.len()
    }

    pub(super) fn finish(mut self) -> Result<Table, DataError> {
        if self.numeric.is_none() {
            self.decide()?;
        }
        if self.lines.is_empty() {
            return Err(DataError::Table {
                source_name: self.source.to_string(),
                message: "no data rows after the header".to_string(),
            });
        }
        self.numbers.iter_mut().for_each(|v| v.shrink_to_fit());
        self.texts.iter_mut().for_each(|v| v.shrink_to_fit());
        self.lines.shrink_to_fit();
        let numeric = self.numeric.take().unwrap_or_default();
        let columns = self
            .names
            .iter()
            .enumerate()
            .map(|(c, name)| Column {
                name: name.clone(),
                data: if numeric[c] {
                    ColumnData::Number(std::mem::take(&mut self.numbers[c]))
                } else {
                    ColumnData::Text(std::mem::take(&mut self.texts[c]))
                },
            })
            .collect();
        Ok(Table {
            source: self.source.to_string(),
            columns,
            lines: self.lines,
        })
    }

    /// Types every column from the sample, then stores the sample's rows.
    fn decide(&mut self) -> Result<(), DataError> {
        let mut numeric = Vec::with_capacity(self.names.len());
        for c in 0..self.names.len() {
            if self.forced_text[c] {
                numeric.push(false);
                continue;
            }
            let mut filled = 0usize;
            let mut strays: Vec<(u64, &str)> = Vec::new();
            for (line, cells) in &self.sample {
                let cell = cells[c].as_str();
                if is_empty(cell) {
                    continue;
                }
                filled += 1;
                if parse_number(cell).is_none() {
                    strays.push((*line, cell));
                }
            }
            let share = strays.len() as f64 / filled.max(1) as f64;
            let commas = comma_style(
                strays.iter().map(|(_, cell)| *cell),
                self.sample.iter().map(|(_, cells)| cells[c].as_str()),
                self.decimal_comma,
            );
            if strays.is_empty() {
                numeric.push(true);
            } else if let Some(found) = commas {
                match found {
                    Ok(style) => {
                        self.styles[c] = style;
                        numeric.push(true);
                    }
                    Err(example) => {
                        return Err(DataError::Cell {
                            source_name: self.source.to_string(),
                            line: strays[0].0,
                            column: self.names[c].clone(),
                            message: format!(
                                "values like '{example}' could be thousands or a decimal comma; \
                                 pass --decimal-comma to read them as decimals, or remove the \
                                 thousands separators"
                            ),
                        });
                    }
                }
            } else if share > STRAY_SHARE {
                numeric.push(false);
            } else {
                let shown: Vec<String> = strays
                    .iter()
                    .map(|(line, cell)| format!("line {line} '{cell}'"))
                    .collect();
                return Err(DataError::Cell {
                    source_name: self.source.to_string(),
                    line: strays[0].0,
                    column: self.names[c].clone(),
                    message: format!(
                        "the column looks numeric ({} of {filled} values in the first {} rows \
                         are numbers) but these are not: {}; fix them, leave them empty, or read \
                         the column as text with --text-columns",
                        filled - strays.len(),
                        self.sample.len(),
                        list_some(shown.iter(), STRAYS_SHOWN)
                    ),
                });
            }
        }
        self.numeric = Some(numeric);
        let sample = std::mem::take(&mut self.sample);
        for (line, cells) in &sample {
            self.store(cells.iter().map(String::as_str), *line)?;
        }
        Ok(())
    }

    /// Stores one row in the decided column types.
    fn store<'c>(
        &mut self,
        cells: impl Iterator<Item = &'c str>,
        line: u64,
    ) -> Result<(), DataError> {
        let numeric = self.numeric.as_ref().expect("types are decided first");
        for (c, cell) in cells.enumerate() {
            if !numeric[c] {
                self.texts[c].push((!cell.is_empty()).then(|| cell.to_string()));
                continue;
            }
            let cell_error = |message: String| DataError::Cell {
                source_name: self.source.to_string(),
                line,
                column: self.names[c].clone(),
                message,
            };
            if is_empty(cell) {
                self.numbers[c].push(f64::NAN);
                continue;
            }
            match self.styles[c].parse(cell) {
                Some(v) if v.is_finite() => self.numbers[c].push(v),
                Some(_) if self.allow_non_finite => self.numbers[c].push(f64::NAN),
                Some(_) => {
                    return Err(cell_error(format!(
                        "'{cell}' is not a finite number (allow non-finite values to read \
                         them as missing)"
                    )))
                }
                None => {
                    return Err(cell_error(format!(
                        "'{cell}' is not a number, but the column is numeric (typed from its \
                         first {TYPING_ROWS} rows); fix the cell, or read the column as text \
                         with --text-columns"
                    )))
                }
            }
        }
        self.lines.push(line);
        Ok(())
    }
}

/// An empty cell or a missing-value marker.
fn is_empty(cell: &str) -> bool {
    cell.is_empty() || MISSING_MARKERS.contains(&cell)
}

/// How a column writes its numbers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum NumberStyle {
    /// Rust's grammar ("1e-3", "-0.5").
    Plain,
    /// A decimal comma ("0,5").
    DecimalComma,
    /// Comma thousands separators ("6,520", "1,234.5").
    Thousands,
}

impl NumberStyle {
    fn parse(self, cell: &str) -> Option<f64> {
        match parse_number(cell) {
            Some(v) => Some(v),
            None => match self {
                NumberStyle::Plain => None,
                NumberStyle::DecimalComma if is_decimal_comma(cell) => {
                    parse_number(&cell.replace(',', "."))
                }
                NumberStyle::Thousands if is_thousands(cell) => {
                    parse_number(&cell.replace(',', ""))
                }
                _ => None,
            },
        }
    }
}

/// `[+-]digits,digits`.
fn is_decimal_comma(cell: &str) -> bool {
    let body = cell.strip_prefix(['+', '-']).unwrap_or(cell);
    match body.split_once(',') {
        Some((a, b)) => {
            !a.is_empty()
                && !b.is_empty()
                && a.bytes().all(|c| c.is_ascii_digit())
                && b.bytes().all(|c| c.is_ascii_digit())
        }
        None => false,
    }
}

/// `[+-]d{1,3}(,ddd)+(.digits)?`.
fn is_thousands(cell: &str) -> bool {
    let body = cell.strip_prefix(['+', '-']).unwrap_or(cell);
    let (whole, fraction) = body.split_once('.').unwrap_or((body, ""));
    if !fraction.bytes().all(|c| c.is_ascii_digit()) {
        return false;
    }
    let groups: Vec<&str> = whole.split(',').collect();
    groups.len() >= 2
        && (1..=3).contains(&groups[0].len())
        && groups.iter().all(|g| g.bytes().all(|c| c.is_ascii_digit()))
        && groups[1..].iter().all(|g| g.len() == 3)
}

/// The comma style that reads every stray cell of a column as a number: None if some stray
/// fits neither style, Err(example) if the strays fit both and nothing tells them apart.
fn comma_style<'c>(
    strays: impl Iterator<Item = &'c str> + Clone,
    all: impl Iterator<Item = &'c str>,
    decimal_comma: bool,
) -> Option<Result<NumberStyle, String>> {
    let mut strays = strays.peekable();
    strays.peek()?;
    let decimal = strays.clone().all(is_decimal_comma);
    let thousands = strays.clone().all(is_thousands);
    match (decimal, thousands) {
        (false, false) => None,
        (true, false) => Some(Ok(NumberStyle::DecimalComma)),
        (false, true) => Some(Ok(NumberStyle::Thousands)),
        (true, true) if decimal_comma => Some(Ok(NumberStyle::DecimalComma)),
        (true, true) => {
            // A plain number with a decimal point says the comma groups thousands.
            let mut all = all;
            if all.any(|c| c.contains('.') && parse_number(c).is_some()) {
                Some(Ok(NumberStyle::Thousands))
            } else {
                Some(Err(strays.next().unwrap_or_default().to_string()))
            }
        }
    }
}
