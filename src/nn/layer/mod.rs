//! Layers: the [`Layer`] trait and its implementations.
//!
//! A layer does not own its parameters: the [`crate::nn::network::Network`] keeps every parameter
//! (and its gradient) in one flat vector and hands each layer its own slice. That gives
//! optimizers, L-BFGS and the gradient checker flat views for free. A layer does own its
//! forward cache and its input-gradient buffer, which grow to the largest batch seen and are
//! then reused, so steps after the first allocate nothing.
//!
//! Shapes are checked by the network before a layer is called; a layer called directly with
//! mismatched shapes panics (a programming error, not a data error).

mod affine;
mod dropout;
mod pointwise;
mod prelu;

pub use affine::Affine;
pub use dropout::Dropout;
pub use pointwise::Pointwise;
pub use prelu::Prelu;

use crate::kernels::scalar::Scalar;
use crate::nn::activation::Activation;
use crate::nn::error::ConfigError;
use crate::nn::init::{Init, Rng};
use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};
use std::fmt;

/// Whether a forward pass is for training (dropout and random slopes active) or inference.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Pass {
    /// Training: stochastic layers draw noise.
    Train,
    /// Inference: every layer is deterministic.
    Infer,
}

/// What a parameter tensor is for; penalties and revival treat them differently.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    /// A weight matrix (fan_in × fan_out).
    Weight,
    /// A bias vector.
    Bias,
    /// Learnable activation slopes (PReLU).
    Slope,
}

/// Name, shape and role of one parameter tensor of a layer, stored row-major.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TensorSpec {
    /// Short name within the layer, e.g. "weight".
    pub name: &'static str,
    /// Rows (fan_in for a weight; 1 for a vector).
    pub rows: usize,
    /// Columns.
    pub cols: usize,
    /// What the tensor is for.
    pub role: Role,
}

impl TensorSpec {
    /// Number of entries.
    pub fn len(&self) -> usize {
        self.rows * self.cols
    }

    /// True if the tensor has no entries.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// One step of a network: forward in training or inference mode, backward that returns the
/// input gradient and accumulates parameter gradients.
pub trait Layer<F: Scalar>: Send + Sync + fmt::Debug {
    /// A serializable description from which [`LayerSpec::build`] makes an equal layer.
    fn spec(&self) -> LayerSpec;

    /// Number of input columns.
    fn input_width(&self) -> usize;

    /// Number of output columns.
    fn output_width(&self) -> usize;

    /// The parameter tensors, in the order they sit in the layer's parameter slice.
    fn tensors(&self) -> Vec<TensorSpec> {
        Vec::new()
    }

    /// Fills the layer's parameter slice with a fresh initialization.
    fn init_params(&self, _params: &mut [F], _rng: &mut Rng) {}

    /// Computes the output for `input` (rows = samples) into the layer's own buffer.
    fn forward(&mut self, params: &[F], input: ArrayView2<'_, F>, pass: Pass);

    /// The output of the last forward pass.
    fn output(&self) -> ArrayView2<'_, F>;

    /// The input gradient computed by the last backward pass.
    fn input_grad(&self) -> ArrayView2<'_, F>;

    /// Given the input of the last forward pass and the gradient of the loss with respect to the
    /// output, adds the parameter gradients into `grads` and returns the input gradient.
    fn backward(
        &mut self,
        params: &[F],
        grads: &mut [F],
        input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) -> ArrayView2<'_, F>;

    /// Like [`Layer::backward`] for a caller that does not need the input gradient (the first
    /// layer of a network in training): parameter gradients only; a layer may then skip the
    /// input gradient, which [`Layer::input_grad`] no longer reflects.
    fn backward_params(
        &mut self,
        params: &[F],
        grads: &mut [F],
        input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) {
        self.backward(params, grads, input, grad_out);
    }

    /// While held, training passes reuse the last drawn noise (dropout mask, random slopes)
    /// instead of drawing anew; the gradient checker needs a fixed function.
    fn hold_noise(&mut self, _hold: bool) {}

    /// Reseeds the layer's own noise generator, if it has one.
    fn reseed(&mut self, _seed: u64) {}
}

/// A serializable description of a layer, enough to rebuild it (parameters aside).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum LayerSpec {
    /// Affine map x·W + b.
    Affine {
        /// Input width.
        inputs: usize,
        /// Output width.
        outputs: usize,
        /// Initializer of W.
        weight_init: Init,
        /// Initializer of b.
        bias_init: Init,
    },
    /// Elementwise activation; PReLU becomes a [`Prelu`] layer, the rest a [`Pointwise`] layer.
    Activation {
        /// Width (inputs = outputs).
        width: usize,
        /// The function.
        activation: Activation,
    },
    /// Inverted dropout.
    Dropout {
        /// Width (inputs = outputs).
        width: usize,
        /// Probability of dropping an element while training.
        rate: f64,
    },
}

impl LayerSpec {
    /// Short kind name, as in reports.
    pub fn kind(&self) -> String {
        match self {
            LayerSpec::Affine { .. } => "affine".to_string(),
            LayerSpec::Activation { activation, .. } => activation.name().to_string(),
            LayerSpec::Dropout { .. } => "dropout".to_string(),
        }
    }

    /// Builds the layer this spec describes, checking its parameters.
    pub fn build<F: Scalar>(&self) -> Result<Box<dyn Layer<F>>, ConfigError> {
        Ok(match *self {
            LayerSpec::Affine {
                inputs,
                outputs,
                weight_init,
                bias_init,
            } => Box::new(Affine::new(inputs, outputs, weight_init, bias_init)?),
            LayerSpec::Activation { width, activation } => {
                if let Activation::Prelu { init, shared } = activation {
                    Box::new(Prelu::new(width, init, shared)?)
                } else {
                    Box::new(Pointwise::new(width, activation)?)
                }
            }
            LayerSpec::Dropout { width, rate } => Box::new(Dropout::new(width, rate)?),
        })
    }
}

pub(crate) fn check_width(what: &str, width: usize) -> Result<(), ConfigError> {
    if width == 0 {
        Err(ConfigError::invalid(what, "width must be at least 1"))
    } else {
        Ok(())
    }
}
