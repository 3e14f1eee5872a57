//! One SIMD register's worth of numbers, and the five operations the register tile needs.
//! The x86-64 types wrap the standard library's intrinsics; their methods are only called
//! from code compiled with the matching target features (see `gemm::product_f32`).

use crate::kernels::scalar::Scalar;

/// A register of `WIDTH` numbers of type `Elem`.
pub(crate) trait Lanes: Copy {
    /// The number type.
    type Elem: Scalar;
    /// Numbers per register.
    const WIDTH: usize;
    /// Whether `mul_add` rounds once (FMA).
    const FUSED: bool;
    /// All zeros.
    ///
    /// # Safety
    /// The CPU supports the register type.
    unsafe fn zero() -> Self;
    /// `x` in every lane.
    ///
    /// # Safety
    /// As [`Lanes::zero`].
    unsafe fn splat(x: Self::Elem) -> Self;
    /// Loads `WIDTH` numbers from `p` (no alignment needed).
    ///
    /// # Safety
    /// As [`Lanes::zero`]; `p` points at `WIDTH` readable numbers.
    unsafe fn load(p: *const Self::Elem) -> Self;
    /// Stores the lanes to `p` (no alignment needed).
    ///
    /// # Safety
    /// As [`Lanes::zero`]; `p` points at `WIDTH` writable numbers.
    unsafe fn store(self, p: *mut Self::Elem);
    /// Lane-wise a + b.
    ///
    /// # Safety
    /// As [`Lanes::zero`].
    unsafe fn add(a: Self, b: Self) -> Self;
    /// Lane-wise a·b + c.
    ///
    /// # Safety
    /// As [`Lanes::zero`].
    unsafe fn mul_add(a: Self, b: Self, c: Self) -> Self;
}

/// Implements [`Lanes`] for a wrapper around an x86-64 register type.
#[cfg(target_arch = "x86_64")]
macro_rules! x86_lanes {
    ($name:ident, $reg:ty, $elem:ty, $width:expr, $fused:expr,
     $zero:ident, $splat:ident, $load:ident, $store:ident, $add:ident, |$a:ident, $b:ident, $c:ident| $fma:expr) => {
        #[doc = concat!("A `", stringify!($reg), "` register of ", stringify!($elem), ".")]
        #[derive(Clone, Copy)]
        pub(crate) struct $name($reg);

        impl Lanes for $name {
            type Elem = $elem;
            const WIDTH: usize = $width;
            const FUSED: bool = $fused;
            #[inline(always)]
            unsafe fn zero() -> Self {
                $name(std::arch::x86_64::$zero())
            }
            #[inline(always)]
            unsafe fn splat(x: $elem) -> Self {
                $name(std::arch::x86_64::$splat(x))
            }
            #[inline(always)]
            unsafe fn load(p: *const $elem) -> Self {
                $name(std::arch::x86_64::$load(p))
            }
            #[inline(always)]
            unsafe fn store(self, p: *mut $elem) {
                std::arch::x86_64::$store(p, self.0)
            }
            #[inline(always)]
            unsafe fn add(a: Self, b: Self) -> Self {
                $name(std::arch::x86_64::$add(a.0, b.0))
            }
            #[inline(always)]
            unsafe fn mul_add(a: Self, b: Self, c: Self) -> Self {
                let ($a, $b, $c) = (a.0, b.0, c.0);
                $name($fma)
            }
        }
    };
}

#[cfg(target_arch = "x86_64")]
use std::arch::x86_64::{
    _mm256_fmadd_pd, _mm256_fmadd_ps, _mm512_fmadd_pd, _mm512_fmadd_ps, _mm_add_pd, _mm_add_ps,
    _mm_mul_pd, _mm_mul_ps,
};

#[cfg(target_arch = "x86_64")]
x86_lanes!(
    Z512,
    std::arch::x86_64::__m512,
    f32,
    16,
    true,
    _mm512_setzero_ps,
    _mm512_set1_ps,
    _mm512_loadu_ps,
    _mm512_storeu_ps,
    _mm512_add_ps,
    |a, b, c| _mm512_fmadd_ps(a, b, c)
);
#[cfg(target_arch = "x86_64")]
x86_lanes!(
    Z512d,
    std::arch::x86_64::__m512d,
    f64,
    8,
    true,
    _mm512_setzero_pd,
    _mm512_set1_pd,
    _mm512_loadu_pd,
    _mm512_storeu_pd,
    _mm512_add_pd,
    |a, b, c| _mm512_fmadd_pd(a, b, c)
);
#[cfg(target_arch = "x86_64")]
x86_lanes!(
    Y256,
    std::arch::x86_64::__m256,
    f32,
    8,
    true,
    _mm256_setzero_ps,
    _mm256_set1_ps,
    _mm256_loadu_ps,
    _mm256_storeu_ps,
    _mm256_add_ps,
    |a, b, c| _mm256_fmadd_ps(a, b, c)
);
#[cfg(target_arch = "x86_64")]
x86_lanes!(
    Y256d,
    std::arch::x86_64::__m256d,
    f64,
    4,
    true,
    _mm256_setzero_pd,
    _mm256_set1_pd,
    _mm256_loadu_pd,
    _mm256_storeu_pd,
    _mm256_add_pd,
    |a, b, c| _mm256_fmadd_pd(a, b, c)
);
#[cfg(target_arch = "x86_64")]
x86_lanes!(
    X128,
    std::arch::x86_64::__m128,
    f32,
    4,
    false,
    _mm_setzero_ps,
    _mm_set1_ps,
    _mm_loadu_ps,
    _mm_storeu_ps,
    _mm_add_ps,
    |a, b, c| _mm_add_ps(_mm_mul_ps(a, b), c)
);
#[cfg(target_arch = "x86_64")]
x86_lanes!(
    X128d,
    std::arch::x86_64::__m128d,
    f64,
    2,
    false,
    _mm_setzero_pd,
    _mm_set1_pd,
    _mm_loadu_pd,
    _mm_storeu_pd,
    _mm_add_pd,
    |a, b, c| _mm_add_pd(_mm_mul_pd(a, b), c)
);

/// A "register" of one number, for targets without a SIMD kernel.
#[cfg(not(target_arch = "x86_64"))]
#[derive(Clone, Copy)]
pub(crate) struct One<F>(F);

#[cfg(not(target_arch = "x86_64"))]
impl<F: Scalar> Lanes for One<F> {
    type Elem = F;
    const WIDTH: usize = 1;
    const FUSED: bool = false;
    #[inline(always)]
    unsafe fn zero() -> Self {
        One(F::zero())
    }
    #[inline(always)]
    unsafe fn splat(x: F) -> Self {
        One(x)
    }
    #[inline(always)]
    unsafe fn load(p: *const F) -> Self {
        One(*p)
    }
    #[inline(always)]
    unsafe fn store(self, p: *mut F) {
        *p = self.0
    }
    #[inline(always)]
    unsafe fn add(a: Self, b: Self) -> Self {
        One(a.0 + b.0)
    }
    #[inline(always)]
    unsafe fn mul_add(a: Self, b: Self, c: Self) -> Self {
        One(a.0 * b.0 + c.0)
    }
}
