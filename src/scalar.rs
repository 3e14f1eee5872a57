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
}
