//! A reusable 2-D scratch buffer: grows to the largest shape asked of it and never shrinks, so a
//! layer's forward and backward stop allocating once they have seen their largest batch.

use crate::kernels::scalar::Scalar;
use ndarray::{ArrayView2, ArrayViewMut2};

/// Row-major storage for a matrix whose shape may change between calls.
#[derive(Debug, Clone, Default)]
pub(crate) struct Buffer<F> {
    data: Vec<F>,
    rows: usize,
    cols: usize,
}

impl<F: Scalar> Buffer<F> {
    /// Sets the shape, growing the storage only if it is too small. Contents are unspecified.
    pub fn reshape(&mut self, rows: usize, cols: usize) {
        let needed = rows * cols;
        if self.data.len() < needed {
            self.data.resize(needed, F::zero());
        }
        self.rows = rows;
        self.cols = cols;
    }

    /// Current (rows, cols).
    pub fn shape(&self) -> (usize, usize) {
        (self.rows, self.cols)
    }

    /// Read-only view with the current shape.
    pub fn view(&self) -> ArrayView2<'_, F> {
        ArrayView2::from_shape((self.rows, self.cols), &self.data[..self.rows * self.cols])
            .expect("buffer storage always covers its shape")
    }

    /// Mutable view with the current shape.
    pub fn view_mut(&mut self) -> ArrayViewMut2<'_, F> {
        let n = self.rows * self.cols;
        ArrayViewMut2::from_shape((self.rows, self.cols), &mut self.data[..n])
            .expect("buffer storage always covers its shape")
    }

    /// The current contents as a flat mutable row-major slice.
    pub fn as_mut_slice(&mut self) -> &mut [F] {
        let n = self.rows * self.cols;
        &mut self.data[..n]
    }

    /// Sets the shape of `self` to that of `source` and copies its contents.
    pub fn copy_from(&mut self, source: ArrayView2<'_, F>) {
        let (r, c) = source.dim();
        self.reshape(r, c);
        match source.as_slice() {
            // Contiguous rows: a plain copy, split over the threads for large batches (each
            // thread then holds in its cache the rows it multiplies next).
            Some(src) => {
                let dst = &mut self.data[..r * c];
                crate::kernels::for_chunks([dst], crate::kernels::SPLIT_ELEMENTS, |at, [d]| {
                    d.copy_from_slice(&src[at..at + d.len()])
                });
            }
            None => self.view_mut().assign(&source),
        }
    }
}
