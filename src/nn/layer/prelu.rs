//! PReLU: a leaky rectifier whose negative-side slopes are learned (He et al. 2015).

use super::{check_width, Layer, LayerSpec, Pass, Role, TensorSpec};
use crate::kernels::scalar::Scalar;
use crate::nn::activation::{leaky, leaky_derivative, Activation};
use crate::nn::buffer::Buffer;
use crate::nn::error::ConfigError;
use crate::nn::init::Rng;
use ndarray::{ArrayView2, Zip};

/// f(x) = x for x > 0, aⱼ·x otherwise, with one learnable slope per unit (or one shared).
/// Slopes start at `init` (0.25 in He et al. 2015). At x = 0 the derivative is the slope.
#[derive(Debug, Clone)]
pub struct Prelu<F> {
    width: usize,
    init: f64,
    shared: bool,
    out: Buffer<F>,
    grad_in: Buffer<F>,
}

impl<F: Scalar> Prelu<F> {
    /// A PReLU layer of the given width.
    pub fn new(width: usize, init: f64, shared: bool) -> Result<Self, ConfigError> {
        check_width("prelu layer", width)?;
        Activation::Prelu { init, shared }.validate()?;
        Ok(Prelu {
            width,
            init,
            shared,
            out: Buffer::default(),
            grad_in: Buffer::default(),
        })
    }

    fn slope_count(&self) -> usize {
        if self.shared {
            1
        } else {
            self.width
        }
    }

    /// Index in the slope tensor of the slope applied to column `j`.
    fn slope_index(shared: bool, j: usize) -> usize {
        if shared {
            0
        } else {
            j
        }
    }
}

impl<F: Scalar> Layer<F> for Prelu<F> {
    fn spec(&self) -> LayerSpec {
        LayerSpec::Activation {
            width: self.width,
            activation: Activation::Prelu {
                init: self.init,
                shared: self.shared,
            },
        }
    }

    fn input_width(&self) -> usize {
        self.width
    }

    fn output_width(&self) -> usize {
        self.width
    }

    fn tensors(&self) -> Vec<TensorSpec> {
        vec![TensorSpec {
            name: "slope",
            rows: 1,
            cols: self.slope_count(),
            role: Role::Slope,
        }]
    }

    fn init_params(&self, params: &mut [F], _rng: &mut Rng) {
        params.fill(F::of(self.init));
    }

    fn forward(&mut self, params: &[F], input: ArrayView2<'_, F>, _pass: Pass) {
        self.out.reshape(input.nrows(), self.width);
        let shared = self.shared;
        let mut out = self.out.view_mut();
        for j in 0..self.width {
            let a = params[Self::slope_index(shared, j)];
            Zip::from(out.column_mut(j))
                .and(input.column(j))
                .for_each(|y, &x| *y = leaky(x, a));
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
        params: &[F],
        grads: &mut [F],
        input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) -> ArrayView2<'_, F> {
        self.grad_in.reshape(input.nrows(), self.width);
        let shared = self.shared;
        let mut grad_in = self.grad_in.view_mut();
        for j in 0..self.width {
            let k = Self::slope_index(shared, j);
            let a = params[k];
            let mut slope_grad = F::zero();
            Zip::from(grad_in.column_mut(j))
                .and(input.column(j))
                .and(grad_out.column(j))
                .for_each(|d, &x, &g| {
                    *d = g * leaky_derivative(x, a);
                    if x <= F::zero() {
                        slope_grad += g * x;
                    }
                });
            grads[k] += slope_grad;
        }
        self.grad_in.view()
    }
}
