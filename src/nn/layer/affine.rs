//! The affine (fully connected) layer y = x·W + b.

use super::{check_width, Layer, LayerSpec, Pass, Role, TensorSpec};
use crate::kernels::scalar::Scalar;
use crate::kernels::{for_chunks, matmul, matmul_bias, with_simd, SPLIT_ELEMENTS};
use crate::nn::buffer::Buffer;
use crate::nn::error::ConfigError;
use crate::nn::init::{Init, Rng};
use ndarray::{ArrayView1, ArrayView2, ArrayViewMut1, ArrayViewMut2, Axis};

/// Fully connected layer: W is inputs × outputs (row-major), then b (outputs).
#[derive(Debug, Clone)]
pub struct Affine<F> {
    inputs: usize,
    outputs: usize,
    weight_init: Init,
    bias_init: Init,
    out: Buffer<F>,
    grad_in: Buffer<F>,
}

impl<F: Scalar> Affine<F> {
    /// A layer from `inputs` to `outputs` units with the given initializers.
    pub fn new(
        inputs: usize,
        outputs: usize,
        weight_init: Init,
        bias_init: Init,
    ) -> Result<Self, ConfigError> {
        check_width("affine layer inputs", inputs)?;
        check_width("affine layer outputs", outputs)?;
        weight_init.validate()?;
        bias_init.validate()?;
        Ok(Affine {
            inputs,
            outputs,
            weight_init,
            bias_init,
            out: Buffer::default(),
            grad_in: Buffer::default(),
        })
    }

    fn split<'a>(&self, params: &'a [F]) -> (ArrayView2<'a, F>, ArrayView1<'a, F>) {
        let (w, b) = params.split_at(self.inputs * self.outputs);
        (
            ArrayView2::from_shape((self.inputs, self.outputs), w).expect("weight slice"),
            ArrayView1::from(b),
        )
    }

    fn split_mut<'a>(&self, grads: &'a mut [F]) -> (ArrayViewMut2<'a, F>, ArrayViewMut1<'a, F>) {
        let (w, b) = grads.split_at_mut(self.inputs * self.outputs);
        (
            ArrayViewMut2::from_shape((self.inputs, self.outputs), w).expect("weight slice"),
            ArrayViewMut1::from(b),
        )
    }
}

impl<F: Scalar> Layer<F> for Affine<F> {
    fn spec(&self) -> LayerSpec {
        LayerSpec::Affine {
            inputs: self.inputs,
            outputs: self.outputs,
            weight_init: self.weight_init,
            bias_init: self.bias_init,
        }
    }

    fn input_width(&self) -> usize {
        self.inputs
    }

    fn output_width(&self) -> usize {
        self.outputs
    }

    fn tensors(&self) -> Vec<TensorSpec> {
        vec![
            TensorSpec {
                name: "weight",
                rows: self.inputs,
                cols: self.outputs,
                role: Role::Weight,
            },
            TensorSpec {
                name: "bias",
                rows: 1,
                cols: self.outputs,
                role: Role::Bias,
            },
        ]
    }

    fn init_params(&self, params: &mut [F], rng: &mut Rng) {
        let (w, b) = params.split_at_mut(self.inputs * self.outputs);
        self.weight_init.fill(w, self.inputs, self.outputs, rng);
        self.bias_init.fill(b, 1, self.outputs, rng);
    }

    fn forward(&mut self, params: &[F], input: ArrayView2<'_, F>, _pass: Pass) {
        let (w, b) = self.split(params);
        self.out.reshape(input.nrows(), self.outputs);
        let bias = b.to_slice().expect("bias slice is contiguous");
        matmul_bias(input, w, bias, &mut self.out.view_mut());
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
        self.backward_params(params, grads, input, grad_out);
        let (w, _) = self.split(params);
        self.grad_in.reshape(grad_out.nrows(), self.inputs);
        matmul(grad_out, w.t(), &mut self.grad_in.view_mut(), false);
        self.grad_in.view()
    }

    fn backward_params(
        &mut self,
        _params: &[F],
        grads: &mut [F],
        input: ArrayView2<'_, F>,
        grad_out: ArrayView2<'_, F>,
    ) {
        let (mut dw, mut db) = self.split_mut(grads);
        matmul(input.t(), grad_out, &mut dw, true);
        match (grad_out.as_slice(), db.as_slice_mut()) {
            (Some(g), Some(db)) => {
                // Column sums; large batches split the columns over the threads.
                let outputs = self.outputs;
                let min_cols = (SPLIT_ELEMENTS / g.len().div_ceil(outputs).max(1)).max(16);
                for_chunks([db], min_cols, |at, [db]| {
                    with_simd(|| {
                        for row in g.chunks_exact(outputs) {
                            let row = &row[at..at + db.len()];
                            db.iter_mut().zip(row).for_each(|(d, &v)| *d += v);
                        }
                    })
                });
            }
            _ => {
                for row in grad_out.axis_iter(Axis(0)) {
                    db += &row;
                }
            }
        }
    }
}
