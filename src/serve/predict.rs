//! The frozen predictor for services: shareable across threads (`Send + Sync`), a single-row
//! path that writes into caller-owned scratch and allocates nothing, a table path, and an
//! input-range guard that flags extrapolation.

use crate::data::{Column, DataError, Encoder, FeatureEncoding, LevelIndex, Table};
use crate::fit::scale::Standardizer;
use crate::nn::activation::{leaky, Activation};
use crate::nn::layer::LayerSpec;
use crate::serve::interval::Conformal;
use crate::serve::model::{Model, ModelError};
use crate::serve::path::{self, Layout, PathScratch};
use std::path::Path;

mod block;
pub use block::BLOCK_ROWS;

/// Fraction of a feature's training range beyond which a value counts as extrapolation.
pub const DEFAULT_MARGIN: f64 = 0.05;

pub use crate::data::Cell;
/// What is wrong with a cell (the encoder's [`CellProblem`](crate::data::CellProblem)).
pub use crate::data::CellProblem as RowErrorKind;

/// Why a row could not be predicted; `feature` indexes [`Predictor::feature_names`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct RowError {
    /// Which feature (for [`RowErrorKind::WrongLength`]: the number of cells given).
    pub feature: usize,
    /// What is wrong with it.
    pub kind: RowErrorKind,
}

/// The result of one row.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowPrediction {
    /// The prediction (the members' average), in the target's own units.
    pub value: f64,
    /// Lower end of the prediction interval, if the model has one.
    pub lower: Option<f64>,
    /// Upper end of the prediction interval.
    pub upper: Option<f64>,
    /// Some numeric feature is outside its training range by more than the margin; which ones
    /// are in the scratch ([`Scratch::out_of_range`]).
    pub extrapolated: bool,
    /// Some category was never seen in training and went through the pooled (or average)
    /// level; which ones are in the scratch ([`Scratch::unseen`]).
    pub unseen: bool,
}

/// Largest standardized input a row may have: 1e15 training standard deviations (far past
/// any extrapolation worth a number, and well inside f32, whose products with the weights
/// would otherwise overflow).
pub const MAX_SCALED_INPUT: f32 = 1e15;

/// Caller-owned working memory for [`Predictor::predict_row`]; make one per thread with
/// [`Predictor::scratch`] and reuse it.
#[derive(Clone, Debug)]
pub struct Scratch {
    a: Vec<f32>,
    b: Vec<f32>,
    input: Vec<f32>,
    raw: Vec<f64>,
    out_of_range: Vec<bool>,
    unseen: Vec<bool>,
    path: PathScratch,
    summed: Vec<f64>,
    wide: Vec<f64>,
}

impl Scratch {
    /// Per feature, whether the last row was outside the training range.
    pub fn out_of_range(&self) -> &[bool] {
        &self.out_of_range
    }

    /// Per feature, whether the last row had a category never seen in training.
    pub fn unseen(&self) -> &[bool] {
        &self.unseen
    }
}

/// One inference step.
#[derive(Clone, Debug)]
pub(crate) enum Step {
    Affine {
        inputs: usize,
        outputs: usize,
        weights: Vec<f32>,
        bias: Vec<f32>,
    },
    Act(Activation),
    Prelu(Vec<f32>),
}

/// How a member starts on a row: its first affine layer on the shifted inputs with the shift
/// folded into the bias (one-hot levels that are off then add nothing and are skipped), or,
/// when it does not start that way, every step on the row as it is.
pub(super) enum Start<'p> {
    /// The first affine layer's weights and folded bias, its width, and the steps after it.
    Shifted {
        weights: &'p [f32],
        bias: &'p [f32],
        outputs: usize,
        rest: &'p [Step],
    },
    /// All the member's steps.
    Dense(&'p [Step]),
}

/// A frozen model for serving.
#[derive(Clone, Debug)]
pub struct Predictor {
    encoder: Encoder,
    inputs: Standardizer,
    target: Standardizer,
    members: Vec<Vec<Step>>,
    interval: Option<Conformal>,
    max_width: usize,
    index: LevelIndex,
    margin: f64,
    layouts: Vec<Layout>,
    baseline: f64,
    /// Per encoded input, the standardized value of 0 for one-hot inputs (0 for the rest):
    /// subtracted before the first layer, so that a level that is off contributes exactly
    /// nothing and is skipped.
    shift: Vec<f32>,
    /// Per encoded input, the standardized value of 1 for one-hot inputs (0 for the rest).
    on: Vec<f32>,
    /// Per feature, whether it is one-hot with every standardized 0 and 1 within range: its
    /// inputs are then copied from `shift` and `on`.
    one_hot_ready: Vec<bool>,
    /// Per member, its first affine layer's bias with the shift folded in (None when the
    /// network does not start with an affine layer).
    first_bias: Vec<Option<Vec<f32>>>,
}

impl Predictor {
    /// A predictor for `model`, with the default extrapolation margin.
    pub fn new(model: &Model) -> Predictor {
        let members: Vec<Vec<Step>> = model.members.iter().map(steps_of).collect();
        let max_width = model
            .members
            .iter()
            .flat_map(|net| {
                net.specs().into_iter().map(|s| match s {
                    LayerSpec::Affine {
                        inputs, outputs, ..
                    } => inputs.max(outputs),
                    LayerSpec::Activation { width, .. } | LayerSpec::Dropout { width, .. } => width,
                })
            })
            .max()
            .unwrap_or(1)
            .max(model.encoder.width());
        let input = model.encoder.width();
        let layouts = members.iter().map(|m| Layout::new(m, input)).collect();
        let (shift, on) = (one_hot_scaled(model, 0.0), one_hot_scaled(model, 1.0));
        let mut k = 0;
        let one_hot_ready = (model.encoder.features.iter())
            .map(|f| {
                let inputs = k..k + f.width();
                k = inputs.end;
                matches!(f, FeatureEncoding::Category { .. })
                    && within_range(&shift[inputs.clone()])
                    && within_range(&on[inputs])
            })
            .collect();
        let first_bias = members.iter().map(|m| folded_bias(m, &shift)).collect();
        let mut predictor = Predictor {
            encoder: model.encoder.clone(),
            inputs: model.inputs.clone(),
            target: model.target.clone(),
            members,
            interval: model.interval.clone(),
            max_width,
            index: LevelIndex::new(&model.encoder),
            margin: DEFAULT_MARGIN,
            layouts,
            baseline: 0.0,
            shift,
            on,
            one_hot_ready,
            first_bias,
        };
        let mut scratch = predictor.scratch();
        scratch.a[..input].fill(0.0);
        let scaled = predictor.ensemble(&mut scratch, input);
        predictor.baseline = predictor.encoder.decode_target(scaled);
        predictor
    }

    /// The prediction at the attribution baseline, in target units: the ensemble at the zero
    /// point of its (standardized) inputs, which is every encoded input at its training mean
    /// (one-hot levels at their training frequencies, date parts at their means). A model
    /// trained without input scaling has no stored means; its baseline is the all-zero input.
    pub fn baseline(&self) -> f64 {
        self.baseline
    }

    /// Ensemble members whose predictions are averaged.
    pub fn member_count(&self) -> usize {
        self.members.len()
    }

    /// The calibrated interval, if the model has one.
    pub fn interval(&self) -> Option<&Conformal> {
        self.interval.as_ref()
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
        let features = &self.encoder.features;
        Scratch {
            a: vec![0.0; self.max_width],
            b: vec![0.0; self.max_width],
            input: vec![0.0; self.max_width],
            raw: vec![0.0; features.iter().map(|f| f.width()).max().unwrap_or(0)],
            out_of_range: vec![false; features.len()],
            unseen: vec![false; features.len()],
            path: PathScratch::new(
                self.layouts.iter().map(Layout::total).max().unwrap_or(0),
                self.encoder.width(),
            ),
            summed: vec![0.0; self.encoder.width()],
            wide: vec![0.0; self.encoder.width()],
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
            RowErrorKind::NotADate => {
                format!("'{name}' must be an ISO 8601 date (YYYY-MM-DD[THH:MM[:SS]])")
            }
            RowErrorKind::NotANumber => format!("'{name}' must be a number"),
            RowErrorKind::NotACategory => format!("'{name}' must be a category (text)"),
            RowErrorKind::NonFinite => format!("'{name}' is not a finite number"),
            RowErrorKind::Overflow if error.feature >= self.encoder.features.len() => {
                "the row is so far outside the training range that the model cannot compute \
                 with it"
                    .to_string()
            }
            RowErrorKind::Overflow => format!(
                "'{name}' is so far outside the training range that the model cannot compute \
                 with it"
            ),
        }
    }

    /// Predicts one row without allocating: cells in [`Predictor::feature_names`] order.
    pub fn predict_row(
        &self,
        row: &[Cell<'_>],
        scratch: &mut Scratch,
    ) -> Result<RowPrediction, RowError> {
        let Scratch {
            a,
            raw,
            out_of_range,
            unseen,
            ..
        } = scratch;
        let k = self.encoder.width();
        let flags = self.encode_row(row, raw, out_of_range, unseen, &mut a[..k])?;
        let scaled = self.ensemble(scratch, k);
        self.finish(scaled, flags)
    }

    /// Encodes and standardizes one row into `a` (one value per encoded input), noting per
    /// feature whether it is out of range or an unseen category; returns whether any is
    /// (extrapolated, unseen). `raw` holds the widest feature's unscaled inputs.
    fn encode_row(
        &self,
        row: &[Cell<'_>],
        raw: &mut [f64],
        out_of_range: &mut [bool],
        unseen: &mut [bool],
        a: &mut [f32],
    ) -> Result<(bool, bool), RowError> {
        let features = &self.encoder.features;
        if row.len() != features.len() {
            return Err(RowError {
                feature: row.len(),
                kind: RowErrorKind::WrongLength,
            });
        }
        let (mut extrapolated, mut any_unseen) = (false, false);
        let mut k = 0;
        for (i, (feature, cell)) in features.iter().zip(row).enumerate() {
            let w = feature.width();
            let slots = &mut raw[..w];
            let outcome = feature
                .encode_cell(&self.index.maps[i], self.encoder.unseen, *cell, slots)
                .map_err(|kind| RowError { feature: i, kind })?;
            unseen[i] = outcome.unseen;
            any_unseen |= outcome.unseen;
            out_of_range[i] = match (outcome.value, feature.range()) {
                (Some(v), Some((min, max))) => {
                    let slack = self.margin * (max - min).max(f64::EPSILON * min.abs());
                    v < min - slack || v > max + slack
                }
                _ => false,
            };
            extrapolated |= out_of_range[i];
            let scaled = &mut a[k..k + w];
            match outcome.on {
                // One-hot inputs with one level on: every scaled value was computed in `new`
                // by the formula below (same bits) and found within range there.
                Some(on) if self.one_hot_ready[i] => {
                    scaled.copy_from_slice(&self.shift[k..k + w]);
                    scaled[on] = self.on[k + on];
                }
                _ => {
                    for (j, (x, &v)) in scaled.iter_mut().zip(&*slots).enumerate() {
                        // NaN marks "at the training mean" (an unseen category without a
                        // pooled level).
                        *x = if v.is_nan() {
                            0.0
                        } else {
                            ((v - self.inputs.mean[k + j]) / self.inputs.sd[k + j]) as f32
                        };
                    }
                    // A scaled value beyond f32 (or one the network cannot carry) would give
                    // a meaningless number: refuse the row instead. A held number is judged
                    // by the value given, so an absurd one is still refused, not held.
                    let given = match (feature, outcome.value) {
                        (FeatureEncoding::Number { held: Some(_), .. }, Some(v)) => {
                            ((v - self.inputs.mean[k]) / self.inputs.sd[k]) as f32
                        }
                        _ => 0.0,
                    };
                    if !within_range(scaled) || !within_range(&[given]) {
                        return Err(RowError {
                            feature: i,
                            kind: RowErrorKind::Overflow,
                        });
                    }
                }
            }
            k += w;
        }
        Ok((extrapolated, any_unseen))
    }

    /// A row's prediction from the ensemble's output `scaled` (before decoding) and the
    /// row's (extrapolated, unseen) flags: decodes it and its interval, or refuses a
    /// non-finite output.
    fn finish(
        &self,
        scaled: f64,
        (extrapolated, unseen): (bool, bool),
    ) -> Result<RowPrediction, RowError> {
        if !scaled.is_finite() {
            // No single input to blame: the index past the last names the row as a whole.
            return Err(RowError {
                feature: self.encoder.features.len(),
                kind: RowErrorKind::Overflow,
            });
        }
        let (lower, upper) = match &self.interval {
            Some(c) => {
                let (lo, hi) = c.around(scaled);
                (
                    Some(self.encoder.decode_target(lo)),
                    Some(self.encoder.decode_target(hi)),
                )
            }
            None => (None, None),
        };
        Ok(RowPrediction {
            value: self.encoder.decode_target(scaled),
            lower,
            upper,
            extrapolated,
            unseen,
        })
    }

    /// The members' average at the scaled input in `scratch.a[..k]` (kept in
    /// `scratch.input`), on the network's target scale before decoding.
    fn ensemble(&self, scratch: &mut Scratch, k: usize) -> f64 {
        let Scratch { a, b, input, .. } = scratch;
        input[..k].copy_from_slice(&a[..k]);
        let mut sum = 0.0_f64;
        for start in self.starts(k) {
            let value = match start {
                Start::Shifted {
                    weights,
                    bias,
                    outputs,
                    rest,
                } => crate::kernels::with_simd(|| {
                    shifted_affine(
                        &input[..k],
                        &self.shift[..k],
                        weights,
                        bias,
                        &mut a[..outputs],
                    );
                    run_steps(rest, a, b, outputs)
                }),
                Start::Dense(steps) => {
                    a[..k].copy_from_slice(&input[..k]);
                    crate::kernels::with_simd(|| run_steps(steps, a, b, k))
                }
            };
            sum += f64::from(value);
        }
        self.average(sum)
    }

    /// How each member starts on a row of `k` encoded inputs (see [`Start`]).
    fn starts(&self, k: usize) -> impl Iterator<Item = Start<'_>> {
        self.members
            .iter()
            .zip(&self.first_bias)
            .map(
                move |(steps, first_bias)| match (steps.as_slice(), first_bias) {
                    (
                        [Step::Affine {
                            inputs,
                            outputs,
                            weights,
                            ..
                        }, rest @ ..],
                        Some(bias),
                    ) if *inputs == k => Start::Shifted {
                        weights,
                        bias,
                        outputs: *outputs,
                        rest,
                    },
                    _ => Start::Dense(steps),
                },
            )
    }

    /// The members' average on the network's target scale, from the sum of their outputs
    /// (added in member order, in f64).
    fn average(&self, sum: f64) -> f64 {
        let out = sum / self.members.len() as f64;
        out * self.target.sd[0] + self.target.mean[0]
    }

    /// Integrated gradients (Sundararajan, Taly & Yan 2017) of one row: writes into `out` one
    /// attribution per feature ([`Predictor::feature_names`] order, in target units) so that
    /// `Σ out + baseline = prediction` (the completeness axiom; the prediction is the one
    /// [`Predictor::predict_row`] gives, and the sum matches it to float rounding for
    /// piecewise-linear networks, within about 1e-6 of the network's output scale for
    /// smooth ones).
    ///
    /// The path runs in a straight line on the network's standardized input scale from the
    /// baseline ([`Predictor::baseline`]) to the row; the gradient of the members' average is
    /// integrated exactly for piecewise-linear activations (ReLU family) and by refined
    /// Gauss–Legendre quadrature otherwise, in f64. The attribution of each encoded input is
    /// (input − baseline input) × average gradient; one-hot levels, date parts and
    /// was-missing inputs are summed back into their column. For a log target the
    /// attributions of ln(target) are rescaled by (prediction − baseline) / (ln prediction −
    /// ln baseline), which keeps completeness and every sign.
    ///
    /// Allocates nothing; `out` must have one entry per feature (else a
    /// [`RowErrorKind::WrongLength`] error naming `out`'s length).
    pub fn attribute_row(
        &self,
        row: &[Cell<'_>],
        scratch: &mut Scratch,
        out: &mut [f64],
    ) -> Result<RowAttribution, RowError> {
        let features = &self.encoder.features;
        if out.len() != features.len() {
            return Err(RowError {
                feature: out.len(),
                kind: RowErrorKind::WrongLength,
            });
        }
        let prediction = self.predict_row(row, scratch)?;
        let k = self.encoder.width();
        let Scratch {
            input,
            path,
            summed,
            wide,
            ..
        } = scratch;
        for (w, &v) in wide[..k].iter_mut().zip(&input[..k]) {
            *w = f64::from(v);
        }
        summed[..k].fill(0.0);
        let (mut start, mut end) = (0.0, 0.0);
        for (steps, layout) in self.members.iter().zip(&self.layouts) {
            let (s, e) = path::integrate(steps, layout, &wide[..k], path);
            start += s;
            end += e;
            for (t, &g) in summed[..k].iter_mut().zip(&path.average[..k]) {
                *t += g;
            }
        }
        let members = self.members.len() as f64;
        let sd = self.target.sd[0];
        // Scale of each input's attribution: target units per network output unit.
        let factor = if self.encoder.target.log {
            let (lo, hi) = (start / members * sd, end / members * sd);
            let change = hi - lo;
            let p = self.encoder.decode_target(hi + self.target.mean[0]);
            let b = self.encoder.decode_target(lo + self.target.mean[0]);
            if change.abs() > 1e-12 {
                (p - b) / change * sd
            } else {
                p * sd
            }
        } else {
            sd
        };
        let mut offset = 0;
        for (o, feature) in out.iter_mut().zip(features) {
            let w = feature.width();
            *o = (offset..offset + w)
                .map(|i| wide[i] * summed[i])
                .sum::<f64>()
                * factor
                / members;
            offset += w;
        }
        Ok(RowAttribution {
            prediction,
            baseline: self.baseline,
        })
    }

    /// Predicts every row of a table (columns found by name; extra columns ignored). Each row
    /// gets its prediction or its error message, and the names of extrapolated features.
    ///
    /// Rows go through the network [`BLOCK_ROWS`] at a time (each layer's weights are used for
    /// the whole block); every row gets exactly the bits [`Predictor::predict_row`] gives it.
    pub fn predict_table(&self, table: &Table) -> Result<Vec<TableRow>, DataError> {
        let columns: Vec<&Column> = self
            .encoder
            .features
            .iter()
            .map(|f| table.column(f.name()))
            .collect::<Result<_, _>>()?;
        let mut block = block::Block::new(self);
        let mut row: Vec<Cell<'_>> = Vec::with_capacity(columns.len());
        let mut out = Vec::with_capacity(table.rows());
        for start in (0..table.rows()).step_by(BLOCK_ROWS) {
            let end = (start + BLOCK_ROWS).min(table.rows());
            block.clear();
            for r in start..end {
                row.clear();
                row.extend(columns.iter().map(|c| c.cell(r)));
                block.encode(self, &row);
            }
            block.run(self);
            for (i, r) in (start..end).enumerate() {
                let line = table.lines[r];
                out.push(match block.result(self, i) {
                    Ok((p, flags)) => TableRow {
                        line,
                        value: Some(p.value),
                        lower: p.lower,
                        upper: p.upper,
                        out_of_range: self.flagged_names(flags.out_of_range),
                        unseen: self.flagged_names(flags.unseen),
                        error: None,
                    },
                    Err(e) => TableRow {
                        line,
                        value: None,
                        lower: None,
                        upper: None,
                        out_of_range: Vec::new(),
                        unseen: Vec::new(),
                        error: Some(self.explain(&e)),
                    },
                });
            }
        }
        Ok(out)
    }

    /// The names of the features whose flag is set.
    fn flagged_names(&self, flags: &[bool]) -> Vec<String> {
        self.encoder
            .features
            .iter()
            .zip(flags)
            .filter(|(_, &f)| f)
            .map(|(f, _)| f.name().to_string())
            .collect()
    }
}

/// The inference steps of one network.
fn steps_of(net: &crate::nn::network::Network<f32>) -> Vec<Step> {
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
    steps
}

/// One network's layers on one encoded row of `width` values in `a` (`b` is the second
/// buffer); returns the scaled output.
#[inline(always)]
fn run_steps(steps: &[Step], a: &mut [f32], b: &mut [f32], mut width: usize) -> f32 {
    let (mut cur, mut next) = (a, b);
    for step in steps {
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

/// The result of [`Predictor::attribute_row`]: the row's prediction and the baseline
/// prediction the attributions start from.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowAttribution {
    /// The row's prediction, as [`Predictor::predict_row`] gives it.
    pub prediction: RowPrediction,
    /// The prediction at the baseline (see [`Predictor::baseline`]).
    pub baseline: f64,
}

/// The prediction for one table row.
#[derive(Clone, Debug, PartialEq)]
pub struct TableRow {
    /// File line of the row.
    pub line: u64,
    /// The prediction, if the row could be encoded.
    pub value: Option<f64>,
    /// The prediction interval, if the model has one.
    pub lower: Option<f64>,
    /// Upper end of the interval.
    pub upper: Option<f64>,
    /// Features outside their training range by more than the margin.
    pub out_of_range: Vec<String>,
    /// Features with a category never seen in training (predicted through the pooled level).
    pub unseen: Vec<String>,
    /// Why the row could not be predicted.
    pub error: Option<String>,
}

/// The standardized value of `v` for every one-hot input of `model` (computed exactly as a
/// row's inputs are, so an input that is `v` gives exactly this), 0 for every other input.
fn one_hot_scaled(model: &Model, v: f64) -> Vec<f32> {
    let mut scaled = Vec::with_capacity(model.encoder.width());
    for feature in &model.encoder.features {
        let one_hot = matches!(feature, FeatureEncoding::Category { .. });
        for _ in 0..feature.width() {
            let k = scaled.len();
            scaled.push(if one_hot {
                ((v - model.inputs.mean[k]) / model.inputs.sd[k]) as f32
            } else {
                0.0
            });
        }
    }
    scaled
}

/// Whether every standardized input is finite and at most [`MAX_SCALED_INPUT`] in size.
fn within_range(scaled: &[f32]) -> bool {
    scaled
        .iter()
        .all(|v| v.is_finite() && v.abs() <= MAX_SCALED_INPUT)
}

/// The first affine layer's bias plus Σ shift·weights (in f64), so that the layer can take
/// `input − shift`; None when the member does not start with an affine layer of that width.
fn folded_bias(steps: &[Step], shift: &[f32]) -> Option<Vec<f32>> {
    let Some(Step::Affine {
        inputs,
        outputs,
        weights,
        bias,
    }) = steps.first()
    else {
        return None;
    };
    if *inputs != shift.len() {
        return None;
    }
    Some(
        (0..*outputs)
            .map(|j| {
                let folded: f64 = shift
                    .iter()
                    .enumerate()
                    .map(|(i, &z)| f64::from(z) * f64::from(weights[i * outputs + j]))
                    .sum();
                (f64::from(bias[j]) + folded) as f32
            })
            .collect(),
    )
}

/// `out = bias + Σ (x − shift)·weights` over the inputs where x − shift is not 0 (one-hot
/// levels that are off are skipped).
#[inline(always)]
fn shifted_affine(x: &[f32], shift: &[f32], weights: &[f32], bias: &[f32], out: &mut [f32]) {
    out.copy_from_slice(bias);
    let width = out.len();
    for ((&xi, &zi), row) in x.iter().zip(shift).zip(weights.chunks_exact(width)) {
        let d = xi - zi;
        if d != 0.0 {
            out.iter_mut().zip(row).for_each(|(o, &w)| *o += d * w);
        }
    }
}

/// out = x·W + bias for one row (W is inputs × outputs, row-major): a dot product with eight
/// partial sums for a single output, else one scaled row of W added per input. Inlined, so
/// that under `with_simd` it is compiled for the instruction set picked.
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
