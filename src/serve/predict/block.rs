//! The table path of the predictor: rows are encoded into a block and each member's layers
//! run over the whole block, so a layer's weights are read once per block instead of once
//! per row. Every output is summed in the same order as the one-row path (bias first, then
//! the inputs in order; no fused multiply-add), so each row gets exactly the bits
//! [`Predictor::predict_row`] gives it (tests/block_predict.rs checks this).

use super::{affine_row, Cell, Predictor, RowError, RowPrediction, Scratch, Start, Step};
use crate::nn::activation::leaky;

/// Rows encoded and run through the network together by [`Predictor::predict_table`]
/// (common practice, no source: large enough to reuse each weight row across many rows,
/// small enough that a block's activations stay in the core's cache).
pub const BLOCK_ROWS: usize = 64;

/// Rows of one register tile of the block product.
const TILE_ROWS: usize = 4;
/// Outputs of one register tile (one 512-bit vector of f32).
const TILE_OUTPUTS: usize = 16;
/// Tiles of one row the sparse first layer sums side by side.
const SPAN_TILES: usize = 4;

/// Which features of a row are flagged (see [`super::Scratch::out_of_range`] and
/// [`super::Scratch::unseen`]).
pub(super) struct Flags<'a> {
    pub out_of_range: &'a [bool],
    pub unseen: &'a [bool],
}

/// Working memory of one block: the encoded rows and their outcomes.
pub(super) struct Block {
    /// One-row scratch (its `raw` buffer is used for encoding).
    scratch: Scratch,
    /// Per block row: the slot its encoded inputs went into, or why it failed.
    entries: Vec<Result<usize, RowError>>,
    /// Per slot: the standardized inputs (`width` each).
    x: Vec<f32>,
    /// Per slot: its inputs that differ from the shift (index, input − shift), in input
    /// order, found from `nonzero_at[slot]` to `nonzero_at[slot + 1]`.
    nonzero: Vec<(usize, f32)>,
    nonzero_at: Vec<usize>,
    /// The two layer buffers, `BLOCK_ROWS × max_width` each.
    a: Vec<f32>,
    b: Vec<f32>,
    /// Per slot: (extrapolated, unseen), and per feature the two flags.
    any: Vec<(bool, bool)>,
    out_of_range: Vec<bool>,
    unseen: Vec<bool>,
    /// Per slot: the members' sum, then the ensemble's value before decoding.
    sum: Vec<f64>,
    /// Encoded inputs per row, features per row, slots in use.
    width: usize,
    features: usize,
    slots: usize,
}

impl Block {
    /// Empty working memory for `p`'s network.
    pub(super) fn new(p: &Predictor) -> Block {
        let (width, features) = (p.encoder.width(), p.encoder.features.len());
        Block {
            scratch: p.scratch(),
            entries: Vec::with_capacity(BLOCK_ROWS),
            x: vec![0.0; BLOCK_ROWS * width],
            nonzero: Vec::with_capacity(BLOCK_ROWS * width),
            nonzero_at: Vec::with_capacity(BLOCK_ROWS + 1),
            a: vec![0.0; BLOCK_ROWS * p.max_width],
            b: vec![0.0; BLOCK_ROWS * p.max_width],
            any: vec![(false, false); BLOCK_ROWS],
            out_of_range: vec![false; BLOCK_ROWS * features],
            unseen: vec![false; BLOCK_ROWS * features],
            sum: vec![0.0; BLOCK_ROWS],
            width,
            features,
            slots: 0,
        }
    }

    /// Starts a new block.
    pub(super) fn clear(&mut self) {
        self.entries.clear();
        self.slots = 0;
        self.nonzero.clear();
        self.nonzero_at.clear();
        self.nonzero_at.push(0);
    }

    /// Encodes the next row of the block (at most [`BLOCK_ROWS`] per block).
    pub(super) fn encode(&mut self, p: &Predictor, row: &[Cell<'_>]) {
        let (s, w, f) = (self.slots, self.width, self.features);
        let encoded = p.encode_row(
            row,
            &mut self.scratch.raw,
            &mut self.out_of_range[s * f..(s + 1) * f],
            &mut self.unseen[s * f..(s + 1) * f],
            &mut self.x[s * w..(s + 1) * w],
        );
        if let Ok(any) = encoded {
            self.any[s] = any;
            self.slots += 1;
            let x = &self.x[s * w..(s + 1) * w];
            crate::kernels::with_simd(
                #[inline(always)]
                || nonzero_inputs(x, &p.shift, &mut self.nonzero),
            );
            self.nonzero_at.push(self.nonzero.len());
        }
        self.entries.push(encoded.map(|_| s));
    }

    /// Runs the ensemble over every encoded row, as `Predictor::ensemble` does for one.
    pub(super) fn run(&mut self, p: &Predictor) {
        let (n, k) = (self.slots, self.width);
        let Block {
            x,
            nonzero,
            nonzero_at,
            a,
            b,
            sum,
            ..
        } = self;
        let sum = &mut sum[..n];
        sum.fill(0.0);
        for start in p.starts(k) {
            match start {
                Start::Shifted {
                    weights,
                    bias,
                    outputs,
                    rest,
                } => crate::kernels::with_simd(
                    #[inline(always)]
                    || {
                        // Sparse rows (one-hot levels that are off are skipped): row by row.
                        for (r, out) in a.chunks_exact_mut(outputs).take(n).enumerate() {
                            let inputs = &nonzero[nonzero_at[r]..nonzero_at[r + 1]];
                            sparse_affine(inputs, weights, bias, out);
                        }
                        run_block(rest, a, b, n, outputs, sum)
                    },
                ),
                Start::Dense(steps) => {
                    a[..n * k].copy_from_slice(&x[..n * k]);
                    crate::kernels::with_simd(
                        #[inline(always)]
                        || run_block(steps, a, b, n, k, sum),
                    )
                }
            }
        }
        for s in sum.iter_mut() {
            *s = p.average(*s);
        }
    }

    /// The prediction of block row `i` (after [`Block::run`]) with its flags, or its error.
    pub(super) fn result(
        &self,
        p: &Predictor,
        i: usize,
    ) -> Result<(RowPrediction, Flags<'_>), RowError> {
        let s = self.entries[i]?;
        let f = self.features;
        let prediction = p.finish(self.sum[s], self.any[s])?;
        Ok((
            prediction,
            Flags {
                out_of_range: &self.out_of_range[s * f..(s + 1) * f],
                unseen: &self.unseen[s * f..(s + 1) * f],
            },
        ))
    }
}

/// One network's layers on `rows` rows of `width` values each in `a` (`b` is the second
/// buffer); adds each row's output to its entry of `sum`. Per row this is `run_steps`.
#[inline(always)]
fn run_block(
    steps: &[Step],
    a: &mut [f32],
    b: &mut [f32],
    rows: usize,
    mut width: usize,
    sum: &mut [f64],
) {
    let (mut cur, mut next) = (a, b);
    for step in steps {
        match step {
            Step::Affine {
                inputs,
                outputs,
                weights,
                bias,
            } => {
                affine_block(
                    &cur[..rows * inputs],
                    weights,
                    bias,
                    &mut next[..rows * outputs],
                );
                width = *outputs;
            }
            // Element-wise, so one call over the block gives each row's own values.
            Step::Act(act) => act.apply(&cur[..rows * width], &mut next[..rows * width]),
            Step::Prelu(slopes) => {
                for (o, c) in next[..rows * width]
                    .chunks_exact_mut(width)
                    .zip(cur[..rows * width].chunks_exact(width))
                {
                    for ((o, &v), &s) in o.iter_mut().zip(c).zip(slopes) {
                        *o = leaky(v, s);
                    }
                }
            }
        }
        std::mem::swap(&mut cur, &mut next);
    }
    for (s, row) in sum.iter_mut().zip(cur.chunks_exact(width)) {
        *s += f64::from(row[0]);
    }
}

/// Appends to `nonzero` the first layer's sparse input, as `shifted_affine` finds it: each
/// (i, x − shift) that is not 0, in input order. Compares 32 inputs at a time into a bit
/// mask (which vectorizes), then visits the set bits.
#[inline(always)]
fn nonzero_inputs(x: &[f32], shift: &[f32], nonzero: &mut Vec<(usize, f32)>) {
    for (c, (xs, zs)) in x.chunks(32).zip(shift.chunks(32)).enumerate() {
        let mut mask = 0_u32;
        for (j, (&xi, &zi)) in xs.iter().zip(zs).enumerate() {
            mask |= u32::from(xi - zi != 0.0) << j;
        }
        while mask != 0 {
            let j = mask.trailing_zeros() as usize;
            nonzero.push((c * 32 + j, xs[j] - zs[j]));
            mask &= mask - 1;
        }
    }
}

/// `out = bias + Σ d·W[i]` over a row's (i, d) pairs in order: `shifted_affine`'s sums, with
/// the outputs kept in registers, [`SPAN_TILES`] tiles of [`TILE_OUTPUTS`] at a time (any
/// rest one tile at a time, then one by one).
#[inline(always)]
fn sparse_affine(inputs: &[(usize, f32)], weights: &[f32], bias: &[f32], out: &mut [f32]) {
    let outputs = bias.len();
    let mut c = 0;
    while c + SPAN_TILES * TILE_OUTPUTS <= outputs {
        sparse_span::<SPAN_TILES>(inputs, weights, bias, out, c);
        c += SPAN_TILES * TILE_OUTPUTS;
    }
    while c + TILE_OUTPUTS <= outputs {
        sparse_span::<1>(inputs, weights, bias, out, c);
        c += TILE_OUTPUTS;
    }
    for (j, o) in out.iter_mut().enumerate().skip(c) {
        *o = bias[j];
        for &(i, d) in inputs {
            *o += d * weights[i * outputs + j];
        }
    }
}

/// Outputs `c..c + N·TILE_OUTPUTS` of [`sparse_affine`]: N independent sums in registers,
/// so their additions overlap.
#[inline(always)]
fn sparse_span<const N: usize>(
    inputs: &[(usize, f32)],
    weights: &[f32],
    bias: &[f32],
    out: &mut [f32],
    c: usize,
) {
    let (outputs, span) = (bias.len(), N * TILE_OUTPUTS);
    let mut acc = [[0.0_f32; TILE_OUTPUTS]; N];
    for (a, b) in acc
        .iter_mut()
        .zip(bias[c..c + span].chunks_exact(TILE_OUTPUTS))
    {
        a.copy_from_slice(b);
    }
    for &(i, d) in inputs {
        let w = &weights[i * outputs + c..i * outputs + c + span];
        for (a, w) in acc.iter_mut().zip(w.chunks_exact(TILE_OUTPUTS)) {
            for (o, &wl) in a.iter_mut().zip(w) {
                *o += d * wl;
            }
        }
    }
    for (a, o) in acc
        .iter()
        .zip(out[c..c + span].chunks_exact_mut(TILE_OUTPUTS))
    {
        o.copy_from_slice(a);
    }
}

/// out = x·W + bias for every row of `x` (rows × inputs; W is inputs × outputs, row-major),
/// each row's outputs exactly as `affine_row` computes them. Tiles of [`TILE_ROWS`] rows ×
/// [`TILE_OUTPUTS`] outputs are kept in registers while the inputs are run through; rows
/// left over and layers whose width is not a multiple of the tile go row by row.
#[inline(always)]
fn affine_block(x: &[f32], weights: &[f32], bias: &[f32], out: &mut [f32]) {
    let outputs = bias.len();
    let rows = out.len() / outputs;
    let inputs = x.len() / rows.max(1);
    let tiled = if outputs.is_multiple_of(TILE_OUTPUTS) {
        rows - rows % TILE_ROWS
    } else {
        0
    };
    for r in (0..tiled).step_by(TILE_ROWS) {
        let xs = &x[r * inputs..(r + TILE_ROWS) * inputs];
        for c in (0..outputs).step_by(TILE_OUTPUTS) {
            let mut acc = [[0.0_f32; TILE_OUTPUTS]; TILE_ROWS];
            for row in &mut acc {
                row.copy_from_slice(&bias[c..c + TILE_OUTPUTS]);
            }
            for i in 0..inputs {
                let w = &weights[i * outputs + c..i * outputs + c + TILE_OUTPUTS];
                for (t, row) in acc.iter_mut().enumerate() {
                    let xi = xs[t * inputs + i];
                    for (o, &wl) in row.iter_mut().zip(w) {
                        *o += xi * wl;
                    }
                }
            }
            for (t, row) in acc.iter().enumerate() {
                out[(r + t) * outputs + c..][..TILE_OUTPUTS].copy_from_slice(row);
            }
        }
    }
    for r in tiled..rows {
        affine_row(
            &x[r * inputs..(r + 1) * inputs],
            weights,
            bias,
            &mut out[r * outputs..(r + 1) * outputs],
        );
    }
}
