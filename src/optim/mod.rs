//! Optimizers: update a flat parameter vector from its gradient.

mod adam;

pub use adam::Adam;

use crate::scalar::Scalar;

/// A rule that moves parameters against their gradient, keeping whatever state it needs.
pub trait Optimizer<F: Scalar>: Send {
    /// One update of `params` from `grads` (same length, the network's flat layout).
    fn step(&mut self, params: &mut [F], grads: &[F]);

    /// The current learning rate.
    fn learning_rate(&self) -> f64;

    /// Sets the learning rate (schedules call this between steps).
    fn set_learning_rate(&mut self, lr: f64);

    /// Forgets all state, as if no step had been taken.
    fn reset(&mut self);
}
