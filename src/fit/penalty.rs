//! Weight penalties: L1, L2 and elastic net, added to the loss and its gradient, or L1 applied
//! as a proximal soft-threshold after each step (which gives exact zeros).

use crate::kernels::scalar::Scalar;
use crate::nn::error::ConfigError;
use crate::nn::layer::Role;
use crate::nn::network::Network;
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// How the L1 part of a penalty is applied.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum L1Mode {
    /// l1·sign(w) is added to the gradient (sign(0) = 0).
    #[default]
    Gradient,
    /// After each optimizer step, w ← sign(w)·max(|w| − lr·l1, 0) (proximal gradient,
    /// Tibshirani 1996 / Daubechies et al. 2004); the L1 term is left out of the gradient.
    Proximal,
}

/// Penalty l1·Σ|w| + l2·Σw² over the selected parameter tensors.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Penalty {
    /// L1 strength.
    pub l1: f64,
    /// L2 strength (no ½: the gradient is 2·l2·w).
    pub l2: f64,
    /// Gradient or proximal L1.
    pub l1_mode: L1Mode,
    /// Penalize weight matrices (on by default).
    pub weights: bool,
    /// Penalize biases (off by default).
    pub biases: bool,
    /// Penalize PReLU slopes (off by default).
    pub slopes: bool,
}

impl Default for Penalty {
    fn default() -> Self {
        Penalty::NONE
    }
}

impl Penalty {
    /// No penalty.
    pub const NONE: Penalty = Penalty {
        l1: 0.0,
        l2: 0.0,
        l1_mode: L1Mode::Gradient,
        weights: true,
        biases: false,
        slopes: false,
    };

    /// L2 only, on weights.
    pub fn l2(l2: f64) -> Self {
        Penalty {
            l2,
            ..Penalty::NONE
        }
    }

    /// L1 only, on weights.
    pub fn l1(l1: f64) -> Self {
        Penalty {
            l1,
            ..Penalty::NONE
        }
    }

    /// Elastic net: both, on weights.
    pub fn elastic(l1: f64, l2: f64) -> Self {
        Penalty {
            l1,
            l2,
            ..Penalty::NONE
        }
    }

    /// Switches L1 to the proximal mode.
    pub fn proximal(mut self) -> Self {
        self.l1_mode = L1Mode::Proximal;
        self
    }

    /// The part that enters the gradient: without L1 in proximal mode, else unchanged.
    pub fn smooth_part(&self) -> Penalty {
        match self.l1_mode {
            L1Mode::Gradient => *self,
            L1Mode::Proximal => Penalty { l1: 0.0, ..*self },
        }
    }

    /// True if the penalty does nothing.
    pub fn is_none(&self) -> bool {
        self.l1 == 0.0 && self.l2 == 0.0
    }

    /// Checks the strengths.
    pub fn validate(&self) -> Result<(), ConfigError> {
        for (name, v) in [("l1", self.l1), ("l2", self.l2)] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(ConfigError::invalid(
                    "penalty",
                    format!("{name} must be a finite number >= 0, got {v}"),
                ));
            }
        }
        Ok(())
    }

    /// Whether tensors of this role are penalized.
    pub fn covers(&self, role: Role) -> bool {
        match role {
            Role::Weight => self.weights,
            Role::Bias => self.biases,
            Role::Slope => self.slopes,
        }
    }

    /// The ranges of the network's flat parameter vector this penalty covers.
    pub fn ranges<F: Scalar>(&self, net: &Network<F>) -> Vec<Range<usize>> {
        net.tensors()
            .into_iter()
            .filter(|t| self.covers(t.role))
            .map(|t| t.range)
            .collect()
    }

    /// The penalty's contribution to the objective (the proximal L1 term included, since it is
    /// part of what is minimized).
    pub fn value<F: Scalar>(&self, params: &[F], ranges: &[Range<usize>]) -> f64 {
        if self.is_none() {
            return 0.0;
        }
        let (mut abs, mut sq) = (0.0, 0.0);
        for r in ranges {
            for &w in &params[r.clone()] {
                let w = w.as_f64();
                abs += w.abs();
                sq += w * w;
            }
        }
        self.l1 * abs + self.l2 * sq
    }

    /// Adds the penalty's gradient to `grads` (the L1 part only in gradient mode).
    pub fn add_gradient<F: Scalar>(&self, params: &[F], grads: &mut [F], ranges: &[Range<usize>]) {
        let l1 = if self.l1_mode == L1Mode::Gradient {
            self.l1
        } else {
            0.0
        };
        if l1 == 0.0 && self.l2 == 0.0 {
            return;
        }
        let (l1, two_l2) = (F::of(l1), F::of(2.0 * self.l2));
        for r in ranges {
            for (g, &w) in grads[r.clone()].iter_mut().zip(&params[r.clone()]) {
                let sign = if w > F::zero() {
                    F::one()
                } else if w < F::zero() {
                    -F::one()
                } else {
                    F::zero()
                };
                *g += l1 * sign + two_l2 * w;
            }
        }
    }

    /// The proximal step of the L1 part after an update with learning rate `lr`.
    pub fn apply_proximal<F: Scalar>(&self, params: &mut [F], ranges: &[Range<usize>], lr: f64) {
        if self.l1_mode != L1Mode::Proximal || self.l1 == 0.0 {
            return;
        }
        let threshold = F::of(lr * self.l1);
        for r in ranges {
            for w in &mut params[r.clone()] {
                let shrunk = w.abs() - threshold;
                *w = if shrunk > F::zero() {
                    shrunk * w.signum()
                } else {
                    F::zero()
                };
            }
        }
    }
}
