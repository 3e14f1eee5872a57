//! The activation family: value, derivative, parameters and kink points of each function.
//!
//! One enum covers the whole family, so one generic layer ([`crate::nn::layer::Pointwise`]) applies
//! any of them. Every function is written so that finite inputs give finite values and
//! derivatives, in `f32` and `f64` alike (large |x| take the asymptote explicitly where the
//! textbook formula would compute inf − inf or 0 · inf).
//!
//! Conventions at kinks (where the derivative is undefined) are listed per variant; they follow
//! the usual choice of taking the negative-side derivative, so ReLU'(0) = 0.

use crate::kernels::scalar::Scalar;
use crate::kernels::{for_chunks, with_simd, SPLIT_ELEMENTS};
use crate::nn::error::ConfigError;
use crate::nn::init::{Draw, Fan, Init};
use serde::{Deserialize, Serialize};
use std::fmt;
use std::str::FromStr;

/// SELU scale λ (Klambauer et al. 2017, "Self-Normalizing Neural Networks", Eq. 14).
pub const SELU_LAMBDA: f64 = 1.050_700_987_355_480_5;
/// SELU negative-side α (Klambauer et al. 2017, Eq. 14).
pub const SELU_ALPHA: f64 = 1.673_263_242_354_377_2;
/// Cubic coefficient of the tanh approximation of GELU (Hendrycks & Gimpel 2016).
pub const GELU_TANH_CUBIC: f64 = 0.044_715;

/// An elementwise activation function and its parameters.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Activation {
    /// f(x) = x.
    Identity,
    /// f(x) = max(0, x). Kink at 0: f'(0) = 0.
    Relu,
    /// f(x) = x for x > 0, a·x otherwise (Maas et al. 2013 use a = 0.01). f'(0) = a.
    LeakyRelu {
        /// Negative-side slope a.
        slope: f64,
    },
    /// Leaky ReLU whose slopes are learned (He et al. 2015), one per unit or one shared,
    /// starting at `init` (0.25 in the paper). Built as a [`crate::nn::layer::Prelu`] layer; used as a
    /// plain function it is the leaky ReLU at its initial slope. f'(0) = slope.
    Prelu {
        /// Initial slope.
        init: f64,
        /// One slope for the whole layer instead of one per unit.
        shared: bool,
    },
    /// Randomized leaky ReLU (Xu et al. 2015): while training the slope of each element is drawn
    /// from U(lower, upper); at inference it is fixed at (lower + upper)/2. f'(0) = slope.
    RandomLeaky {
        /// Lower bound of the slope draw (1/8 in the paper).
        lower: f64,
        /// Upper bound of the slope draw (1/3 in the paper).
        upper: f64,
    },
    /// f(x) = x for x > 0, α(eˣ − 1) otherwise (Clevert et al. 2016). f'(0) = α.
    Elu {
        /// Negative-side saturation α.
        alpha: f64,
    },
    /// λ·ELU(x; α) with the published λ and α (Klambauer et al. 2017). f'(0) = λα.
    Selu,
    /// f(x) = max(0, x) + min(0, α(e^(x/α) − 1)) (Barron 2017). f'(0) = 1.
    Celu {
        /// Scale α.
        alpha: f64,
    },
    /// Exact GELU, f(x) = x·Φ(x) with Φ the standard normal CDF (Hendrycks & Gimpel 2016).
    Gelu,
    /// The tanh approximation of GELU, 0.5x(1 + tanh(√(2/π)(x + 0.044715x³))).
    GeluTanh,
    /// SiLU / swish, f(x) = x·σ(βx) (Elfwing et al. 2018; Ramachandran et al. 2017).
    Silu {
        /// Steepness β (1 for SiLU).
        beta: f64,
    },
    /// f(x) = x·tanh(softplus(x)) (Misra 2019).
    Mish,
    /// f(x) = ln(1 + e^(βx))/β (Dugas et al. 2001), computed without overflow.
    Softplus {
        /// Sharpness β.
        beta: f64,
    },
    /// f(x) = min(max(0, x), cap). Kinks at 0 and at cap: f' = 0 at both.
    CappedRelu {
        /// The ceiling (6 by default).
        cap: f64,
    },
    /// Hyperbolic tangent, a saturating baseline.
    Tanh,
    /// Logistic sigmoid 1/(1 + e^(−x)), a saturating baseline.
    Sigmoid,
}

/// Which initializer family an activation calls for when none is given.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Family {
    /// Zero (or nearly zero) for negative inputs, identity-like for positive: He initialization.
    Rectifier,
    /// SELU: LeCun initialization keeps activations normalized.
    SelfNormalizing,
    /// Identity, tanh and sigmoid: Glorot initialization.
    Symmetric,
}

/// All activation names accepted by [`Activation::from_str`], in display order.
pub const ACTIVATION_NAMES: &[&str] = &[
    "identity",
    "relu",
    "leaky-relu",
    "prelu",
    "prelu-shared",
    "random-leaky",
    "elu",
    "selu",
    "celu",
    "gelu",
    "gelu-tanh",
    "silu",
    "mish",
    "softplus",
    "capped-relu",
    "tanh",
    "sigmoid",
];

impl Activation {
    /// Leaky ReLU with the slope 0.01 of Maas et al. 2013.
    pub const LEAKY: Activation = Activation::LeakyRelu { slope: 0.01 };
    /// PReLU with one slope per unit, starting at 0.25 (He et al. 2015).
    pub const PRELU: Activation = Activation::Prelu {
        init: 0.25,
        shared: false,
    };
    /// Randomized leaky ReLU with the bounds 1/8 and 1/3 of Xu et al. 2015.
    pub const RANDOM_LEAKY: Activation = Activation::RandomLeaky {
        lower: 1.0 / 8.0,
        upper: 1.0 / 3.0,
    };
    /// ELU with α = 1.
    pub const ELU: Activation = Activation::Elu { alpha: 1.0 };
    /// CELU with α = 1.
    pub const CELU: Activation = Activation::Celu { alpha: 1.0 };
    /// SiLU (swish with β = 1).
    pub const SILU: Activation = Activation::Silu { beta: 1.0 };
    /// Softplus with β = 1.
    pub const SOFTPLUS: Activation = Activation::Softplus { beta: 1.0 };
    /// ReLU capped at 6.
    pub const RELU6: Activation = Activation::CappedRelu { cap: 6.0 };

    /// Every activation with its default parameters, one per name in [`ACTIVATION_NAMES`]
    /// except the shared-slope PReLU.
    pub fn all() -> Vec<Activation> {
        vec![
            Activation::Identity,
            Activation::Relu,
            Activation::LEAKY,
            Activation::PRELU,
            Activation::RANDOM_LEAKY,
            Activation::ELU,
            Activation::Selu,
            Activation::CELU,
            Activation::Gelu,
            Activation::GeluTanh,
            Activation::SILU,
            Activation::Mish,
            Activation::SOFTPLUS,
            Activation::RELU6,
            Activation::Tanh,
            Activation::Sigmoid,
        ]
    }

    /// The short name used on the command line and in reports.
    pub fn name(&self) -> &'static str {
        match self {
            Activation::Identity => "identity",
            Activation::Relu => "relu",
            Activation::LeakyRelu { .. } => "leaky-relu",
            Activation::Prelu { shared: false, .. } => "prelu",
            Activation::Prelu { shared: true, .. } => "prelu-shared",
            Activation::RandomLeaky { .. } => "random-leaky",
            Activation::Elu { .. } => "elu",
            Activation::Selu => "selu",
            Activation::Celu { .. } => "celu",
            Activation::Gelu => "gelu",
            Activation::GeluTanh => "gelu-tanh",
            Activation::Silu { .. } => "silu",
            Activation::Mish => "mish",
            Activation::Softplus { .. } => "softplus",
            Activation::CappedRelu { .. } => "capped-relu",
            Activation::Tanh => "tanh",
            Activation::Sigmoid => "sigmoid",
        }
    }

    /// The one tunable parameter of the function, if it has one.
    pub fn parameter(&self) -> Option<f64> {
        match *self {
            Activation::LeakyRelu { slope } => Some(slope),
            Activation::Prelu { init, .. } => Some(init),
            Activation::Elu { alpha } | Activation::Celu { alpha } => Some(alpha),
            Activation::Silu { beta } | Activation::Softplus { beta } => Some(beta),
            Activation::CappedRelu { cap } => Some(cap),
            _ => None,
        }
    }

    /// Checks that the parameters are finite and in range.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let what = format!("activation {}", self.name());
        let positive = |name: &str, v: f64| {
            if v.is_finite() && v > 0.0 {
                Ok(())
            } else {
                Err(ConfigError::invalid(
                    &what,
                    format!("{name} must be a finite number > 0, got {v}"),
                ))
            }
        };
        match *self {
            Activation::LeakyRelu { slope } | Activation::Prelu { init: slope, .. } => {
                if slope.is_finite() {
                    Ok(())
                } else {
                    Err(ConfigError::invalid(&what, "slope must be finite"))
                }
            }
            Activation::RandomLeaky { lower, upper } => {
                if lower.is_finite() && upper.is_finite() && 0.0 <= lower && lower <= upper {
                    Ok(())
                } else {
                    Err(ConfigError::invalid(
                        &what,
                        format!("need 0 <= lower <= upper, got lower {lower}, upper {upper}"),
                    ))
                }
            }
            Activation::Elu { alpha } | Activation::Celu { alpha } => positive("alpha", alpha),
            Activation::Silu { beta } | Activation::Softplus { beta } => positive("beta", beta),
            Activation::CappedRelu { cap } => positive("cap", cap),
            _ => Ok(()),
        }
    }

    /// Which initializer family suits this activation.
    pub fn family(&self) -> Family {
        match self {
            Activation::Identity | Activation::Tanh | Activation::Sigmoid => Family::Symmetric,
            Activation::Selu => Family::SelfNormalizing,
            _ => Family::Rectifier,
        }
    }

    /// The negative-side slope that He initialization's gain accounts for (0 for ReLU).
    pub fn negative_slope(&self) -> f64 {
        match *self {
            Activation::LeakyRelu { slope } => slope,
            Activation::Prelu { init, .. } => init,
            Activation::RandomLeaky { lower, upper } => 0.5 * (lower + upper),
            _ => 0.0,
        }
    }

    /// The weight initializer used before this activation when none is given: He (normal,
    /// fan-in, with the leaky gain) for the rectifier family, LeCun normal for SELU, Glorot
    /// uniform for identity, tanh and sigmoid.
    pub fn default_init(&self) -> Init {
        match self.family() {
            Family::Rectifier => Init::He {
                draw: Draw::Normal,
                fan: Fan::In,
                slope: self.negative_slope(),
            },
            Family::SelfNormalizing => Init::Lecun { draw: Draw::Normal },
            Family::Symmetric => Init::Glorot {
                draw: Draw::Uniform,
            },
        }
    }

    /// Inputs where the derivative jumps; gradient checks keep samples away from them.
    pub fn kinks(&self) -> Vec<f64> {
        match *self {
            Activation::Relu
            | Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. }
            | Activation::Selu => vec![0.0],
            Activation::Elu { alpha } if alpha != 1.0 => vec![0.0],
            Activation::CappedRelu { cap } => vec![0.0, cap],
            _ => Vec::new(),
        }
    }

    /// True if the layer for this function has learnable parameters (PReLU).
    pub fn is_learnable(&self) -> bool {
        matches!(self, Activation::Prelu { .. })
    }

    /// True if the function draws random numbers while training (randomized leaky ReLU).
    pub fn is_random(&self) -> bool {
        matches!(self, Activation::RandomLeaky { .. })
    }

    /// `out[i] = f(x[i])` at inference. The variant is chosen once per call, not per element, so
    /// the common rectifiers run as tight, vectorizable loops.
    pub fn apply<F: Scalar>(&self, x: &[F], out: &mut [F]) {
        fn each<F: Scalar>(x: &[F], out: &mut [F], f: impl Fn(F) -> F + Sync + Copy) {
            for_chunks([out], SPLIT_ELEMENTS, |at, [out]| {
                let x = &x[at..at + out.len()];
                with_simd(|| map_into(x, out, f))
            })
        }
        let zero = F::zero();
        match *self {
            Activation::Identity => out.copy_from_slice(x),
            Activation::Relu => each(x, out, move |v| if v > zero { v } else { zero }),
            Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. } => {
                let a = F::of(self.negative_slope());
                each(x, out, move |v| leaky(v, a))
            }
            Activation::CappedRelu { cap } => {
                let c = F::of(cap);
                each(x, out, move |v| v.max(zero).min(c))
            }
            Activation::Elu { alpha } => {
                let a = F::of(alpha);
                each(x, out, move |v| elu(v, a))
            }
            Activation::Selu => {
                let (l, a) = (F::of(SELU_LAMBDA), F::of(SELU_ALPHA));
                each(x, out, move |v| l * elu(v, a))
            }
            Activation::Gelu => each(x, out, gelu),
            // β = 1 skips a multiplication (same bits as the general form).
            Activation::Silu { beta: 1.0 } => each(x, out, move |v| silu(v, F::one())),
            Activation::Silu { beta } => {
                let b = F::of(beta);
                each(x, out, move |v| silu(v, b))
            }
            // β = 1 skips a multiplication and a division by 1 (same bits as the general form).
            Activation::Softplus { beta: 1.0 } => each(x, out, softplus),
            Activation::Softplus { beta } => {
                let b = F::of(beta);
                each(x, out, move |v| softplus_beta(v, b))
            }
            Activation::Tanh => each(x, out, F::kernel_tanh),
            Activation::Sigmoid => each(x, out, sigmoid),
            _ => each(x, out, move |v| self.value(v)),
        }
    }

    /// `out[i] = g[i]·f'(x[i])`: the backward pass of [`Activation::apply`].
    pub fn apply_derivative<F: Scalar>(&self, x: &[F], g: &[F], out: &mut [F]) {
        fn both<F: Scalar>(x: &[F], g: &[F], out: &mut [F], f: impl Fn(F, F) -> F + Sync + Copy) {
            for_chunks([out], SPLIT_ELEMENTS, |at, [out]| {
                let (x, g) = (&x[at..at + out.len()], &g[at..at + out.len()]);
                with_simd(|| zip_into(x, g, out, f))
            })
        }
        fn each<F: Scalar>(x: &[F], g: &[F], out: &mut [F], f: impl Fn(F) -> F + Sync + Copy) {
            both(x, g, out, move |v, gv| gv * f(v))
        }
        let (zero, one) = (F::zero(), F::one());
        match *self {
            Activation::Identity => out.copy_from_slice(g),
            // The gradient itself where x > 0 (not g·1, which would turn an infinite g times a
            // zero slope into NaN).
            Activation::Relu => both(x, g, out, move |v, gv| if v > zero { gv } else { zero }),
            Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. } => {
                let a = F::of(self.negative_slope());
                each(x, g, out, move |v| leaky_derivative(v, a))
            }
            Activation::CappedRelu { cap } => {
                let c = F::of(cap);
                each(
                    x,
                    g,
                    out,
                    move |v| if v > zero && v < c { one } else { zero },
                )
            }
            Activation::Elu { alpha } => {
                let a = F::of(alpha);
                each(x, g, out, move |v| elu_derivative(v, a))
            }
            Activation::Selu => {
                let (l, a) = (F::of(SELU_LAMBDA), F::of(SELU_ALPHA));
                each(x, g, out, move |v| l * elu_derivative(v, a))
            }
            Activation::Gelu => each(x, g, out, gelu_derivative),
            Activation::Silu { beta } => {
                let b = F::of(beta);
                each(x, g, out, move |v| silu_derivative(v, b))
            }
            Activation::Softplus { beta } => {
                let b = F::of(beta);
                each(x, g, out, move |v| sigmoid(b * v))
            }
            Activation::Tanh => each(x, g, out, tanh_derivative),
            Activation::Sigmoid => each(x, g, out, sigmoid_derivative),
            _ => each(x, g, out, move |v| self.derivative(v)),
        }
    }

    /// f(x) at inference.
    #[inline]
    pub fn value<F: Scalar>(&self, x: F) -> F {
        let zero = F::zero();
        let one = F::one();
        match *self {
            Activation::Identity => x,
            Activation::Relu => {
                if x > zero {
                    x
                } else {
                    zero
                }
            }
            Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. } => leaky(x, F::of(self.negative_slope())),
            Activation::Elu { alpha } => elu(x, F::of(alpha)),
            Activation::Selu => F::of(SELU_LAMBDA) * elu(x, F::of(SELU_ALPHA)),
            Activation::Celu { alpha } => {
                let a = F::of(alpha);
                if x > zero {
                    x
                } else {
                    a * (x / a).kernel_exp_m1()
                }
            }
            Activation::Gelu => gelu(x),
            Activation::GeluTanh => {
                if x.abs() > F::of(1e6) {
                    // tanh saturates: the formula's limit, exact in floating point.
                    return if x > zero { x } else { zero };
                }
                let t = gelu_tanh_inner(x).tanh();
                F::of(0.5) * x * (one + t)
            }
            Activation::Silu { beta } => silu(x, F::of(beta)),
            Activation::Mish => x * softplus(x).tanh(),
            Activation::Softplus { beta } => softplus_beta(x, F::of(beta)),
            Activation::CappedRelu { cap } => x.max(zero).min(F::of(cap)),
            Activation::Tanh => x.kernel_tanh(),
            Activation::Sigmoid => sigmoid(x),
        }
    }

    /// f'(x) at inference, with the kink conventions documented on each variant.
    #[inline]
    pub fn derivative<F: Scalar>(&self, x: F) -> F {
        let zero = F::zero();
        let one = F::one();
        match *self {
            Activation::Identity => one,
            Activation::Relu => {
                if x > zero {
                    one
                } else {
                    zero
                }
            }
            Activation::LeakyRelu { .. }
            | Activation::Prelu { .. }
            | Activation::RandomLeaky { .. } => leaky_derivative(x, F::of(self.negative_slope())),
            Activation::Elu { alpha } => elu_derivative(x, F::of(alpha)),
            Activation::Selu => F::of(SELU_LAMBDA) * elu_derivative(x, F::of(SELU_ALPHA)),
            Activation::Celu { alpha } => {
                if x > zero {
                    one
                } else {
                    (x / F::of(alpha)).kernel_exp()
                }
            }
            Activation::Gelu => gelu_derivative(x),
            Activation::GeluTanh => {
                if x.abs() > F::of(1e6) {
                    return if x > zero { one } else { zero };
                }
                let c = F::of(std::f64::consts::FRAC_2_SQRT_PI * std::f64::consts::FRAC_1_SQRT_2);
                let t = gelu_tanh_inner(x).tanh();
                let inner_slope = c * (one + F::of(3.0 * GELU_TANH_CUBIC) * x * x);
                F::of(0.5) * (one + t) + F::of(0.5) * x * (one - t * t) * inner_slope
            }
            Activation::Silu { beta } => silu_derivative(x, F::of(beta)),
            Activation::Mish => {
                let t = softplus(x).tanh();
                t + (x * sigmoid(x)) * (one - t * t)
            }
            Activation::Softplus { beta } => sigmoid(F::of(beta) * x),
            Activation::CappedRelu { cap } => {
                if x > zero && x < F::of(cap) {
                    one
                } else {
                    zero
                }
            }
            Activation::Tanh => tanh_derivative(x),
            Activation::Sigmoid => sigmoid_derivative(x),
        }
    }
}

impl fmt::Display for Activation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.parameter() {
            Some(p) => write!(f, "{}:{}", self.name(), p),
            None => match *self {
                Activation::RandomLeaky { lower, upper } => {
                    write!(f, "{}:{}:{}", self.name(), lower, upper)
                }
                _ => f.write_str(self.name()),
            },
        }
    }
}

impl FromStr for Activation {
    type Err = ConfigError;

    /// Parses `name` or `name:parameter` (for random-leaky, `random-leaky:lower:upper`), e.g.
    /// `relu`, `leaky-relu:0.1`, `elu:0.5`, `capped-relu:1`.
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let mut parts = text.trim().split(':');
        let name = parts.next().unwrap_or("").to_ascii_lowercase();
        let numbers: Vec<&str> = parts.collect();
        let number = |i: usize, default: f64| -> Result<f64, ConfigError> {
            match numbers.get(i) {
                None => Ok(default),
                Some(s) => s.trim().parse::<f64>().map_err(|_| {
                    ConfigError::invalid(
                        format!("activation '{text}'"),
                        format!("parameter '{s}' is not a number"),
                    )
                }),
            }
        };
        let max_numbers = match name.as_str() {
            "random-leaky" => 2,
            "identity" | "relu" | "selu" | "gelu" | "gelu-tanh" | "mish" | "tanh" | "sigmoid" => 0,
            _ => 1,
        };
        if numbers.len() > max_numbers {
            return Err(ConfigError::invalid(
                format!("activation '{text}'"),
                format!("takes at most {max_numbers} parameter(s)"),
            ));
        }
        let activation = match name.as_str() {
            "identity" => Activation::Identity,
            "relu" => Activation::Relu,
            "leaky-relu" => Activation::LeakyRelu {
                slope: number(0, 0.01)?,
            },
            "prelu" => Activation::Prelu {
                init: number(0, 0.25)?,
                shared: false,
            },
            "prelu-shared" => Activation::Prelu {
                init: number(0, 0.25)?,
                shared: true,
            },
            "random-leaky" => Activation::RandomLeaky {
                lower: number(0, 1.0 / 8.0)?,
                upper: number(1, 1.0 / 3.0)?,
            },
            "elu" => Activation::Elu {
                alpha: number(0, 1.0)?,
            },
            "selu" => Activation::Selu,
            "celu" => Activation::Celu {
                alpha: number(0, 1.0)?,
            },
            "gelu" => Activation::Gelu,
            "gelu-tanh" => Activation::GeluTanh,
            "silu" | "swish" => Activation::Silu {
                beta: number(0, 1.0)?,
            },
            "mish" => Activation::Mish,
            "softplus" => Activation::Softplus {
                beta: number(0, 1.0)?,
            },
            "capped-relu" => Activation::CappedRelu {
                cap: number(0, 6.0)?,
            },
            "tanh" => Activation::Tanh,
            "sigmoid" => Activation::Sigmoid,
            _ => {
                return Err(ConfigError::UnknownName {
                    kind: "activation",
                    name: text.to_string(),
                    known: ACTIVATION_NAMES.join(", "),
                })
            }
        };
        activation.validate()?;
        Ok(activation)
    }
}

/// out[i] = f(x[i]).
#[inline(always)]
fn map_into<F: Scalar>(x: &[F], out: &mut [F], f: impl Fn(F) -> F) {
    for (o, &v) in out.iter_mut().zip(x) {
        *o = f(v);
    }
}

/// out[i] = f(x[i], g[i]).
#[inline(always)]
fn zip_into<F: Scalar>(x: &[F], g: &[F], out: &mut [F], f: impl Fn(F, F) -> F) {
    for ((o, &v), &gv) in out.iter_mut().zip(x).zip(g) {
        *o = f(v, gv);
    }
}

/// Leaky rectifier with negative-side slope `a`.
#[inline]
pub fn leaky<F: Scalar>(x: F, a: F) -> F {
    if x > F::zero() {
        x
    } else {
        a * x
    }
}

/// Derivative of [`leaky`]; `a` at x = 0.
#[inline]
pub fn leaky_derivative<F: Scalar>(x: F, a: F) -> F {
    if x > F::zero() {
        F::one()
    } else {
        a
    }
}

// The element functions below are shared by `value`/`derivative` and the slice kernels, so a
// single element and a whole layer give the same bits. Both sides of a kink are computed and
// one selected, which keeps the kernel loops branch-free; comparisons are written so that a
// NaN input gives a NaN.

/// The non-positive part of x (NaN kept).
#[inline(always)]
fn negative_part<F: Scalar>(x: F) -> F {
    if x > F::zero() {
        F::zero()
    } else {
        x
    }
}

/// max(x, 0) + α(e^min(x, 0) − 1): one of the two terms is exactly 0, and an addition is
/// cheaper than a select.
#[inline]
fn elu<F: Scalar>(x: F, alpha: F) -> F {
    let positive = if x > F::zero() { x } else { F::zero() };
    positive + alpha * negative_part(x).kernel_exp_m1()
}

#[inline]
fn elu_derivative<F: Scalar>(x: F, alpha: F) -> F {
    let negative = alpha * negative_part(x).kernel_exp();
    if x > F::zero() {
        F::one()
    } else {
        negative
    }
}

/// Logistic sigmoid 1/(1 + e^(−x)): no overflow (the kernel exponential saturates in f32; in
/// f64 an infinite e^(−x) gives 0), accurate relative to the result in the left tail.
#[inline]
pub fn sigmoid<F: Scalar>(x: F) -> F {
    if F::REFERENCE {
        // Neither branch overflows.
        return if x >= F::zero() {
            F::one() / (F::one() + (-x).exp())
        } else {
            let e = x.exp();
            e / (F::one() + e)
        };
    }
    x.kernel_sigmoid_times(F::one())
}

/// x·σ(βx).
#[inline]
fn silu<F: Scalar>(x: F, beta: F) -> F {
    if F::REFERENCE {
        return x * sigmoid(beta * x);
    }
    (beta * x).kernel_sigmoid_times(x)
}

/// σ(x) and 1 − σ(x): for x ≥ 0 as e^(−x)·σ(x), accurate where σ(x) rounds to 1 (and e^(−x)
/// ≤ 1, so the product is never ∞·0).
#[inline(always)]
fn sigmoid_and_complement<F: Scalar>(x: F) -> (F, F) {
    if F::REFERENCE {
        let s = sigmoid(x);
        return (s, F::one() - s);
    }
    let e = (-x).kernel_exp_fast();
    // Beyond ±87 the kernel clamps e^(−x) to the f32 exponent range (about 2^±126): take the
    // limits there, or x·σ(x)·(1 − σ(x)) in SiLU's derivative comes out O(1) near ±3e38.
    let far = F::of(87.0);
    let s = if x < -far {
        F::zero()
    } else {
        F::one() / (F::one() + e)
    };
    let complement = if x < F::zero() {
        F::one() - s
    } else if x > far {
        F::zero()
    } else {
        e * s
    };
    (s, complement)
}

#[inline]
fn sigmoid_derivative<F: Scalar>(x: F) -> F {
    let (s, c) = sigmoid_and_complement(x);
    s * c
}

/// d/dx x·σ(βx) = s + βx·s(1 − s), grouped so that no partial product overflows.
#[inline]
fn silu_derivative<F: Scalar>(x: F, beta: F) -> F {
    let (s, c) = sigmoid_and_complement(beta * x);
    s + beta * ((x * s) * c)
}

/// 1 − tanh²(x) = 4u/(1 + u)² with u = e^(−2|x|): accurate where tanh rounds to ±1 (1 − t²
/// would then be all rounding error).
#[inline]
fn tanh_derivative<F: Scalar>(x: F) -> F {
    if F::REFERENCE {
        let t = x.tanh();
        return F::one() - t * t;
    }
    let u = (-(x.abs() + x.abs())).kernel_exp_fast();
    let v = F::one() + u;
    F::of(4.0) * u / (v * v)
}

/// ln(1 + eˣ) without overflow: max(x, 0) + ln(1 + e^(−|x|)).
#[inline]
pub fn softplus<F: Scalar>(x: F) -> F {
    let positive = if x > F::zero() { x } else { F::zero() };
    positive + x.abs().kernel_ln_1p_exp_neg()
}

/// ln(1 + e^(βx))/β as max(x, 0) + ln(1 + e^(−β|x|))/β: βx is never formed, so it cannot
/// overflow.
#[inline]
fn softplus_beta<F: Scalar>(x: F, beta: F) -> F {
    let positive = if x > F::zero() { x } else { F::zero() };
    positive + (beta * x.abs()).kernel_ln_1p_exp_neg() / beta
}

/// x·Φ(x) written as max(x, 0) − |x|·Φ(−|x|): one tail evaluation, no cancellation.
#[inline]
fn gelu<F: Scalar>(x: F) -> F {
    if F::REFERENCE {
        return x * normal_cdf(x);
    }
    let positive = if x > F::zero() { x } else { F::zero() };
    positive - x.abs().kernel_scaled_normal_tail()
}

/// Φ(x) + x·φ(x), the tail and the density sharing one exponential.
#[inline]
fn gelu_derivative<F: Scalar>(x: F) -> F {
    if F::REFERENCE {
        return normal_cdf(x) + x * normal_pdf(x);
    }
    let (tail, density) = x.abs().kernel_normal_tail();
    let cdf = if x > F::zero() { F::one() - tail } else { tail };
    cdf + x * density
}

/// Standard normal CDF Φ(x) = erfc(−x/√2)/2, accurate in both tails.
#[inline]
pub fn normal_cdf<F: Scalar>(x: F) -> F {
    F::of(0.5) * (-x * F::of(std::f64::consts::FRAC_1_SQRT_2)).kernel_erfc()
}

/// Standard normal density φ(x).
#[inline]
pub fn normal_pdf<F: Scalar>(x: F) -> F {
    let inv_sqrt_2pi =
        F::of(0.5 * std::f64::consts::FRAC_2_SQRT_PI * std::f64::consts::FRAC_1_SQRT_2);
    inv_sqrt_2pi * (F::of(-0.5) * x * x).kernel_exp()
}

#[inline]
fn gelu_tanh_inner<F: Scalar>(x: F) -> F {
    let c = F::of(std::f64::consts::FRAC_2_SQRT_PI * std::f64::consts::FRAC_1_SQRT_2);
    c * (x + F::of(GELU_TANH_CUBIC) * x * x * x)
}
