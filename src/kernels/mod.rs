//! Matrix products and the SIMD dispatch for the hot loops: one place, so the layers never
//! depend on how a product is computed.
//!
//! The product is our own ([`gemm`]): packed and register-tiled, chosen at run time for
//! AVX-512, AVX2 + FMA or baseline x86-64, allocation-free after warm-up, and split over helper
//! threads ([`pool`]) when [`set_threads`] asks for more than one and the product is large.

mod gemm;
mod pool;

use crate::scalar::Scalar;
use gemm::{Mat, MatMut};
use ndarray::{ArrayView2, ArrayViewMut2};
use std::sync::atomic::{AtomicU8, AtomicUsize, Ordering};

/// Threads for large products; 0 until set, then read from `RELUME_THREADS` (default 1).
static THREADS: AtomicUsize = AtomicUsize::new(0);

/// Products with fewer multiply-adds than this stay on one thread: waking a helper costs
/// microseconds (common practice, no source; 2²² is about 60 µs of work here).
const SPLIT_WORK: usize = 1 << 22;

/// Sets how many threads large matrix products (and [`for_parts`] loops) may use, from 1 to
/// 64. The default is 1, or the `RELUME_THREADS` environment variable: inside a service, one
/// thread per request is usually the better use of the cores.
pub fn set_threads(threads: usize) {
    THREADS.store(threads.clamp(1, 64), Ordering::Relaxed);
}

/// The thread count set by [`set_threads`] (or `RELUME_THREADS`, or 1).
pub fn threads() -> usize {
    match THREADS.load(Ordering::Relaxed) {
        0 => {
            let from_env = std::env::var("RELUME_THREADS")
                .ok()
                .and_then(|v| v.trim().parse::<usize>().ok())
                .unwrap_or(1)
                .clamp(1, 64);
            THREADS.store(from_env, Ordering::Relaxed);
            from_env
        }
        n => n,
    }
}

/// c = a·b, or c += a·b when `accumulate`. Shapes: a m×k, b k×n, c m×n (any strides).
///
/// # Panics
/// If the shapes do not agree (callers check shapes before).
pub fn matmul<F: Scalar>(
    a: ArrayView2<'_, F>,
    b: ArrayView2<'_, F>,
    c: &mut ArrayViewMut2<'_, F>,
    accumulate: bool,
) {
    let (m, k) = a.dim();
    let n = b.ncols();
    assert!(
        b.nrows() == k && c.dim() == (m, n),
        "matmul shapes {m}×{k} · {}×{n} into {:?}",
        b.nrows(),
        c.dim()
    );
    let mat = |v: &ArrayView2<'_, F>| Mat {
        ptr: v.as_ptr(),
        rows: v.nrows(),
        cols: v.ncols(),
        rs: v.strides()[0],
        cs: v.strides()[1],
    };
    let (a, b) = (mat(&a), mat(&b));
    let c = MatMut {
        ptr: c.as_mut_ptr(),
        rows: m,
        cols: n,
        rs: c.strides()[0],
        cs: c.strides()[1],
    };
    let threads = threads();
    let parts = if m * n * k >= SPLIT_WORK { threads } else { 1 };
    // Split the longer side of C into `parts` blocks of whole 32-element runs.
    let split_rows = m >= n;
    let side = if split_rows { m } else { n };
    let chunk = side.div_ceil(parts).div_ceil(32) * 32;
    let parts = side.div_ceil(chunk.max(1));
    let part = |p: usize| {
        let start = p * chunk;
        let len = chunk.min(side - start);
        // SAFETY: `a`, `b`, `c` come from live views with the checked shapes; blocks of
        // different parts cover disjoint rows (or columns) of C, and `pool::run` returns only
        // after every part is done, while the views are still borrowed.
        unsafe {
            if split_rows {
                gemm::product(
                    a.block(start, len, 0, k),
                    b,
                    c.block(start, len, 0, n),
                    accumulate,
                )
            } else {
                gemm::product(
                    a,
                    b.block(0, k, start, len),
                    c.block(0, m, start, len),
                    accumulate,
                )
            }
        }
    };
    pool::run(threads, parts, &part);
}

/// Runs `body(part)` for each part in `0..parts`, spread over the threads set by
/// [`set_threads`]; `body` must only touch data of its own part.
pub fn for_parts(parts: usize, body: &(dyn Fn(usize) + Sync + '_)) {
    pool::run(threads(), parts, body);
}

/// Instruction sets the kernels can run with, from least to most capable.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Simd {
    /// Baseline x86-64 (SSE2), or plain code on other targets.
    Baseline,
    /// AVX2 with FMA.
    Avx2,
    /// AVX-512F (with AVX2 and FMA).
    Avx512,
}

/// Cap on the instruction set, as `Simd as u8` (default: no cap).
static SIMD_LIMIT: AtomicU8 = AtomicU8::new(Simd::Avx512 as u8);

/// Caps the instruction set the kernels use (for example to compare results across
/// instruction sets, or to avoid AVX-512 on CPUs that slow their clock for it). Results differ
/// between instruction sets only in rounding.
pub fn set_simd_limit(limit: Simd) {
    SIMD_LIMIT.store(limit as u8, Ordering::Relaxed);
}

/// The instruction set the kernels run with: the best this CPU has, within the cap.
pub fn simd_level() -> Simd {
    let limit = SIMD_LIMIT.load(Ordering::Relaxed);
    #[cfg(target_arch = "x86_64")]
    {
        let fma = std::is_x86_feature_detected!("fma");
        if limit >= Simd::Avx512 as u8 && fma && std::is_x86_feature_detected!("avx512f") {
            return Simd::Avx512;
        }
        if limit >= Simd::Avx2 as u8 && fma && std::is_x86_feature_detected!("avx2") {
            return Simd::Avx2;
        }
    }
    let _ = limit;
    Simd::Baseline
}

/// Runs `body` in code compiled with AVX2 and FMA enabled when the CPU has them (checked once
/// per call), else as is: loops inside `body` then vectorize 8-wide while the crate still builds
/// for baseline x86-64. [`set_simd_limit`] applies here too.
#[inline(always)]
pub(crate) fn with_simd<R>(body: impl FnOnce() -> R) -> R {
    #[cfg(target_arch = "x86_64")]
    {
        if simd_level() >= Simd::Avx2 {
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
