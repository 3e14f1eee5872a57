//! Explaining a trained model: which input columns matter ([`importance`]: permutation
//! importance), how the prediction moves with each ([`dependence`]: partial dependence and
//! individual conditional expectation curves), and why one row got its number
//! ([`attribution`]: integrated gradients, computed by [`crate::Predictor::attribute_row`]).
//!
//! Everything is in the target's own units and named by the table's own columns: one-hot
//! levels, date parts and was-missing inputs count as the column they came from.

pub mod attribution;
pub mod dependence;
pub mod importance;

pub use attribution::{attribute_table, TableAttributions};
pub use dependence::{partial_dependence, Dependence, GridValue, GRID_POINTS, ICE_ROWS, PD_ROWS};
pub use importance::{permutation_importance, Importance, REPEATS};

use crate::data::{DataError, Encoder, Table};
use crate::fit::scale::Standardizer;
use crate::nn::layer::Pass;
use crate::nn::network::Network;
use crate::serve::model::Model;
use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};

/// What [`explain`] does.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ExplainOptions {
    /// Shuffles per column for the importance.
    pub repeats: usize,
    /// Grid points of a numeric or date column's partial dependence.
    pub grid_points: usize,
    /// Rows (a seeded sample) averaged into the partial dependence.
    pub pd_rows: usize,
    /// Rows (a seeded sample of those) whose ICE curves are kept.
    pub ice_rows: usize,
    /// Seed of every draw.
    pub seed: u64,
}

impl Default for ExplainOptions {
    fn default() -> Self {
        ExplainOptions {
            repeats: REPEATS,
            grid_points: GRID_POINTS,
            pd_rows: PD_ROWS,
            ice_rows: ICE_ROWS,
            seed: 0,
        }
    }
}

/// The explanation of a model on a table (the JSON of `relume explain --report`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Explanation {
    /// The target column, whose units every number here is in.
    pub target: String,
    /// Rows of the table explained.
    pub rows: usize,
    /// RMSE of the model on those rows (None when the table has no target column).
    pub rmse: Option<f64>,
    /// Permutation importance per input column, largest first (empty without a target).
    pub importance: Vec<Importance>,
    /// Partial dependence and ICE curves per input column, in the model's column order.
    pub partial_dependence: Vec<Dependence>,
    /// The prediction at the attribution baseline (every encoded input at its training mean).
    pub baseline: f64,
    /// Settings used.
    pub repeats: usize,
    /// Seed of every draw.
    pub seed: u64,
}

impl Explanation {
    /// The JSON text.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("an explanation always serializes")
    }
}

/// Importance (when `table` has the target column) and partial dependence of `model` on
/// `table`.
pub fn explain(
    model: &Model,
    table: &Table,
    options: &ExplainOptions,
) -> Result<Explanation, DataError> {
    let batch = Batch::new(model);
    let raw = model.encoder.encode_inputs::<f64>(table, None)?;
    let has_target = table.column(&model.encoder.target.name).is_ok();
    let (importance, rmse) = if has_target {
        let y = model
            .encoder
            .encode_target(table, None)?
            .column(0)
            .mapv(|v| model.encoder.decode_target(v))
            .to_vec();
        let base = batch.clone().predict(raw.view());
        let rmse = crate::serve::metrics::Metrics::compute(&base, &y).rmse;
        (
            permutation_importance(&batch, raw.view(), &y, options.repeats, options.seed),
            Some(rmse),
        )
    } else {
        (Vec::new(), None)
    };
    let partial_dependence = partial_dependence(&batch, table, raw.view(), options)?;
    Ok(Explanation {
        target: model.encoder.target.name.clone(),
        rows: table.rows(),
        rmse,
        importance,
        partial_dependence,
        baseline: crate::Predictor::new(model).baseline(),
        repeats: options.repeats,
        seed: options.seed,
    })
}

/// The model's networks for predicting many encoded rows at once (each thread clones it).
#[derive(Clone, Debug)]
pub struct Batch {
    encoder: Encoder,
    inputs: Standardizer,
    target: Standardizer,
    members: Vec<Network<f32>>,
}

impl Batch {
    /// The networks and scalings of `model`.
    pub fn new(model: &Model) -> Batch {
        Batch {
            encoder: model.encoder.clone(),
            inputs: model.inputs.clone(),
            target: model.target.clone(),
            members: model.members.clone(),
        }
    }

    /// The encoder.
    pub fn encoder(&self) -> &Encoder {
        &self.encoder
    }

    /// Predictions in target units for encoded (unscaled) rows.
    pub fn predict(&mut self, raw: ArrayView2<'_, f64>) -> Vec<f64> {
        let mut x = Array2::<f32>::zeros(raw.dim());
        for ((r, c), v) in raw.indexed_iter() {
            x[(r, c)] = ((v - self.inputs.mean[c]) / self.inputs.sd[c]) as f32;
        }
        let mut sum = vec![0.0_f64; raw.nrows()];
        for net in &mut self.members {
            let out = net
                .forward(x.view(), Pass::Infer)
                .expect("encoded widths match the network");
            for (s, &o) in sum.iter_mut().zip(out.column(0)) {
                *s += f64::from(o);
            }
        }
        let m = self.members.len() as f64;
        sum.iter()
            .map(|s| {
                self.encoder
                    .decode_target(s / m * self.target.sd[0] + self.target.mean[0])
            })
            .collect()
    }
}

/// Where each feature's inputs start in an encoded row, with one entry more (the width).
pub(crate) fn input_offsets(encoder: &Encoder) -> Vec<usize> {
    let mut out = vec![0];
    for f in &encoder.features {
        out.push(out.last().copied().unwrap_or(0) + f.width());
    }
    out
}

/// Root mean squared difference.
pub(crate) fn rmse(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().max(1) as f64;
    (a.iter().zip(b).map(|(x, y)| (x - y).powi(2)).sum::<f64>() / n).sqrt()
}
