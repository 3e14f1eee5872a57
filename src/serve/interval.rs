//! Split-conformal prediction intervals (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018,
//! "Distribution-free predictive inference for regression"): the half-width is the
//! ⌈(n + 1)·coverage⌉-th smallest absolute residual on n calibration rows that played no part
//! in fitting the model, so a new exchangeable row falls inside with probability at least the
//! nominal coverage (and at most coverage + 1/(n + 1) without ties, their Theorem 2.2).

use serde::{Deserialize, Serialize};

/// Nominal coverage of intervals unless set otherwise.
pub const DEFAULT_COVERAGE: f64 = 0.9;

/// A calibrated symmetric interval on the network's target scale (ln y for a log target).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Conformal {
    /// Nominal coverage (0 < coverage < 1).
    pub coverage: f64,
    /// Half-width on the target scale the network models.
    pub half_width: f64,
    /// Calibration rows it came from.
    pub calibration_rows: usize,
}

impl Conformal {
    /// Calibrates from absolute residuals of rows held out of all fitting. None if there are
    /// too few rows for the coverage (⌈(n + 1)·coverage⌉ > n) or the coverage is not in (0, 1).
    pub fn calibrate(residuals: &[f64], coverage: f64) -> Option<Conformal> {
        if !(coverage > 0.0 && coverage < 1.0) {
            return None;
        }
        let mut r: Vec<f64> = residuals
            .iter()
            .map(|v| v.abs())
            .filter(|v| v.is_finite())
            .collect();
        let n = r.len();
        let rank = ((n as f64 + 1.0) * coverage).ceil() as usize;
        if rank == 0 || rank > n {
            return None;
        }
        r.sort_by(f64::total_cmp);
        Some(Conformal {
            coverage,
            half_width: r[rank - 1],
            calibration_rows: n,
        })
    }

    /// The interval around a prediction on the network's target scale.
    pub fn around(&self, center: f64) -> (f64, f64) {
        (center - self.half_width, center + self.half_width)
    }

    /// Checks a stored interval.
    pub fn validate(&self) -> Result<(), String> {
        let coverage_ok = self.coverage > 0.0 && self.coverage < 1.0;
        let width_ok = self.half_width.is_finite() && self.half_width >= 0.0;
        if !(coverage_ok && width_ok) {
            return Err("interval: coverage must be in (0, 1) and the half-width finite".into());
        }
        Ok(())
    }
}
