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

/// Runs `body` in code compiled with AVX2 and FMA enabled when the CPU has them (checked once
/// per call), else as is: loops inside `body` then vectorize 8-wide while the crate still builds
/// for baseline x86-64.
#[inline(always)]
pub(crate) fn with_simd<R>(body: impl FnOnce() -> R) -> R {
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the running CPU supports AVX2 and FMA (checked just above), the only
            // requirement of `with_avx2`.
            return unsafe { with_avx2(body) };
        }
    }
    body()
}

/// # Safety
/// The CPU must support AVX2 and FMA.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn with_avx2<R>(body: impl FnOnce() -> R) -> R {
    body()
}
