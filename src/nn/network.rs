//! A stack of layers applied in order, with every parameter in one flat vector.

use crate::kernels::scalar::Scalar;
use crate::nn::activation::Activation;
use crate::nn::buffer::Buffer;
use crate::nn::error::{ConfigError, ShapeError};
use crate::nn::init::{rng_from_seed, with_slope, Init};
use crate::nn::layer::{Layer, LayerSpec, Pass, Role};
use ndarray::{Array2, ArrayView2};
use rand::RngCore;
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// Where one parameter tensor sits in the network's flat parameter vector.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TensorInfo {
    /// Index of the layer that owns it.
    pub layer: usize,
    /// Kind of that layer, e.g. "affine" or "prelu".
    pub layer_kind: String,
    /// Name within the layer, e.g. "weight".
    pub name: &'static str,
    /// What it is for.
    pub role: Role,
    /// Rows and columns (row-major).
    pub shape: (usize, usize),
    /// Range in [`Network::params`] and [`Network::grads`].
    pub range: Range<usize>,
}

impl TensorInfo {
    /// A label such as "layer 0 (affine) weight".
    pub fn label(&self) -> String {
        format!("layer {} ({}) {}", self.layer, self.layer_kind, self.name)
    }
}

/// A feed-forward network: layers applied in order to rows of samples.
#[derive(Debug)]
pub struct Network<F: Scalar> {
    input_width: usize,
    layers: Vec<Box<dyn Layer<F>>>,
    spans: Vec<Range<usize>>,
    params: Vec<F>,
    grads: Vec<F>,
    input: Buffer<F>,
    top_grad: Buffer<F>,
    forward_rows: Option<usize>,
}

impl<F: Scalar> Network<F> {
    /// An empty network taking `input_width` columns; add layers with [`Network::push`].
    pub fn new(input_width: usize) -> Result<Self, ConfigError> {
        crate::nn::layer::check_width("network input", input_width)?;
        Ok(Network {
            input_width,
            layers: Vec::new(),
            spans: Vec::new(),
            params: Vec::new(),
            grads: Vec::new(),
            input: Buffer::default(),
            top_grad: Buffer::default(),
            forward_rows: None,
        })
    }

    /// Builds a network from layer descriptions; parameters are zero until
    /// [`Network::initialize`] or [`Network::params_mut`] sets them.
    pub fn from_specs(input_width: usize, specs: &[LayerSpec]) -> Result<Self, ConfigError> {
        let mut net = Network::new(input_width)?;
        for spec in specs {
            net.push(spec.build()?)?;
        }
        Ok(net)
    }

    /// Appends a layer, checking that its input width matches the current output width.
    pub fn push(&mut self, layer: Box<dyn Layer<F>>) -> Result<(), ConfigError> {
        let got = self.output_width();
        if layer.input_width() != got {
            return Err(ConfigError::WidthMismatch {
                layer: self.layers.len(),
                kind: layer.spec().kind(),
                expected: layer.input_width(),
                got,
            });
        }
        let start = self.params.len();
        let size: usize = layer.tensors().iter().map(|t| t.len()).sum();
        self.params.resize(start + size, F::zero());
        self.grads.resize(start + size, F::zero());
        self.spans.push(start..start + size);
        self.layers.push(layer);
        Ok(())
    }

    /// Draws fresh parameters for every layer and reseeds the noise of stochastic layers, all
    /// from `seed`: the same seed gives the same network.
    pub fn initialize(&mut self, seed: u64) {
        let mut rng = rng_from_seed(seed);
        for (layer, span) in self.layers.iter_mut().zip(&self.spans) {
            layer.init_params(&mut self.params[span.clone()], &mut rng);
            layer.reseed(rng.next_u64());
        }
        self.clear_gradients();
    }

    /// Number of input columns.
    pub fn input_width(&self) -> usize {
        self.input_width
    }

    /// Number of output columns.
    pub fn output_width(&self) -> usize {
        self.layers
            .last()
            .map_or(self.input_width, |l| l.output_width())
    }

    /// The layers, in order.
    pub fn layers(&self) -> &[Box<dyn Layer<F>>] {
        &self.layers
    }

    /// Descriptions of every layer, enough to rebuild the network with [`Network::from_specs`].
    pub fn specs(&self) -> Vec<LayerSpec> {
        self.layers.iter().map(|l| l.spec()).collect()
    }

    /// Total number of parameters.
    pub fn param_count(&self) -> usize {
        self.params.len()
    }

    /// All parameters, layer after layer, each tensor row-major.
    pub fn params(&self) -> &[F] {
        &self.params
    }

    /// Mutable flat view of all parameters.
    pub fn params_mut(&mut self) -> &mut [F] {
        &mut self.params
    }

    /// Accumulated gradients, laid out like [`Network::params`].
    pub fn grads(&self) -> &[F] {
        &self.grads
    }

    /// Mutable flat view of the gradients.
    pub fn grads_mut(&mut self) -> &mut [F] {
        &mut self.grads
    }

    /// Parameters and gradients together, for optimizers that update one from the other.
    pub fn params_and_grads(&mut self) -> (&mut [F], &[F]) {
        (&mut self.params, &self.grads)
    }

    /// Parameters (read-only) and gradients (mutable) together, for adding penalty gradients.
    pub fn grads_with_params(&mut self) -> (&[F], &mut [F]) {
        (&self.params, &mut self.grads)
    }

    /// The loss of `loss` on rows `x` → `y` in a training pass, with its gradient with respect
    /// to every parameter left in [`Network::grads`] (earlier gradients are cleared first).
    /// One call for what a training step needs before the optimizer moves the parameters.
    pub fn loss_gradients(
        &mut self,
        loss: crate::nn::loss::Loss,
        x: ArrayView2<'_, F>,
        y: ArrayView2<'_, F>,
    ) -> Result<F, ShapeError> {
        self.clear_gradients();
        let out = self.forward(x, crate::nn::layer::Pass::Train)?;
        let value = loss.value(out, y)?;
        let mut grad = Array2::zeros(out.dim());
        loss.gradient_into(out, y, grad.view_mut())?;
        self.backward_params(grad.view())?;
        Ok(value)
    }

    /// Sets every gradient to zero.
    pub fn clear_gradients(&mut self) {
        let grads = &mut self.grads[..];
        crate::kernels::for_chunks([grads], crate::kernels::SPLIT_ELEMENTS, |_, [g]| {
            g.fill(F::zero())
        });
    }

    /// Where each parameter tensor lives in the flat vectors.
    pub fn tensors(&self) -> Vec<TensorInfo> {
        let mut out = Vec::new();
        for (i, (layer, span)) in self.layers.iter().zip(&self.spans).enumerate() {
            let mut start = span.start;
            let kind = layer.spec().kind();
            for t in layer.tensors() {
                out.push(TensorInfo {
                    layer: i,
                    layer_kind: kind.clone(),
                    name: t.name,
                    role: t.role,
                    shape: (t.rows, t.cols),
                    range: start..start + t.len(),
                });
                start += t.len();
            }
        }
        out
    }

    /// Runs every layer on `x` (rows = samples) and returns the output. Buffers are reused, so
    /// repeated calls with batches no larger than before allocate nothing.
    pub fn forward(
        &mut self,
        x: ArrayView2<'_, F>,
        pass: Pass,
    ) -> Result<ArrayView2<'_, F>, ShapeError> {
        if x.ncols() != self.input_width {
            return Err(ShapeError::new(
                "network input",
                (x.nrows(), self.input_width),
                x.dim(),
            ));
        }
        self.input.copy_from(x);
        for i in 0..self.layers.len() {
            let (before, rest) = self.layers.split_at_mut(i);
            let input = match before.last() {
                Some(prev) => prev.output(),
                None => self.input.view(),
            };
            rest[0].forward(&self.params[self.spans[i].clone()], input, pass);
        }
        self.forward_rows = Some(x.nrows());
        Ok(self.output())
    }

    /// The output of the last forward pass.
    pub fn output(&self) -> ArrayView2<'_, F> {
        match self.layers.last() {
            Some(layer) => layer.output(),
            None => self.input.view(),
        }
    }

    /// The output of layer `index` from the last forward pass (for diagnostics).
    pub fn layer_output(&self, index: usize) -> Option<ArrayView2<'_, F>> {
        self.layers.get(index).map(|l| l.output())
    }

    /// The input of layer `index` from the last forward pass (for diagnostics).
    pub fn layer_input(&self, index: usize) -> Option<ArrayView2<'_, F>> {
        match index {
            0 => Some(self.input.view()),
            i => self.layers.get(i - 1).map(|l| l.output()),
        }
    }

    /// Back-propagates `grad_out` (the loss gradient with respect to the last forward pass's
    /// output), adds the parameter gradients into [`Network::grads`] and returns the gradient
    /// with respect to the network input.
    pub fn backward(
        &mut self,
        grad_out: ArrayView2<'_, F>,
    ) -> Result<ArrayView2<'_, F>, ShapeError> {
        self.backpropagate(grad_out, true)?;
        Ok(match self.layers.first() {
            Some(first) => first.input_grad(),
            None => self.top_grad.view(),
        })
    }

    /// [`Network::backward`] without the gradient with respect to the network input, which
    /// training does not need: the first layer skips that product.
    pub fn backward_params(&mut self, grad_out: ArrayView2<'_, F>) -> Result<(), ShapeError> {
        self.backpropagate(grad_out, false)
    }

    fn backpropagate(
        &mut self,
        grad_out: ArrayView2<'_, F>,
        input_grad: bool,
    ) -> Result<(), ShapeError> {
        let rows = self.forward_rows.ok_or_else(|| {
            ShapeError::new("backward before any forward pass", (0, 0), grad_out.dim())
        })?;
        let expected = (rows, self.output_width());
        if grad_out.dim() != expected {
            return Err(ShapeError::new("output gradient", expected, grad_out.dim()));
        }
        self.top_grad.copy_from(grad_out);
        for i in (0..self.layers.len()).rev() {
            let (before, rest) = self.layers.split_at_mut(i);
            let (layer, after) = rest.split_first_mut().expect("i < len");
            let input = match before.last() {
                Some(prev) => prev.output(),
                None => self.input.view(),
            };
            let grad = match after.first() {
                Some(next) => next.input_grad(),
                None => self.top_grad.view(),
            };
            let span = self.spans[i].clone();
            let (params, grads) = (&self.params[span.clone()], &mut self.grads[span]);
            if i == 0 && !input_grad {
                layer.backward_params(params, grads, input, grad);
            } else {
                layer.backward(params, grads, input, grad);
            }
        }
        Ok(())
    }

    /// Inference on `x`, returning an owned array.
    pub fn predict(&mut self, x: ArrayView2<'_, F>) -> Result<Array2<F>, ShapeError> {
        Ok(self.forward(x, Pass::Infer)?.to_owned())
    }

    /// Holds (or releases) the noise of stochastic layers: see [`Layer::hold_noise`].
    pub fn hold_noise(&mut self, hold: bool) {
        self.layers.iter_mut().for_each(|l| l.hold_noise(hold));
    }

    /// The same network in another precision (e.g. an `f32` model as `f64` for a gradient
    /// check). Noise generators restart from seed 0.
    pub fn cast<G: Scalar>(&self) -> Network<G> {
        let mut net = Network::from_specs(self.input_width, &self.specs())
            .expect("specs of a valid network rebuild");
        for (dst, src) in net.params.iter_mut().zip(&self.params) {
            *dst = G::of(src.as_f64());
        }
        net
    }
}

impl<F: Scalar> Clone for Network<F> {
    /// Copies architecture and parameters (gradients and buffers start empty).
    fn clone(&self) -> Self {
        self.cast::<F>()
    }
}

/// A compact description of the usual regressor: affine layers of the given widths, each
/// followed by the activation (and optional dropout), then a linear output layer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NetworkPlan {
    /// Input width.
    pub inputs: usize,
    /// Hidden layer widths, first to last.
    pub hidden: Vec<usize>,
    /// Output width.
    pub outputs: usize,
    /// Activation after each hidden affine layer.
    pub activation: Activation,
    /// Weight initializer of the hidden layers; `None` picks the activation's default
    /// (He for the rectifier family, LeCun for SELU, Glorot for identity, tanh and sigmoid).
    /// A He initializer is given the activation's negative slope for its gain.
    pub init: Option<Init>,
    /// Dropout rate after each hidden activation (0 for none).
    pub dropout: f64,
}

impl NetworkPlan {
    /// A plan with one output, the activation's default initializer and no dropout.
    pub fn new(inputs: usize, hidden: &[usize], activation: Activation) -> Self {
        NetworkPlan {
            inputs,
            hidden: hidden.to_vec(),
            outputs: 1,
            activation,
            init: None,
            dropout: 0.0,
        }
    }

    /// Sets the output width.
    pub fn outputs(mut self, outputs: usize) -> Self {
        self.outputs = outputs;
        self
    }

    /// Sets the hidden-layer weight initializer.
    pub fn init(mut self, init: Init) -> Self {
        self.init = Some(init);
        self
    }

    /// Sets the dropout rate after each hidden activation.
    pub fn dropout(mut self, rate: f64) -> Self {
        self.dropout = rate;
        self
    }

    /// The layer descriptions this plan stands for. The output layer is linear with Glorot
    /// uniform weights (common practice, no source); every bias starts at zero.
    pub fn specs(&self) -> Result<Vec<LayerSpec>, ConfigError> {
        self.activation.validate()?;
        let weight_init = with_slope(
            self.init.unwrap_or_else(|| self.activation.default_init()),
            self.activation.negative_slope(),
        );
        let mut specs = Vec::new();
        let mut width = self.inputs;
        for &h in &self.hidden {
            specs.push(LayerSpec::Affine {
                inputs: width,
                outputs: h,
                weight_init,
                bias_init: Init::ZERO,
            });
            specs.push(LayerSpec::Activation {
                width: h,
                activation: self.activation,
            });
            if self.dropout > 0.0 {
                specs.push(LayerSpec::Dropout {
                    width: h,
                    rate: self.dropout,
                });
            }
            width = h;
        }
        specs.push(LayerSpec::Affine {
            inputs: width,
            outputs: self.outputs,
            weight_init: Init::GLOROT,
            bias_init: Init::ZERO,
        });
        Ok(specs)
    }

    /// Builds and initializes the network from `seed`.
    pub fn build<F: Scalar>(&self, seed: u64) -> Result<Network<F>, ConfigError> {
        let mut net = Network::from_specs(self.inputs, &self.specs()?)?;
        net.initialize(seed);
        Ok(net)
    }
}
