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
    /// True for `f64`: the activation functions then keep their textbook formulas on libm, the
    /// reference the `f32` kernels are checked against (and what the certified fits were
    /// measured with); false for `f32`, which uses the faster kernel forms. A constant, so the
    /// choice costs nothing at run time.
    const REFERENCE: bool;
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
    /// eˣ for the activation kernels that need it to an error small against 1 + |result|
    /// (the sigmoid, SiLU and tanh derivatives): exact (libm) in `f64`; in `f32` 2^(x·log₂e) with one rounding
    /// more than [`Scalar::kernel_exp`], so a relative error ≤ 1.1e-7 + 9e-8·|x|, and cheaper.
    fn kernel_exp_fast(self) -> Self;
    /// eˣ − 1 for the activation kernels, without cancellation near 0 (as [`Scalar::kernel_exp`]).
    fn kernel_exp_m1(self) -> Self;
    /// erfc(x) for the activation kernels: exact (libm) in `f64`; in `f32` 2·Φ(−|x|√2) by the
    /// tail of [`Scalar::kernel_normal_tail`] (absolute error about 2.2e-7, twice the
    /// tail's), branch-free.
    fn kernel_erfc(self) -> Self;
    /// For a ≥ 0, the standard normal tail Φ(−a) and density φ(a), sharing one exponential:
    /// exact (libm) in `f64`; in `f32` a rational form in the manner of Abramowitz & Stegun
    /// 7.1.26 and a branch-free 2ˣ.
    fn kernel_normal_tail(self) -> (Self, Self);
    /// For a ≥ 0, a·Φ(−a) (the part GELU subtracts from max(x, 0)): exact (libm) in `f64`; in
    /// `f32` the form of [`Scalar::kernel_normal_tail`] with the factor a absorbed (no
    /// multiplication by a).
    fn kernel_scaled_normal_tail(self) -> Self;
    /// scale·σ(x) = scale/(1 + e^(−x)) for the sigmoid and SiLU kernels: the textbook
    /// two-branch formula on libm in `f64`; in `f32` with e^(−x) = 2ᵏ·2ᶠ (as in
    /// [`Scalar::kernel_exp_fast`]) written as 2⁻ᵏ/(2⁻ᵏ + 2ᶠ), so 2ᵏ is never multiplied out.
    fn kernel_sigmoid_times(self, scale: Self) -> Self;
    /// tanh(x) for the activation kernels: libm in `f64`; in `f32` an odd rational function
    /// on [−9, 9] (absolute error ≤ 2e-7 in tests/activations.rs), saturating beyond.
    fn kernel_tanh(self) -> Self;
    /// ln(1 + e^(−a)) for a ≥ 0 (softplus without its linear part): libm in `f64`; in `f32`
    /// 2·atanh(s) with s = u/(2 + u), u = e^(−a) = 2ᵏ·2ᶠ, written as s = 2ᶠ/(2ᶠ + 2^(1−k)) so the
    /// scaling by 2ᵏ is never multiplied out, and atanh by a polynomial; branch-free.
    fn kernel_ln_1p_exp_neg(self) -> Self;
}

impl Scalar for f32 {
    const REFERENCE: bool = false;
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
    fn kernel_exp_fast(self) -> Self {
        exp_fast_f32(self)
    }
    #[inline]
    fn kernel_exp_m1(self) -> Self {
        exp_m1_f32(self)
    }
    #[inline]
    fn kernel_erfc(self) -> Self {
        let (_, tail, _) = normal_tail_f32(self.abs() * std::f32::consts::SQRT_2);
        let erfc = tail + tail;
        if self < 0.0 {
            2.0 - erfc
        } else {
            erfc
        }
    }
    #[inline]
    fn kernel_normal_tail(self) -> (Self, Self) {
        let (_, tail, density) = normal_tail_f32(self);
        (tail, density)
    }
    #[inline]
    fn kernel_scaled_normal_tail(self) -> Self {
        normal_tail_f32(self).0
    }
    #[inline]
    fn kernel_sigmoid_times(self, scale: Self) -> Self {
        scale * sigmoid_f32(self)
    }
    #[inline]
    fn kernel_tanh(self) -> Self {
        tanh_f32(self)
    }
    #[inline]
    fn kernel_ln_1p_exp_neg(self) -> Self {
        ln_1p_exp_neg_f32(self)
    }
}

// The f32 kernels below use only IEEE additions, multiplications, divisions, comparisons and
// bit operations (no fused multiply-add), so a vector lane computes exactly what the scalar
// code does: results do not depend on the instruction set. Clamps are written as comparisons
// that keep a NaN (the compiler emits one max/min instruction for each).

/// 1.5·2²³: adding and subtracting it rounds an f32 of magnitude below 2²² to the nearest
/// integer with plain SSE2 arithmetic, so the loops vectorize on any x86-64 (a `round` call
/// would not).
const ROUNDER: f32 = 12_582_912.0;
/// ln 2 split in two (Cody & Waite 1980): the high part has 15 significant bits, so k·LN2_HI is
/// exact for the |k| ≤ 127 used here.
const LN2_HI: f32 = 0.693_145_75;
const LN2_LO: f32 = 1.428_606_8e-6;

/// max(x, lo), NaN kept.
#[inline(always)]
fn at_least(x: f32, lo: f32) -> f32 {
    if x < lo {
        lo
    } else {
        x
    }
}

/// min(x, hi), NaN kept.
#[inline(always)]
fn at_most(x: f32, hi: f32) -> f32 {
    if x > hi {
        hi
    } else {
        x
    }
}

/// 2ᵏ from t = k + ROUNDER, k an integer in [−126, 127]: the low mantissa bits of t hold k.
#[inline(always)]
fn pow2_of_rounded(t: f32) -> f32 {
    f32::from_bits(t.to_bits().wrapping_sub(0x4B40_0000 - 127) << 23)
}

/// x = k·ln 2 + r with |r| ≤ ln 2 / 2 (up to rounding of the split), for x in [−87.3, 88.3];
/// returns (k + ROUNDER, r).
#[inline(always)]
fn reduce(x: f32) -> (f32, f32) {
    let t = x * std::f32::consts::LOG2_E + ROUNDER;
    let k = t - ROUNDER;
    (t, x - k * LN2_HI - k * LN2_LO)
}

/// eʳ for |r| ≤ ln 2 / 2: 1 + r·Q(r), Q of degree 4 fitted by weighted least squares at 200
/// Chebyshev points for relative error (our fit: 1.05e-7 with the coefficients rounded to f32;
/// checked against libm in tests/activations.rs), evaluated in Estrin's order (pairs of terms
/// combined with r², a shorter dependency chain than Horner's order).
#[inline(always)]
fn exp_reduced(r: f32) -> f32 {
    let r2 = r * r;
    (1.0 + r * 0.999_999_5)
        + r2 * ((0.499_991_42 + r * 0.166_681_14) + r2 * (0.041_898_73 + r * 0.008_261_531))
}

/// Branch-free eˣ in f32: x = k·ln 2 + r, eʳ by [`exp_reduced`], 2ᵏ built from its bits.
/// Inputs are clamped to [−87.3, 88.3], where 2ᵏ stays normal; a NaN stays NaN.
#[inline(always)]
fn exp_f32(x: f32) -> f32 {
    let (t, r) = reduce(at_most(at_least(x, -87.3), 88.3));
    pow2_of_rounded(t) * exp_reduced(r)
}

/// 2ᶠ for |f| ≤ 1/2: 1 + f·Q(f), Q of degree 4 fitted as in [`exp_reduced`] (our fit:
/// relative error 1.05e-7 with the coefficients rounded to f32), in Estrin's order (the
/// perf report's `activation_l1=` lines: 3–4% faster than Horner's for softplus with AVX2, the
/// same for sigmoid, SiLU and GELU).
#[inline(always)]
fn exp2_frac(f: f32) -> f32 {
    let f2 = f * f;
    (1.0 + f * 0.693_146_9)
        + f2 * ((0.240_222_38 + f * 0.055_508_93) + f2 * (0.009_671_698 + f * 0.001_321_867_2))
}

/// eˣ as 2ʷ, w = x·log₂e clamped to [−126, 127] and split into an integer and a fraction: the
/// rounding of w adds a relative error of up to 9e-8·|x| (no Cody–Waite split), which the
/// callers (the sigmoid, SiLU and tanh derivatives) multiply by a bounded factor.
#[inline(always)]
fn exp_fast_f32(x: f32) -> f32 {
    let w = at_most(at_least(x * std::f32::consts::LOG2_E, -126.0), 127.0);
    let rounded = w + ROUNDER;
    let f = w - (rounded - ROUNDER);
    pow2_of_rounded(rounded) * exp2_frac(f)
}

/// Branch-free eˣ − 1 in f32 without cancellation near 0: with x clamped to [−87.3, 88.3]
/// (so that a caller's own clamp to x ≤ 0 makes the upper one vanish) and x·log₂e = k + f
/// (split as in [`exp_fast_f32`]), eˣ − 1 = 2ᵏ(2ᶠ − 1) + (2ᵏ − 1), and
/// 2ᶠ − 1 = f·P(f), P of degree 5 fitted as in [`exp_reduced`] (our fit: relative error 2.1e-8
/// with the coefficients rounded to f32), in Estrin's order. For k = 0 this is the polynomial
/// alone, accurate relative to the result; the rounding of x·log₂e adds a relative error of up
/// to 9e-8·|x| to eˣ, which is below 4e-8 of the result's distance to −1 for x ≤ 0.
#[inline(always)]
fn exp_m1_f32(x: f32) -> f32 {
    let w = at_most(at_least(x, -87.3), 88.3) * std::f32::consts::LOG2_E;
    let rounded = w + ROUNDER;
    let f = w - (rounded - ROUNDER);
    let f2 = f * f;
    let q = f
        // The fitted first coefficient is ln 2 in f32.
        * ((std::f32::consts::LN_2 + f * 0.240_226_49)
            + f2 * ((0.055_503_573 + f * 0.009_618_238)
                + f2 * (0.001_339_073_5 + f * 0.000_154_035_11)));
    let s = pow2_of_rounded(rounded);
    s * q + (s - 1.0)
}

/// v·2ᵏ by adding k to the exponent field (`k_bits` = k << 23, any wrap-around is mod 2³²):
/// exact while v·2ᵏ stays normal, which the callers guarantee; a multiplication less than
/// building 2ᵏ and multiplying.
#[inline(always)]
fn scale_exponent(v: f32, k_bits: u32) -> f32 {
    f32::from_bits(v.to_bits().wrapping_add(k_bits))
}

/// For a ≥ 0: (a·Φ(−a), Φ(−a), φ(a)). Φ(−a) = e^(−a²/2)·t·P(u) with t = 1/(3 + a) and
/// u = a·t = a/(3 + a): the form of Abramowitz & Stegun 1964, formula 7.1.26 (e^(−a²/2) times
/// a polynomial in t = 1/(1 + p·a)), rewritten in u, which is what GELU needs (a·Φ(−a) =
/// e^(−a²/2)·u·P(u), no multiplication by a; the tail itself is t = (1 − u)/3 times the
/// same). The degree-4 P is our own least-squares fit, weighted by max(1, a) because GELU
/// multiplies the tail by a (error 1.1e-7 in max(1, a)·|Φ(−a) error| with the coefficients
/// rounded to f32). φ(a) = e^(−a²/2)/√(2π). The exponential, shared, is 2ᵏ·2ᶠ with
/// k + f = −a²·log₂(e)/2 clamped at −125, k added to the exponent field of 2ᶠ ≥ 0.7 (so the
/// result stays normal), and 0 for a > 13. A NaN gives NaN in the first two (the density is
/// then 0; the callers add it to the NaN).
#[inline(always)]
fn normal_tail_f32(a: f32) -> (f32, f32, f32) {
    let u = a / (3.0 + a);
    let poly =
        1.499_999_8 + u * (-2.090_428 + u * (1.067_536_2 + u * (0.222_338_13 + u * -0.326_259_2)));
    let w = at_least(a * a * (-0.5 * std::f32::consts::LOG2_E), -125.0);
    let rounded = w + ROUNDER;
    let f = w - (rounded - ROUNDER);
    // The low bits of `rounded` hold k; shifted up they are k in the exponent field (the
    // other bits of 1.5·2²³ shift out).
    let e = scale_exponent(exp2_frac(f), rounded.to_bits() << 23);
    // Past a = 13 the clamp holds e at about 2⁻¹²⁵ where e^(−a²/2) is below 1e-36: take 0, or
    // x·φ(x) in GELU's derivative would come out O(1) for x near the f32 maximum.
    let e = if a <= 13.0 { e } else { 0.0 };
    let m = poly * e;
    (u * m, (1.0 - u) * m * (1.0 / 3.0), 0.398_942_3 * e)
}

/// σ(x) = 1/(1 + e^(−x)) in f32: w = −x·log₂e clamped to [−126, 127] and split as k + f (as in
/// [`exp_fast_f32`]), then σ = 2⁻ᵏ/(2⁻ᵏ + 2ᶠ), the power built from its bits (0 for k = 127,
/// so σ(x) < 6e-39 comes out as 0). The same relative error as 1/(1 + e^(−x)) with
/// [`exp_fast_f32`], one multiplication less.
#[inline(always)]
fn sigmoid_f32(x: f32) -> f32 {
    let w = at_most(at_least(x * -std::f32::consts::LOG2_E, -126.0), 127.0);
    let rounded = w + ROUNDER;
    let f = w - (rounded - ROUNDER);
    // Biased exponent 127 − k.
    let inv = f32::from_bits((0x4B40_0000_u32 + 127).wrapping_sub(rounded.to_bits()) << 23);
    inv / (inv + exp2_frac(f))
}

/// tanh(x) in f32: x·P(x²)/Q(x²) on [−9, 9] (beyond, tanh rounds to ±1 in f32), P of degree 5
/// and Q of degree 3 in x², fitted by iteratively reweighted linear least squares at 400
/// Chebyshev points (our fit: absolute error 5.7e-8 before rounding).
#[inline(always)]
fn tanh_f32(x: f32) -> f32 {
    let x = at_most(at_least(x, -9.0), 9.0);
    let y = x * x;
    let p = 0.999_999_8
        + y * (0.129_136_95
            + y * (0.002_915_051_5
                + y * (9.219_683e-6 + y * (-1.265_330_2e-8 + y * 1.796_956_2e-11))));
    let q = 1.0 + y * (0.462_469_5 + y * (0.023_739_163 + y * 0.000_227_340_85));
    x * p / q
}

/// ln(1 + e^(−a)) in f32 for a ≥ 0 (a NaN stays NaN). With w = −a·log₂e clamped to [−126, 0]
/// and split as k + f (as in [`exp_fast_f32`]), u = e^(−a) = 2ᵏ·2ᶠ and
/// ln(1 + u) = 2·atanh(s), s = u/(2 + u) = 2ᶠ/(2ᶠ + 2^(1−k)) ≤ 1/3: the same bits as u/(2 + u)
/// (numerator and denominator are scaled by the exact power 2⁻ᵏ), without forming u. Then
/// 2·atanh(s) = 2s·R(s²) (the 2 folded into the coefficients), R(w) = atanh(√w)/√w a degree-3
/// polynomial fitted as in [`exp_reduced`] (relative error 1.7e-7 before rounding).
#[inline(always)]
fn ln_1p_exp_neg_f32(a: f32) -> f32 {
    let w = at_least(a * -std::f32::consts::LOG2_E, -126.0);
    let rounded = w + ROUNDER;
    let f = w - (rounded - ROUNDER);
    // 2^(1−k): the low bits of `rounded` hold k, so 128 − k is the biased exponent of 2^(1−k)
    // (between 128 and 254 for k in [−126, 0]).
    let scale = f32::from_bits((0x4B40_0000_u32 + 128).wrapping_sub(rounded.to_bits()) << 23);
    let p = exp2_frac(f);
    let s = p / (p + scale);
    let w = s * s;
    s * (1.999_999_6 + w * (0.666_759_8 + w * (0.395_900_6 + w * 0.342_224_54)))
}

impl Scalar for f64 {
    const REFERENCE: bool = true;
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
    fn kernel_exp_fast(self) -> Self {
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
    #[inline]
    fn kernel_normal_tail(self) -> (Self, Self) {
        let inv_sqrt_2pi = 0.5 * std::f64::consts::FRAC_2_SQRT_PI * std::f64::consts::FRAC_1_SQRT_2;
        (
            0.5 * libm::erfc(self * std::f64::consts::FRAC_1_SQRT_2),
            inv_sqrt_2pi * (-0.5 * self * self).exp(),
        )
    }
    #[inline]
    fn kernel_scaled_normal_tail(self) -> Self {
        self * (0.5 * libm::erfc(self * std::f64::consts::FRAC_1_SQRT_2))
    }
    #[inline]
    fn kernel_sigmoid_times(self, scale: Self) -> Self {
        // Neither branch overflows.
        if self >= 0.0 {
            scale * (1.0 / (1.0 + (-self).exp()))
        } else {
            let e = self.exp();
            scale * (e / (1.0 + e))
        }
    }
    #[inline]
    fn kernel_tanh(self) -> Self {
        self.tanh()
    }
    #[inline]
    fn kernel_ln_1p_exp_neg(self) -> Self {
        (-self).exp().ln_1p()
    }
}
