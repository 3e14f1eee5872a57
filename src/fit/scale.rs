//! Column standardization (z-scores), fitted on training rows and applied to any rows.

use crate::kernels::scalar::Scalar;
use ndarray::{Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

/// Per-column affine scaling z = (v − mean)/sd, computed in f64.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Standardizer {
    /// Column means.
    pub mean: Vec<f64>,
    /// Column standard deviations (population form); 1 for constant columns, so they map to 0
    /// instead of dividing by zero.
    pub sd: Vec<f64>,
}

impl Standardizer {
    /// Fits the column means and standard deviations of `x` (two-pass, in f64).
    pub fn fit<F: Scalar>(x: ArrayView2<'_, F>) -> Self {
        Self::fit_columns(x.ncols(), x.nrows(), |j| {
            x.column(j).into_iter().map(|v| v.as_f64())
        })
    }

    /// [`Standardizer::fit`] on the rows `rows` of `x` (the same numbers as fitting a copy of
    /// those rows, without the copy).
    pub fn fit_rows<F: Scalar>(x: ArrayView2<'_, F>, rows: &[usize]) -> Self {
        Self::fit_columns(x.ncols(), rows.len(), |j| {
            rows.iter().map(move |&r| x[(r, j)].as_f64())
        })
    }

    /// The fit over `width` columns of `n` values each, column `j`'s values from `column(j)`.
    fn fit_columns<I: Iterator<Item = f64>>(
        width: usize,
        n: usize,
        column: impl Fn(usize) -> I,
    ) -> Self {
        let n = n.max(1) as f64;
        let mut mean = Vec::with_capacity(width);
        let mut sd = Vec::with_capacity(width);
        for j in 0..width {
            let m = column(j).sum::<f64>() / n;
            let var = column(j).map(|v| (v - m).powi(2)).sum::<f64>() / n;
            let s = var.sqrt();
            mean.push(m);
            sd.push(if s > 1e-12 * m.abs().max(1e-300) && s > 0.0 {
                s
            } else {
                1.0
            });
        }
        Standardizer { mean, sd }
    }

    /// The identity scaling for `width` columns.
    pub fn identity(width: usize) -> Self {
        Standardizer {
            mean: vec![0.0; width],
            sd: vec![1.0; width],
        }
    }

    /// Number of columns.
    pub fn width(&self) -> usize {
        self.mean.len()
    }

    /// (v − mean)/sd for every column.
    pub fn apply<F: Scalar>(&self, x: ArrayView2<'_, F>) -> Array2<F> {
        let mut out = x.to_owned();
        self.apply_in_place(&mut out);
        out
    }

    /// [`Standardizer::apply`] without a copy.
    pub fn apply_in_place<F: Scalar>(&self, x: &mut Array2<F>) {
        for (mut col, (m, s)) in x.axis_iter_mut(Axis(1)).zip(self.mean.iter().zip(&self.sd)) {
            col.mapv_inplace(|v| F::of((v.as_f64() - m) / s));
        }
    }

    /// mean + sd·z for every column: the inverse of [`Standardizer::apply`].
    pub fn invert<F: Scalar>(&self, z: ArrayView2<'_, F>) -> Array2<F> {
        let mut out = z.to_owned();
        for (mut col, (m, s)) in out
            .axis_iter_mut(Axis(1))
            .zip(self.mean.iter().zip(&self.sd))
        {
            col.mapv_inplace(|v| F::of(m + s * v.as_f64()));
        }
        out
    }
}
