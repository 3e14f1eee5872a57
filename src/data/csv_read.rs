//! Reading CSV into a [`Table`] (the `tables` feature): separator detection, row-by-row
//! typing through the table builder, and messages that name the line.

use super::build::TableBuilder;
use super::{list_some, DataError, ReadOptions, Table};
use std::io::Read;
use std::path::Path;

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
    /// [`TYPING_ROWS`](crate::data::TYPING_ROWS) rows (the typing sample): numeric if every one of them is a number or a
    /// missing-value marker ([`MISSING_MARKERS`](crate::data::MISSING_MARKERS), read as empty), text if more than
    /// [`STRAY_SHARE`](crate::data::STRAY_SHARE) of them are not numbers, and an error naming the first stray lines and
    /// values in between (a numeric column with a few damaged cells). After the sample, a cell
    /// that does not fit its column's type is an error naming its line.
    pub fn read(
        reader: impl Read,
        source: &str,
        options: &ReadOptions,
    ) -> Result<Table, DataError> {
        let mut whole = None;
        Table::read_chunks(reader, source, options, usize::MAX, |t| {
            whole = Some(t);
            Ok::<(), DataError>(())
        })?;
        Ok(whole.expect("read_chunks hands over at least one table or fails"))
    }

    /// Reads CSV like [`Table::read`], but hands the rows to `each` in tables of at most
    /// `chunk_rows` rows (the last may be shorter) as they are read, so memory stays bounded
    /// by the chunk, not the file. Each chunk is typed on its own from its first
    /// [`TYPING_ROWS`](crate::data::TYPING_ROWS) rows (columns forced to text by the options stay text in every chunk);
    /// lines keep counting from the top of the file. Returns the number of rows read. A file
    /// without data rows is an error, as for [`Table::read`].
    pub fn read_chunks<E: From<DataError>>(
        reader: impl Read,
        source: &str,
        options: &ReadOptions,
        chunk_rows: usize,
        mut each: impl FnMut(Table) -> Result<(), E>,
    ) -> Result<usize, E> {
        let chunk_rows = chunk_rows.max(1);
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
        let table_error = |message: String| -> E {
            DataError::Table {
                source_name: source.to_string(),
                message,
            }
            .into()
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
        let mut total = 0usize;
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
            total += 1;
            if builder.rows() >= chunk_rows {
                let full =
                    std::mem::replace(&mut builder, TableBuilder::new(source, &headers, options));
                each(full.finish()?)?;
            }
        }
        if builder.rows() > 0 || total == 0 {
            each(builder.finish()?)?;
        }
        Ok(total)
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
