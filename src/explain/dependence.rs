//! Partial dependence (Friedman 2001) and individual conditional expectation curves
//! (Goldstein et al. 2015): the prediction as one column is set to each grid value in every
//! row of a seeded sample, the others kept as they are; the partial dependence is the mean
//! over the rows, an ICE curve one row's predictions.
//!
//! Grid: [`GRID_POINTS`] evenly spaced values from the training minimum to the training
//! maximum for numeric and date columns (even spacing keeps a slope readable on the curve
//! and covers the whole training range, sparse ends included; the rug shows where the data
//! lies), every level for text columns (its pooled and missing levels included when the
//! model has them).

use super::{input_offsets, Batch, ExplainOptions};
use crate::data::{civil_from_days, DataError, FeatureEncoding, Table, MISSING_LEVEL, OTHER_LEVEL};
use crate::fit::parallel::map_in_order;
use crate::serve::predict::Cell;
use ndarray::{Array2, ArrayView2};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// Default grid points of a numeric or date column.
pub const GRID_POINTS: usize = 20;
/// Default rows averaged into the partial dependence (a seeded sample).
pub const PD_ROWS: usize = 500;
/// Default rows whose ICE curves are kept.
pub const ICE_ROWS: usize = 30;
/// Most values of a column kept for the rug.
pub const RUG_POINTS: usize = 300;

/// Partial dependence and ICE curves of one column, in target units.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Dependence {
    /// Column name.
    pub feature: String,
    /// "number", "date" (grid in days since 1970-01-01) or "category".
    pub kind: String,
    /// Grid values.
    pub grid: Vec<GridValue>,
    /// Partial dependence: mean prediction at each grid value.
    pub mean: Vec<f64>,
    /// ICE curves: one row's predictions at each grid value, per sampled row.
    pub ice: Vec<Vec<f64>>,
    /// File lines of the rows whose ICE curves are given.
    pub ice_lines: Vec<u64>,
    /// Values of the column in the table (a seeded sample; numbers and dates only).
    pub rug: Vec<f64>,
}

/// One grid value: a number or a level.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum GridValue {
    /// A number (a date as days since 1970-01-01).
    Number(f64),
    /// A level.
    Level(String),
}

/// The grid of a feature with the encoded inputs of each point.
fn grid_of(feature: &FeatureEncoding, points: usize) -> (Vec<GridValue>, Vec<Vec<f64>>) {
    let width = feature.width();
    match feature {
        FeatureEncoding::Category {
            levels,
            pooled,
            missing_level,
            ..
        } => {
            let mut names = levels.clone();
            if pooled.is_some() {
                names.push(OTHER_LEVEL.to_string());
            }
            if *missing_level {
                names.push(MISSING_LEVEL.to_string());
            }
            let slots = (0..width)
                .map(|k| (0..width).map(|i| f64::from(u8::from(i == k))).collect())
                .collect();
            (names.into_iter().map(GridValue::Level).collect(), slots)
        }
        FeatureEncoding::Number { min, max, .. } | FeatureEncoding::Date { min, max, .. } => {
            let count = if max > min { points.max(2) } else { 1 };
            let values: Vec<f64> = (0..count)
                .map(|k| min + (max - min) * k as f64 / (count - 1).max(1) as f64)
                .collect();
            let index = crate::data::LevelMap::default();
            // A value that does not encode (a date beyond the calendar's reach in a damaged
            // model file) is left out of the grid rather than stopping the explanation.
            let (values, slots): (Vec<f64>, Vec<Vec<f64>>) = values
                .iter()
                .filter_map(|&v| {
                    let mut out = vec![0.0; width];
                    let text;
                    let cell = if let FeatureEncoding::Date { .. } = feature {
                        text = iso_date(v);
                        Cell::Text(&text)
                    } else {
                        Cell::Number(v)
                    };
                    feature
                        .encode_cell(&index, crate::data::UnseenPolicy::Flag, cell, &mut out)
                        .ok()
                        .map(|_| (v, out))
                })
                .unzip();
            (values.into_iter().map(GridValue::Number).collect(), slots)
        }
    }
}

/// A day number (days since 1970-01-01, with a fraction for the time) as ISO 8601.
fn iso_date(days: f64) -> String {
    let day = days.floor();
    let (y, m, d) = civil_from_days(day as i64);
    let seconds = ((days - day) * 86_400.0).round() as i64;
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}",
        seconds / 3600,
        seconds / 60 % 60,
        seconds % 60
    )
}

/// The partial dependence of every input column of the model in `batch`, on the rows of
/// `table` (encoded as `raw`).
pub fn partial_dependence(
    batch: &Batch,
    table: &Table,
    raw: ArrayView2<'_, f64>,
    options: &ExplainOptions,
) -> Result<Vec<Dependence>, DataError> {
    let n = raw.nrows();
    let mut rng = ChaCha8Rng::seed_from_u64(options.seed ^ 0x7064);
    let mut rows: Vec<usize> = (0..n).collect();
    rows.shuffle(&mut rng);
    rows.truncate(options.pd_rows.max(1));
    let ice = options.ice_rows.min(rows.len());
    let offsets = input_offsets(batch.encoder());
    let features = &batch.encoder().features;
    let rugs: Vec<Vec<f64>> = features
        .iter()
        .map(|f| rug(table, f, options.seed))
        .collect::<Result<_, _>>()?;
    let columns: Vec<usize> = (0..features.len()).collect();
    Ok(map_in_order(&columns, |&j| {
        let mut local = batch.clone();
        let feature = &features[j];
        let (grid, slots) = grid_of(feature, options.grid_points);
        let s = rows.len();
        let mut x = Array2::<f64>::zeros((grid.len() * s, raw.ncols()));
        for (g, values) in slots.iter().enumerate() {
            for (k, &r) in rows.iter().enumerate() {
                let mut row = x.row_mut(g * s + k);
                row.assign(&raw.row(r));
                for (c, &v) in values.iter().enumerate() {
                    row[offsets[j] + c] = v;
                }
            }
        }
        let p = local.predict(x.view());
        let mean = (0..grid.len())
            .map(|g| p[g * s..(g + 1) * s].iter().sum::<f64>() / s as f64)
            .collect();
        let curves = (0..ice)
            .map(|k| (0..grid.len()).map(|g| p[g * s + k]).collect())
            .collect();
        Dependence {
            feature: feature.name().to_string(),
            kind: match feature {
                FeatureEncoding::Number { .. } => "number",
                FeatureEncoding::Date { .. } => "date",
                FeatureEncoding::Category { .. } => "category",
            }
            .to_string(),
            grid,
            mean,
            ice: curves,
            ice_lines: rows[..ice].iter().map(|&r| table.lines[r]).collect(),
            rug: rugs[j].clone(),
        }
    })
    .into_iter()
    .collect())
}

/// A seeded sample of the column's numeric values (dates as days) for the rug.
fn rug(table: &Table, feature: &FeatureEncoding, seed: u64) -> Result<Vec<f64>, DataError> {
    let column = table.column(feature.name())?;
    let mut values: Vec<f64> = match (feature, &column.data) {
        (FeatureEncoding::Number { .. }, crate::data::ColumnData::Number(v)) => {
            v.iter().copied().filter(|v| v.is_finite()).collect()
        }
        (FeatureEncoding::Date { .. }, crate::data::ColumnData::Text(v)) => v
            .iter()
            .flatten()
            .filter_map(|t| crate::data::parse_iso_date(t).map(|p| p.days))
            .collect(),
        _ => Vec::new(),
    };
    if values.len() > RUG_POINTS {
        values.shuffle(&mut ChaCha8Rng::seed_from_u64(seed ^ 0x0072_7567));
        values.truncate(RUG_POINTS);
    }
    values.sort_by(f64::total_cmp);
    Ok(values)
}
