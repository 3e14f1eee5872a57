//! Matrix products and the SIMD dispatch for the hot loops: one place, so the layers never
//! depend on how a product is computed.
//!
//! The product is our own (module `gemm`): packed and register-tiled, chosen at run time for
//! AVX-512, AVX2 + FMA or baseline x86-64, allocation-free after warm-up, and split over helper
//! threads (module `pool`) when [`set_threads`] asks for more than one and the product is large.
//! [`scalar::Scalar`] is the number type (f32 or f64) every stage computes in.

mod gemm;
mod pool;
pub mod scalar;

use crate::kernels::scalar::Scalar;
use gemm::{Mat, MatMut};
use ndarray::{ArrayView2, ArrayViewMut2};
use std::sync::atomic::{AtomicU8, AtomicUsize, Ordering};

/// Threads for large products; 0 until set, then read from `RELUME_THREADS` (default 1).
static THREADS: AtomicUsize = AtomicUsize::new(0);

/// Products with fewer multiply-adds than this stay on one thread (about 4 µs of work here).
/// Helpers spin between jobs, so during training a hand-off is cheap; measured on the 256→1
/// output layer at batch 1024, splitting its 2¹⁸-multiply-add products cut the helper's idle
/// time from about 290 to 110 µs per step.
const SPLIT_WORK: usize = 1 << 18;

/// Sets how many threads large matrix products (and the large element-wise loops of a training
/// step) may use, from 1 to 64. The default is 1, or the `RELUME_THREADS` environment variable:
/// inside a service, one thread per request is usually the better use of the cores. Results do
/// not depend on the thread count: every number is computed as one thread would.
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
    product(a, b, None, c, accumulate);
}

/// c = a·b + bias, the bias (length n) added to every row: the affine layer's forward pass
/// in one sweep over c.
///
/// # Panics
/// If the shapes do not agree.
pub fn matmul_bias<F: Scalar>(
    a: ArrayView2<'_, F>,
    b: ArrayView2<'_, F>,
    bias: &[F],
    c: &mut ArrayViewMut2<'_, F>,
) {
    assert_eq!(bias.len(), b.ncols(), "bias length");
    product(a, b, Some(bias), c, false);
}

fn product<F: Scalar>(
    a: ArrayView2<'_, F>,
    b: ArrayView2<'_, F>,
    bias: Option<&[F]>,
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
        bias: bias.map_or(std::ptr::null(), |b| b.as_ptr()),
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
        // SAFETY: `a`, `b`, `c` (and the bias) come from live views with the checked shapes;
        // blocks of different parts cover disjoint rows (or columns) of C, and `pool::run`
        // returns only after every part is done, while the views are still borrowed.
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

/// Element-wise loops shorter than this stay on one thread (common practice, no source: about
/// 20–40 µs of work, well above the cost of waking a helper).
pub(crate) const SPLIT_ELEMENTS: usize = 1 << 15;

/// A pointer that may be sent to the helper threads (see [`for_chunks`]).
struct SendPtr<T>(*mut T);
impl<T> Clone for SendPtr<T> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<T> Copy for SendPtr<T> {}
// SAFETY: only used by `for_chunks`, which hands each thread a disjoint range.
unsafe impl<T: Send> Send for SendPtr<T> {}
unsafe impl<T: Send> Sync for SendPtr<T> {}

/// Calls `body(start, chunks)` on consecutive ranges `start..start + len` of `N` slices of
/// equal length (the chunks are those ranges of each slice), one range per thread when the
/// slices have at least twice `min_len` elements and [`set_threads`] allows more than one.
pub(crate) fn for_chunks<T: Send, const N: usize>(
    slices: [&mut [T]; N],
    min_len: usize,
    body: impl Fn(usize, [&mut [T]; N]) + Sync,
) {
    let len = slices.first().map_or(0, |s| s.len());
    assert!(
        slices.iter().all(|s| s.len() == len),
        "slices of equal length"
    );
    let threads = threads();
    let parts = threads.min(len / min_len.max(1));
    if parts <= 1 {
        body(0, slices);
        return;
    }
    // Chunks of whole 64-byte lines, so threads do not write to the same cache line.
    let line = (64 / std::mem::size_of::<T>().max(1)).max(1);
    let chunk = len.div_ceil(parts).div_ceil(line) * line;
    let ptrs = slices.map(|s| SendPtr(s.as_mut_ptr()));
    let part = |p: usize| {
        let start = (p * chunk).min(len);
        let end = (start + chunk).min(len);
        // SAFETY: every part gets a disjoint range of each slice, the slices are exclusively
        // borrowed for this call, and `pool::run` returns only when all parts are done.
        let chunks = ptrs
            .map(|ptr| unsafe { std::slice::from_raw_parts_mut(ptr.0.add(start), end - start) });
        body(start, chunks);
    };
    pool::run(threads, len.div_ceil(chunk), &part);
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
        match simd_level() {
            // SAFETY: the running CPU supports AVX-512F, AVX2 and FMA (checked by
            // `simd_level`), the only requirement of `with_avx512`.
            Simd::Avx512 => return unsafe { with_avx512(body) },
            // SAFETY: as above, for AVX2 and FMA.
            Simd::Avx2 => return unsafe { with_avx2(body) },
            Simd::Baseline => {}
        }
    }
    body()
}

/// # Safety
/// The CPU must support AVX-512F, AVX2 and FMA.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn with_avx512<R>(body: impl FnOnce() -> R) -> R {
    body()
}

/// # Safety
/// The CPU must support AVX2 and FMA.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn with_avx2<R>(body: impl FnOnce() -> R) -> R {
    body()
}
