//! From table columns to network inputs: column roles (identifiers and constants left out,
//! dates expanded), one-hot categories with rare levels pooled, missing cells, and an optional
//! log target. Category levels come from every row handed to training (the target is not
//! involved, so nothing leaks); ranges, fill values and warnings come from the training rows.
//! (Z-scores are applied after encoding by the recipe's [`crate::Standardizer`].)

use super::dates::{date_parts, parse_iso_date};
use super::profile::{self, TextProfile};
use super::{list_some, ColumnData, DataError, Table};
use crate::kernels::scalar::Scalar;
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

/// Levels seen in fewer rows than this are pooled into [`OTHER_LEVEL`]. Measured on the shared
/// real tables (DEVELOPERS.md): 5 gave the best or near-best holdout RMSE of 2, 5 and 10.
pub const DEFAULT_MIN_LEVEL_ROWS: usize = 5;
/// A text column keeps at most this many levels (the most frequent); the rest are pooled.
pub const DEFAULT_MAX_LEVELS: usize = 50;
/// How far outside its training range a numeric input may go, as a fraction of that range,
/// before it is held at that distance ([`EncoderSpec::hold_beyond`]). Bounding what a network
/// extrapolates from is common practice (no source); the value 0.25 is our own, chosen on the
/// shared real tables over seven seeded splits (DEVELOPERS.md).
pub const DEFAULT_HOLD_BEYOND: f64 = 0.25;
/// A text column with at least this share of distinct values among its filled cells (and at
/// least [`IDENTIFIER_MIN_ROWS`] of them) is identifier-like. Common practice, no source.
pub const IDENTIFIER_SHARE: f64 = 0.9;
/// Filled cells a column needs before it can be called identifier-like.
pub const IDENTIFIER_MIN_ROWS: usize = 20;
/// A single input that explains this share of the target's variance on the training rows
/// (r² for numbers and dates, η² for categories) is reported as a likely leak.
pub const LEAK_SHARE: f64 = 0.9;
/// A positive target with at least this sample skewness gets the log-target advice.
pub const SKEW_ADVICE: f64 = 1.0;
/// Name of the pooled level of rare and unseen categories.
pub const OTHER_LEVEL: &str = "(other)";
/// Name of the level of empty text cells.
pub const MISSING_LEVEL: &str = "(missing)";

/// How to fill empty numeric cells. Without it an empty numeric cell is an error naming its
/// line and column. (Empty text cells are always their own level.)
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Impute {
    /// The training mean.
    Mean,
    /// The training median.
    Median,
    /// The most frequent training value.
    MostFrequent,
}

/// What a category never seen in training gets at prediction time.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum UnseenPolicy {
    /// A prediction with a flag: the pooled level if the column has one, else the average of
    /// the levels (every one-hot input at its training mean).
    #[default]
    Flag,
    /// No prediction for that row: an error naming the column.
    Error,
}

/// What to encode.
#[derive(Clone, Debug, PartialEq)]
pub struct EncoderSpec {
    /// Target column.
    pub target: String,
    /// Feature columns; None: every column but the target, with roles decided from the data.
    /// Columns named here are used whatever their role would be.
    pub features: Option<Vec<String>>,
    /// Fill empty numeric cells (with a was-missing input) instead of refusing them.
    pub impute: Option<Impute>,
    /// Model ln(target) instead of the target (every target must then be > 0).
    pub log_target: bool,
    /// Levels seen in fewer rows are pooled into [`OTHER_LEVEL`].
    pub min_level_rows: usize,
    /// Most levels a text column keeps.
    pub max_levels: usize,
    /// What an unseen category gets at prediction time.
    pub unseen: UnseenPolicy,
    /// Columns used whatever their role would be (identifier-like or constant).
    pub keep: Vec<String>,
    /// Columns left out.
    pub drop: Vec<String>,
    /// Numeric values further outside their column's training range than this fraction of
    /// the range are held at that distance, in training, validation and prediction alike (the
    /// row is still flagged as extrapolated); None lets every value through.
    pub hold_beyond: Option<f64>,
}

impl Default for EncoderSpec {
    fn default() -> Self {
        EncoderSpec {
            target: String::new(),
            features: None,
            impute: None,
            log_target: false,
            min_level_rows: DEFAULT_MIN_LEVEL_ROWS,
            max_levels: DEFAULT_MAX_LEVELS,
            unseen: UnseenPolicy::Flag,
            keep: Vec::new(),
            drop: Vec::new(),
            hold_beyond: Some(DEFAULT_HOLD_BEYOND),
        }
    }
}

/// How one feature column becomes network inputs.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum FeatureEncoding {
    /// A numeric column: one input, plus a 0/1 was-missing input when imputed.
    Number {
        /// Column name.
        name: String,
        /// Value used for empty cells, if imputation is on.
        fill: Option<f64>,
        /// Smallest training value.
        min: f64,
        /// Largest training value.
        max: f64,
        /// A second input says whether the cell was empty.
        #[serde(default)]
        missing_flag: bool,
        /// Values are held within these bounds before they reach the network (model files
        /// before version 3: none).
        #[serde(default, skip_serializing_if = "Option::is_none")]
        held: Option<(f64, f64)>,
    },
    /// A text column, one-hot: one input per level, then the pooled level, then the missing
    /// level (each if present).
    Category {
        /// Column name.
        name: String,
        /// Levels with an input of their own, in input order.
        levels: Vec<String>,
        /// Level used for empty cells (model files written before the missing level).
        fill: Option<String>,
        /// Rare levels pooled into [`OTHER_LEVEL`]; Some means the column has that input.
        #[serde(default)]
        pooled: Option<Vec<String>>,
        /// Empty cells have their own input ([`MISSING_LEVEL`]).
        #[serde(default)]
        missing_level: bool,
    },
    /// An ISO 8601 date column: days since 1970-01-01, the sine and cosine of the position in
    /// the year and in the week, and in the day when the column has times.
    Date {
        /// Column name.
        name: String,
        /// Days used for empty cells, if imputation is on.
        fill: Option<f64>,
        /// Earliest training date (days since 1970-01-01).
        min: f64,
        /// Latest training date.
        max: f64,
        /// A last input says whether the cell was empty.
        missing_flag: bool,
        /// The values have a time of day (two more inputs).
        with_time: bool,
    },
}

impl FeatureEncoding {
    /// Column name.
    pub fn name(&self) -> &str {
        match self {
            FeatureEncoding::Number { name, .. }
            | FeatureEncoding::Category { name, .. }
            | FeatureEncoding::Date { name, .. } => name,
        }
    }

    /// Number of network inputs it produces.
    pub fn width(&self) -> usize {
        match self {
            FeatureEncoding::Number { missing_flag, .. } => 1 + usize::from(*missing_flag),
            FeatureEncoding::Category {
                levels,
                pooled,
                missing_level,
                ..
            } => levels.len() + usize::from(pooled.is_some()) + usize::from(*missing_level),
            FeatureEncoding::Date {
                missing_flag,
                with_time,
                ..
            } => 5 + 2 * usize::from(*with_time) + usize::from(*missing_flag),
        }
    }

    /// The training range of a numeric or date feature.
    pub fn range(&self) -> Option<(f64, f64)> {
        match self {
            FeatureEncoding::Number { min, max, .. } | FeatureEncoding::Date { min, max, .. } => {
                Some((*min, *max))
            }
            FeatureEncoding::Category { .. } => None,
        }
    }

    /// Names of its inputs ("column", "column=level", "column:days", ...).
    pub fn input_names(&self) -> Vec<String> {
        match self {
            FeatureEncoding::Number {
                name, missing_flag, ..
            } => {
                let mut v = vec![name.clone()];
                if *missing_flag {
                    v.push(format!("{name}:missing"));
                }
                v
            }
            FeatureEncoding::Category {
                name,
                levels,
                pooled,
                missing_level,
                ..
            } => {
                let mut v: Vec<String> = levels.iter().map(|l| format!("{name}={l}")).collect();
                if pooled.is_some() {
                    v.push(format!("{name}={OTHER_LEVEL}"));
                }
                if *missing_level {
                    v.push(format!("{name}={MISSING_LEVEL}"));
                }
                v
            }
            FeatureEncoding::Date {
                name,
                missing_flag,
                with_time,
                ..
            } => {
                let mut parts = vec!["days", "year-sin", "year-cos", "week-sin", "week-cos"];
                if *with_time {
                    parts.extend(["day-sin", "day-cos"]);
                }
                if *missing_flag {
                    parts.push("missing");
                }
                parts.iter().map(|p| format!("{name}:{p}")).collect()
            }
        }
    }

    /// The feature's type as `predict` must read it: true for text (categories and dates).
    pub fn reads_as_text(&self) -> bool {
        !matches!(self, FeatureEncoding::Number { .. })
    }

    /// Encodes one cell into `out` (this feature's inputs, before scaling). An unseen
    /// category under [`UnseenPolicy::Flag`] without a pooled level writes NaN into every
    /// input: "at the training mean", which the caller's scaling turns into 0.
    pub fn encode_cell(
        &self,
        levels: &LevelMap,
        unseen: UnseenPolicy,
        cell: Cell<'_>,
        out: &mut [f64],
    ) -> Result<CellOutcome, CellProblem> {
        let mut outcome = CellOutcome::default();
        match self {
            FeatureEncoding::Number {
                fill,
                missing_flag,
                held,
                ..
            } => {
                let v = match cell {
                    Cell::Number(v) if v.is_finite() => {
                        outcome.value = Some(v);
                        match held {
                            Some((lo, hi)) => v.clamp(*lo, *hi),
                            None => v,
                        }
                    }
                    Cell::Number(_) => return Err(CellProblem::NonFinite),
                    Cell::Missing => fill.ok_or(CellProblem::Missing)?,
                    Cell::Text(_) => return Err(CellProblem::NotANumber),
                };
                out[0] = v;
                if *missing_flag {
                    out[1] = if cell == Cell::Missing { 1.0 } else { 0.0 };
                }
            }
            FeatureEncoding::Category {
                levels: names,
                fill,
                pooled,
                missing_level,
                ..
            } => {
                out.fill(0.0);
                let other = names.len();
                let missing = other + usize::from(pooled.is_some());
                let slot = match cell {
                    Cell::Text(t) => levels.get(t).copied(),
                    Cell::Missing if *missing_level => Some(Slot::Level(missing)),
                    // No empty cell was seen in training: the fill level when imputation was
                    // asked for, else an error, not a guess.
                    Cell::Missing => match fill {
                        Some(f) => levels.get(f.as_str()).copied(),
                        None => return Err(CellProblem::Missing),
                    },
                    Cell::Number(_) => return Err(CellProblem::NotACategory),
                };
                outcome.on = match slot {
                    Some(Slot::Level(i)) => Some(i),
                    Some(Slot::Pooled) => Some(other),
                    None if unseen == UnseenPolicy::Error => {
                        return Err(CellProblem::UnseenCategory)
                    }
                    None => {
                        outcome.unseen = true;
                        pooled.is_some().then_some(other)
                    }
                };
                match outcome.on {
                    Some(i) => out[i] = 1.0,
                    None => out.fill(f64::NAN),
                }
            }
            FeatureEncoding::Date {
                fill,
                missing_flag,
                with_time,
                ..
            } => {
                let parts = match cell {
                    Cell::Text(t) => Some(parse_iso_date(t).ok_or(CellProblem::NotADate)?),
                    Cell::Missing => None,
                    Cell::Number(_) => return Err(CellProblem::NotADate),
                };
                match parts {
                    Some(p) => {
                        outcome.value = Some(p.days);
                        write_date(&p, *with_time, out);
                    }
                    None => {
                        let days = fill.ok_or(CellProblem::Missing)?;
                        write_date(&date_parts(days, false), *with_time, out);
                    }
                }
                if *missing_flag {
                    out[self.width() - 1] = if parts.is_none() { 1.0 } else { 0.0 };
                }
            }
        }
        Ok(outcome)
    }
}

fn write_date(p: &super::DateParts, with_time: bool, out: &mut [f64]) {
    let tau = std::f64::consts::TAU;
    out[0] = p.days;
    out[1] = (tau * p.year_turn()).sin();
    out[2] = (tau * p.year_turn()).cos();
    out[3] = (tau * p.week_turn()).sin();
    out[4] = (tau * p.week_turn()).cos();
    if with_time {
        out[5] = (tau * p.day_turn()).sin();
        out[6] = (tau * p.day_turn()).cos();
    }
}

/// One cell of a row to encode or predict, in the model's feature order.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Cell<'a> {
    /// A number.
    Number(f64),
    /// A category or a date.
    Text(&'a str),
    /// An empty cell.
    Missing,
}

/// What is wrong with a cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CellProblem {
    /// The row has the wrong number of cells.
    WrongLength,
    /// Empty, and the model has no way to fill it.
    Missing,
    /// A category not seen in training (under [`UnseenPolicy::Error`]).
    UnseenCategory,
    /// Text where a number is expected.
    NotANumber,
    /// A number where a category is expected.
    NotACategory,
    /// Not an ISO 8601 date where a date is expected.
    NotADate,
    /// A number that is not finite.
    NonFinite,
    /// A finite number so far outside the training range that the model's f32 arithmetic
    /// overflows on it.
    Overflow,
}

/// What encoding a cell found besides its inputs.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct CellOutcome {
    /// A category never seen in training (predicted through the pooled or average level).
    pub unseen: bool,
    /// The value of a numeric or date cell, for the range check (None if filled or text).
    pub value: Option<f64>,
    /// For a category: which of its inputs is 1 (None when they are all NaN, "at the training
    /// mean").
    pub on: Option<usize>,
}

/// Where a known category value goes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Slot {
    /// Its own input.
    Level(usize),
    /// The pooled input.
    Pooled,
}

/// The look-up of one category feature: level text → its input.
pub type LevelMap = HashMap<String, Slot, BuildHasherDefault<Fnv1a>>;

/// The 64-bit FNV-1a hash (Fowler, Noll & Vo; offset basis 0xcbf29ce484222325, prime
/// 0x100000001b3, as published with the algorithm), for the short level texts looked up once
/// per cell: one multiply per byte and no key, in place of the default keyed hash. It is not
/// built to resist chosen collisions, which matters little here: the keys are the model's own
/// levels, and a row's text is only ever looked up among them.
#[derive(Clone, Copy, Debug)]
pub struct Fnv1a(u64);

impl Default for Fnv1a {
    fn default() -> Self {
        Fnv1a(0xcbf2_9ce4_8422_2325)
    }
}

impl Hasher for Fnv1a {
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0 ^ u64::from(b)).wrapping_mul(0x0000_0100_0000_01b3);
        }
    }

    fn finish(&self) -> u64 {
        self.0
    }
}

/// Per feature, a lookup from category text to its input (empty for other features).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct LevelIndex {
    /// One map per feature, in feature order.
    pub maps: Vec<LevelMap>,
}

impl LevelIndex {
    /// The lookups of every feature of `encoder`.
    pub fn new(encoder: &Encoder) -> LevelIndex {
        let maps = encoder
            .features
            .iter()
            .map(|f| match f {
                FeatureEncoding::Category { levels, pooled, .. } => levels
                    .iter()
                    .enumerate()
                    .map(|(i, l)| (l.clone(), Slot::Level(i)))
                    .chain(pooled.iter().flatten().map(|l| (l.clone(), Slot::Pooled)))
                    .collect(),
                _ => LevelMap::default(),
            })
            .collect();
        LevelIndex { maps }
    }
}

/// What became of one column of the table, with the reason.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ColumnNote {
    /// Column name.
    pub name: String,
    /// The column feeds the network.
    pub used: bool,
    /// What it became and why, in words.
    pub what: String,
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
    /// What an unseen category gets at prediction time.
    #[serde(default)]
    pub unseen: UnseenPolicy,
    /// What became of every column, with the reason.
    #[serde(default)]
    pub columns: Vec<ColumnNote>,
    /// Warnings about the data found while fitting (likely leaks, a skewed target, many
    /// levels).
    #[serde(default)]
    pub warnings: Vec<String>,
}

impl Encoder {
    /// Fits the encoding: category levels and column roles from every row of `table` (the
    /// rows handed to training), ranges, fill values and warnings from the rows `train`.
    pub fn fit(table: &Table, spec: &EncoderSpec, train: &[usize]) -> Result<Encoder, DataError> {
        let target = table.column(&spec.target)?;
        let ColumnData::Number(y) = &target.data else {
            return Err(DataError::Table {
                source_name: table.source.clone(),
                message: format!("the target column '{}' is not numeric", spec.target),
            });
        };
        check_names(table, spec)?;
        if let Some(f) = spec.hold_beyond {
            if !(f.is_finite() && f >= 0.0) {
                return Err(DataError::Table {
                    source_name: table.source.clone(),
                    message: format!(
                        "the hold-beyond fraction must be a finite number ≥ 0, not {f}"
                    ),
                });
            }
        }
        let mut features = Vec::new();
        let mut columns = Vec::new();
        let mut warnings = Vec::new();
        for column in &table.columns {
            let name = column.name.as_str();
            if name == spec.target {
                columns.push(note(name, false, "target".to_string()));
                continue;
            }
            let listed = spec.features.as_ref().map(|f| f.iter().any(|n| n == name));
            if listed == Some(false) {
                columns.push(note(name, false, "left out: not in --features".to_string()));
                continue;
            }
            if spec.drop.iter().any(|n| n == name) {
                columns.push(note(name, false, "left out: --drop-columns".to_string()));
                continue;
            }
            let forced = listed == Some(true) || spec.keep.iter().any(|n| n == name);
            let fitted = match &column.data {
                ColumnData::Number(values) => fit_number(table, name, values, train, spec, forced)?,
                ColumnData::Text(values) => fit_text(table, name, values, train, spec, forced)?,
            };
            match fitted {
                Fitted::Used {
                    encoding,
                    what,
                    warning,
                } => {
                    if let Some(w) = warning {
                        warnings.push(w);
                    }
                    if let Some(w) = leak_warning(&encoding, &column.data, y, train) {
                        warnings.push(w);
                    }
                    columns.push(note(name, true, what));
                    features.push(encoding);
                }
                Fitted::LeftOut { why, warning } => {
                    if let Some(w) = warning {
                        warnings.push(w);
                    }
                    columns.push(note(name, false, format!("left out: {why}")));
                }
            }
        }
        if let Some(order) = &spec.features {
            features.sort_by_key(|f| order.iter().position(|n| n == f.name()));
        }
        if features.is_empty() {
            return Err(DataError::Table {
                source_name: table.source.clone(),
                message: format!(
                    "no usable feature columns: {}",
                    list_some(
                        columns
                            .iter()
                            .map(|c: &ColumnNote| format!("{} ({})", c.name, c.what)),
                        10
                    )
                ),
            });
        }
        if !spec.log_target {
            if let Some(w) = skew_warning(&spec.target, y, train) {
                warnings.push(w);
            }
        }
        Ok(Encoder {
            features,
            target: TargetEncoding {
                name: spec.target.clone(),
                log: spec.log_target,
            },
            impute: spec.impute,
            unseen: spec.unseen,
            columns,
            warnings,
        })
    }

    /// Number of network inputs.
    pub fn width(&self) -> usize {
        self.features.iter().map(|f| f.width()).sum()
    }

    /// Input names after encoding ("column", "column=level", "column:days", ...).
    pub fn input_names(&self) -> Vec<String> {
        self.features.iter().flat_map(|f| f.input_names()).collect()
    }

    /// Names of the feature columns a table must read as text (categories and dates), so
    /// that prediction reads each column as the model was trained on it.
    pub fn text_columns(&self) -> Vec<String> {
        self.features
            .iter()
            .filter(|f| f.reads_as_text())
            .map(|f| f.name().to_string())
            .collect()
    }

    /// Encodes the feature columns of `rows` (all rows if None) of the rows the encoder was
    /// fitted on. An empty numeric cell without imputation, or a category not seen when
    /// fitting, is an error naming line and column (serve new rows through
    /// [`crate::Predictor`], which flags them instead).
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
        let index = LevelIndex::new(self);
        let mut out = Array2::zeros((rows.len(), self.width()));
        let mut buffer = vec![0.0; self.features.iter().map(|f| f.width()).max().unwrap_or(0)];
        let mut offset = 0;
        for (i, feature) in self.features.iter().enumerate() {
            let column = table.column(feature.name())?;
            let w = feature.width();
            for (k, &r) in rows.iter().enumerate() {
                let cell = column.cell(r);
                let slots = &mut buffer[..w];
                feature
                    .encode_cell(&index.maps[i], UnseenPolicy::Error, cell, slots)
                    .map_err(|p| table.cell_error(r, feature.name(), describe(p, cell)))?;
                for (j, v) in slots.iter().enumerate() {
                    out[(k, offset + j)] = F::of(*v);
                }
            }
            offset += w;
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

/// A message for a cell problem found while encoding a table.
fn describe(problem: CellProblem, cell: Cell<'_>) -> String {
    match (problem, cell) {
        (CellProblem::Missing, _) => "the cell is empty; fill it, or turn on imputation (--impute \
                                      mean, median or most-frequent)"
            .to_string(),
        (CellProblem::UnseenCategory, Cell::Text(t)) => {
            format!("category '{t}' was not seen when the encoder was fitted")
        }
        (CellProblem::NotADate, _) => "not an ISO 8601 date (YYYY-MM-DD[THH:MM[:SS]])".to_string(),
        (CellProblem::NotANumber, _) => "text where the model expects a number".to_string(),
        (CellProblem::NotACategory, _) => "a number where the model expects text".to_string(),
        _ => "the cell cannot be encoded".to_string(),
    }
}

fn note(name: &str, used: bool, what: String) -> ColumnNote {
    ColumnNote {
        name: name.to_string(),
        used,
        what,
    }
}

/// Every name in the spec's column lists exists, and none appears twice.
fn check_names(table: &Table, spec: &EncoderSpec) -> Result<(), DataError> {
    let lists: [(&str, &[String]); 3] = [
        ("--features", spec.features.as_deref().unwrap_or(&[])),
        ("--keep-columns", &spec.keep),
        ("--drop-columns", &spec.drop),
    ];
    for (option, names) in lists {
        for (i, name) in names.iter().enumerate() {
            table.column(name)?;
            if names[..i].contains(name) {
                return Err(DataError::Table {
                    source_name: table.source.clone(),
                    message: format!("{option} names '{name}' twice"),
                });
            }
            if name == &spec.target {
                return Err(DataError::Table {
                    source_name: table.source.clone(),
                    message: format!("'{name}' is both the target and in {option}"),
                });
            }
        }
    }
    Ok(())
}

/// The outcome of fitting one column.
enum Fitted {
    Used {
        encoding: FeatureEncoding,
        what: String,
        warning: Option<String>,
    },
    LeftOut {
        why: String,
        warning: Option<String>,
    },
}

fn missing_error(table: &Table, row: usize, column: &str, count: usize) -> DataError {
    table.cell_error(
        row,
        column,
        format!(
            "the cell is empty ({count} empty cells in this column); fill them, or turn on \
             imputation with --impute mean, median or most-frequent (library: \
             EncoderSpec::impute), which also adds a was-missing input"
        ),
    )
}

fn fit_number(
    table: &Table,
    name: &str,
    values: &[f64],
    train: &[usize],
    spec: &EncoderSpec,
    forced: bool,
) -> Result<Fitted, DataError> {
    let empty: Vec<usize> = (0..values.len()).filter(|&r| values[r].is_nan()).collect();
    let mut seen: Vec<f64> = train
        .iter()
        .map(|&r| values[r])
        .filter(|v| !v.is_nan())
        .collect();
    if seen.is_empty() {
        return Ok(Fitted::LeftOut {
            why: "no values in the training rows".to_string(),
            warning: Some(format!(
                "column '{name}' is empty in every training row: left out"
            )),
        });
    }
    let (min, max) = seen
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    if min == max && empty.is_empty() && !forced {
        return Ok(Fitted::LeftOut {
            why: format!("constant (every value is {min})"),
            warning: None,
        });
    }
    // With imputation asked for, every column gets its fill value, so that an empty cell met
    // only when predicting is filled too; the was-missing input only where training saw one.
    let impute = match (spec.impute, empty.first()) {
        (None, Some(&r)) => return Err(missing_error(table, r, name, empty.len())),
        (how, _) => how,
    };
    seen.sort_by(f64::total_cmp);
    let fill = impute.map(|how| profile::fill_value(&seen, how));
    let what = match fill {
        Some(v) if !empty.is_empty() => format!(
            "number, range [{min}, {max}]; {} empty cells filled with {} {v} (+ a was-missing \
             input)",
            empty.len(),
            impute_name(impute)
        ),
        Some(v) => format!(
            "number, range [{min}, {max}]; an empty cell when predicting is filled with {} {v}",
            impute_name(impute)
        ),
        None => format!("number, range [{min}, {max}]"),
    };
    let held = spec
        .hold_beyond
        .map(|f| {
            let reach = f * (max - min);
            (min - reach, max + reach)
        })
        .filter(|(lo, hi)| lo.is_finite() && hi.is_finite());
    let what = match held {
        Some((lo, hi)) => format!("{what}; values outside [{lo}, {hi}] are held there"),
        None => what,
    };
    Ok(Fitted::Used {
        encoding: FeatureEncoding::Number {
            name: name.to_string(),
            fill,
            min,
            max,
            missing_flag: !empty.is_empty(),
            held,
        },
        what,
        warning: None,
    })
}

fn impute_name(how: Option<Impute>) -> &'static str {
    match how {
        Some(Impute::Mean) => "the mean",
        Some(Impute::Median) => "the median",
        Some(Impute::MostFrequent) => "the most frequent value",
        None => "nothing",
    }
}

fn fit_text(
    table: &Table,
    name: &str,
    values: &[Option<String>],
    train: &[usize],
    spec: &EncoderSpec,
    forced: bool,
) -> Result<Fitted, DataError> {
    let profile = TextProfile::of(values);
    let filled = values.len() - profile.missing;
    if profile.counts.is_empty() {
        return Ok(Fitted::LeftOut {
            why: "every cell is empty".to_string(),
            warning: None,
        });
    }
    let distinct = profile.counts.len();
    if !forced
        && filled >= IDENTIFIER_MIN_ROWS
        && distinct as f64 >= IDENTIFIER_SHARE * filled as f64
    {
        return Ok(Fitted::LeftOut {
            why: format!("identifier-like ({distinct} distinct values in {filled} filled cells)"),
            warning: Some(format!(
                "column '{name}' looks like an identifier ({distinct} distinct values in \
                 {filled} rows) and is left out (--keep-columns {name} uses it)"
            )),
        });
    }
    if !forced && distinct == 1 && profile.missing == 0 {
        return Ok(Fitted::LeftOut {
            why: format!(
                "constant (every value is '{}')",
                profile.counts.keys().next().map_or("", |s| s.as_str())
            ),
            warning: None,
        });
    }
    if profile.all_dates {
        return fit_date(table, name, values, train, spec);
    }
    let split = profile.split_levels(spec.min_level_rows, spec.max_levels);
    let mut what = format!("category, {} levels one-hot", split.kept.len());
    let mut warning = None;
    if !split.pooled.is_empty() {
        let rare = split.pooled.len() - split.capped;
        what += &format!(", {} levels pooled into {OTHER_LEVEL}", split.pooled.len());
        if rare > 0 {
            what += &format!(" ({rare} seen in fewer than {} rows", spec.min_level_rows);
            what += if split.capped > 0 { ", " } else { ")" };
        }
        if split.capped > 0 {
            what += &format!(
                "{}{} beyond the {} most frequent)",
                if rare > 0 { "" } else { " (" },
                split.capped,
                spec.max_levels
            );
            warning = Some(format!(
                "column '{name}' has {distinct} levels: the {} most frequent are kept and \
                 {} are pooled into {OTHER_LEVEL}",
                split.kept.len(),
                split.pooled.len()
            ));
        }
    }
    if profile.missing > 0 {
        what += &format!(", {} empty cells as {MISSING_LEVEL}", profile.missing);
    }
    // With imputation asked for and no empty cell in the table, an empty cell met when
    // predicting takes the most frequent kept level (ties: the first by name).
    let fill = if spec.impute.is_some() && profile.missing == 0 {
        split
            .kept
            .iter()
            .max_by(|a, b| profile.counts[*a].cmp(&profile.counts[*b]).then(b.cmp(a)))
            .cloned()
    } else {
        None
    };
    if let Some(level) = &fill {
        what += &format!(", an empty cell when predicting taken as '{level}'");
    }
    if profile
        .counts
        .keys()
        .all(|l| super::parse_number(l).is_some())
    {
        what += " (numbers read as text: codes)";
    }
    Ok(Fitted::Used {
        encoding: FeatureEncoding::Category {
            name: name.to_string(),
            levels: split.kept,
            fill,
            pooled: (!split.pooled.is_empty()).then_some(split.pooled),
            missing_level: profile.missing > 0,
        },
        what,
        warning,
    })
}

fn fit_date(
    table: &Table,
    name: &str,
    values: &[Option<String>],
    train: &[usize],
    spec: &EncoderSpec,
) -> Result<Fitted, DataError> {
    let parsed = |r: usize| values[r].as_deref().and_then(parse_iso_date);
    let empty: Vec<usize> = (0..values.len()).filter(|&r| values[r].is_none()).collect();
    let mut days: Vec<f64> = train
        .iter()
        .filter_map(|&r| parsed(r))
        .map(|p| p.days)
        .collect();
    if days.is_empty() {
        return Ok(Fitted::LeftOut {
            why: "no dates in the training rows".to_string(),
            warning: None,
        });
    }
    // With imputation asked for, every column gets its fill value, so that an empty cell met
    // only when predicting is filled too; the was-missing input only where training saw one.
    let impute = match (spec.impute, empty.first()) {
        (None, Some(&r)) => return Err(missing_error(table, r, name, empty.len())),
        (how, _) => how,
    };
    days.sort_by(f64::total_cmp);
    let with_time = (0..values.len()).any(|r| parsed(r).is_some_and(|p| p.has_time));
    let (min, max) = (days[0], days[days.len() - 1]);
    let fill = impute.map(|how| profile::fill_value(&days, how).floor());
    Ok(Fitted::Used {
        encoding: FeatureEncoding::Date {
            name: name.to_string(),
            fill,
            min,
            max,
            missing_flag: !empty.is_empty(),
            with_time,
        },
        what: format!(
            "ISO date: days since 1970-01-01 with year and week cycles{}{}",
            if with_time {
                " and the time of day"
            } else {
                ""
            },
            match (fill.is_some(), empty.len()) {
                (false, _) => String::new(),
                (true, 0) => "; an empty cell when predicting is filled".to_string(),
                (true, n) => format!("; {n} empty cells filled (+ a was-missing input)"),
            }
        ),
        warning: None,
    })
}

/// A likely leak: one input explains nearly all the target's variance on the training rows.
fn leak_warning(
    encoding: &FeatureEncoding,
    data: &ColumnData,
    y: &[f64],
    train: &[usize],
) -> Option<String> {
    let (share, measure) = match (encoding, data) {
        (FeatureEncoding::Number { .. }, ColumnData::Number(x)) => (
            profile::r_squared(train.iter().map(|&r| (x[r], y[r]))),
            "r²",
        ),
        (FeatureEncoding::Date { .. }, ColumnData::Text(x)) => (
            profile::r_squared(train.iter().map(|&r| {
                let d = x[r].as_deref().and_then(parse_iso_date);
                (d.map_or(f64::NAN, |p| p.days), y[r])
            })),
            "r²",
        ),
        (FeatureEncoding::Category { levels, .. }, ColumnData::Text(x)) => {
            if levels.len() * 10 > train.len() {
                return None;
            }
            (
                profile::eta_squared(train.iter().map(|&r| (x[r].as_deref(), y[r]))),
                "η² (share of variance between its levels)",
            )
        }
        _ => return None,
    };
    (share >= LEAK_SHARE).then(|| {
        format!(
            "column '{}' alone explains {:.1}% of the target's variance on the training rows \
             ({measure}): a likely leak or proxy of the target; make sure it is known when \
             predictions are made, or leave it out (--drop-columns {})",
            encoding.name(),
            100.0 * share,
            encoding.name()
        )
    })
}

/// Advice for a strongly right-skewed positive target.
fn skew_warning(target: &str, y: &[f64], train: &[usize]) -> Option<String> {
    let v: Vec<f64> = train
        .iter()
        .map(|&r| y[r])
        .filter(|v| !v.is_nan())
        .collect();
    if v.len() < 3 || v.iter().any(|&t| t <= 0.0) {
        return None;
    }
    let skew = profile::skewness(&v);
    (skew >= SKEW_ADVICE).then(|| {
        format!(
            "the target '{target}' is positive and right-skewed (sample skewness {skew:.2}): \
             --log-target (model ln of it) often fits such targets better; compare both on \
             held-out rows"
        )
    })
}

impl super::Column {
    /// Cell `row` as an encoder input.
    pub fn cell(&self, row: usize) -> Cell<'_> {
        match &self.data {
            ColumnData::Number(v) if v[row].is_nan() => Cell::Missing,
            ColumnData::Number(v) => Cell::Number(v[row]),
            ColumnData::Text(v) => v[row].as_deref().map_or(Cell::Missing, Cell::Text),
        }
    }
}
