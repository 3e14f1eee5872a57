//! Learning-rate schedules, evaluated once per epoch.

use crate::nn::error::ConfigError;
use serde::{Deserialize, Serialize};

/// How the learning rate changes over epochs (epoch 0 is the first).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, Default)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Schedule {
    /// The base rate throughout.
    #[default]
    Constant,
    /// Multiply by `factor` every `every` epochs.
    Step {
        /// Epochs between cuts.
        every: usize,
        /// Multiplier at each cut, in (0, 1].
        factor: f64,
    },
    /// Multiply by `gamma` every epoch.
    Exponential {
        /// Per-epoch multiplier, in (0, 1].
        gamma: f64,
    },
    /// Linear warm-up from base/warmup to base over `warmup` epochs, then a half cosine from
    /// base down to base·floor at epoch `total` (Loshchilov & Hutter 2017, without restarts).
    Cosine {
        /// Warm-up epochs (0 for none).
        warmup: usize,
        /// Epoch at which the cosine reaches its floor.
        total: usize,
        /// Final rate as a fraction of the base.
        floor: f64,
    },
    /// Multiply by `factor` when the validation loss has not improved by a relative
    /// `min_improvement` for `patience` epochs, never below base·`min_fraction`.
    Plateau {
        /// Epochs without improvement before a cut.
        patience: usize,
        /// Multiplier at each cut, in (0, 1).
        factor: f64,
        /// Smallest rate as a fraction of the base.
        min_fraction: f64,
    },
}

impl Schedule {
    /// Checks the settings.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let bad = |d: String| Err(ConfigError::invalid("learning-rate schedule", d));
        let unit = |v: f64| v > 0.0 && v <= 1.0;
        match *self {
            Schedule::Step { every: 0, .. } => bad("step: every must be >= 1".into()),
            Schedule::Step { factor, .. } if !unit(factor) => {
                bad(format!("step: factor must be in (0, 1], got {factor}"))
            }
            Schedule::Exponential { gamma } if !unit(gamma) => {
                bad(format!("exponential: gamma must be in (0, 1], got {gamma}"))
            }
            Schedule::Cosine { floor, .. } if !(0.0..=1.0).contains(&floor) => {
                bad(format!("cosine: floor must be in [0, 1], got {floor}"))
            }
            Schedule::Plateau { factor, .. } if !(factor > 0.0 && factor < 1.0) => {
                bad(format!("plateau: factor must be in (0, 1), got {factor}"))
            }
            _ => Ok(()),
        }
    }

    /// A tracker that turns this schedule into a rate per epoch.
    pub fn start(&self, base: f64) -> RateTracker {
        RateTracker {
            schedule: *self,
            base,
            plateau_rate: base,
            best: f64::INFINITY,
            waited: 0,
        }
    }
}

/// The running state of a schedule (only the plateau cut needs any).
#[derive(Clone, Debug)]
pub struct RateTracker {
    schedule: Schedule,
    base: f64,
    plateau_rate: f64,
    best: f64,
    waited: usize,
}

/// Relative improvement of the validation loss that counts for the plateau cut.
const PLATEAU_MIN_IMPROVEMENT: f64 = 1e-4;

impl RateTracker {
    /// The rate for `epoch`.
    pub fn rate(&self, epoch: usize) -> f64 {
        let base = self.base;
        match self.schedule {
            Schedule::Constant => base,
            Schedule::Step { every, factor } => base * factor.powi((epoch / every) as i32),
            Schedule::Exponential { gamma } => base * gamma.powi(epoch as i32),
            Schedule::Cosine {
                warmup,
                total,
                floor,
            } => {
                if epoch < warmup {
                    base * (epoch + 1) as f64 / warmup as f64
                } else {
                    let span = total.saturating_sub(warmup).max(1) as f64;
                    let t = ((epoch - warmup) as f64 / span).min(1.0);
                    let cos = 0.5 * (1.0 + (std::f64::consts::PI * t).cos());
                    base * (floor + (1.0 - floor) * cos)
                }
            }
            Schedule::Plateau { .. } => self.plateau_rate,
        }
    }

    /// Reports the epoch's validation loss (the plateau cut reacts to it).
    pub fn observe(&mut self, val_loss: f64) {
        let Schedule::Plateau {
            patience,
            factor,
            min_fraction,
        } = self.schedule
        else {
            return;
        };
        let improved = !self.best.is_finite()
            || val_loss < self.best - PLATEAU_MIN_IMPROVEMENT * self.best.abs();
        if improved {
            self.best = val_loss;
            self.waited = 0;
        } else {
            self.waited += 1;
            if self.waited >= patience.max(1) {
                self.plateau_rate = (self.plateau_rate * factor).max(self.base * min_fraction);
                self.waited = 0;
            }
        }
    }
}

/// Names [`Schedule`]'s text form accepts, with their parameters.
pub const SCHEDULE_FORMS: &str = "constant, step:EVERY[:FACTOR], exponential:GAMMA, \
     cosine:TOTAL[:WARMUP[:FLOOR]], plateau[:PATIENCE[:FACTOR[:MIN_FRACTION]]]";

impl std::str::FromStr for Schedule {
    type Err = ConfigError;

    /// Parses `name` or `name:param:param` in the order of [`SCHEDULE_FORMS`]: `constant`,
    /// `step:20:0.5` (factor 0.5 by default), `exponential:0.99`, `cosine:200:10:0.01`
    /// (warm-up 0 and floor 0 by default), `plateau:10:0.5:0.01` (the recipe's own values by
    /// default).
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let mut parts = text.trim().split(':');
        let name = parts.next().unwrap_or("").trim().to_ascii_lowercase();
        let params: Vec<&str> = parts.map(str::trim).collect();
        let what = || format!("schedule '{text}'");
        let number = |i: usize| -> Result<Option<f64>, ConfigError> {
            params
                .get(i)
                .map(|s| {
                    s.parse::<f64>().map_err(|_| {
                        ConfigError::invalid(what(), format!("parameter '{s}' is not a number"))
                    })
                })
                .transpose()
        };
        let count = |i: usize| -> Result<Option<usize>, ConfigError> {
            params
                .get(i)
                .map(|s| {
                    s.parse::<usize>().map_err(|_| {
                        ConfigError::invalid(
                            what(),
                            format!("parameter '{s}' is not a whole number of epochs"),
                        )
                    })
                })
                .transpose()
        };
        let required = |v: Option<usize>, name: &str| {
            v.ok_or_else(|| ConfigError::invalid(what(), format!("needs {name}")))
        };
        let (schedule, most) = match name.as_str() {
            "constant" => (Schedule::Constant, 0),
            "step" => (
                Schedule::Step {
                    every: required(count(0)?, "the epochs between cuts, e.g. step:20")?,
                    factor: number(1)?.unwrap_or(0.5),
                },
                2,
            ),
            "exponential" => (
                Schedule::Exponential {
                    gamma: number(0)?.ok_or_else(|| {
                        ConfigError::invalid(
                            what(),
                            "needs the per-epoch factor, e.g. exponential:0.99",
                        )
                    })?,
                },
                1,
            ),
            "cosine" => (
                Schedule::Cosine {
                    total: required(count(0)?, "the epoch the cosine ends at, e.g. cosine:200")?,
                    warmup: count(1)?.unwrap_or(0),
                    floor: number(2)?.unwrap_or(0.0),
                },
                3,
            ),
            "plateau" => (
                Schedule::Plateau {
                    patience: count(0)?.unwrap_or(10),
                    factor: number(1)?.unwrap_or(0.5),
                    min_fraction: number(2)?.unwrap_or(0.01),
                },
                3,
            ),
            _ => {
                return Err(ConfigError::UnknownName {
                    kind: "schedule",
                    name: text.to_string(),
                    known: SCHEDULE_FORMS.to_string(),
                })
            }
        };
        if params.len() > most {
            return Err(ConfigError::invalid(
                what(),
                format!("takes at most {most} parameter(s)"),
            ));
        }
        schedule.validate()?;
        Ok(schedule)
    }
}

impl std::fmt::Display for Schedule {
    /// The text form that [`FromStr`](std::str::FromStr) reads back.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match *self {
            Schedule::Constant => f.write_str("constant"),
            Schedule::Step { every, factor } => write!(f, "step:{every}:{factor}"),
            Schedule::Exponential { gamma } => write!(f, "exponential:{gamma}"),
            Schedule::Cosine {
                warmup,
                total,
                floor,
            } => write!(f, "cosine:{total}:{warmup}:{floor}"),
            Schedule::Plateau {
                patience,
                factor,
                min_fraction,
            } => write!(f, "plateau:{patience}:{factor}:{min_fraction}"),
        }
    }
}
