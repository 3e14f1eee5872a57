//! From table columns to network inputs: column choice, imputation, one-hot encoding of text
//! columns and an optional log target, all fitted on the training rows only. (Z-scores are
//! applied after encoding by the recipe's [`crate::Standardizer`], also fitted on training rows.)

use super::{ColumnData, DataError, Table};
use crate::scalar::Scalar;
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// How to fill empty cells. Without it an empty cell is an error naming its line and column.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Impute {
    /// Numbers: the training mean; text: the most frequent level.
    Mean,
    /// Numbers: the training median; text: the most frequent level.
    Median,
    /// The most frequent value (numbers and text).
    MostFrequent,
}

/// What to encode.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct EncoderSpec {
    /// Target column.
    pub target: String,
    /// Feature columns; None: every column but the target.
    pub features: Option<Vec<String>>,
    /// Fill empty cells instead of refusing them.
    pub impute: Option<Impute>,
    /// Model ln(target) instead of the target (every target must then be > 0).
    pub log_target: bool,
}

/// How one feature column becomes network inputs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum FeatureEncoding {
    /// A numeric column, one input.
    Number {
        /// Column name.
        name: String,
        /// Value used for empty cells, if imputation is on.
        fill: Option<f64>,
        /// Smallest training value.
        min: f64,
        /// Largest training value.
        max: f64,
    },
    /// A text column, one input per level seen in training (one-hot).
    Category {
        /// Column name.
        name: String,
        /// Levels in input order.
        levels: Vec<String>,
        /// Level used for empty cells, if imputation is on.
        fill: Option<String>,
    },
}

impl FeatureEncoding {
    /// Column name.
    pub fn name(&self) -> &str {
        match self {
            FeatureEncoding::Number { name, .. } | FeatureEncoding::Category { name, .. } => name,
        }
    }

    /// Number of network inputs it produces.
    pub fn width(&self) -> usize {
        match self {
            FeatureEncoding::Number { .. } => 1,
            FeatureEncoding::Category { levels, .. } => levels.len(),
        }
    }
}

/// How the target column is encoded.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TargetEncoding {
    /// Column name.
    pub name: String,
    /// The network models ln(target).
    pub log: bool,
}

/// The fitted encoding of a table's columns.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Encoder {
    /// Feature columns in input order.
    pub features: Vec<FeatureEncoding>,
    /// The target.
    pub target: TargetEncoding,
    /// Imputation in use, if any.
    pub impute: Option<Impute>,
}

impl Encoder {
    /// Fits the encoding on the rows `train` of `table`.
    pub fn fit(table: &Table, spec: &EncoderSpec, train: &[usize]) -> Result<Encoder, DataError> {
        let target = table.column(&spec.target)?;
        if !matches!(target.data, ColumnData::Number(_)) {
            return Err(DataError::Table {
                source_name: table.source.clone(),
                message: format!("the target column '{}' is not numeric", spec.target),
            });
        }
        let names: Vec<String> = match &spec.features {
            Some(list) => list.clone(),
            None => table
                .columns
                .iter()
                .filter(|c| c.name != spec.target)
                .map(|c| c.name.clone())
                .collect(),
        };
        if names.is_empty() {
            return Err(DataError::Table {
                source_name: table.source.clone(),
                message: "no feature columns: the table has only the target".to_string(),
            });
        }
        let mut features = Vec::with_capacity(names.len());
        for name in &names {
            if name == &spec.target {
                return Err(DataError::Table {
                    source_name: table.source.clone(),
                    message: format!("'{name}' is both the target and a feature"),
                });
            }
            let column = table.column(name)?;
            features.push(match &column.data {
                ColumnData::Number(values) => fit_number(table, name, values, train, spec.impute)?,
                ColumnData::Text(values) => fit_text(table, name, values, train, spec.impute)?,
            });
        }
        Ok(Encoder {
            features,
            target: TargetEncoding {
                name: spec.target.clone(),
                log: spec.log_target,
            },
            impute: spec.impute,
        })
    }

    /// Number of network inputs.
    pub fn width(&self) -> usize {
        self.features.iter().map(|f| f.width()).sum()
    }

    /// Input column names after encoding ("column" or "column=level").
    pub fn input_names(&self) -> Vec<String> {
        self.features
            .iter()
            .flat_map(|f| match f {
                FeatureEncoding::Number { name, .. } => vec![name.clone()],
                FeatureEncoding::Category { name, levels, .. } => {
                    levels.iter().map(|l| format!("{name}={l}")).collect()
                }
            })
            .collect()
    }

    /// Encodes the feature columns of `rows` (all rows if None). An empty cell without
    /// imputation, or a level not seen in training, is an error naming line and column.
    pub fn encode_inputs<F: Scalar>(
        &self,
        table: &Table,
        rows: Option<&[usize]>,
    ) -> Result<Array2<F>, DataError> {
        let all: Vec<usize>;
        let rows = match rows {
            Some(r) => r,
            None => {
                all = (0..table.rows()).collect();
                &all
            }
        };
        let mut out = Array2::zeros((rows.len(), self.width()));
        let mut offset = 0;
        for feature in &self.features {
            let column = table.column(feature.name())?;
            match (feature, &column.data) {
                (FeatureEncoding::Number { name, fill, .. }, ColumnData::Number(values)) => {
                    for (k, &r) in rows.iter().enumerate() {
                        let v = values[r];
                        out[(k, offset)] = F::of(if v.is_nan() {
                            fill.ok_or_else(|| missing(table, r, name))?
                        } else {
                            v
                        });
                    }
                }
                (FeatureEncoding::Category { name, levels, fill }, ColumnData::Text(values)) => {
                    let index: HashMap<&str, usize> = levels
                        .iter()
                        .enumerate()
                        .map(|(i, l)| (l.as_str(), i))
                        .collect();
                    for (k, &r) in rows.iter().enumerate() {
                        let value = match (&values[r], fill) {
                            (Some(v), _) => v.as_str(),
                            (None, Some(f)) => f.as_str(),
                            (None, None) => return Err(missing(table, r, name)),
                        };
                        let level = index.get(value).ok_or_else(|| {
                            table.cell_error(
                                r,
                                name,
                                format!(
                                    "category '{value}' was not seen in training (known: {})",
                                    levels.join(", ")
                                ),
                            )
                        })?;
                        out[(k, offset + level)] = F::one();
                    }
                }
                _ => {
                    return Err(DataError::Table {
                        source_name: table.source.clone(),
                        message: format!(
                            "column '{}' changed type: the model expects {}",
                            feature.name(),
                            match feature {
                                FeatureEncoding::Number { .. } => "numbers",
                                FeatureEncoding::Category { .. } => "text",
                            }
                        ),
                    })
                }
            }
            offset += feature.width();
        }
        Ok(out)
    }

    /// The target of `rows` as the network models it (ln(y) with a log target). Empty cells are
    /// always an error: a target is never imputed.
    pub fn encode_target(
        &self,
        table: &Table,
        rows: Option<&[usize]>,
    ) -> Result<Array2<f64>, DataError> {
        let column = table.column(&self.target.name)?;
        let ColumnData::Number(values) = &column.data else {
            return Err(DataError::Table {
                source_name: table.source.clone(),
                message: format!("the target column '{}' is not numeric", self.target.name),
            });
        };
        let picked: Vec<usize> = rows.map_or_else(|| (0..table.rows()).collect(), |r| r.to_vec());
        let mut out = Array2::zeros((picked.len(), 1));
        for (k, &r) in picked.iter().enumerate() {
            let v = values[r];
            if v.is_nan() {
                return Err(table.cell_error(r, &self.target.name, "the target is empty"));
            }
            out[(k, 0)] = if self.target.log {
                if v <= 0.0 {
                    return Err(table.cell_error(
                        r,
                        &self.target.name,
                        format!("{v} cannot be log-transformed: the target must be > 0"),
                    ));
                }
                v.ln()
            } else {
                v
            };
        }
        Ok(out)
    }

    /// Back from the network's target scale to the target's own units.
    pub fn decode_target(&self, value: f64) -> f64 {
        if self.target.log {
            value.exp()
        } else {
            value
        }
    }
}

fn missing(table: &Table, row: usize, column: &str) -> DataError {
    table.cell_error(
        row,
        column,
        "the cell is empty; fill it, or turn on imputation (mean, median or most-frequent)",
    )
}

fn fit_number(
    table: &Table,
    name: &str,
    values: &[f64],
    train: &[usize],
    impute: Option<Impute>,
) -> Result<FeatureEncoding, DataError> {
    let mut seen: Vec<f64> = Vec::with_capacity(train.len());
    for &r in train {
        let v = values[r];
        if v.is_nan() {
            if impute.is_none() {
                return Err(missing(table, r, name));
            }
        } else {
            seen.push(v);
        }
    }
    if seen.is_empty() {
        return Err(DataError::Table {
            source_name: table.source.clone(),
            message: format!("column '{name}' has no values in the training rows"),
        });
    }
    let (min, max) = seen
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let fill = impute.map(|how| match how {
        Impute::Mean => seen.iter().sum::<f64>() / seen.len() as f64,
        Impute::Median => {
            let mut sorted = seen.clone();
            sorted.sort_by(f64::total_cmp);
            let n = sorted.len();
            if n % 2 == 1 {
                sorted[n / 2]
            } else {
                0.5 * (sorted[n / 2 - 1] + sorted[n / 2])
            }
        }
        Impute::MostFrequent => {
            let mut sorted = seen.clone();
            sorted.sort_by(f64::total_cmp);
            most_frequent(&sorted).copied().unwrap_or(sorted[0])
        }
    });
    Ok(FeatureEncoding::Number {
        name: name.to_string(),
        fill,
        min,
        max,
    })
}

fn fit_text(
    table: &Table,
    name: &str,
    values: &[Option<String>],
    train: &[usize],
    impute: Option<Impute>,
) -> Result<FeatureEncoding, DataError> {
    let mut seen: Vec<&str> = Vec::with_capacity(train.len());
    for &r in train {
        match &values[r] {
            Some(v) => seen.push(v),
            None if impute.is_none() => return Err(missing(table, r, name)),
            None => {}
        }
    }
    seen.sort_unstable();
    let mut levels: Vec<String> = Vec::new();
    for v in &seen {
        if levels.last().map(|l| l.as_str()) != Some(v) {
            levels.push(v.to_string());
        }
    }
    if levels.is_empty() {
        return Err(DataError::Table {
            source_name: table.source.clone(),
            message: format!("column '{name}' has no values in the training rows"),
        });
    }
    let fill =
        impute.map(|_| most_frequent(&seen).map_or_else(|| levels[0].clone(), |s| s.to_string()));
    Ok(FeatureEncoding::Category {
        name: name.to_string(),
        levels,
        fill,
    })
}

/// The most frequent item of a sorted slice (the first such, on ties).
fn most_frequent<T: PartialEq>(sorted: &[T]) -> Option<&T> {
    let mut best: Option<(&T, usize)> = None;
    let mut i = 0;
    while i < sorted.len() {
        let mut j = i;
        while j < sorted.len() && sorted[j] == sorted[i] {
            j += 1;
        }
        if best.is_none_or(|(_, n)| j - i > n) {
            best = Some((&sorted[i], j - i));
        }
        i = j;
    }
    best.map(|(v, _)| v)
}
