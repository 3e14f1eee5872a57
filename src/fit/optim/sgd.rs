//! Stochastic gradient descent, with heavy-ball (Polyak 1964) or Nesterov momentum.

use super::{fit_state, flush_tiny, zero_entries, Optimizer};
use crate::kernels::scalar::Scalar;

/// SGD with optional momentum.
///
/// Heavy ball (Polyak 1964): v ← μv − ε∇f(θ); θ ← θ + v.
/// Nesterov (Sutskever et al. 2013): v ← μv − ε∇f(θ + μv); θ ← θ + v. The parameters held are
/// the look-ahead point Θ = θ + μv, so the gradient passed in is ∇f(Θ), and the update is
/// Θ ← Θ − μv_old + (1 + μ)v_new (Bengio, Boulanger-Lewandowski & Pascanu 2013, Eq. 7).
#[derive(Clone, Debug)]
pub struct Sgd<F> {
    lr: f64,
    momentum: f64,
    nesterov: bool,
    velocity: Vec<F>,
}

impl<F: Scalar> Sgd<F> {
    /// Plain SGD at learning rate `lr`.
    pub fn new(lr: f64) -> Self {
        Sgd {
            lr,
            momentum: 0.0,
            nesterov: false,
            velocity: Vec::new(),
        }
    }

    /// Sets the momentum coefficient μ and whether to use Nesterov's form.
    pub fn momentum(mut self, momentum: f64, nesterov: bool) -> Self {
        self.momentum = momentum;
        self.nesterov = nesterov;
        self
    }
}

impl<F: Scalar> Optimizer<F> for Sgd<F> {
    fn step(&mut self, params: &mut [F], grads: &[F]) {
        let lr = F::of(self.lr);
        if self.momentum == 0.0 {
            params
                .iter_mut()
                .zip(grads)
                .for_each(|(p, &g)| *p -= lr * g);
            return;
        }
        fit_state(&mut self.velocity, params.len());
        let mu = F::of(self.momentum);
        let nesterov = self.nesterov;
        for ((p, &g), v) in params.iter_mut().zip(grads).zip(self.velocity.iter_mut()) {
            let old = *v;
            *v = flush_tiny(mu * old - lr * g);
            if nesterov {
                *p += (F::one() + mu) * *v - mu * old;
            } else {
                *p += *v;
            }
        }
    }

    fn learning_rate(&self) -> f64 {
        self.lr
    }

    fn set_learning_rate(&mut self, lr: f64) {
        self.lr = lr;
    }

    fn reset(&mut self) {
        self.velocity.clear();
    }

    fn reset_entries(&mut self, entries: &[usize]) {
        zero_entries(&mut [&mut self.velocity], entries);
    }
}

#[cfg(test)]
mod tests {
    use super::Sgd;

    #[test]
    fn velocity_of_a_zero_gradient_never_becomes_subnormal() {
        for nesterov in [false, true] {
            let opt = Sgd::new(1e-2).momentum(0.9, nesterov);
            super::super::decay_to_zero(opt, |o| o.velocity.clone());
        }
    }
}
