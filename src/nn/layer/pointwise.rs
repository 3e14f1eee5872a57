//! One generic elementwise layer for the whole activation family.

use super::{check_width, Layer, LayerSpec, Pass};
use crate::kernels::scalar::Scalar;
use crate::nn::activation::{leaky, leaky_derivative, Activation};
use crate::nn::buffer::Buffer;
use crate::nn::error::ConfigError;
use crate::nn::init::{rng_from_seed, Rng};
use ndarray::{ArrayView2, Zip};
use rand::Rng as _;

/// Applies an [`Activation`] to every element. For the randomized leaky ReLU it draws one slope
/// per element from U(lower, upper) on every training pass and uses the mean slope at inference.
#[derive(Debug, Clone)]
pub struct Pointwise<F> {
    width: usize,
    activation: Activation,
    out: Buffer<F>,
    grad_in: Buffer<F>,
    /// Per-element slopes of the last training pass (randomized leaky ReLU only).
    slopes: Buffer<F>,
    /// Whether the last forward pass used `slopes`.
    noisy: bool,
    hold: bool,
    rng: Rng,
}

impl<F: Scalar> Pointwise<F> {
    /// An activation layer of the given width.
    pub fn new(width: usize, activation: Activation) -> Result<Self, ConfigError> {
        check_width("activation layer", width)?;
        activation.validate()?;
        Ok(Pointwise {
            width,
            activation,
            out: Buffer::default(),
            grad_in: Buffer::default(),
            slopes: Buffer::default(),
            noisy: false,
            hold: false,
            rng: rng_from_seed(0),
        })
    }

    /// The function this layer applies.
    pub fn activation(&self) -> Activation {
        self.activation
    }

    fn draw_slopes(&mut self, rows: usize) {
        let Activation::RandomLeaky { lower, upper } = self.activation else {
            return;
        };
        let held = self.hold && self.slopes.shape() == (rows, self.width);
        if held {
            return;
        }
        self.slopes.reshape(rows, self.width);
        let rng = &mut self.rng;
        for s in self.slopes.as_mut_slice() {
            *s = F::of(if upper > lower {
                rng.random_range(lower..upper)
            } else {
                lower
            });
        }
    }
}

impl<F: Scalar> Layer<F> for Pointwise<F> {
    fn spec(&self) -> LayerSpec {
        LayerSpec::Activation {
            width: self.width,
            activation: self.activation,
        }
    }

    fn input_width(&self) -> usize {
        self.width
    }

    fn output_width(&self) -> usize {
        self.width
    }

    fn forward(&mut self, _params: &[F], input: ArrayView2<'_, F>, pass: Pass) {
        self.noisy = pass == Pass::Train && self.activation.is_random();
        self.out.reshape(input.nrows(), self.width);
        if self.noisy {
            self.draw_slopes(input.nrows());
            Zip::from(&mut self.out.view_mut())
                .and(&input)
                .and(&self.slopes.view())
                .for_each(|y, &x, &a| *y = leaky(x, a));
        } else if let Some(x) = input.as_slice() {
            self.activation.apply(x, self.out.as_mut_slice());
        } else {
            let act = self.activation;
            Zip::from(&mut self.out.view_mut())
                .and(&input)
                .for_each(|y, &x| *y = act.value(x));
        }
    }

    fn output(&self) -> ArrayView2<'_, F> {
        self.out.view()
    }

    fn input_grad(&self) -> ArrayView2<'_, F> {
        self.grad_in.view()
    }

    fn backward(
        &mut self,
        _params: &[F],
        _grads: &mut [F],
        input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) -> ArrayView2<'_, F> {
        self.grad_in.reshape(input.nrows(), self.width);
        if self.noisy {
            Zip::from(&mut self.grad_in.view_mut())
                .and(&input)
                .and(&grad_out)
                .and(&self.slopes.view())
                .for_each(|d, &x, &g, &a| *d = g * leaky_derivative(x, a));
        } else if let (Some(x), Some(g)) = (input.as_slice(), grad_out.as_slice()) {
            self.activation
                .apply_derivative(x, g, self.grad_in.as_mut_slice());
        } else {
            let act = self.activation;
            Zip::from(&mut self.grad_in.view_mut())
                .and(&input)
                .and(&grad_out)
                .for_each(|d, &x, &g| *d = g * act.derivative(x));
        }
        self.grad_in.view()
    }

    fn hold_noise(&mut self, hold: bool) {
        self.hold = hold;
    }

    fn reseed(&mut self, seed: u64) {
        self.rng = rng_from_seed(seed);
    }
}
