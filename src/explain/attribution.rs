//! Integrated gradients (Sundararajan, Taly & Yan 2017) for every row of a table, one
//! attribution per input column: see [`crate::Predictor::attribute_row`] for the baseline,
//! the path and the integration.

use crate::data::{Column, DataError, Table};
use crate::fit::parallel::map_in_order;
use crate::serve::predict::{Cell, Predictor};

/// Rows attributed per parallel task.
const CHUNK: usize = 256;

/// The attributions of a table's rows.
#[derive(Clone, Debug, PartialEq)]
pub struct TableAttributions {
    /// Input column names, in the order of each row's values.
    pub features: Vec<String>,
    /// The prediction at the baseline, which every row's attributions start from.
    pub baseline: f64,
    /// Per row: its attributions (target units) adding up to prediction − baseline, or None
    /// if the row could not be predicted (the prediction's error says why).
    pub rows: Vec<Option<Vec<f64>>>,
}

/// Attributes every row of `table` (columns found by name, extra columns ignored).
pub fn attribute_table(
    predictor: &Predictor,
    table: &Table,
) -> Result<TableAttributions, DataError> {
    let names = predictor.feature_names();
    let columns: Vec<&Column> = names
        .iter()
        .map(|n| table.column(n))
        .collect::<Result<_, _>>()?;
    let starts: Vec<usize> = (0..table.rows()).step_by(CHUNK).collect();
    let rows = map_in_order(&starts, |&start| {
        let mut scratch = predictor.scratch();
        let mut cells: Vec<Cell<'_>> = Vec::with_capacity(columns.len());
        let end = (start + CHUNK).min(table.rows());
        (start..end)
            .map(|r| {
                cells.clear();
                cells.extend(columns.iter().map(|c| c.cell(r)));
                let mut out = vec![0.0; columns.len()];
                predictor
                    .attribute_row(&cells, &mut scratch, &mut out)
                    .ok()
                    .map(|_| out)
            })
            .collect::<Vec<_>>()
    })
    .into_iter()
    .flatten()
    .collect();
    Ok(TableAttributions {
        features: names.iter().map(|n| n.to_string()).collect(),
        baseline: predictor.baseline(),
        rows,
    })
}
