//! Regression losses: value (mean over every entry) and gradient with respect to predictions.

use crate::kernels::scalar::Scalar;
use crate::nn::error::{ConfigError, ShapeError};
use ndarray::{ArrayView2, ArrayViewMut2, Zip};
use serde::{Deserialize, Serialize};
use std::str::FromStr;

/// A loss between predictions ŷ and targets y, averaged over all entries. Residual r = ŷ − y.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Loss {
    /// Mean squared error, mean(r²).
    Mse,
    /// Mean absolute error, mean(|r|); gradient 0 at r = 0.
    Mae,
    /// Huber 1964: r²/2 for |r| ≤ δ, δ(|r| − δ/2) beyond.
    Huber {
        /// Threshold δ > 0.
        delta: f64,
    },
    /// Quantile (pinball) loss of Koenker & Bassett 1978 with u = y − ŷ:
    /// τu for u ≥ 0, (τ − 1)u for u < 0; gradient 0 at u = 0.
    Quantile {
        /// Quantile level τ in (0, 1).
        tau: f64,
    },
}

impl Loss {
    /// Checks the parameters.
    pub fn validate(&self) -> Result<(), ConfigError> {
        match *self {
            Loss::Huber { delta } if !(delta.is_finite() && delta > 0.0) => Err(
                ConfigError::invalid("huber loss", format!("delta must be > 0, got {delta}")),
            ),
            Loss::Quantile { tau } if !(tau > 0.0 && tau < 1.0) => Err(ConfigError::invalid(
                "quantile loss",
                format!("tau must be in (0, 1), got {tau}"),
            )),
            _ => Ok(()),
        }
    }

    /// Short name for reports.
    pub fn name(&self) -> &'static str {
        match self {
            Loss::Mse => "mse",
            Loss::Mae => "mae",
            Loss::Huber { .. } => "huber",
            Loss::Quantile { .. } => "quantile",
        }
    }

    fn point<F: Scalar>(&self, residual: F) -> F {
        let r = residual;
        match *self {
            Loss::Mse => r * r,
            Loss::Mae => r.abs(),
            Loss::Huber { delta } => {
                let d = F::of(delta);
                if r.abs() <= d {
                    F::of(0.5) * r * r
                } else {
                    d * (r.abs() - F::of(0.5) * d)
                }
            }
            Loss::Quantile { tau } => {
                let u = -r;
                let t = F::of(tau);
                if u >= F::zero() {
                    t * u
                } else {
                    (t - F::one()) * u
                }
            }
        }
    }

    fn point_slope<F: Scalar>(&self, residual: F) -> F {
        let r = residual;
        let zero = F::zero();
        let sign = if r > zero {
            F::one()
        } else if r < zero {
            -F::one()
        } else {
            zero
        };
        match *self {
            Loss::Mse => F::of(2.0) * r,
            Loss::Mae => sign,
            Loss::Huber { delta } => {
                let d = F::of(delta);
                if r.abs() <= d {
                    r
                } else {
                    d * sign
                }
            }
            Loss::Quantile { tau } => {
                let t = F::of(tau);
                if r < zero {
                    -t
                } else if r > zero {
                    F::one() - t
                } else {
                    zero
                }
            }
        }
    }

    /// Mean loss over all entries.
    pub fn value<F: Scalar>(
        &self,
        pred: ArrayView2<'_, F>,
        target: ArrayView2<'_, F>,
    ) -> Result<F, ShapeError> {
        same_shape("loss target", pred.dim(), target.dim())?;
        let n = pred.len().max(1);
        let mut total = F::zero();
        Zip::from(&pred)
            .and(&target)
            .for_each(|&p, &y| total += self.point(p - y));
        Ok(total / F::of(n as f64))
    }

    /// Sum of the loss over all entries, accumulated in f64 (for means over many rows taken
    /// in parts).
    pub fn total<F: Scalar>(
        &self,
        pred: ArrayView2<'_, F>,
        target: ArrayView2<'_, F>,
    ) -> Result<f64, ShapeError> {
        same_shape("loss target", pred.dim(), target.dim())?;
        let mut total = 0.0;
        Zip::from(&pred)
            .and(&target)
            .for_each(|&p, &y| total += self.point(p - y).as_f64());
        Ok(total)
    }

    /// Writes d(mean loss)/dŷ into `out` (same shape as `pred`).
    pub fn gradient_into<F: Scalar>(
        &self,
        pred: ArrayView2<'_, F>,
        target: ArrayView2<'_, F>,
        mut out: ArrayViewMut2<'_, F>,
    ) -> Result<(), ShapeError> {
        same_shape("loss target", pred.dim(), target.dim())?;
        same_shape("loss gradient buffer", pred.dim(), out.dim())?;
        let scale = F::one() / F::of(pred.len().max(1) as f64);
        Zip::from(&mut out)
            .and(&pred)
            .and(&target)
            .for_each(|g, &p, &y| *g = self.point_slope(p - y) * scale);
        Ok(())
    }
}

fn same_shape(what: &str, expected: (usize, usize), got: (usize, usize)) -> Result<(), ShapeError> {
    if expected == got {
        Ok(())
    } else {
        Err(ShapeError::new(what, expected, got))
    }
}

impl std::fmt::Display for Loss {
    /// The text form [`Loss::from_str`] reads back: `mse`, `mae`, `huber:1`, `quantile:0.9`.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match *self {
            Loss::Huber { delta } => write!(f, "huber:{delta}"),
            Loss::Quantile { tau } => write!(f, "quantile:{tau}"),
            _ => f.write_str(self.name()),
        }
    }
}

impl FromStr for Loss {
    type Err = ConfigError;

    /// Parses `mse`, `mae`, `huber[:delta]` (δ = 1 by default) or `quantile[:tau]` (τ = 0.5).
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let (name, arg) = match text.split_once(':') {
            Some((n, a)) => (n, Some(a)),
            None => (text, None),
        };
        let number = |default: f64| -> Result<f64, ConfigError> {
            arg.map_or(Ok(default), |a| {
                a.trim().parse().map_err(|_| {
                    ConfigError::invalid(format!("loss '{text}'"), "parameter is not a number")
                })
            })
        };
        let loss = match name.trim().to_ascii_lowercase().as_str() {
            "mse" => Loss::Mse,
            "mae" => Loss::Mae,
            "huber" => Loss::Huber {
                delta: number(1.0)?,
            },
            "quantile" => Loss::Quantile { tau: number(0.5)? },
            _ => {
                return Err(ConfigError::UnknownName {
                    kind: "loss",
                    name: text.to_string(),
                    known: "mse, mae, huber, quantile".to_string(),
                })
            }
        };
        loss.validate()?;
        Ok(loss)
    }
}
