//! The floating-point types the library computes in.
//!
//! Training usually runs in `f32`; gradient checks run in `f64`. Everything numeric in the crate
//! is generic over [`Scalar`], which both implement.

use ndarray::{LinalgScalar, ScalarOperand};
use num_traits::{Float, FloatConst};
use serde::{de::DeserializeOwned, Serialize};
use std::fmt::{Debug, Display};
use std::iter::Sum;
use std::ops::{AddAssign, DivAssign, MulAssign, SubAssign};

/// A real number type the library can train and predict in: `f32` or `f64`.
pub trait Scalar:
    Float
    + FloatConst
    + LinalgScalar
    + ScalarOperand
    + AddAssign
    + SubAssign
    + MulAssign
    + DivAssign
    + Sum
    + Debug
    + Display
    + Default
    + Send
    + Sync
    + Serialize
    + DeserializeOwned
    + 'static
{
    /// Converts an `f64` constant to this type (rounding to nearest for `f32`).
    fn of(value: f64) -> Self;
    /// Widens (or keeps) the value as an `f64`.
    fn as_f64(self) -> f64;
    /// The error function erf(x).
    fn erf(self) -> Self;
    /// The complementary error function erfc(x) = 1 − erf(x), accurate where erf(x) is near 1.
    fn erfc(self) -> Self;
    /// eˣ for the activation kernels: exact (libm) in `f64`; in `f32` a branch-free
    /// approximation that vectorizes (relative error ≤ 2e-7).
    fn kernel_exp(self) -> Self;
    /// eˣ − 1 for the activation kernels, without cancellation near 0 (as [`Scalar::kernel_exp`]).
    fn kernel_exp_m1(self) -> Self;
    /// erfc(x) for the activation kernels: exact (libm) in `f64`; in `f32` Abramowitz & Stegun
    /// 7.1.26 (absolute error ≤ 1.5e-7 on erf), branch-free.
    fn kernel_erfc(self) -> Self;
}

impl Scalar for f32 {
    fn of(value: f64) -> Self {
        value as f32
    }
    fn as_f64(self) -> f64 {
        self as f64
    }
    fn erf(self) -> Self {
        libm::erff(self)
    }
    fn erfc(self) -> Self {
        libm::erfcf(self)
    }
    #[inline]
    fn kernel_exp(self) -> Self {
        exp_f32(self)
    }
    #[inline]
    fn kernel_exp_m1(self) -> Self {
        // Near 0, the series avoids the cancellation of e^x − 1; both branches are computed
        // and one selected, so the loop stays branch-free.
        let x = self;
        let series = x
            * (1.0
                + x * (0.5
                    + x * (1.0 / 6.0 + x * (1.0 / 24.0 + x * (1.0 / 120.0 + x * (1.0 / 720.0))))));
        let direct = exp_f32(x) - 1.0;
        if x.abs() < 0.25 {
            series
        } else {
            direct
        }
    }
    #[inline]
    fn kernel_erfc(self) -> Self {
        // Abramowitz & Stegun 1964, formula 7.1.26, for |x|, mirrored for x < 0.
        let z = self.abs();
        let t = 1.0 / (1.0 + 0.327_591_1 * z);
        let poly = t
            * (0.254_829_6
                + t * (-0.284_496_7 + t * (1.421_413_8 + t * (-1.453_152 + t * 1.061_405_4))));
        let tail = poly * exp_f32(-z * z);
        if self >= 0.0 {
            tail
        } else {
            2.0 - tail
        }
    }
}

/// Branch-free eˣ in f32: x = k·ln 2 + r with |r| ≤ ln 2 / 2, a degree-7 Taylor polynomial for
/// eʳ, and 2ᵏ built from its bits. Inputs are clamped to [−87.3, 88.3], where 2ᵏ stays normal.
#[inline]
fn exp_f32(x: f32) -> f32 {
    // max/min (not clamp) so that a NaN input becomes a number here; it is put back at the end.
    #[allow(clippy::manual_clamp)]
    let c = x.max(-87.3).min(88.3);
    // Round to nearest by adding and subtracting 1.5·2²³: plain SSE2, so the loop vectorizes
    // on any x86-64 (a `round` call would not).
    const SHIFT: f32 = 12_582_912.0;
    let k = (c * std::f32::consts::LOG2_E + SHIFT) - SHIFT;
    let r = c - k * 0.693_145_75 - k * 1.428_606_8e-6;
    let p = 1.0
        + r * (1.0
            + r * (0.5
                + r * (1.0 / 6.0
                    + r * (1.0 / 24.0
                        + r * (1.0 / 120.0 + r * (1.0 / 720.0 + r * (1.0 / 5040.0)))))));
    // SAFETY: c is within [−87.3, 88.3], so k is an integer in [−126, 127], which an i32 holds
    // exactly; the unchecked conversion only skips the saturation checks that block
    // vectorization.
    let k = unsafe { k.to_int_unchecked::<i32>() };
    let e = f32::from_bits(((k + 127) as u32) << 23) * p;
    if x.is_nan() {
        x
    } else {
        e
    }
}

impl Scalar for f64 {
    fn of(value: f64) -> Self {
        value
    }
    fn as_f64(self) -> f64 {
        self
    }
    fn erf(self) -> Self {
        libm::erf(self)
    }
    fn erfc(self) -> Self {
        libm::erfc(self)
    }
    #[inline]
    fn kernel_exp(self) -> Self {
        self.exp()
    }
    #[inline]
    fn kernel_exp_m1(self) -> Self {
        self.exp_m1()
    }
    #[inline]
    fn kernel_erfc(self) -> Self {
        libm::erfc(self)
    }
}
