//! Training diagnostics: dead and dormant units, sparsity, activation and gradient statistics,
//! warnings with remedies, and revival of dead units.
//!
//! The statistics of a hidden layer (each activation layer of the network) are taken at the end
//! of every epoch on a fixed probe batch — the same rows every epoch, in inference mode — so
//! epochs are comparable and the cost is one small forward pass. Gradient norms and
//! update-to-weight ratios come from every step of the epoch and are averaged over it.
//!
//! A unit is dead when its output is exactly 0 for every probe row. Its τ-dormant score
//! (Sokar et al. 2023, "The Dormant Neuron Phenomenon in Deep Reinforcement Learning", Eq. 1) is
//! s = E|h| / ((1/H)·Σₖ E|hₖ|); it is τ-dormant when s ≤ τ. For τ = 0 that is exactly "dead"
//! (reported as `dead_fraction`); `dormant_fraction` uses τ = 0.1 by default.

use crate::fit::train::{EpochRecord, Flow, Observer, StepRecord};
use crate::kernels::scalar::Scalar;
use crate::nn::init::{rng_from_seed, Draw, Fan, Init, Rng};
use crate::nn::layer::{LayerSpec, Pass};
use crate::nn::network::Network;
use ndarray::{Array2, ArrayView2, Axis};
use rand::RngCore;
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// Thresholds and policies of the monitor.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct MonitorConfig {
    /// τ of the reported dormant fraction.
    pub dormant_tau: f64,
    /// Warn when more than this fraction of a layer's units is dead.
    pub dead_warning: f64,
    /// Warn when a step's gradient norm exceeds the epoch's first by this factor.
    pub grad_jump_warning: f64,
    /// Warn when the mean update-to-weight ratio of a layer is above this.
    pub update_ratio_high: f64,
    /// Warn when the mean update-to-weight ratio of a layer is below this.
    pub update_ratio_low: f64,
    /// Warn when more than this fraction of a tanh or sigmoid layer's outputs is saturated.
    pub saturation_warning: f64,
    /// Opt-in revival of dead or dormant units.
    pub revival: Option<Revival>,
}

impl Default for MonitorConfig {
    /// Thresholds: 30% dead, a 100× gradient jump, update ratios outside [1e-6, 1e-1], 50%
    /// saturation (common practice, no source; the update ratio's healthy value of about 1e-3
    /// is a rule of thumb).
    fn default() -> Self {
        MonitorConfig {
            dormant_tau: 0.1,
            dead_warning: 0.3,
            grad_jump_warning: 100.0,
            update_ratio_high: 1e-1,
            update_ratio_low: 1e-6,
            saturation_warning: 0.5,
            revival: None,
        }
    }
}

/// Re-initialize τ-dormant units every `every` epochs (Sokar et al. 2023, "ReDo"): incoming
/// weights drawn anew with He initialization, bias and outgoing weights set to zero (so the
/// network's output does not jump), and the optimizer state of those entries reset.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Revival {
    /// Epochs between revivals.
    pub every: usize,
    /// Units with a dormant score ≤ τ are revived (0: dead units only).
    pub tau: f64,
    /// Seed of the new draws.
    pub seed: u64,
}

/// Statistics of one hidden layer at the end of one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct LayerStats {
    /// Index of the activation layer in the network.
    pub layer: usize,
    /// Its activation, e.g. "relu".
    pub activation: String,
    /// Number of units.
    pub units: usize,
    /// Fraction of units that are 0 for every probe row (τ = 0 dormant).
    pub dead_fraction: f64,
    /// Fraction of outputs that are exactly 0 (sparsity).
    pub zero_fraction: f64,
    /// Fraction of units that are τ-dormant at the configured τ.
    pub dormant_fraction: f64,
    /// Mean of the outputs.
    pub mean: f64,
    /// Standard deviation of the outputs.
    pub std: f64,
    /// Fraction of pre-activations (inputs of the layer) below 0.
    pub negative_fraction: f64,
    /// Fraction of saturated outputs (tanh: |y| > 0.99; sigmoid: y < 0.01 or > 0.99).
    pub saturation_fraction: Option<f64>,
    /// L2 norm of the gradient of the weights feeding the layer, averaged over the epoch's steps.
    pub grad_norm: f64,
    /// ‖Δw‖/‖w‖ of the weights feeding the layer, averaged over the epoch's steps.
    pub update_ratio: f64,
    /// Units revived at the end of this epoch.
    pub revived: usize,
}

/// What a warning is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WarningKind {
    /// Too many dead units.
    DeadUnits,
    /// The gradient norm jumped within an epoch.
    GradientJump,
    /// Updates are large against the weights.
    UpdateTooLarge,
    /// Updates are tiny against the weights.
    UpdateTooSmall,
    /// A tanh or sigmoid layer is saturated.
    Saturation,
}

/// A threshold crossed, with why it matters and what to try.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Warning {
    /// Epoch it was seen in.
    pub epoch: usize,
    /// Network index of the layer concerned, if one.
    pub layer: Option<usize>,
    /// What it is about.
    pub kind: WarningKind,
    /// What was seen.
    pub message: String,
    /// What to try.
    pub remedy: String,
}

/// Per-epoch diagnostics of every hidden layer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochDiagnostics {
    /// Epoch index.
    pub epoch: usize,
    /// One entry per hidden (activation) layer.
    pub layers: Vec<LayerStats>,
    /// One entry per parameter tensor.
    pub tensors: Vec<TensorHealth>,
    /// Largest step gradient norm over the epoch's first.
    pub grad_jump: f64,
}

/// Where the parameters around one hidden layer sit.
#[derive(Clone, Debug)]
struct Hidden {
    layer: usize,
    activation: crate::Activation,
    units: usize,
    /// The affine layer feeding it: weight and bias ranges and its fan-in.
    incoming: Option<(Range<usize>, Range<usize>, usize)>,
    /// Index (in the monitor's tensor list) of the incoming weight.
    incoming_tensor: Option<usize>,
    /// The weight range of the next affine layer (rows = this layer's units).
    outgoing: Option<(Range<usize>, usize)>,
}

/// Running sums over an epoch's steps for one parameter tensor.
#[derive(Clone, Copy, Debug, Default)]
struct StepSums {
    grad_norm: f64,
    update_ratio: f64,
}

/// Gradient and update statistics of one parameter tensor over one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TensorHealth {
    /// e.g. "layer 0 (affine) weight".
    pub tensor: String,
    /// L2 norm of the tensor's gradient, averaged over the epoch's steps.
    pub grad_norm: f64,
    /// ‖Δθ‖/‖θ‖ per step, averaged over the epoch's steps (0 while θ = 0).
    pub update_ratio: f64,
}

/// A callback that sees each warning as it is raised.
pub type WarningHandler = Box<dyn FnMut(&Warning) + Send>;

/// An [`Observer`] that computes [`EpochDiagnostics`], raises warnings and optionally revives
/// dead units.
pub struct Monitor<F: Scalar> {
    config: MonitorConfig,
    probe: Array2<F>,
    hidden: Vec<Hidden>,
    /// Label and range of every parameter tensor.
    tensors: Vec<(String, Range<usize>)>,
    previous: Vec<F>,
    sums: Vec<StepSums>,
    steps: usize,
    first_norm: Option<f64>,
    max_norm: f64,
    rng: Rng,
    resets: Vec<usize>,
    on_warning: Option<WarningHandler>,
    /// Diagnostics so far, one entry per epoch.
    pub epochs: Vec<EpochDiagnostics>,
    /// Warnings so far.
    pub warnings: Vec<Warning>,
}

impl<F: Scalar> std::fmt::Debug for Monitor<F> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Monitor")
            .field("config", &self.config)
            .field("probe_rows", &self.probe.nrows())
            .field("epochs", &self.epochs.len())
            .field("warnings", &self.warnings)
            .finish()
    }
}

impl<F: Scalar> Monitor<F> {
    /// A monitor that probes with `probe` (rows in the network's input space: scaled, if the
    /// network is trained on scaled data). A few hundred training rows are enough.
    pub fn new(probe: ArrayView2<'_, F>, config: MonitorConfig) -> Self {
        let seed = config.revival.map_or(0, |r| r.seed);
        Monitor {
            config,
            probe: probe.to_owned(),
            hidden: Vec::new(),
            tensors: Vec::new(),
            previous: Vec::new(),
            sums: Vec::new(),
            steps: 0,
            first_norm: None,
            max_norm: 0.0,
            rng: rng_from_seed(seed),
            resets: Vec::new(),
            on_warning: None,
            epochs: Vec::new(),
            warnings: Vec::new(),
        }
    }

    /// Calls `handler` with every warning as it is raised (e.g. to print it under a progress
    /// bar).
    pub fn with_warning_handler(mut self, handler: impl FnMut(&Warning) + Send + 'static) -> Self {
        self.on_warning = Some(Box::new(handler));
        self
    }

    /// The thresholds in use.
    pub fn config(&self) -> &MonitorConfig {
        &self.config
    }

    fn map_layers(&mut self, net: &Network<F>) {
        let tensors = net.tensors();
        let weight_of = |layer: usize| {
            tensors
                .iter()
                .find(|t| t.layer == layer && t.name == "weight")
                .map(|t| (t.range.clone(), t.shape.0))
        };
        let bias_of = |layer: usize| {
            tensors
                .iter()
                .find(|t| t.layer == layer && t.name == "bias")
                .map(|t| t.range.clone())
        };
        let specs = net.specs();
        self.hidden.clear();
        for (i, spec) in specs.iter().enumerate() {
            let LayerSpec::Activation { width, activation } = *spec else {
                continue;
            };
            // The nearest affine layer before it, with nothing but dropout in between.
            let before = (0..i)
                .rev()
                .take_while(|&k| !matches!(specs[k], LayerSpec::Activation { .. }))
                .find(|&k| matches!(specs[k], LayerSpec::Affine { .. }));
            let after = (i + 1..specs.len())
                .take_while(|&k| !matches!(specs[k], LayerSpec::Activation { .. }))
                .find(|&k| matches!(specs[k], LayerSpec::Affine { .. }));
            let incoming = before.and_then(|k| {
                let (w, fan_in) = weight_of(k)?;
                Some((w, bias_of(k)?, fan_in))
            });
            let outgoing = after.and_then(|k| {
                let (w, _) = weight_of(k)?;
                let cols = w.len() / width;
                Some((w, cols))
            });
            let incoming_tensor = before.and_then(|k| {
                tensors
                    .iter()
                    .position(|t| t.layer == k && t.name == "weight")
            });
            self.hidden.push(Hidden {
                layer: i,
                activation,
                units: width,
                incoming,
                incoming_tensor,
                outgoing,
            });
        }
        self.tensors = tensors
            .iter()
            .map(|t| (t.label(), t.range.clone()))
            .collect();
        self.sums = vec![StepSums::default(); self.tensors.len()];
    }

    fn warn(&mut self, warning: Warning) {
        if let Some(handler) = self.on_warning.as_mut() {
            handler(&warning);
        }
        self.warnings.push(warning);
    }

    /// Probe statistics of every hidden layer (no step statistics).
    fn probe_stats(&self, net: &mut Network<F>) -> Vec<LayerStats> {
        if net.forward(self.probe.view(), Pass::Infer).is_err() {
            return Vec::new();
        }
        let health = self.tensor_health();
        self.hidden
            .iter()
            .map(|h| {
                let out = net.layer_output(h.layer).expect("mapped layer");
                let input = net.layer_input(h.layer).expect("mapped layer");
                let mut stats = output_stats(out, self.config.dormant_tau);
                stats.layer = h.layer;
                stats.activation = h.activation.name().to_string();
                stats.negative_fraction = fraction(input, |v| v < 0.0);
                stats.saturation_fraction = match h.activation {
                    crate::Activation::Tanh => Some(fraction(out, |v| v.abs() > 0.99)),
                    crate::Activation::Sigmoid => {
                        Some(fraction(out, |v| !(0.01..=0.99).contains(&v)))
                    }
                    _ => None,
                };
                if let Some(t) = h.incoming_tensor {
                    stats.grad_norm = health[t].grad_norm;
                    stats.update_ratio = health[t].update_ratio;
                }
                stats
            })
            .collect()
    }

    /// The epoch's per-tensor averages so far.
    fn tensor_health(&self) -> Vec<TensorHealth> {
        let steps = self.steps.max(1) as f64;
        self.tensors
            .iter()
            .zip(&self.sums)
            .map(|((label, _), sums)| TensorHealth {
                tensor: label.clone(),
                grad_norm: sums.grad_norm / steps,
                update_ratio: sums.update_ratio / steps,
            })
            .collect()
    }

    fn check_thresholds(&mut self, epoch: usize, layers: &[LayerStats], jump: f64) {
        let c = self.config;
        let mut found = Vec::new();
        // Hidden layers are numbered from 1 in every output (the order of their activation
        // layers), the same numbering `train`, `inspect` and the chart use.
        for (ordinal, s) in layers.iter().enumerate() {
            let hidden = ordinal + 1;
            let at = |kind, message: String, remedy: &str| Warning {
                epoch,
                layer: Some(s.layer),
                kind,
                message,
                remedy: remedy.to_string(),
            };
            if s.dead_fraction > c.dead_warning {
                found.push(at(
                    WarningKind::DeadUnits,
                    format!(
                        "hidden layer {hidden} ({}): {:.0}% of {} units are dead (zero for every \
                         probe row)",
                        s.activation,
                        100.0 * s.dead_fraction,
                        s.units
                    ),
                    "lower the learning rate, use a leaky rectifier (leaky-relu, prelu, elu), \
                     check input scaling, or turn on revival",
                ));
            }
            if s.steps_seen() && s.update_ratio > c.update_ratio_high {
                found.push(at(
                    WarningKind::UpdateTooLarge,
                    format!(
                        "hidden layer {hidden}: updates are {:.1e} of the weights per step",
                        s.update_ratio
                    ),
                    "lower the learning rate or clip gradients (about 1e-3 is healthy)",
                ));
            }
            if s.steps_seen() && s.update_ratio < c.update_ratio_low {
                found.push(at(
                    WarningKind::UpdateTooSmall,
                    format!(
                        "hidden layer {hidden}: updates are only {:.1e} of the weights per step",
                        s.update_ratio
                    ),
                    "raise the learning rate, or check for dead units and vanishing gradients",
                ));
            }
            if s.saturation_fraction
                .is_some_and(|f| f > c.saturation_warning)
            {
                found.push(at(
                    WarningKind::Saturation,
                    format!(
                        "hidden layer {hidden} ({}): {:.0}% of outputs are saturated",
                        s.activation,
                        100.0 * s.saturation_fraction.unwrap_or(0.0)
                    ),
                    "scale the inputs, lower the learning rate, or use a rectifier",
                ));
            }
        }
        if jump > c.grad_jump_warning {
            found.push(Warning {
                epoch,
                layer: None,
                kind: WarningKind::GradientJump,
                message: format!("the gradient norm grew {jump:.0}× within the epoch"),
                remedy: "clip gradients by norm, lower the learning rate, or add a schedule"
                    .to_string(),
            });
        }
        for w in found {
            self.warn(w);
        }
    }

    /// Re-initializes the τ-dormant units of every hidden layer with an incoming affine layer;
    /// returns the count per hidden layer.
    fn revive(&mut self, net: &mut Network<F>, tau: f64) -> Vec<usize> {
        if net.forward(self.probe.view(), Pass::Infer).is_err() {
            return vec![0; self.hidden.len()];
        }
        let scores: Vec<Vec<f64>> = self
            .hidden
            .iter()
            .map(|h| dormant_scores(net.layer_output(h.layer).expect("mapped layer")))
            .collect();
        let mut counts = Vec::with_capacity(self.hidden.len());
        for (h, scores) in self.hidden.clone().iter().zip(scores) {
            let Some((w_in, b_in, fan_in)) = h.incoming.clone() else {
                counts.push(0);
                continue;
            };
            let he = Init::He {
                draw: Draw::Normal,
                fan: Fan::In,
                slope: h.activation.negative_slope(),
            };
            let mut count = 0;
            let mut column = vec![F::zero(); fan_in];
            for (j, &s) in scores.iter().enumerate() {
                if s > tau {
                    continue;
                }
                count += 1;
                he.fill(&mut column, fan_in, 1, &mut self.rng);
                let params = net.params_mut();
                for (r, v) in column.iter().enumerate() {
                    let k = w_in.start + r * h.units + j;
                    params[k] = *v;
                    self.resets.push(k);
                }
                params[b_in.start + j] = F::zero();
                self.resets.push(b_in.start + j);
                if let Some((w_out, cols)) = h.outgoing.clone() {
                    for c in 0..cols {
                        let k = w_out.start + j * cols + c;
                        params[k] = F::zero();
                        self.resets.push(k);
                    }
                }
            }
            counts.push(count);
        }
        // Keep the generator moving even if nothing was revived, so draws depend on the epoch.
        let _ = self.rng.next_u32();
        counts
    }
}

impl LayerStats {
    fn steps_seen(&self) -> bool {
        self.grad_norm > 0.0 || self.update_ratio > 0.0
    }
}

impl<F: Scalar> Observer<F> for Monitor<F> {
    fn start(&mut self, net: &Network<F>) {
        self.map_layers(net);
        self.previous = net.params().to_vec();
    }

    fn after_step(&mut self, record: &StepRecord, net: &Network<F>) {
        if self.tensors.is_empty() || self.previous.len() != net.param_count() {
            self.map_layers(net);
            self.previous = net.params().to_vec();
        }
        let (params, grads) = (net.params(), net.grads());
        for ((_, range), sums) in self.tensors.iter().zip(self.sums.iter_mut()) {
            sums.grad_norm += norm(&grads[range.clone()]);
            let before = &self.previous[range.clone()];
            let delta = params[range.clone()]
                .iter()
                .zip(before)
                .map(|(a, b)| (a.as_f64() - b.as_f64()).powi(2))
                .sum::<f64>()
                .sqrt();
            let size = norm(before);
            if size > 0.0 {
                sums.update_ratio += delta / size;
            }
        }
        self.previous.copy_from_slice(params);
        self.steps += 1;
        let first = *self.first_norm.get_or_insert(record.grad_norm);
        self.max_norm = self
            .max_norm
            .max(record.grad_norm / first.max(f64::MIN_POSITIVE));
    }

    fn after_epoch(&mut self, record: &EpochRecord, net: &mut Network<F>) -> Flow {
        if self.tensors.is_empty() {
            self.map_layers(net);
        }
        let mut layers = self.probe_stats(net);
        let tensors = self.tensor_health();
        let jump = self.max_norm;
        self.check_thresholds(record.epoch, &layers, jump);
        if let Some(revival) = self.config.revival {
            if revival.every > 0 && (record.epoch + 1).is_multiple_of(revival.every) {
                let counts = self.revive(net, revival.tau);
                for (s, c) in layers.iter_mut().zip(counts) {
                    s.revived = c;
                }
            }
        }
        self.epochs.push(EpochDiagnostics {
            epoch: record.epoch,
            layers,
            tensors,
            grad_jump: jump,
        });
        self.sums.iter_mut().for_each(|s| *s = StepSums::default());
        self.steps = 0;
        self.first_norm = None;
        self.max_norm = 0.0;
        self.previous.copy_from_slice(net.params());
        Flow::Continue
    }

    fn take_optimizer_resets(&mut self) -> Vec<usize> {
        std::mem::take(&mut self.resets)
    }
}

/// Sokar et al. 2023 dormant score of every unit (column) of a layer's outputs:
/// E|hᵢ| / ((1/H)·Σₖ E|hₖ|). All zeros if the whole layer is silent.
pub fn dormant_scores<F: Scalar>(outputs: ArrayView2<'_, F>) -> Vec<f64> {
    let rows = outputs.nrows().max(1) as f64;
    let means: Vec<f64> = outputs
        .axis_iter(Axis(1))
        .map(|c| c.iter().map(|v| v.as_f64().abs()).sum::<f64>() / rows)
        .collect();
    let layer_mean = means.iter().sum::<f64>() / means.len().max(1) as f64;
    means
        .iter()
        .map(|m| {
            if layer_mean > 0.0 {
                m / layer_mean
            } else {
                0.0
            }
        })
        .collect()
}

/// Output-side statistics of one layer: dead, zero and dormant fractions, mean and std.
fn output_stats<F: Scalar>(out: ArrayView2<'_, F>, tau: f64) -> LayerStats {
    let units = out.ncols();
    let dead = out
        .axis_iter(Axis(1))
        .filter(|c| c.iter().all(|v| *v == F::zero()))
        .count();
    let scores = dormant_scores(out);
    let dormant = scores.iter().filter(|&&s| s <= tau).count();
    let n = out.len().max(1) as f64;
    let mean = out.iter().map(|v| v.as_f64()).sum::<f64>() / n;
    let var = out.iter().map(|v| (v.as_f64() - mean).powi(2)).sum::<f64>() / n;
    LayerStats {
        layer: 0,
        activation: String::new(),
        units,
        dead_fraction: dead as f64 / units.max(1) as f64,
        zero_fraction: fraction(out, |v| v == 0.0),
        dormant_fraction: dormant as f64 / units.max(1) as f64,
        mean,
        std: var.sqrt(),
        negative_fraction: 0.0,
        saturation_fraction: None,
        grad_norm: 0.0,
        update_ratio: 0.0,
        revived: 0,
    }
}

fn fraction<F: Scalar>(a: ArrayView2<'_, F>, pred: impl Fn(f64) -> bool) -> f64 {
    a.iter().filter(|v| pred(v.as_f64())).count() as f64 / a.len().max(1) as f64
}

fn norm<F: Scalar>(v: &[F]) -> f64 {
    v.iter().map(|x| x.as_f64().powi(2)).sum::<f64>().sqrt()
}
