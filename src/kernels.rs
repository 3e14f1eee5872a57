//! Matrix products for the layers: one place, so the product can be swapped or tuned without
//! touching the layers. Today it is ndarray's `general_mat_mul` (matrixmultiply), which was
//! faster here than the alternatives tried; it allocates its packing buffer on every call.

use crate::scalar::Scalar;
use ndarray::linalg::general_mat_mul;
use ndarray::{ArrayView2, ArrayViewMut2};

/// c = a·b, or c += a·b when `accumulate`. Shapes: a m×k, b k×n, c m×n (any strides).
pub fn matmul<F: Scalar>(
    a: ArrayView2<'_, F>,
    b: ArrayView2<'_, F>,
    c: &mut ArrayViewMut2<'_, F>,
    accumulate: bool,
) {
    let beta = if accumulate { F::one() } else { F::zero() };
    general_mat_mul(F::one(), &a, &b, beta, c);
}
