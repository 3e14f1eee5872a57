//! The frozen predictor for services: shareable across threads (`Send + Sync`), a single-row
//! path that writes into caller-owned scratch and allocates nothing, a table path, and an
//! input-range guard that flags extrapolation.

use crate::activation::{leaky, Activation};
use crate::data::{ColumnData, DataError, Encoder, FeatureEncoding, Table};
use crate::layer::LayerSpec;
use crate::model::{Model, ModelError};
use crate::scale::Standardizer;
use std::collections::HashMap;
use std::path::Path;

/// Fraction of a feature's training range beyond which a value counts as extrapolation.
pub const DEFAULT_MARGIN: f64 = 0.05;

/// One cell of a row to predict, in the model's feature order.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Cell<'a> {
    /// A number.
    Number(f64),
    /// A category.
    Text(&'a str),
    /// An empty cell (filled if the model was trained with imputation).
    Missing,
}

/// Why a row could not be predicted; `feature` indexes [`Predictor::feature_names`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct RowError {
    /// Which feature.
    pub feature: usize,
    /// What is wrong with it.
    pub kind: RowErrorKind,
}

/// What is wrong with a cell.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RowErrorKind {
    /// The row has the wrong number of cells (`feature` holds the count given).
    WrongLength,
    /// Empty, and the model has no imputation.
    Missing,
    /// A category not seen in training.
    UnseenCategory,
    /// Text where a number is expected.
    NotANumber,
    /// A number where a category is expected.
    NotACategory,
    /// A number that is not finite.
    NonFinite,
}

/// The result of one row.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowPrediction {
    /// The prediction, in the target's own units.
    pub value: f64,
    /// Some numeric feature is outside its training range by more than the margin; which ones
    /// are in the scratch ([`Scratch::out_of_range`]).
    pub extrapolated: bool,
}

/// Caller-owned working memory for [`Predictor::predict_row`]; make one per thread with
/// [`Predictor::scratch`] and reuse it.
#[derive(Clone, Debug)]
pub struct Scratch {
    a: Vec<f32>,
    b: Vec<f32>,
    out_of_range: Vec<bool>,
}

impl Scratch {
    /// Per feature, whether the last row was outside the training range.
    pub fn out_of_range(&self) -> &[bool] {
        &self.out_of_range
    }
}

/// One inference step.
#[derive(Clone, Debug)]
enum Step {
    Affine {
        inputs: usize,
        outputs: usize,
        weights: Vec<f32>,
        bias: Vec<f32>,
    },
    Act(Activation),
    Prelu(Vec<f32>),
}

/// A frozen model for serving.
#[derive(Clone, Debug)]
pub struct Predictor {
    encoder: Encoder,
    inputs: Standardizer,
    target: Standardizer,
    steps: Vec<Step>,
    max_width: usize,
    levels: Vec<HashMap<String, usize>>,
    margin: f64,
}

impl Predictor {
    /// A predictor for `model`, with the default extrapolation margin.
    pub fn new(model: &Model) -> Predictor {
        let net = &model.network;
        let params = net.params();
        let mut steps = Vec::new();
        let mut offset = 0;
        for spec in net.specs() {
            match spec {
                LayerSpec::Affine {
                    inputs, outputs, ..
                } => {
                    let w = inputs * outputs;
                    steps.push(Step::Affine {
                        inputs,
                        outputs,
                        weights: params[offset..offset + w].to_vec(),
                        bias: params[offset + w..offset + w + outputs].to_vec(),
                    });
                    offset += w + outputs;
                }
                LayerSpec::Activation {
                    width,
                    activation: Activation::Prelu { shared, .. },
                } => {
                    let n = if shared { 1 } else { width };
                    let slopes = &params[offset..offset + n];
                    steps.push(Step::Prelu(if shared {
                        vec![slopes[0]; width]
                    } else {
                        slopes.to_vec()
                    }));
                    offset += n;
                }
                LayerSpec::Activation { activation, .. } => steps.push(Step::Act(activation)),
                LayerSpec::Dropout { .. } => {}
            }
        }
        let max_width = net
            .specs()
            .iter()
            .map(|s| match *s {
                LayerSpec::Affine {
                    inputs, outputs, ..
                } => inputs.max(outputs),
                LayerSpec::Activation { width, .. } | LayerSpec::Dropout { width, .. } => width,
            })
            .max()
            .unwrap_or(1)
            .max(net.input_width());
        let levels = model
            .encoder
            .features
            .iter()
            .map(|f| match f {
                FeatureEncoding::Category { levels, .. } => levels
                    .iter()
                    .enumerate()
                    .map(|(i, l)| (l.clone(), i))
                    .collect(),
                FeatureEncoding::Number { .. } => HashMap::new(),
            })
            .collect();
        Predictor {
            encoder: model.encoder.clone(),
            inputs: model.inputs.clone(),
            target: model.target.clone(),
            steps,
            max_width,
            levels,
            margin: DEFAULT_MARGIN,
        }
    }

    /// Loads a model file and freezes it.
    pub fn load(path: &Path) -> Result<Predictor, ModelError> {
        Ok(Predictor::new(&Model::load(path)?))
    }

    /// Sets the extrapolation margin as a fraction of each feature's training range.
    pub fn with_margin(mut self, margin: f64) -> Self {
        self.margin = margin.max(0.0);
        self
    }

    /// Feature (column) names in the order rows must give them.
    pub fn feature_names(&self) -> Vec<&str> {
        self.encoder.features.iter().map(|f| f.name()).collect()
    }

    /// The encoder (columns, categories, training ranges).
    pub fn encoder(&self) -> &Encoder {
        &self.encoder
    }

    /// Working memory for [`Predictor::predict_row`].
    pub fn scratch(&self) -> Scratch {
        Scratch {
            a: vec![0.0; self.max_width],
            b: vec![0.0; self.max_width],
            out_of_range: vec![false; self.encoder.features.len()],
        }
    }

    /// A message for a row error, naming the feature.
    pub fn explain(&self, error: &RowError) -> String {
        let name = self
            .encoder
            .features
            .get(error.feature)
            .map_or("?", |f| f.name());
        match error.kind {
            RowErrorKind::WrongLength => format!(
                "the row has {} values; the model takes {} ({})",
                error.feature,
                self.encoder.features.len(),
                self.feature_names().join(", ")
            ),
            RowErrorKind::Missing => format!("'{name}' is empty and the model has no imputation"),
            RowErrorKind::UnseenCategory => {
                format!("'{name}' has a category that was not seen in training")
            }
            RowErrorKind::NotANumber => format!("'{name}' must be a number"),
            RowErrorKind::NotACategory => format!("'{name}' must be a category (text)"),
            RowErrorKind::NonFinite => format!("'{name}' is not a finite number"),
        }
    }

    /// Predicts one row without allocating: cells in [`Predictor::feature_names`] order.
    pub fn predict_row(
        &self,
        row: &[Cell<'_>],
        scratch: &mut Scratch,
    ) -> Result<RowPrediction, RowError> {
        let features = &self.encoder.features;
        if row.len() != features.len() {
            return Err(RowError {
                feature: row.len(),
                kind: RowErrorKind::WrongLength,
            });
        }
        let Scratch { a, b, out_of_range } = scratch;
        let mut extrapolated = false;
        let mut k = 0;
        for (i, (feature, cell)) in features.iter().zip(row).enumerate() {
            let error = |kind| RowError { feature: i, kind };
            match feature {
                FeatureEncoding::Number { fill, min, max, .. } => {
                    let v = match *cell {
                        Cell::Number(v) if v.is_finite() => v,
                        Cell::Number(_) => return Err(error(RowErrorKind::NonFinite)),
                        Cell::Missing => fill.ok_or(error(RowErrorKind::Missing))?,
                        Cell::Text(_) => return Err(error(RowErrorKind::NotANumber)),
                    };
                    let slack = self.margin * (max - min).max(f64::EPSILON * min.abs());
                    let outside = v < min - slack || v > max + slack;
                    out_of_range[i] = outside;
                    extrapolated |= outside;
                    a[k] = ((v - self.inputs.mean[k]) / self.inputs.sd[k]) as f32;
                    k += 1;
                }
                FeatureEncoding::Category { levels, fill, .. } => {
                    out_of_range[i] = false;
                    let name = match *cell {
                        Cell::Text(t) => t,
                        Cell::Missing => fill.as_deref().ok_or(error(RowErrorKind::Missing))?,
                        Cell::Number(_) => return Err(error(RowErrorKind::NotACategory)),
                    };
                    let hit = *self.levels[i]
                        .get(name)
                        .ok_or(error(RowErrorKind::UnseenCategory))?;
                    for j in 0..levels.len() {
                        let one = if j == hit { 1.0 } else { 0.0 };
                        a[k + j] = ((one - self.inputs.mean[k + j]) / self.inputs.sd[k + j]) as f32;
                    }
                    k += levels.len();
                }
            }
        }
        let out = crate::kernels::with_simd(|| self.run_steps(a, b, k));
        let scaled = out as f64 * self.target.sd[0] + self.target.mean[0];
        Ok(RowPrediction {
            value: self.encoder.decode_target(scaled),
            extrapolated,
        })
    }

    /// The layers on one encoded row of `width` values in `a` (`b` is the second buffer);
    /// returns the scaled output.
    #[inline(always)]
    fn run_steps(&self, a: &mut [f32], b: &mut [f32], mut width: usize) -> f32 {
        let (mut cur, mut next) = (a, b);
        for step in &self.steps {
            match step {
                Step::Affine {
                    inputs,
                    outputs,
                    weights,
                    bias,
                } => {
                    affine_row(&cur[..*inputs], weights, bias, &mut next[..*outputs]);
                    width = *outputs;
                }
                Step::Act(act) => act.apply(&cur[..width], &mut next[..width]),
                Step::Prelu(slopes) => next[..width]
                    .iter_mut()
                    .zip(&cur[..width])
                    .zip(slopes)
                    .for_each(|((o, &v), &s)| *o = leaky(v, s)),
            }
            std::mem::swap(&mut cur, &mut next);
        }
        cur[0]
    }

    /// Predicts every row of a table (columns found by name; extra columns ignored). Each row
    /// gets its prediction or its error message, and the names of extrapolated features.
    pub fn predict_table(&self, table: &Table) -> Result<Vec<TableRow>, DataError> {
        let columns: Vec<&ColumnData> = self
            .encoder
            .features
            .iter()
            .map(|f| table.column(f.name()).map(|c| &c.data))
            .collect::<Result<_, _>>()?;
        let mut scratch = self.scratch();
        let mut row: Vec<Cell<'_>> = Vec::with_capacity(columns.len());
        let mut out = Vec::with_capacity(table.rows());
        for r in 0..table.rows() {
            row.clear();
            row.extend(columns.iter().map(|c| match c {
                ColumnData::Number(v) if v[r].is_nan() => Cell::Missing,
                ColumnData::Number(v) => Cell::Number(v[r]),
                ColumnData::Text(v) => v[r].as_deref().map_or(Cell::Missing, Cell::Text),
            }));
            out.push(match self.predict_row(&row, &mut scratch) {
                Ok(p) => TableRow {
                    line: table.lines[r],
                    value: Some(p.value),
                    out_of_range: self
                        .encoder
                        .features
                        .iter()
                        .zip(scratch.out_of_range())
                        .filter(|(_, &o)| o)
                        .map(|(f, _)| f.name().to_string())
                        .collect(),
                    error: None,
                },
                Err(e) => TableRow {
                    line: table.lines[r],
                    value: None,
                    out_of_range: Vec::new(),
                    error: Some(self.explain(&e)),
                },
            });
        }
        Ok(out)
    }
}

/// The prediction for one table row.
#[derive(Clone, Debug, PartialEq)]
pub struct TableRow {
    /// File line of the row.
    pub line: u64,
    /// The prediction, if the row could be encoded.
    pub value: Option<f64>,
    /// Features outside their training range by more than the margin.
    pub out_of_range: Vec<String>,
    /// Why the row could not be predicted.
    pub error: Option<String>,
}

/// out = x·W + bias for one row (W is inputs × outputs, row-major): a dot product with eight
/// partial sums for a single output, else one scaled row of W added per input.
#[inline(always)]
fn affine_row(x: &[f32], weights: &[f32], bias: &[f32], out: &mut [f32]) {
    if out.len() == 1 {
        let mut acc = [0.0_f32; 8];
        let (xs, ws) = (x.chunks_exact(8), weights.chunks_exact(8));
        let tail: f32 = xs
            .remainder()
            .iter()
            .zip(ws.remainder())
            .map(|(a, b)| a * b)
            .sum();
        for (u, v) in xs.zip(ws) {
            for l in 0..8 {
                acc[l] += u[l] * v[l];
            }
        }
        out[0] = bias[0] + tail + acc.iter().sum::<f32>();
        return;
    }
    out.copy_from_slice(bias);
    let width = out.len();
    for (&xi, row) in x.iter().zip(weights.chunks_exact(width)) {
        out.iter_mut().zip(row).for_each(|(o, &w)| *o += xi * w);
    }
}
