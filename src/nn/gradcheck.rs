//! Finite-difference gradient checker.
//!
//! Compares the analytic gradient of `loss(network(x), y) + penalty(θ)` with respect to every
//! parameter (and optionally every input) against a five-point central difference in `f64`:
//! g ≈ (−L(θ+2h) + 8L(θ+h) − 8L(θ−h) + L(θ−2h)) / 12h, whose truncation error is O(h⁴).
//! The relative error of an entry is |a − n| / max(|a|, |n|, floor); the floor keeps entries
//! whose true gradient is (near) zero from turning rounding noise into large relative errors.
//! Stochastic layers are held at one noise draw for the whole check. A proximal L1 term is not
//! part of the gradient, so only the smooth part of the penalty is checked.

use crate::fit::objective::Objective;
use crate::fit::penalty::Penalty;
use crate::nn::error::ShapeError;
use crate::nn::layer::Pass;
use crate::nn::network::Network;
use ndarray::{Array2, ArrayView2};
use std::ops::Range;

/// Settings of a gradient check.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CheckOptions {
    /// Step h, scaled by max(1, |θ|) per entry.
    pub step: f64,
    /// Denominator floor of the relative error.
    pub floor: f64,
    /// How many worst entries to keep per tensor.
    pub worst: usize,
    /// Also check the gradient with respect to the inputs.
    pub inputs: bool,
    /// Pass the forward runs in: `Train` checks dropout and random slopes at a held draw.
    pub pass: Pass,
}

impl Default for CheckOptions {
    fn default() -> Self {
        CheckOptions {
            step: 1e-4,
            floor: 1e-5,
            worst: 3,
            inputs: true,
            pass: Pass::Train,
        }
    }
}

/// One compared entry.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EntryCheck {
    /// Index within the tensor (row-major).
    pub index: usize,
    /// Back-propagated value.
    pub analytic: f64,
    /// Finite-difference value.
    pub numeric: f64,
    /// |analytic − numeric| / max(|analytic|, |numeric|, floor).
    pub rel_error: f64,
}

/// The result for one parameter tensor (or the inputs).
#[derive(Clone, Debug, PartialEq)]
pub struct TensorCheck {
    /// e.g. "layer 0 (affine) weight" or "input".
    pub label: String,
    /// Largest relative error over the tensor.
    pub max_rel_error: f64,
    /// The worst entries, largest error first.
    pub worst: Vec<EntryCheck>,
}

/// The result of a whole check.
#[derive(Clone, Debug, PartialEq)]
pub struct GradReport {
    /// One entry per parameter tensor, then one for the inputs if checked.
    pub tensors: Vec<TensorCheck>,
}

impl GradReport {
    /// Largest relative error over every tensor.
    pub fn max_rel_error(&self) -> f64 {
        self.tensors
            .iter()
            .map(|t| t.max_rel_error)
            .fold(0.0, f64::max)
    }

    /// The tensor with the largest error, if any.
    pub fn worst_tensor(&self) -> Option<&TensorCheck> {
        self.tensors
            .iter()
            .max_by(|a, b| a.max_rel_error.total_cmp(&b.max_rel_error))
    }
}

/// Checks the gradients of `objective` (a [`crate::Loss`] or an [`Objective`] with a penalty)
/// at the network's current parameters; see the module docs.
pub fn check_gradients(
    net: &mut Network<f64>,
    objective: impl Into<Objective>,
    x: ArrayView2<'_, f64>,
    y: ArrayView2<'_, f64>,
    options: CheckOptions,
) -> Result<GradReport, ShapeError> {
    let objective = objective.into();
    let objective = Objective::new(objective.loss, objective.penalty.smooth_part());
    // Draw the noise once, then hold it for every evaluation below.
    net.forward(x, options.pass)?;
    net.hold_noise(true);
    let result = run_check(net, objective, x, y, options);
    net.hold_noise(false);
    result
}

/// The objective's pieces the check evaluates again and again.
struct Target<'a> {
    objective: Objective,
    ranges: Vec<Range<usize>>,
    y: ArrayView2<'a, f64>,
    pass: Pass,
}

impl Target<'_> {
    fn value(&self, net: &mut Network<f64>, x: ArrayView2<'_, f64>) -> Result<f64, ShapeError> {
        let out = net.forward(x, self.pass)?;
        let data = self.objective.loss.value(out, self.y)?;
        Ok(data + self.penalty().value(net.params(), &self.ranges))
    }

    fn penalty(&self) -> &Penalty {
        &self.objective.penalty
    }
}

fn run_check(
    net: &mut Network<f64>,
    objective: Objective,
    x: ArrayView2<'_, f64>,
    y: ArrayView2<'_, f64>,
    options: CheckOptions,
) -> Result<GradReport, ShapeError> {
    let target = Target {
        objective,
        ranges: objective.penalty.ranges(net),
        y,
        pass: options.pass,
    };
    // Analytic gradients.
    net.clear_gradients();
    let out = net.forward(x, target.pass)?.to_owned();
    let mut top = Array2::zeros(out.dim());
    objective
        .loss
        .gradient_into(out.view(), y, top.view_mut())?;
    let input_grad = net.backward(top.view())?.to_owned();
    let mut analytic = net.grads().to_vec();
    target
        .penalty()
        .add_gradient(net.params(), &mut analytic, &target.ranges);

    let mut tensors = Vec::new();
    for info in net.tensors() {
        let mut entries = Vec::with_capacity(info.range.len());
        for (k, p) in info.range.clone().enumerate() {
            let original = net.params()[p];
            let numeric = five_point(original, options.step, |v| {
                net.params_mut()[p] = v;
                target.value(net, x)
            })?;
            net.params_mut()[p] = original;
            entries.push(compare(k, analytic[p], numeric, options.floor));
        }
        tensors.push(summarize(info.label(), entries, options.worst));
    }

    if options.inputs {
        let mut probe = x.to_owned();
        let mut entries = Vec::with_capacity(probe.len());
        let shape = probe.dim();
        for k in 0..probe.len() {
            let (r, c) = (k / shape.1, k % shape.1);
            let original = probe[(r, c)];
            let numeric = five_point(original, options.step, |v| {
                probe[(r, c)] = v;
                target.value(net, probe.view())
            })?;
            probe[(r, c)] = original;
            entries.push(compare(k, input_grad[(r, c)], numeric, options.floor));
        }
        tensors.push(summarize("input".to_string(), entries, options.worst));
    }
    Ok(GradReport { tensors })
}

/// Five-point central difference of `f` at `at`, step h·max(1, |at|).
fn five_point(
    at: f64,
    step: f64,
    mut f: impl FnMut(f64) -> Result<f64, ShapeError>,
) -> Result<f64, ShapeError> {
    let h = step * at.abs().max(1.0);
    let (p2, p1) = (f(at + 2.0 * h)?, f(at + h)?);
    let (m1, m2) = (f(at - h)?, f(at - 2.0 * h)?);
    Ok((-p2 + 8.0 * p1 - 8.0 * m1 + m2) / (12.0 * h))
}

fn compare(index: usize, analytic: f64, numeric: f64, floor: f64) -> EntryCheck {
    let scale = analytic.abs().max(numeric.abs()).max(floor);
    let diff = (analytic - numeric).abs();
    EntryCheck {
        index,
        analytic,
        numeric,
        // A NaN on either side must count as a failure, not compare as "small".
        rel_error: if diff.is_nan() {
            f64::INFINITY
        } else {
            diff / scale
        },
    }
}

fn summarize(label: String, mut entries: Vec<EntryCheck>, keep: usize) -> TensorCheck {
    entries.sort_by(|a, b| b.rel_error.total_cmp(&a.rel_error));
    entries.truncate(keep);
    TensorCheck {
        label,
        max_rel_error: entries.first().map_or(0.0, |e| e.rel_error),
        worst: entries,
    }
}
