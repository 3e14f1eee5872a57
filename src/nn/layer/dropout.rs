//! Inverted dropout (Srivastava et al. 2014): zero each element with probability p while
//! training and scale the survivors by 1/(1 − p); the identity at inference.

use super::{check_width, Layer, LayerSpec, Pass};
use crate::kernels::scalar::Scalar;
use crate::nn::buffer::Buffer;
use crate::nn::error::ConfigError;
use crate::nn::init::{rng_from_seed, Rng};
use ndarray::{ArrayView2, Zip};
use rand::Rng as _;

/// Seeded inverted dropout.
#[derive(Debug, Clone)]
pub struct Dropout<F> {
    width: usize,
    rate: f64,
    out: Buffer<F>,
    grad_in: Buffer<F>,
    /// 0 or 1/(1 − p) per element, from the last training pass.
    mask: Buffer<F>,
    masked: bool,
    hold: bool,
    rng: Rng,
}

impl<F: Scalar> Dropout<F> {
    /// Dropout of the given width and drop probability `rate` in [0, 1).
    pub fn new(width: usize, rate: f64) -> Result<Self, ConfigError> {
        check_width("dropout layer", width)?;
        if !(0.0..1.0).contains(&rate) {
            return Err(ConfigError::invalid(
                "dropout layer",
                format!("rate must be in [0, 1), got {rate}"),
            ));
        }
        Ok(Dropout {
            width,
            rate,
            out: Buffer::default(),
            grad_in: Buffer::default(),
            mask: Buffer::default(),
            masked: false,
            hold: false,
            rng: rng_from_seed(0),
        })
    }

    fn draw_mask(&mut self, rows: usize) {
        if self.hold && self.mask.shape() == (rows, self.width) {
            return;
        }
        self.mask.reshape(rows, self.width);
        let keep = F::of(1.0 / (1.0 - self.rate));
        let rate = self.rate;
        let rng = &mut self.rng;
        for m in self.mask.as_mut_slice() {
            *m = if rng.random::<f64>() < rate {
                F::zero()
            } else {
                keep
            };
        }
    }
}

impl<F: Scalar> Layer<F> for Dropout<F> {
    fn spec(&self) -> LayerSpec {
        LayerSpec::Dropout {
            width: self.width,
            rate: self.rate,
        }
    }

    fn input_width(&self) -> usize {
        self.width
    }

    fn output_width(&self) -> usize {
        self.width
    }

    fn forward(&mut self, _params: &[F], input: ArrayView2<'_, F>, pass: Pass) {
        self.masked = pass == Pass::Train && self.rate > 0.0;
        if self.masked {
            self.draw_mask(input.nrows());
            self.out.reshape(input.nrows(), self.width);
            Zip::from(&mut self.out.view_mut())
                .and(&input)
                .and(&self.mask.view())
                .for_each(|y, &x, &m| *y = x * m);
        } else {
            self.out.copy_from(input);
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
        _input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) -> ArrayView2<'_, F> {
        if self.masked {
            self.grad_in.reshape(grad_out.nrows(), self.width);
            Zip::from(&mut self.grad_in.view_mut())
                .and(&grad_out)
                .and(&self.mask.view())
                .for_each(|d, &g, &m| *d = g * m);
        } else {
            self.grad_in.copy_from(grad_out);
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
