//! Training and validation rows as views of the caller's arrays (a subset is a list of row
//! numbers, not a copy), and the validation loss computed over bounded chunks of rows, so
//! that memory beyond the caller's data does not grow with the number of rows.

use crate::kernels::scalar::Scalar;
use crate::nn::error::ShapeError;
use crate::nn::layer::Pass;
use crate::nn::loss::Loss;
use crate::nn::network::Network;
use ndarray::{s, Array2, ArrayView1, ArrayView2, Axis, CowArray, Ix2};
use std::borrow::Cow;

/// Most rows one validation or prediction forward pass takes at once: the network's buffers
/// grow to the largest pass, so a bound here bounds them.
pub const CHUNK_ROWS: usize = 4096;

/// Rows of the caller's inputs `x` and targets `y`: all of them, or those listed.
pub(crate) struct Rows<'d, F> {
    x: ArrayView2<'d, F>,
    y: ArrayView2<'d, F>,
    index: Option<Cow<'d, [usize]>>,
}

impl<'d, F: Scalar> Rows<'d, F> {
    /// Every row of `x` and `y`.
    pub(crate) fn all(x: ArrayView2<'d, F>, y: ArrayView2<'d, F>) -> Self {
        Rows { x, y, index: None }
    }

    /// The rows `index` of `x` and `y`, in that order.
    pub(crate) fn subset(
        x: ArrayView2<'d, F>,
        y: ArrayView2<'d, F>,
        index: impl Into<Cow<'d, [usize]>>,
    ) -> Self {
        Rows {
            x,
            y,
            index: Some(index.into()),
        }
    }

    /// Number of rows.
    pub(crate) fn len(&self) -> usize {
        self.index.as_ref().map_or(self.x.nrows(), |idx| idx.len())
    }

    /// Input row `i`.
    pub(crate) fn x_row(&self, i: usize) -> ArrayView1<'_, F> {
        self.x.row(self.source(i))
    }

    /// Target row `i`.
    pub(crate) fn y_row(&self, i: usize) -> ArrayView1<'_, F> {
        self.y.row(self.source(i))
    }

    /// Asks the CPU to start loading row `i` (inputs and target) into cache (no effect off
    /// x86-64): the next mini-batch's rows are scattered over the whole table, and fetching
    /// them while the current step computes hides most of the wait on large tables.
    pub(crate) fn prefetch(&self, i: usize) {
        let r = self.source(i);
        prefetch_row(self.x.row(r));
        prefetch_row(self.y.row(r));
    }

    fn source(&self, i: usize) -> usize {
        self.index.as_ref().map_or(i, |idx| idx[i])
    }

    /// Every row as one pair of arrays: views when all rows are used, else copies (full-batch
    /// training needs them in one piece).
    pub(crate) fn whole(&self) -> (CowArray<'d, F, Ix2>, CowArray<'d, F, Ix2>) {
        match &self.index {
            None => (self.x.into(), self.y.into()),
            Some(idx) => (
                self.x.select(Axis(0), idx).into(),
                self.y.select(Axis(0), idx).into(),
            ),
        }
    }

    /// Mean `loss` of `net` over these rows, run forward at most [`CHUNK_ROWS`] rows at a time
    /// and summed in f64.
    pub(crate) fn mean_loss(&self, net: &mut Network<F>, loss: &Loss) -> Result<f64, ShapeError> {
        let rows = self.len();
        let (mut xb, mut yb) = match self.index {
            Some(_) => (
                Array2::zeros((rows.min(CHUNK_ROWS), self.x.ncols())),
                Array2::zeros((rows.min(CHUNK_ROWS), self.y.ncols())),
            ),
            None => (Array2::zeros((0, 0)), Array2::zeros((0, 0))),
        };
        let mut total = 0.0;
        for start in (0..rows).step_by(CHUNK_ROWS) {
            let end = (start + CHUNK_ROWS).min(rows);
            let (xv, yv) = match &self.index {
                None => (
                    self.x.slice(s![start..end, ..]),
                    self.y.slice(s![start..end, ..]),
                ),
                Some(idx) => {
                    for (slot, &r) in idx[start..end].iter().enumerate() {
                        xb.row_mut(slot).assign(&self.x.row(r));
                        yb.row_mut(slot).assign(&self.y.row(r));
                    }
                    (
                        xb.slice(s![..end - start, ..]),
                        yb.slice(s![..end - start, ..]),
                    )
                }
            };
            let out = net.forward(xv, Pass::Infer)?;
            total += loss.total(out, yv)?;
        }
        Ok(total / (rows * self.y.ncols()).max(1) as f64)
    }
}

/// Prefetches every cache line of a contiguous row (see [`Rows::prefetch`]).
fn prefetch_row<F>(row: ArrayView1<'_, F>) {
    #[cfg(target_arch = "x86_64")]
    if let Some(values) = row.as_slice() {
        use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T0};
        let line = (64 / std::mem::size_of::<F>().max(1)).max(1);
        let last = values.len().saturating_sub(1);
        for k in (0..values.len()).step_by(line).chain(std::iter::once(last)) {
            if let Some(v) = values.get(k) {
                // SAFETY: a prefetch only hints the cache; SSE is part of every x86-64 CPU,
                // and the address is inside the row.
                unsafe { _mm_prefetch::<_MM_HINT_T0>((v as *const F).cast::<i8>()) };
            }
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = row;
}

/// `net`'s outputs for every row of `x`, run forward at most [`CHUNK_ROWS`] rows at a time.
pub fn forward_in_chunks<F: Scalar>(
    net: &mut Network<F>,
    x: ArrayView2<'_, F>,
) -> Result<Array2<F>, ShapeError> {
    if x.ncols() != net.input_width() {
        return Err(ShapeError::new(
            "network input",
            (x.nrows(), net.input_width()),
            x.dim(),
        ));
    }
    let mut out = Array2::zeros((x.nrows(), net.output_width()));
    for start in (0..x.nrows()).step_by(CHUNK_ROWS) {
        let end = (start + CHUNK_ROWS).min(x.nrows());
        let part = net.forward(x.slice(s![start..end, ..]), Pass::Infer)?;
        out.slice_mut(s![start..end, ..]).assign(&part);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::nn::activation::Activation;
    use crate::nn::network::NetworkPlan;

    fn data(rows: usize) -> (Array2<f64>, Array2<f64>) {
        let x = Array2::from_shape_fn((rows, 3), |(i, j)| ((i * 7 + j * 13) % 101) as f64 / 50.0);
        let y = Array2::from_shape_fn((rows, 1), |(i, _)| (i % 17) as f64 / 8.0 - 1.0);
        (x, y)
    }

    #[test]
    fn chunked_loss_and_outputs_match_one_pass_over_every_row() {
        // 2.5 chunks, so full chunks and a partial one are both taken.
        let rows = CHUNK_ROWS * 5 / 2;
        let (x, y) = data(rows);
        let mut net = NetworkPlan::new(3, &[8], Activation::Gelu)
            .build::<f64>(3)
            .unwrap();
        let whole = net.forward(x.view(), Pass::Infer).unwrap().to_owned();
        let chunked = forward_in_chunks(&mut net, x.view()).unwrap();
        let worst = (&whole - &chunked)
            .iter()
            .fold(0.0_f64, |m, d| m.max(d.abs()));
        assert!(worst < 1e-12, "outputs differ by {worst}");
        // The mean over the same rows, directly, in f64.
        let direct = (&whole - &y).iter().map(|r| r * r).sum::<f64>() / rows as f64;
        let all = Rows::all(x.view(), y.view()).mean_loss(&mut net, &Loss::Mse);
        assert!((all.unwrap() - direct).abs() < 1e-12 * direct);
        // A subset, gathered chunk by chunk, against the same rows taken out beforehand.
        let idx: Vec<usize> = (0..rows).filter(|i| i % 3 != 1).collect();
        let (xs, ys) = (x.select(Axis(0), &idx), y.select(Axis(0), &idx));
        let out = net.forward(xs.view(), Pass::Infer).unwrap().to_owned();
        let direct = (&out - &ys).iter().map(|r| r.abs()).sum::<f64>() / idx.len() as f64;
        let part = Rows::subset(x.view(), y.view(), idx).mean_loss(&mut net, &Loss::Mae);
        assert!((part.unwrap() - direct).abs() < 1e-12 * direct);
    }

    #[test]
    fn a_wrong_width_is_an_error_even_without_rows() {
        let mut net = NetworkPlan::new(3, &[4], Activation::Relu)
            .build::<f64>(1)
            .unwrap();
        assert!(forward_in_chunks(&mut net, Array2::<f64>::zeros((0, 2)).view()).is_err());
    }
}
