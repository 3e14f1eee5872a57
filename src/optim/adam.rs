//! Adam (Kingma & Ba 2015) with bias correction.

use super::Optimizer;
use crate::scalar::Scalar;

/// Adam: per-parameter steps from bias-corrected first and second moment estimates.
#[derive(Clone, Debug)]
pub struct Adam<F> {
    /// Learning rate (step size α).
    pub lr: f64,
    /// Decay of the first moment (0.9 in the paper).
    pub beta1: f64,
    /// Decay of the second moment (0.999 in the paper).
    pub beta2: f64,
    /// Denominator guard (1e-8 in the paper).
    pub eps: f64,
    m: Vec<F>,
    v: Vec<F>,
    t: i32,
}

impl<F: Scalar> Adam<F> {
    /// Adam with the paper's defaults and the given learning rate.
    pub fn new(lr: f64) -> Self {
        Adam {
            lr,
            beta1: 0.9,
            beta2: 0.999,
            eps: 1e-8,
            m: Vec::new(),
            v: Vec::new(),
            t: 0,
        }
    }
}

impl<F: Scalar> Optimizer<F> for Adam<F> {
    fn step(&mut self, params: &mut [F], grads: &[F]) {
        if self.m.len() != params.len() {
            self.m = vec![F::zero(); params.len()];
            self.v = vec![F::zero(); params.len()];
            self.t = 0;
        }
        self.t = self.t.saturating_add(1);
        let (b1, b2) = (self.beta1, self.beta2);
        // Fold both bias corrections into the step size, as in Section 2 of the paper.
        let step = self.lr * (1.0 - b2.powi(self.t)).sqrt() / (1.0 - b1.powi(self.t));
        let correction2 = (1.0 - b2.powi(self.t)).sqrt();
        let (b1, b2, step) = (F::of(b1), F::of(b2), F::of(step));
        let eps = F::of(self.eps * correction2);
        let one = F::one();
        for ((p, &g), (m, v)) in params
            .iter_mut()
            .zip(grads)
            .zip(self.m.iter_mut().zip(self.v.iter_mut()))
        {
            *m = b1 * *m + (one - b1) * g;
            *v = b2 * *v + (one - b2) * g * g;
            *p -= step * *m / (v.sqrt() + eps);
        }
    }

    fn learning_rate(&self) -> f64 {
        self.lr
    }

    fn set_learning_rate(&mut self, lr: f64) {
        self.lr = lr;
    }

    fn reset(&mut self) {
        self.m.clear();
        self.v.clear();
        self.t = 0;
    }
}
