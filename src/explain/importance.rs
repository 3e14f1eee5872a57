//! Permutation importance (Breiman 2001; Fisher, Rudin & Dominici 2019): the rise in RMSE,
//! in target units, when one column's values are shuffled across rows, so that the column
//! no longer carries information about the target while keeping its distribution.
//!
//! Every repeat draws a bootstrap sample of the rows and a fresh shuffle of the column
//! within it (both seeded), and scores the rise against the unshuffled predictions on the
//! same sample; the interval is mean ± 1.96 × the repeats' standard deviation, so it covers
//! both the shuffle and the sampling of rows (common practice, no source). A column the
//! model does not use has an interval around zero. All inputs a column became (one-hot
//! levels, date parts, its was-missing input) are shuffled together.

use super::{input_offsets, rmse, Batch};
use crate::fit::parallel::map_in_order;
use ndarray::{Array2, ArrayView2};
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// Default number of shuffles per column.
pub const REPEATS: usize = 20;

/// The importance of one input column, in target units.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Importance {
    /// Column name.
    pub feature: String,
    /// Mean rise in RMSE over the repeats.
    pub mean: f64,
    /// Lower end of the 95% interval (mean − 1.96 sd).
    pub lower: f64,
    /// Upper end of the 95% interval (mean + 1.96 sd).
    pub upper: f64,
    /// Standard deviation of the repeats.
    pub sd: f64,
}

/// The importance of every input column (largest mean first) of the model in `batch` on
/// encoded rows `raw` with targets `y` (target units).
pub fn permutation_importance(
    batch: &Batch,
    raw: ArrayView2<'_, f64>,
    y: &[f64],
    repeats: usize,
    seed: u64,
) -> Vec<Importance> {
    let n = raw.nrows();
    let repeats = repeats.max(2);
    let offsets = input_offsets(batch.encoder());
    let base = batch.clone().predict(raw);
    // The same bootstrap samples for every column (paired comparisons between columns).
    let samples: Vec<Vec<usize>> = (0..repeats)
        .map(|r| {
            let mut rng = ChaCha8Rng::seed_from_u64(seed ^ (r as u64).wrapping_mul(0x9e37_79b9));
            (0..n).map(|_| rng.random_range(0..n.max(1))).collect()
        })
        .collect();
    let features = &batch.encoder().features;
    let columns: Vec<usize> = (0..features.len()).collect();
    let mut out: Vec<Importance> = map_in_order(&columns, |&j| {
        let mut local = batch.clone();
        let (from, to) = (offsets[j], offsets[j + 1]);
        let mut shuffled = Array2::<f64>::zeros((n, raw.ncols()));
        let rises: Vec<f64> = samples
            .iter()
            .enumerate()
            .map(|(r, rows)| {
                let mut rng =
                    ChaCha8Rng::seed_from_u64(seed.wrapping_add(1 + j as u64) ^ ((r as u64) << 32));
                let mut order = rows.clone();
                order.shuffle(&mut rng);
                for (k, (&row, &donor)) in rows.iter().zip(&order).enumerate() {
                    shuffled.row_mut(k).assign(&raw.row(row));
                    for c in from..to {
                        shuffled[(k, c)] = raw[(donor, c)];
                    }
                }
                let p = local.predict(shuffled.view());
                let truth: Vec<f64> = rows.iter().map(|&i| y[i]).collect();
                let before: Vec<f64> = rows.iter().map(|&i| base[i]).collect();
                rmse(&p, &truth) - rmse(&before, &truth)
            })
            .collect();
        let m = rises.len() as f64;
        let mean = rises.iter().sum::<f64>() / m;
        let sd = (rises.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (m - 1.0)).sqrt();
        Importance {
            feature: features[j].name().to_string(),
            mean,
            lower: mean - 1.96 * sd,
            upper: mean + 1.96 * sd,
            sd,
        }
    });
    out.sort_by(|a, b| b.mean.total_cmp(&a.mean));
    out
}
