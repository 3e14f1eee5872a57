//! RMSProp (Tieleman & Hinton 2012): divide each step by a running RMS of the gradient.

use super::{fit_state, flush_tiny, zero_entries, Optimizer};
use crate::kernels::scalar::Scalar;

/// s ← ρs + (1 − ρ)g²; θ ← θ − ε·g/(√s + 1e-8).
#[derive(Clone, Debug)]
pub struct RmsProp<F> {
    lr: f64,
    decay: f64,
    eps: f64,
    square_avg: Vec<F>,
}

impl<F: Scalar> RmsProp<F> {
    /// RMSProp with ρ = 0.9 and the given learning rate.
    pub fn new(lr: f64) -> Self {
        RmsProp {
            lr,
            decay: 0.9,
            eps: 1e-8,
            square_avg: Vec::new(),
        }
    }

    /// Sets the decay ρ.
    pub fn decay(mut self, decay: f64) -> Self {
        self.decay = decay;
        self
    }
}

impl<F: Scalar> Optimizer<F> for RmsProp<F> {
    fn step(&mut self, params: &mut [F], grads: &[F]) {
        fit_state(&mut self.square_avg, params.len());
        let (lr, rho, eps) = (F::of(self.lr), F::of(self.decay), F::of(self.eps));
        for ((p, &g), s) in params.iter_mut().zip(grads).zip(self.square_avg.iter_mut()) {
            *s = flush_tiny(rho * *s + (F::one() - rho) * g * g);
            *p -= lr * g / (s.sqrt() + eps);
        }
    }

    fn learning_rate(&self) -> f64 {
        self.lr
    }

    fn set_learning_rate(&mut self, lr: f64) {
        self.lr = lr;
    }

    fn reset(&mut self) {
        self.square_avg.clear();
    }

    fn reset_entries(&mut self, entries: &[usize]) {
        zero_entries(&mut [&mut self.square_avg], entries);
    }
}

#[cfg(test)]
mod tests {
    use super::RmsProp;

    #[test]
    fn square_average_of_a_zero_gradient_never_becomes_subnormal() {
        super::super::decay_to_zero(RmsProp::new(1e-3), |o| o.square_avg.clone());
    }
}
