//! Integrated gradients (Sundararajan, Taly & Yan 2017) of one network along the straight
//! path from the zero input (the training means, on the network's scale) to a row's input:
//! `∫₀¹ ∇f(t·x) dt`, the average input gradient along the path, in f64.
//!
//! - Networks whose activations are all piecewise linear (ReLU, leaky ReLU, PReLU,
//!   randomized leaky ReLU at inference, capped ReLU, identity) are integrated exactly: along
//!   the path every pre-activation is affine in t between kinks, so the walk finds the next
//!   kink any unit reaches, adds the (constant) gradient times the segment's length, switches
//!   that unit to its next piece and updates only what the switch changes (the values
//!   downstream of the unit, the gradient upstream of it).
//! - Other networks use adaptive Gauss–Legendre quadrature with 8 nodes per panel: starting
//!   from one panel over the whole path, a panel [t₀, t₁] whose completeness gap
//!   `|Σ xᵢ·∫gᵢ − (f(t₁) − f(t₀))|` exceeds (t₁ − t₀) × [`QUADRATURE_TOLERANCE`] ×
//!   max(|f(x) − f(0)|, [`QUADRATURE_FLOOR`]) is split in two (at most [`MAX_PANELS`]
//!   panels). Splitting concentrates the nodes where the gradient bends or jumps (SELU and
//!   ELU kinks), so the whole path's gap stays below the tolerance.

use super::predict::Step;
use crate::nn::activation::Activation;

/// Most Gauss–Legendre panels per row and member.
pub const MAX_PANELS: usize = 512;
/// Completeness gap the quadrature aims for, relative to max(|f(x) − f(0)|,
/// [`QUADRATURE_FLOOR`]) on the network's standardized output scale.
pub const QUADRATURE_TOLERANCE: f64 = 1e-6;
/// Smallest output change the quadrature's tolerance is relative to.
pub const QUADRATURE_FLOOR: f64 = 1e-3;
/// Panels waiting to be integrated at most (the stack never grows past it).
const STACK: usize = 64;
/// Nodes per Gauss–Legendre panel.
const NODES: usize = 8;
/// Kinks crossed on one path before the exact walk gives up and uses quadrature.
const MAX_EVENTS: usize = 1 << 20;

/// The levels of one network: level k is the input of step k, the last level the output.
#[derive(Clone, Debug)]
pub(crate) struct Layout {
    /// Start of each level in the flat buffers (one more entry: the total).
    offsets: Vec<usize>,
    /// Every activation is piecewise linear.
    exact: bool,
    /// Some activation that is not piecewise linear has kinks (SELU, ELU with α ≠ 1).
    kinked: bool,
    /// The flat ranges of the levels that feed an activation with kinks.
    kinked_levels: Vec<std::ops::Range<usize>>,
}

impl Layout {
    /// The layout of `steps` taking `input` values.
    pub(crate) fn new(steps: &[Step], input: usize) -> Layout {
        let mut offsets = vec![0, input];
        let mut width = input;
        for step in steps {
            if let Step::Affine { outputs, .. } = step {
                width = *outputs;
            }
            offsets.push(offsets.last().copied().unwrap_or(0) + width);
        }
        let exact = steps.iter().all(|s| match s {
            Step::Affine { .. } | Step::Prelu(_) => true,
            Step::Act(a) => piecewise_linear(a),
        });
        let kinked = steps
            .iter()
            .any(|s| matches!(s, Step::Act(a) if !piecewise_linear(a) && !a.kinks().is_empty()));
        let kinked_levels = steps
            .iter()
            .enumerate()
            .filter(|(_, s)| match s {
                Step::Prelu(_) => true,
                Step::Act(a) => !a.kinks().is_empty(),
                Step::Affine { .. } => false,
            })
            .map(|(k, _)| offsets[k]..offsets[k + 1])
            .collect();
        Layout {
            offsets,
            exact,
            kinked,
            kinked_levels,
        }
    }

    /// Total values over all levels.
    pub(crate) fn total(&self) -> usize {
        *self.offsets.last().unwrap_or(&0)
    }

    fn range(&self, level: usize) -> std::ops::Range<usize> {
        self.offsets[level]..self.offsets[level + 1]
    }
}

/// True for the activations the exact walk handles.
fn piecewise_linear(a: &Activation) -> bool {
    matches!(
        a,
        Activation::Identity
            | Activation::Relu
            | Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. }
            | Activation::CappedRelu { .. }
    )
}

/// The pieces of a piecewise-linear unit: `kinks` ascending, piece p lies between kink p − 1
/// and kink p, where the unit gives `slope[p]·z + offset[p]`.
#[derive(Clone, Copy, Debug)]
struct Pieces {
    kinks: [f64; 2],
    count: usize,
    slope: [f64; 3],
    offset: [f64; 3],
}

impl Pieces {
    fn of(step: &Step, unit: usize) -> Pieces {
        let leaky = |a: f64| Pieces {
            kinks: [0.0, 0.0],
            count: 1,
            slope: [a, 1.0, 0.0],
            offset: [0.0; 3],
        };
        match step {
            Step::Prelu(slopes) => leaky(f64::from(slopes[unit])),
            Step::Act(Activation::CappedRelu { cap }) => Pieces {
                kinks: [0.0, *cap],
                count: 2,
                slope: [0.0, 1.0, 0.0],
                offset: [0.0, 0.0, *cap],
            },
            Step::Act(Activation::Identity) | Step::Affine { .. } => Pieces {
                kinks: [0.0; 2],
                count: 0,
                slope: [1.0, 0.0, 0.0],
                offset: [0.0; 3],
            },
            Step::Act(a) => leaky(a.negative_slope()),
        }
    }

    /// The pieces of `step`'s units if they all have the same (every step but PReLU).
    fn shared(step: &Step) -> Option<Pieces> {
        (!matches!(step, Step::Prelu(_))).then(|| Pieces::of(step, 0))
    }

    /// The piece at value `z` moving with slope `d` (at a kink: the side it moves into; not
    /// moving, the lower side, which matches the derivative conventions at kinks).
    fn at(&self, z: f64, d: f64) -> usize {
        self.kinks[..self.count]
            .iter()
            .filter(|&&k| z > k || (z == k && d > 0.0))
            .count()
    }

    /// When a unit on piece `p` with value `c + d·t` reaches the end of its piece (not before
    /// `now`); infinity if never.
    fn next(&self, p: usize, c: f64, d: f64, now: f64) -> f64 {
        let t = if d > 0.0 && p < self.count {
            (self.kinks[p] - c) / d
        } else if d < 0.0 && p > 0 {
            (self.kinks[p - 1] - c) / d
        } else {
            f64::INFINITY
        };
        t.max(now)
    }
}

/// Gauss–Legendre nodes and weights on [−1, 1] (Newton's method on the Legendre recurrence).
pub(crate) fn gauss_legendre(n: usize) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut derivative = 1.0;
        for _ in 0..100 {
            let (mut p0, mut p1) = (1.0, x);
            for k in 2..=n {
                let k = k as f64;
                let p2 = ((2.0 * k - 1.0) * x * p1 - (k - 1.0) * p0) / k;
                p0 = p1;
                p1 = p2;
            }
            derivative = n as f64 * (x * p1 - p0) / (x * x - 1.0);
            let step = p1 / derivative;
            x -= step;
            if step.abs() < 1e-16 {
                break;
            }
        }
        out.push((x, 2.0 / ((1.0 - x * x) * derivative * derivative)));
    }
    out
}

/// Working memory of the path integral (sized once for the largest member, reused).
#[derive(Clone, Debug)]
pub(crate) struct PathScratch {
    value: Vec<f64>,
    value_end: Vec<f64>,
    slope: Vec<f64>,
    grad: Vec<f64>,
    delta_value: Vec<f64>,
    delta_slope: Vec<f64>,
    piece: Vec<u8>,
    event: Vec<f64>,
    acc: Vec<f64>,
    panel: Vec<f64>,
    direction: Vec<f64>,
    point: Vec<f64>,
    stack: Vec<(f64, f64, f64, f64)>,
    /// The average input gradient of the last member.
    pub(crate) average: Vec<f64>,
    nodes: Vec<(f64, f64)>,
}

impl PathScratch {
    /// Buffers for levels of `total` values and inputs of width `input`.
    pub(crate) fn new(total: usize, input: usize) -> PathScratch {
        PathScratch {
            value: vec![0.0; total],
            value_end: vec![0.0; total],
            slope: vec![0.0; total],
            grad: vec![0.0; total],
            delta_value: vec![0.0; total],
            delta_slope: vec![0.0; total],
            piece: vec![0; total],
            event: vec![f64::INFINITY; total],
            acc: vec![0.0; total],
            panel: vec![0.0; total],
            direction: vec![0.0; total],
            point: vec![0.0; input],
            stack: Vec::with_capacity(STACK),
            average: vec![0.0; input],
            nodes: gauss_legendre(NODES),
        }
    }
}

/// The average input gradient of one network along the path from 0 to `x` into
/// `scratch.average`; returns (f(0), f(x)) as the walk or the quadrature saw them.
pub(crate) fn integrate(
    steps: &[Step],
    layout: &Layout,
    x: &[f64],
    scratch: &mut PathScratch,
) -> (f64, f64) {
    if layout.exact {
        if let Some(ends) = walk(steps, layout, x, scratch) {
            return ends;
        }
    }
    quadrature(steps, layout, x, scratch)
}

/// The level whose gradient is accumulated: after the first step when it is affine (its
/// product is applied once at the end), else the input.
fn accumulation_level(steps: &[Step]) -> usize {
    usize::from(matches!(steps.first(), Some(Step::Affine { .. })))
}

/// Turns the accumulated gradient at the accumulation level into the input gradient.
fn finish(steps: &[Step], layout: &Layout, scratch: &mut PathScratch) {
    let n = layout.offsets[1];
    let PathScratch { acc, average, .. } = scratch;
    match steps.first() {
        Some(Step::Affine {
            outputs, weights, ..
        }) => {
            let a = &acc[..*outputs];
            for (g, row) in average[..n].iter_mut().zip(weights.chunks_exact(*outputs)) {
                *g = dot(row, a);
            }
        }
        _ => average[..n].copy_from_slice(&acc[..n]),
    }
}

fn dot(w: &[f32], v: &[f64]) -> f64 {
    w.iter().zip(v).map(|(&a, &b)| f64::from(a) * b).sum()
}

/// The exact walk over the kinks; None if it met more than [`MAX_EVENTS`] kinks.
fn walk(
    steps: &[Step],
    layout: &Layout,
    x: &[f64],
    scratch: &mut PathScratch,
) -> Option<(f64, f64)> {
    let s = scratch;
    let last = steps.len();
    let total = layout.total();
    // Values c + d·t of every level at t = 0 with their pieces.
    let input = layout.range(0);
    s.value[input.clone()].fill(0.0);
    s.slope[input].copy_from_slice(x);
    s.event[..total].fill(f64::INFINITY);
    for (k, step) in steps.iter().enumerate() {
        let (from, to) = (layout.range(k), layout.range(k + 1));
        let (before, after) = s.value.split_at_mut(to.start);
        let (d_before, d_after) = s.slope.split_at_mut(to.start);
        let (c_in, d_in) = (&before[from.clone()], &d_before[from.clone()]);
        let (c_out, d_out) = (&mut after[..to.len()], &mut d_after[..to.len()]);
        match step {
            Step::Affine { weights, bias, .. } => {
                affine(c_in, weights, Some(bias), c_out);
                affine(d_in, weights, None, d_out);
            }
            _ => {
                for u in 0..from.len() {
                    let pieces = Pieces::of(step, u);
                    let p = pieces.at(c_in[u], d_in[u]);
                    s.piece[from.start + u] = p as u8;
                    s.event[from.start + u] = pieces.next(p, c_in[u], d_in[u], 0.0);
                    c_out[u] = pieces.slope[p] * c_in[u] + pieces.offset[p];
                    d_out[u] = pieces.slope[p] * d_in[u];
                }
            }
        }
    }
    let start = s.value[layout.offsets[last]];
    // The gradient at t = 0, from the output back to the accumulation level.
    let top = accumulation_level(steps);
    s.grad[layout.offsets[last]] = 1.0;
    for k in (top..last).rev() {
        backward_step(steps, layout, k, &mut s.grad, &s.piece);
    }
    let acc_range = layout.range(top);
    s.acc[..acc_range.len()].fill(0.0);
    let mut now = 0.0;
    for _ in 0..MAX_EVENTS {
        let (mut at, mut when) = (usize::MAX, f64::INFINITY);
        for range in &layout.kinked_levels {
            for (i, &t) in s.event[range.clone()].iter().enumerate() {
                if t < when {
                    (at, when) = (range.start + i, t);
                }
            }
        }
        let end = when.min(1.0);
        let length = end - now;
        if length > 0.0 {
            for (a, &g) in s.acc.iter_mut().zip(&s.grad[acc_range.clone()]) {
                *a += length * g;
            }
        }
        now = end;
        if when >= 1.0 {
            let out = layout.offsets[last];
            finish(steps, layout, s);
            return Some((start, s.value[out] + s.slope[out]));
        }
        switch(steps, layout, at, now, s);
    }
    None
}

/// Moves the unit at flat index `at` to its next piece at time `now` and updates the values
/// downstream and the gradient upstream.
fn switch(steps: &[Step], layout: &Layout, at: usize, now: f64, s: &mut PathScratch) {
    let k = layout.offsets.partition_point(|&o| o <= at) - 1;
    let u = at - layout.offsets[k];
    let pieces = Pieces::of(&steps[k], u);
    let old = usize::from(s.piece[at]);
    let new = if s.slope[at] > 0.0 { old + 1 } else { old - 1 };
    s.piece[at] = new as u8;
    s.event[at] = pieces.next(new, s.value[at], s.slope[at], now);
    let ds = pieces.slope[new] - pieces.slope[old];
    let dof = pieces.offset[new] - pieces.offset[old];
    let last = steps.len();
    // Downstream: the unit's output changes by (ds·c + dof) + ds·d·t.
    let next = layout.range(k + 1);
    s.delta_value[next.clone()].fill(0.0);
    s.delta_slope[next.clone()].fill(0.0);
    s.delta_value[next.start + u] = ds * s.value[at] + dof;
    s.delta_slope[next.start + u] = ds * s.slope[at];
    let apply = |s: &mut PathScratch, level: usize| {
        for i in layout.range(level) {
            s.value[i] += s.delta_value[i];
            s.slope[i] += s.delta_slope[i];
        }
    };
    for (level, step) in steps.iter().enumerate().skip(k + 1) {
        apply(s, level);
        let here = layout.range(level);
        let there = layout.range(level + 1);
        let (dv_here, dv_there) = s.delta_value.split_at_mut(there.start);
        let (ds_here, ds_there) = s.delta_slope.split_at_mut(there.start);
        let (dv_in, ds_in) = (&dv_here[here.clone()], &ds_here[here.clone()]);
        let (dv_out, ds_out) = (&mut dv_there[..there.len()], &mut ds_there[..there.len()]);
        match step {
            Step::Affine {
                outputs, weights, ..
            } => {
                dv_out.fill(0.0);
                ds_out.fill(0.0);
                for (i, row) in weights.chunks_exact(*outputs).enumerate() {
                    let (a, b) = (dv_in[i], ds_in[i]);
                    if a == 0.0 && b == 0.0 {
                        continue;
                    }
                    for ((o, p), &w) in dv_out.iter_mut().zip(ds_out.iter_mut()).zip(row) {
                        *o += a * f64::from(w);
                        *p += b * f64::from(w);
                    }
                }
            }
            _ => {
                let shared = Pieces::shared(step);
                for j in 0..here.len() {
                    let (a, b) = (dv_in[j], ds_in[j]);
                    if a == 0.0 && b == 0.0 {
                        dv_out[j] = 0.0;
                        ds_out[j] = 0.0;
                        continue;
                    }
                    let flat = here.start + j;
                    let p = usize::from(s.piece[flat]);
                    let unit = shared.unwrap_or_else(|| Pieces::of(step, j));
                    dv_out[j] = unit.slope[p] * a;
                    ds_out[j] = unit.slope[p] * b;
                    s.event[flat] = unit.next(p, s.value[flat], s.slope[flat], now);
                }
            }
        }
    }
    apply(s, last);
    // Upstream: the gradient reaching the unit's input changes by ds·(gradient at its output).
    let top = accumulation_level(steps);
    let here = layout.range(k);
    s.delta_value[here.clone()].fill(0.0);
    s.delta_value[at] = ds * s.grad[next.start + u];
    s.grad[at] += s.delta_value[at];
    for level in (top + 1..=k).rev() {
        let below = layout.range(level - 1);
        let here = layout.range(level);
        let (dv_below, dv_here) = s.delta_value.split_at_mut(here.start);
        let (d_in, d_out) = (&dv_here[..here.len()], &mut dv_below[below.clone()]);
        match &steps[level - 1] {
            Step::Affine {
                outputs, weights, ..
            } if level == k => {
                // Only the switched unit changed: one column of W.
                let v = d_in[u];
                for (g, row) in d_out.iter_mut().zip(weights.chunks_exact(*outputs)) {
                    *g = f64::from(row[u]) * v;
                }
            }
            Step::Affine {
                outputs, weights, ..
            } => {
                for (g, row) in d_out.iter_mut().zip(weights.chunks_exact(*outputs)) {
                    *g = dot(row, d_in);
                }
            }
            step => {
                let shared = Pieces::shared(step);
                for (j, (g, &v)) in d_out.iter_mut().zip(d_in).enumerate() {
                    let p = usize::from(s.piece[below.start + j]);
                    *g = shared.unwrap_or_else(|| Pieces::of(step, j)).slope[p] * v;
                }
            }
        }
        for i in below {
            s.grad[i] += s.delta_value[i];
        }
    }
}

/// Writes the gradient at level `k` from the gradient at level `k + 1` (pieces for
/// piecewise-linear steps; the value stored at level `k` otherwise).
fn backward_step(steps: &[Step], layout: &Layout, k: usize, grad: &mut [f64], piece: &[u8]) {
    let (from, to) = (layout.range(k), layout.range(k + 1));
    let (below, above) = grad.split_at_mut(to.start);
    let (g_in, g_out) = (&mut below[from.clone()], &above[..to.len()]);
    match &steps[k] {
        Step::Affine {
            outputs, weights, ..
        } => {
            for (g, row) in g_in.iter_mut().zip(weights.chunks_exact(*outputs)) {
                *g = dot(row, g_out);
            }
        }
        step => {
            let shared = Pieces::shared(step);
            for (j, (g, &v)) in g_in.iter_mut().zip(g_out).enumerate() {
                let p = usize::from(piece[from.start + j]);
                *g = shared.unwrap_or_else(|| Pieces::of(step, j)).slope[p] * v;
            }
        }
    }
}

/// out = x·W (+ bias), W inputs × outputs row-major, in f64.
fn affine(x: &[f64], weights: &[f32], bias: Option<&[f32]>, out: &mut [f64]) {
    match bias {
        Some(b) => out.iter_mut().zip(b).for_each(|(o, &v)| *o = f64::from(v)),
        None => out.fill(0.0),
    }
    let width = out.len();
    for (&xi, row) in x.iter().zip(weights.chunks_exact(width)) {
        if xi != 0.0 {
            out.iter_mut()
                .zip(row)
                .for_each(|(o, &w)| *o += xi * f64::from(w));
        }
    }
}

/// Forward pass at `x` (values of every level into `scratch.value`); returns the output.
fn forward(steps: &[Step], layout: &Layout, x: &[f64], value: &mut [f64]) -> f64 {
    value[layout.range(0)].copy_from_slice(x);
    for (k, step) in steps.iter().enumerate() {
        let (from, to) = (layout.range(k), layout.range(k + 1));
        let (before, after) = value.split_at_mut(to.start);
        let (v_in, v_out) = (&before[from], &mut after[..to.len()]);
        match step {
            Step::Affine { weights, bias, .. } => affine(v_in, weights, Some(bias), v_out),
            Step::Act(a) => v_out
                .iter_mut()
                .zip(v_in)
                .for_each(|(o, &z)| *o = a.value(z)),
            Step::Prelu(slopes) => v_out
                .iter_mut()
                .zip(v_in)
                .zip(slopes)
                .for_each(|((o, &z), &a)| *o = if z > 0.0 { z } else { f64::from(a) * z }),
        }
    }
    value[layout.offsets[steps.len()]]
}

/// Gradient at the point whose levels are in `value`, from the output back to level `top`.
fn backward(steps: &[Step], layout: &Layout, top: usize, value: &[f64], grad: &mut [f64]) {
    let last = steps.len();
    grad[layout.offsets[last]] = 1.0;
    for k in (top..last).rev() {
        let (from, to) = (layout.range(k), layout.range(k + 1));
        let (below, above) = grad.split_at_mut(to.start);
        let (g_in, g_out) = (&mut below[from.clone()], &above[..to.len()]);
        let z = &value[from];
        match &steps[k] {
            Step::Affine {
                outputs, weights, ..
            } => {
                for (g, row) in g_in.iter_mut().zip(weights.chunks_exact(*outputs)) {
                    *g = dot(row, g_out);
                }
            }
            Step::Act(a) => g_in
                .iter_mut()
                .zip(g_out)
                .zip(z)
                .for_each(|((g, &v), &zi)| *g = a.derivative(zi) * v),
            Step::Prelu(slopes) => g_in
                .iter_mut()
                .zip(g_out)
                .zip(z.iter().zip(slopes))
                .for_each(|((g, &v), (&zi, &a))| *g = if zi > 0.0 { v } else { f64::from(a) * v }),
        }
    }
}

/// The point in (t0, t1) where the first unit whose input is on different sides of one of
/// its activation's kinks at t0 and at t1 reaches that kink (regula falsi, Illinois
/// variant), if there is such a unit.
fn kink_inside(
    steps: &[Step],
    layout: &Layout,
    x: &[f64],
    t0: f64,
    t1: f64,
    s: &mut PathScratch,
) -> Option<f64> {
    let n = x.len();
    let level_at = |t: f64, s: &mut PathScratch, into_end: bool| {
        for (p, &v) in s.point[..n].iter_mut().zip(x) {
            *p = t * v;
        }
        let buffer = if into_end {
            &mut s.value_end
        } else {
            &mut s.value
        };
        forward(steps, layout, &s.point[..n], buffer);
    };
    level_at(t0, s, false);
    level_at(t1, s, true);
    let mut found = None;
    'search: for (k, step) in steps.iter().enumerate() {
        let Step::Act(a) = step else { continue };
        for kink in a.kinks() {
            for i in layout.range(k) {
                let (g0, g1) = (s.value[i] - kink, s.value_end[i] - kink);
                // Skip a crossing at an end of the panel: the kink it was split at.
                let share = g0 / (g0 - g1);
                if (g0 > 0.0) != (g1 > 0.0) && share > 1e-7 && share < 1.0 - 1e-7 {
                    found = Some((i, kink, g0, g1));
                    break 'search;
                }
            }
        }
    }
    let (unit, kink, mut g0, mut g1) = found?;
    let (mut lo, mut hi) = (t0, t1);
    let mut side = 0;
    for _ in 0..100 {
        let t = (lo * g1 - hi * g0) / (g1 - g0);
        if !(t > lo && t < hi) || hi - lo < 1e-13 {
            return Some(0.5 * (lo + hi));
        }
        level_at(t, s, false);
        let g = s.value[unit] - kink;
        if g == 0.0 || hi - lo < 1e-13 {
            return Some(t);
        }
        if (g > 0.0) == (g0 > 0.0) {
            lo = t;
            g0 = g;
            if side == -1 {
                g1 *= 0.5;
            }
            side = -1;
        } else {
            hi = t;
            g1 = g;
            if side == 1 {
                g0 *= 0.5;
            }
            side = 1;
        }
        if (hi - lo) < 1e-12 * (t1 - t0) {
            break;
        }
    }
    Some(0.5 * (lo + hi))
}

/// Adaptive Gauss–Legendre quadrature (see the module docs): a panel whose completeness
/// gap exceeds its share of the tolerance is split in two.
fn quadrature(steps: &[Step], layout: &Layout, x: &[f64], s: &mut PathScratch) -> (f64, f64) {
    let n = x.len();
    let top = accumulation_level(steps);
    let acc_range = layout.range(top);
    let width = acc_range.len();
    // The path's direction at the accumulation level: Σ xᵢ·gᵢ = acc · direction.
    match steps.first() {
        Some(Step::Affine { weights, .. }) if top == 1 => {
            affine(x, weights, None, &mut s.direction[..width])
        }
        _ => s.direction[..width].copy_from_slice(x),
    }
    let at = |t: f64, s: &mut PathScratch| {
        for (p, &v) in s.point[..n].iter_mut().zip(x) {
            *p = t * v;
        }
        forward(steps, layout, &s.point[..n], &mut s.value)
    };
    let start = at(0.0, s);
    let end = at(1.0, s);
    let tolerance = QUADRATURE_TOLERANCE * (end - start).abs().max(QUADRATURE_FLOOR);
    s.acc[..width].fill(0.0);
    s.stack.clear();
    s.stack.push((0.0, 1.0, start, end));
    let mut panels = 0;
    while let Some((t0, t1, f0, f1)) = s.stack.pop() {
        panels += 1;
        let room = s.stack.len() + 2 <= s.stack.capacity() && panels < MAX_PANELS;
        // A unit crossing a kink inside the panel: split exactly there.
        if layout.kinked && room && t1 - t0 > 1e-12 {
            if let Some(tau) = kink_inside(steps, layout, x, t0, t1, s) {
                let fm = at(tau, s);
                s.stack.push((tau, t1, fm, f1));
                s.stack.push((t0, tau, f0, fm));
                continue;
            }
        }
        s.panel[..width].fill(0.0);
        for k in 0..s.nodes.len() {
            let (node, weight) = s.nodes[k];
            let t = t0 + 0.5 * (node + 1.0) * (t1 - t0);
            at(t, s);
            backward(steps, layout, top, &s.value, &mut s.grad);
            let w = 0.5 * weight * (t1 - t0);
            for (a, &g) in s.panel[..width].iter_mut().zip(&s.grad[acc_range.clone()]) {
                *a += w * g;
            }
        }
        let along: f64 = s.panel[..width]
            .iter()
            .zip(&s.direction[..width])
            .map(|(a, d)| a * d)
            .sum();
        if (along - (f1 - f0)).abs() > tolerance * (t1 - t0) && room && t1 - t0 > 1e-9 {
            let mid = 0.5 * (t0 + t1);
            let fm = at(mid, s);
            s.stack.push((mid, t1, fm, f1));
            s.stack.push((t0, mid, f0, fm));
        } else {
            for (a, &p) in s.acc[..width].iter_mut().zip(&s.panel[..width]) {
                *a += p;
            }
        }
    }
    finish(steps, layout, s);
    (start, end)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Gauss–Legendre with n nodes integrates polynomials of degree 2n − 1 exactly (a property
    /// of the rule; Abramowitz & Stegun 25.4.29).
    #[test]
    fn gauss_legendre_is_exact_for_degree_fifteen() {
        let rule = gauss_legendre(8);
        let sum: f64 = rule.iter().map(|(_, w)| w).sum();
        assert!((sum - 2.0).abs() < 1e-14);
        // ∫₋₁¹ x¹⁴ dx = 2/15, ∫ x¹⁵ = 0.
        let even: f64 = rule.iter().map(|(x, w)| w * x.powi(14)).sum();
        let odd: f64 = rule.iter().map(|(x, w)| w * x.powi(15)).sum();
        assert!((even - 2.0 / 15.0).abs() < 1e-14, "{even}");
        assert!(odd.abs() < 1e-14);
    }
}
