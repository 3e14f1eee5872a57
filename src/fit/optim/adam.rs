//! Adam (Kingma & Ba 2015) with bias correction; AMSGrad (Reddi et al. 2018) and decoupled
//! weight decay (AdamW, Loshchilov & Hutter 2019) as options.

use super::{fit_state, flush_tiny, zero_entries, Optimizer};
use crate::kernels::scalar::Scalar;
use crate::kernels::{for_chunks, with_simd, SPLIT_ELEMENTS};

/// Adam: per-parameter steps from bias-corrected first and second moment estimates,
/// θ ← θ − α·m̂/(√v̂ + ε), with m̂ = m/(1 − β1ᵗ) and v̂ = v/(1 − β2ᵗ).
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
    amsgrad: bool,
    decay: f64,
    decay_mask: Vec<bool>,
    m: Vec<F>,
    v: Vec<F>,
    v_max: Vec<F>,
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
            amsgrad: false,
            decay: 0.0,
            decay_mask: Vec::new(),
            m: Vec::new(),
            v: Vec::new(),
            v_max: Vec::new(),
            t: 0,
        }
    }

    /// Uses the running maximum of v in the denominator (AMSGrad).
    pub fn amsgrad(mut self, on: bool) -> Self {
        self.amsgrad = on;
        self
    }

    /// Decoupled weight decay λ: after each step, θ ← θ − lr·λ·θ on the entries the decay mask
    /// selects (all entries if no mask is set).
    pub fn decoupled_decay(mut self, decay: f64) -> Self {
        self.decay = decay;
        self
    }
}

impl<F: Scalar> Optimizer<F> for Adam<F> {
    fn step(&mut self, params: &mut [F], grads: &[F]) {
        if fit_state(&mut self.m, params.len()) {
            self.t = 0;
        }
        fit_state(&mut self.v, params.len());
        if self.amsgrad {
            fit_state(&mut self.v_max, params.len());
        }
        self.t = self.t.saturating_add(1);
        let c1 = 1.0 - self.beta1.powi(self.t);
        let c2 = 1.0 - self.beta2.powi(self.t);
        let (b1, b2, one) = (F::of(self.beta1), F::of(self.beta2), F::one());
        let (inv_c1, inv_c2, eps) = (F::of(1.0 / c1), F::of(1.0 / c2), F::of(self.eps));
        let lr = F::of(self.lr);
        if self.decay > 0.0 {
            // Decoupled decay first, on the entries the mask selects (θ·(1 − lr·λ)).
            let shrink = F::of(1.0 - self.lr * self.decay);
            for (i, p) in params.iter_mut().enumerate() {
                if self.decay_mask.get(i).copied().unwrap_or(true) {
                    *p *= shrink;
                }
            }
        }
        let (m_state, v_state, v_max) = (&mut self.m, &mut self.v, &mut self.v_max);
        let step = lr * inv_c1;
        if !self.amsgrad {
            // One pass over the four vectors: moments, then the step (split over the threads
            // set by `kernels::set_threads` for large networks).
            let chunks = [params, &mut m_state[..], &mut v_state[..]];
            for_chunks(chunks, SPLIT_ELEMENTS, |at, [params, m_state, v_state]| {
                let grads = &grads[at..at + params.len()];
                with_simd(|| {
                    let state = m_state.iter_mut().zip(v_state.iter_mut());
                    for ((p, &g), (m, v)) in params.iter_mut().zip(grads).zip(state) {
                        *m = flush_tiny(b1 * *m + (one - b1) * g);
                        *v = flush_tiny(b2 * *v + (one - b2) * g * g);
                        *p -= step * *m / ((*v * inv_c2).sqrt() + eps);
                    }
                })
            });
            return;
        }
        with_simd(|| {
            for ((m, v), &g) in m_state.iter_mut().zip(v_state.iter_mut()).zip(grads) {
                *m = flush_tiny(b1 * *m + (one - b1) * g);
                *v = flush_tiny(b2 * *v + (one - b2) * g * g);
            }
            for (vm, &v) in v_max.iter_mut().zip(v_state.iter()) {
                *vm = vm.max(v);
            }
            for ((p, &m), &v) in params.iter_mut().zip(m_state.iter()).zip(v_max.iter()) {
                *p -= step * m / ((v * inv_c2).sqrt() + eps);
            }
        });
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
        self.v_max.clear();
        self.t = 0;
    }

    fn reset_entries(&mut self, entries: &[usize]) {
        zero_entries(&mut [&mut self.m, &mut self.v, &mut self.v_max], entries);
    }

    fn set_decay_mask(&mut self, mask: &[bool]) {
        self.decay_mask = mask.to_vec();
    }
}

#[cfg(test)]
mod tests {
    use super::Adam;

    #[test]
    fn moments_of_a_zero_gradient_never_become_subnormal() {
        for amsgrad in [false, true] {
            super::super::decay_to_zero(Adam::new(1e-3).amsgrad(amsgrad), |o| {
                [&o.m[..], &o.v[..], &o.v_max[..]].concat()
            });
        }
    }
}
