//! Regression metrics in the target's own units.

use serde::{Deserialize, Serialize};

/// Error summary of predictions against targets.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Metrics {
    /// Number of rows.
    pub rows: usize,
    /// Root mean squared error.
    pub rmse: f64,
    /// Mean absolute error.
    pub mae: f64,
    /// Coefficient of determination 1 − SS_res/SS_tot (NaN-free: 0 when the target is constant
    /// and the fit exact, −∞ is reported as the most negative finite number).
    pub r2: f64,
    /// Mean absolute percentage error over rows whose target is not 0 (None if all are 0).
    pub mape: Option<f64>,
    /// Rows left out of MAPE because their target is 0.
    pub mape_skipped: usize,
    /// Residual (prediction − target) quantiles at 5%, 25%, 50%, 75% and 95%.
    pub residual_quantiles: [f64; 5],
}

impl Metrics {
    /// Computes every metric; `predictions` and `targets` must have the same length ≥ 1.
    pub fn compute(predictions: &[f64], targets: &[f64]) -> Metrics {
        let n = predictions.len().min(targets.len());
        let residuals: Vec<f64> = (0..n).map(|i| predictions[i] - targets[i]).collect();
        let rows = n.max(1) as f64;
        let sse: f64 = residuals.iter().map(|r| r * r).sum();
        let mean_t = targets[..n].iter().sum::<f64>() / rows;
        let sst: f64 = targets[..n].iter().map(|t| (t - mean_t).powi(2)).sum();
        let r2 = if sst > 0.0 {
            (1.0 - sse / sst).max(f64::MIN)
        } else if sse == 0.0 {
            1.0
        } else {
            0.0
        };
        let pct: Vec<f64> = (0..n)
            .filter(|&i| targets[i] != 0.0)
            .map(|i| (residuals[i] / targets[i]).abs())
            .collect();
        let mut sorted = residuals.clone();
        sorted.sort_by(f64::total_cmp);
        Metrics {
            rows: n,
            rmse: (sse / rows).sqrt(),
            mae: residuals.iter().map(|r| r.abs()).sum::<f64>() / rows,
            r2,
            mape: (!pct.is_empty()).then(|| 100.0 * pct.iter().sum::<f64>() / pct.len() as f64),
            mape_skipped: n - pct.len(),
            residual_quantiles: [0.05, 0.25, 0.5, 0.75, 0.95].map(|q| quantile(&sorted, q)),
        }
    }
}

/// Linear-interpolation quantile of sorted values (type 7 of Hyndman & Fan 1996).
pub fn quantile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q.clamp(0.0, 1.0);
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Mean pinball (quantile) loss of Koenker & Bassett 1978 at level `tau`: with u = target −
/// prediction, τu when u ≥ 0 and (τ − 1)u when u < 0. NaN for no rows.
pub fn pinball_loss(predictions: &[f64], targets: &[f64], tau: f64) -> f64 {
    let n = predictions.len().min(targets.len());
    let total: f64 = (0..n)
        .map(|i| {
            let u = targets[i] - predictions[i];
            if u >= 0.0 {
                tau * u
            } else {
                (tau - 1.0) * u
            }
        })
        .sum();
    total / n as f64
}

/// Share of rows whose target is below (or at) the prediction: near τ for a good τ-quantile
/// model. NaN for no rows.
pub fn share_below(predictions: &[f64], targets: &[f64]) -> f64 {
    let n = predictions.len().min(targets.len());
    let below = (0..n).filter(|&i| targets[i] <= predictions[i]).count();
    below as f64 / n as f64
}
