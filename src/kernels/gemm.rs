//! The matrix product itself: the usual three-level blocking (a kc×nc panel of B, an mc×kc block
//! of A, both packed into strips, and an MR×NR register tile), plus a direct path without
//! packing for products too thin to fill a tile. The packing space is a grow-only buffer per
//! thread, so a product allocates nothing once its thread has seen its largest shapes.
//!
//! The register tile is written once, generic over a SIMD register type (`simd::Lanes`), and
//! instantiated for AVX-512, for AVX2 + FMA and for baseline x86-64 (one number per "register"
//! elsewhere); the variant is chosen at run time, each with the tile shape that fits its
//! register file.

use crate::kernels::scalar::Scalar;
use std::any::TypeId;
use std::cell::Cell;
use std::mem::size_of;

mod simd;
use simd::Lanes;
#[cfg(not(target_arch = "x86_64"))]
use simd::One;

/// A read-only matrix operand: first element, shape and element strides. Built only from a
/// valid ndarray view, so every (i, j) inside the shape addresses an element of that view.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Mat<F> {
    pub ptr: *const F,
    pub rows: usize,
    pub cols: usize,
    pub rs: isize,
    pub cs: isize,
}

/// The output operand, as [`Mat`] but writable. No other live reference aliases its elements.
/// `bias`, when not null, points at `cols` values added to every row when the product
/// overwrites (does not accumulate into) C.
#[derive(Clone, Copy, Debug)]
pub(crate) struct MatMut<F> {
    pub ptr: *mut F,
    pub rows: usize,
    pub cols: usize,
    pub rs: isize,
    pub cs: isize,
    pub bias: *const F,
}

// SAFETY: the operands are plain addresses of `F: Send + Sync` data; callers hand disjoint
// output blocks to different threads and keep the data alive until every thread is done.
unsafe impl<F: Sync> Send for Mat<F> {}
unsafe impl<F: Sync> Sync for Mat<F> {}
unsafe impl<F: Send> Send for MatMut<F> {}
unsafe impl<F: Send> Sync for MatMut<F> {}

impl<F> Mat<F> {
    /// The same operand read as another element type.
    ///
    /// # Safety
    /// `G` is `F` (checked by the caller with `TypeId`).
    unsafe fn cast<G>(self) -> Mat<G> {
        Mat {
            ptr: self.ptr as *const G,
            rows: self.rows,
            cols: self.cols,
            rs: self.rs,
            cs: self.cs,
        }
    }

    /// Address of element (i, j).
    ///
    /// # Safety
    /// `i < rows` and `j < cols`.
    #[inline(always)]
    unsafe fn at(&self, i: usize, j: usize) -> *const F {
        self.ptr.offset(i as isize * self.rs + j as isize * self.cs)
    }

    /// The transpose (no data moves).
    fn t(self) -> Self {
        Mat {
            rows: self.cols,
            cols: self.rows,
            rs: self.cs,
            cs: self.rs,
            ..self
        }
    }

    /// Rows `r0..r0 + rows` and columns `c0..c0 + cols` (must lie inside the matrix).
    pub fn block(&self, r0: usize, rows: usize, c0: usize, cols: usize) -> Self {
        debug_assert!(r0 + rows <= self.rows && c0 + cols <= self.cols);
        Mat {
            ptr: self
                .ptr
                .wrapping_offset(r0 as isize * self.rs + c0 as isize * self.cs),
            rows,
            cols,
            ..*self
        }
    }
}

impl<F> MatMut<F> {
    /// The same operand written as another element type.
    ///
    /// # Safety
    /// `G` is `F` (checked by the caller with `TypeId`).
    unsafe fn cast<G>(self) -> MatMut<G> {
        MatMut {
            ptr: self.ptr as *mut G,
            rows: self.rows,
            cols: self.cols,
            rs: self.rs,
            cs: self.cs,
            bias: self.bias as *const G,
        }
    }

    /// Address of element (i, j).
    ///
    /// # Safety
    /// `i < rows` and `j < cols`.
    #[inline(always)]
    unsafe fn at(&self, i: usize, j: usize) -> *mut F {
        self.ptr.offset(i as isize * self.rs + j as isize * self.cs)
    }

    /// Rows `r0..r0 + rows` and columns `c0..c0 + cols` (must lie inside the matrix).
    pub fn block(&self, r0: usize, rows: usize, c0: usize, cols: usize) -> Self {
        debug_assert!(r0 + rows <= self.rows && c0 + cols <= self.cols);
        MatMut {
            ptr: self
                .ptr
                .wrapping_offset(r0 as isize * self.rs + c0 as isize * self.cs),
            rows,
            cols,
            bias: if self.bias.is_null() {
                self.bias
            } else {
                self.bias.wrapping_add(c0)
            },
            ..*self
        }
    }

    /// The bias of column j, or zero.
    ///
    /// # Safety
    /// `j < cols`.
    #[inline(always)]
    unsafe fn bias_at(&self, j: usize) -> F
    where
        F: Scalar,
    {
        if self.bias.is_null() {
            F::zero()
        } else {
            *self.bias.add(j)
        }
    }
}

/// Depth of one packed block (rows of B, columns of A), common practice, no source: a B strip
/// of KC×NR stays in the 32–48 KiB L1 data cache.
const KC: usize = 256;

/// c = a·b (+ the bias row of `c`), or c += a·b when `accumulate`, on this thread.
///
/// # Safety
/// `a` is m×k, `b` k×n and `c` m×n, each describing valid memory as [`Mat`] and [`MatMut`]
/// promise; `c` does not overlap `a` or `b`.
pub(crate) unsafe fn product<F: Scalar>(a: Mat<F>, b: Mat<F>, c: MatMut<F>, accumulate: bool) {
    debug_assert!(a.rows == c.rows && b.cols == c.cols && a.cols == b.rows);
    if c.rows == 0 || c.cols == 0 {
        return;
    }
    if TypeId::of::<F>() == TypeId::of::<f32>() {
        // SAFETY: F is f32, so the casts change nothing.
        product_f32(a.cast(), b.cast(), c.cast(), accumulate)
    } else if TypeId::of::<F>() == TypeId::of::<f64>() {
        // SAFETY: F is f64, as above.
        product_f64(a.cast(), b.cast(), c.cast(), accumulate)
    } else {
        // Another `Scalar` type: no tile for it, the plain loops still give the right answer.
        direct::<F, false>(a, b, c, accumulate)
    }
}

/// The f32 product, compiled here once: being neither generic nor inline, it is optimized with
/// this crate even when the code calling it is built without optimization (a debug build, a
/// doctest), where a generic product would be instantiated unoptimized and run 100× slower.
#[inline(never)]
unsafe fn product_f32(a: Mat<f32>, b: Mat<f32>, c: MatMut<f32>, accumulate: bool) {
    tiled(a, b, c, accumulate)
}

/// The f64 product, as [`product_f32`].
#[inline(never)]
unsafe fn product_f64(a: Mat<f64>, b: Mat<f64>, c: MatMut<f64>, accumulate: bool) {
    tiled(a, b, c, accumulate)
}

/// The register types a number type has a tile for.
trait Registers: Scalar {
    /// A 512-bit register of these numbers.
    #[cfg(target_arch = "x86_64")]
    type Z: Lanes<Elem = Self>;
    /// A 256-bit register.
    #[cfg(target_arch = "x86_64")]
    type Y: Lanes<Elem = Self>;
    /// A 128-bit register.
    #[cfg(target_arch = "x86_64")]
    type X: Lanes<Elem = Self>;
}

impl Registers for f32 {
    #[cfg(target_arch = "x86_64")]
    type Z = simd::Z512;
    #[cfg(target_arch = "x86_64")]
    type Y = simd::Y256;
    #[cfg(target_arch = "x86_64")]
    type X = simd::X128;
}

impl Registers for f64 {
    #[cfg(target_arch = "x86_64")]
    type Z = simd::Z512d;
    #[cfg(target_arch = "x86_64")]
    type Y = simd::Y256d;
    #[cfg(target_arch = "x86_64")]
    type X = simd::X128d;
}

/// [`product`] for a number type with tiles: the instruction set picks the register type.
unsafe fn tiled<E: Registers>(a: Mat<E>, b: Mat<E>, c: MatMut<E>, accumulate: bool) {
    #[cfg(target_arch = "x86_64")]
    {
        use super::Simd;
        // Tiles that fit the register file: 32 zmm (24 accumulators), 16 ymm (12), 16 xmm (8).
        match super::simd_level() {
            Simd::Avx512 => with_avx512::<E::Z, 12, 2>(a, b, c, accumulate),
            Simd::Avx2 => with_avx2::<E::Y, 6, 2>(a, b, c, accumulate),
            Simd::Baseline => dispatch::<E::X, 4, 2>(a, b, c, accumulate),
        }
    }
    #[cfg(not(target_arch = "x86_64"))]
    dispatch::<One<E>, 4, 4>(a, b, c, accumulate)
}

/// The product compiled with AVX-512. A function of its own rather than `with_simd`'s closure
/// form: the tile handed over in a closure was not inlined into the AVX-512 context and ran 64×
/// slower (measured with the perf report's `gemm` lines).
///
/// # Safety
/// As [`product`]; the CPU supports AVX-512F and FMA (checked by `simd_level`).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn with_avx512<V: Lanes, const MR: usize, const NV: usize>(
    a: Mat<V::Elem>,
    b: Mat<V::Elem>,
    c: MatMut<V::Elem>,
    accumulate: bool,
) {
    dispatch::<V, MR, NV>(a, b, c, accumulate)
}

/// # Safety
/// As [`product`]; the CPU supports AVX2 and FMA (checked by `simd_level`).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn with_avx2<V: Lanes, const MR: usize, const NV: usize>(
    a: Mat<V::Elem>,
    b: Mat<V::Elem>,
    c: MatMut<V::Elem>,
    accumulate: bool,
) {
    dispatch::<V, MR, NV>(a, b, c, accumulate)
}

/// Chooses between the packed path and the direct one for this tile shape (MR rows, NV
/// registers of columns).
#[inline(always)]
unsafe fn dispatch<V: Lanes, const MR: usize, const NV: usize>(
    a: Mat<V::Elem>,
    b: Mat<V::Elem>,
    c: MatMut<V::Elem>,
    accumulate: bool,
) {
    let (m, n, k) = (c.rows, c.cols, a.cols);
    let nr = NV * V::WIDTH;
    // Thin products would leave most of every tile empty; tiny ones cost more to pack than to
    // multiply (common practice, no source; thresholds measured on the perf report's shapes).
    if k == 0 || 4 * m < MR || 4 * n < nr || m * n * k < 2048 {
        if V::FUSED {
            direct::<V::Elem, true>(a, b, c, accumulate);
        } else {
            direct::<V::Elem, false>(a, b, c, accumulate);
        }
    } else {
        blocked::<V, MR, NV>(a, b, c, accumulate);
    }
}

/// x·y + z, fused into one rounding when the instruction set has FMA.
#[inline(always)]
fn madd<F: Scalar, const FUSED: bool>(x: F, y: F, z: F) -> F {
    if FUSED {
        x.mul_add(y, z)
    } else {
        x * y + z
    }
}

/// One 64-byte-aligned line of packing space.
#[repr(C, align(64))]
#[derive(Clone, Copy)]
struct Line([u8; 64]);

thread_local! {
    /// Taken out for the length of one product and put back after, so the product itself runs
    /// outside the thread-local's closure (which is compiled without the SIMD features).
    static PACKING: Cell<Vec<Line>> = const { Cell::new(Vec::new()) };
}

/// The packed, register-tiled product.
#[inline(always)]
unsafe fn blocked<V: Lanes, const MR: usize, const NV: usize>(
    a: Mat<V::Elem>,
    b: Mat<V::Elem>,
    c: MatMut<V::Elem>,
    accumulate: bool,
) {
    let nr_tile = NV * V::WIDTH;
    // An A block of MC×KC (≤ 120 KiB in f32) for the L2 cache, a B panel of KC×NC (≤ 1 MiB).
    let mc_max = MR * 10;
    let nc_max = nr_tile * 32;
    let a_len = mc_max * KC;
    let b_len = KC * nc_max;
    let bytes = (a_len + b_len) * size_of::<V::Elem>();
    let mut lines = PACKING.with(Cell::take);
    let needed = bytes.div_ceil(64);
    if lines.len() < needed {
        lines.resize(needed, Line([0; 64]));
    }
    // SAFETY: the buffer holds `bytes` bytes, 64-byte aligned, and any bit pattern is a valid
    // f32 or f64; the two packed regions do not overlap.
    let base = lines.as_mut_ptr() as *mut V::Elem;
    let a_pack = std::slice::from_raw_parts_mut(base, a_len);
    let b_pack = std::slice::from_raw_parts_mut(base.add(a_len), b_len);
    let (m, n, k) = (c.rows, c.cols, a.cols);
    for jc in (0..n).step_by(nc_max) {
        let nc = nc_max.min(n - jc);
        for pc in (0..k).step_by(KC) {
            let kc = KC.min(k - pc);
            pack_strips(b.block(pc, kc, jc, nc), nr_tile, b_pack);
            let overwrite = pc == 0 && !accumulate;
            for ic in (0..m).step_by(mc_max) {
                let mc = mc_max.min(m - ic);
                pack_strips(a.block(ic, mc, pc, kc).t(), MR, a_pack);
                for j0 in (0..nc).step_by(nr_tile) {
                    let b_strip = b_pack.as_ptr().add(j0 * kc);
                    let nr = nr_tile.min(nc - j0);
                    for i0 in (0..mc).step_by(MR) {
                        let a_strip = a_pack.as_ptr().add(i0 * kc);
                        let mr = MR.min(mc - i0);
                        let block = c.block(ic + i0, mr, jc + j0, nr);
                        tile::<V, MR, NV>(kc, a_strip, b_strip, block, overwrite);
                    }
                }
            }
        }
    }
    PACKING.with(|cell| cell.set(lines));
}

/// One register tile: c (the valid part of an MR×NR block) = or += the product of an A strip
/// (kc×MR, packed) and a B strip (kc×NR, packed), accumulated in MR·NV registers.
///
/// # Safety
/// The strips hold kc·MR and kc·NR elements; `c` is at most MR × NR.
#[inline(always)]
unsafe fn tile<V: Lanes, const MR: usize, const NV: usize>(
    kc: usize,
    a: *const V::Elem,
    b: *const V::Elem,
    c: MatMut<V::Elem>,
    overwrite: bool,
) {
    let w = V::WIDTH;
    let nr = NV * w;
    // The stack buffer for partial tiles below holds MAX_NR columns (folded at compile time).
    assert!(nr <= MAX_NR, "register tile wider than MAX_NR");
    let mut t = [[V::zero(); NV]; MR];
    for p in 0..kc {
        let mut bv = [V::zero(); NV];
        for (v, slot) in bv.iter_mut().enumerate() {
            *slot = V::load(b.add(p * nr + v * w));
        }
        let ap = a.add(p * MR);
        for (i, row) in t.iter_mut().enumerate() {
            let ai = V::splat(*ap.add(i));
            for (acc, &bj) in row.iter_mut().zip(&bv) {
                *acc = V::mul_add(ai, bj, *acc);
            }
        }
    }
    if c.rows == MR && c.cols == nr && c.cs == 1 {
        let mut bias = [V::zero(); NV];
        if overwrite && !c.bias.is_null() {
            for (v, slot) in bias.iter_mut().enumerate() {
                *slot = V::load(c.bias.add(v * w));
            }
        }
        for (i, row) in t.iter().enumerate() {
            let out = c.at(i, 0);
            for (v, &acc) in row.iter().enumerate() {
                let o = out.add(v * w);
                let base = if overwrite { bias[v] } else { V::load(o) };
                V::store(V::add(base, acc), o);
            }
        }
        return;
    }
    // A partial tile (or strided C): through a buffer on the stack.
    let mut buf = [[<V::Elem as num_traits::Zero>::zero(); MAX_NR]; MR];
    for (row, regs) in buf.iter_mut().zip(&t) {
        for (v, &acc) in regs.iter().enumerate() {
            V::store(acc, row.as_mut_ptr().add(v * w));
        }
    }
    for (i, row) in buf.iter().enumerate().take(c.rows) {
        for (j, &v) in row.iter().enumerate().take(c.cols) {
            let o = c.at(i, j);
            *o = if overwrite { c.bias_at(j) + v } else { *o + v };
        }
    }
}

/// The widest register tile, in elements (AVX-512 f32: 2 registers of 16).
const MAX_NR: usize = 32;

/// Packs a block into strips of `width` columns: strip s holds, for each row p, the `width`
/// values m[p, s·width..] side by side (zeros past the last column). A kc×nc block of B is
/// packed as it is; an mc×kc block of A is packed transposed, giving strips of rows.
#[inline(always)]
unsafe fn pack_strips<F: Scalar>(m: Mat<F>, width: usize, out: &mut [F]) {
    let (rows, cols) = (m.rows, m.cols);
    for (s, strip) in out[..cols.div_ceil(width) * rows * width]
        .chunks_exact_mut(rows * width)
        .enumerate()
    {
        let j0 = s * width;
        let n = width.min(cols - j0);
        for (p, dst) in strip.chunks_exact_mut(width).enumerate() {
            if m.cs == 1 && n == width {
                // A whole strip row: `width` is a constant once inlined, so this copy compiles
                // to a few vector moves instead of a call to memcpy per row (which cost ~9% of a
                // two-thread training step).
                // SAFETY: row p of the block has `cols` contiguous elements from column 0.
                let src = std::slice::from_raw_parts(m.at(p, j0), width);
                dst.copy_from_slice(src);
            } else if m.cs == 1 {
                // SAFETY: as above.
                let src = std::slice::from_raw_parts(m.at(p, j0), n);
                dst[..n].copy_from_slice(src);
            } else {
                for (j, d) in dst[..n].iter_mut().enumerate() {
                    *d = *m.at(p, j0 + j);
                }
            }
            dst[n..].fill(F::zero());
        }
    }
}

/// Whether a dimension of `len` elements at `stride` is contiguous (length ≤ 1 always is).
fn contiguous(len: usize, stride: isize) -> bool {
    len <= 1 || stride == 1
}

/// The product without packing, with the innermost loop along the longest contiguous
/// dimension: rows of B and C (length n), columns of A and C (length m), or rows of A against
/// columns of B (dot products of length k).
#[inline(always)]
unsafe fn direct<F: Scalar, const FUSED: bool>(
    a: Mat<F>,
    b: Mat<F>,
    c: MatMut<F>,
    accumulate: bool,
) {
    let (m, n, k) = (c.rows, c.cols, a.cols);
    let rows_ok = contiguous(n, b.cs) && contiguous(n, c.cs);
    let cols_ok = contiguous(m, a.rs) && contiguous(m, c.rs);
    let dots_ok = contiguous(k, a.cs) && contiguous(k, b.rs);
    let best = [(rows_ok, n), (cols_ok, m), (dots_ok, k)]
        .iter()
        .enumerate()
        .filter(|(_, (ok, _))| *ok)
        .max_by_key(|(_, (_, len))| *len)
        .map_or(2, |(form, _)| form);
    match best {
        0 => {
            for i in 0..m {
                // SAFETY: row i of C has n contiguous elements; rows of B likewise.
                let out = std::slice::from_raw_parts_mut(c.at(i, 0), n);
                if !accumulate {
                    for (j, o) in out.iter_mut().enumerate() {
                        *o = c.bias_at(j);
                    }
                }
                for p in 0..k {
                    let s = *a.at(i, p);
                    let row = std::slice::from_raw_parts(b.at(p, 0), n);
                    out.iter_mut()
                        .zip(row)
                        .for_each(|(o, &v)| *o = madd::<F, FUSED>(s, v, *o));
                }
            }
        }
        1 => {
            for j in 0..n {
                // SAFETY: column j of C has m contiguous elements; columns of A likewise.
                let out = std::slice::from_raw_parts_mut(c.at(0, j), m);
                if !accumulate {
                    out.fill(c.bias_at(j));
                }
                for p in 0..k {
                    let s = *b.at(p, j);
                    let col = std::slice::from_raw_parts(a.at(0, p), m);
                    out.iter_mut()
                        .zip(col)
                        .for_each(|(o, &v)| *o = madd::<F, FUSED>(s, v, *o));
                }
            }
        }
        _ => {
            for i in 0..m {
                for j in 0..n {
                    let sum = if dots_ok && k > 0 {
                        // SAFETY: row i of A and column j of B have k contiguous elements.
                        let x = std::slice::from_raw_parts(a.at(i, 0), k);
                        let y = std::slice::from_raw_parts(b.at(0, j), k);
                        dot::<F, FUSED>(x, y)
                    } else {
                        (0..k).fold(F::zero(), |s, p| {
                            madd::<F, FUSED>(*a.at(i, p), *b.at(p, j), s)
                        })
                    };
                    let o = c.at(i, j);
                    *o = if accumulate {
                        *o + sum
                    } else {
                        c.bias_at(j) + sum
                    };
                }
            }
        }
    }
}

/// Σ x·y with 16 partial sums, so the loop vectorizes.
#[inline(always)]
fn dot<F: Scalar, const FUSED: bool>(x: &[F], y: &[F]) -> F {
    let mut acc = [F::zero(); 16];
    let (xs, ys) = (x.chunks_exact(16), y.chunks_exact(16));
    let tail: F = xs
        .remainder()
        .iter()
        .zip(ys.remainder())
        .fold(F::zero(), |s, (&u, &v)| madd::<F, FUSED>(u, v, s));
    for (u, v) in xs.zip(ys) {
        for l in 0..16 {
            acc[l] = madd::<F, FUSED>(u[l], v[l], acc[l]);
        }
    }
    acc.iter().fold(tail, |s, &v| s + v)
}
