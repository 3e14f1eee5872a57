//! Weight and bias initializers.
//!
//! Variances follow the papers: He et al. 2015 (2/((1+a²)·fan)), Glorot & Bengio 2010
//! (2/(fan_in+fan_out)), LeCun et al. 1998 (1/fan_in). A uniform draw with variance v spans
//! ±√(3v). Orthogonal matrices follow Saxe et al. 2014 (QR of a Gaussian matrix, signs fixed so
//! the distribution is uniform over orthogonal matrices). Every draw uses a caller-seeded RNG.

use crate::kernels::scalar::Scalar;
use crate::nn::error::ConfigError;
use rand::{Rng as _, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use serde::{Deserialize, Serialize};
use std::str::FromStr;

/// The random number generator used everywhere: seeded, portable and reproducible.
pub type Rng = rand_chacha::ChaCha8Rng;

/// Makes the crate's RNG from a seed.
pub fn rng_from_seed(seed: u64) -> Rng {
    Rng::seed_from_u64(seed)
}

/// Shape of the distribution a variance-scaled initializer draws from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Draw {
    /// Zero-mean normal.
    Normal,
    /// Zero-mean uniform.
    Uniform,
}

/// Which fan He initialization scales by.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Fan {
    /// Number of inputs of a unit: preserves forward variance.
    In,
    /// Number of outputs of a unit: preserves backward variance.
    Out,
}

/// How to fill a weight matrix (fan_in rows × fan_out columns) or a bias vector.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Init {
    /// He et al. 2015: variance 2/((1+a²)·fan), a the negative slope of the rectifier after it.
    He {
        /// Normal or uniform.
        draw: Draw,
        /// Fan-in or fan-out.
        fan: Fan,
        /// Negative-side slope a of the following leaky rectifier (0 for ReLU).
        slope: f64,
    },
    /// Glorot & Bengio 2010: variance 2/(fan_in + fan_out).
    Glorot {
        /// Normal or uniform.
        draw: Draw,
    },
    /// LeCun et al. 1998: variance 1/fan_in.
    Lecun {
        /// Normal or uniform.
        draw: Draw,
    },
    /// A random matrix with orthonormal columns (or rows, if wider than tall), times `gain`.
    Orthogonal {
        /// Multiplier applied to the orthogonal matrix.
        gain: f64,
    },
    /// Every entry equal to `value` (zero for biases).
    Constant {
        /// The value.
        value: f64,
    },
}

/// Initializer names accepted by [`Init::from_str`].
pub const INIT_NAMES: &[&str] = &[
    "he",
    "he-uniform",
    "he-fan-out",
    "he-uniform-fan-out",
    "glorot",
    "glorot-normal",
    "lecun",
    "lecun-uniform",
    "orthogonal",
    "zero",
];

impl Init {
    /// He normal, fan-in, for ReLU.
    pub const HE: Init = Init::He {
        draw: Draw::Normal,
        fan: Fan::In,
        slope: 0.0,
    };
    /// Glorot uniform.
    pub const GLOROT: Init = Init::Glorot {
        draw: Draw::Uniform,
    };
    /// LeCun normal.
    pub const LECUN: Init = Init::Lecun { draw: Draw::Normal };
    /// All zeros.
    pub const ZERO: Init = Init::Constant { value: 0.0 };

    /// The variance of each entry for a fan_in × fan_out matrix, if the scheme is
    /// variance-scaled (None for orthogonal and constant).
    pub fn variance(&self, fan_in: usize, fan_out: usize) -> Option<f64> {
        let (fi, fo) = (fan_in.max(1) as f64, fan_out.max(1) as f64);
        match *self {
            Init::He { fan, slope, .. } => {
                let n = if fan == Fan::In { fi } else { fo };
                Some(2.0 / ((1.0 + slope * slope) * n))
            }
            Init::Glorot { .. } => Some(2.0 / (fi + fo)),
            Init::Lecun { .. } => Some(1.0 / fi),
            Init::Orthogonal { .. } | Init::Constant { .. } => None,
        }
    }

    /// Checks that the parameters are finite.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let ok = match *self {
            Init::He { slope, .. } => slope.is_finite(),
            Init::Orthogonal { gain } => gain.is_finite(),
            Init::Constant { value } => value.is_finite(),
            _ => true,
        };
        if ok {
            Ok(())
        } else {
            Err(ConfigError::invalid(
                "initializer",
                format!("{self:?} has a non-finite parameter"),
            ))
        }
    }

    /// Fills `out` (a fan_in × fan_out matrix in row-major order, or a bias of length fan_out
    /// with fan_in = 1) with a fresh draw from `rng`.
    pub fn fill<F: Scalar>(&self, out: &mut [F], fan_in: usize, fan_out: usize, rng: &mut Rng) {
        debug_assert_eq!(out.len(), fan_in * fan_out);
        match *self {
            Init::Constant { value } => out.fill(F::of(value)),
            Init::Orthogonal { gain } => {
                let q = orthogonal(fan_in, fan_out, rng);
                for (o, v) in out.iter_mut().zip(q) {
                    *o = F::of(gain * v);
                }
            }
            Init::He { draw, .. } | Init::Glorot { draw } | Init::Lecun { draw } => {
                let variance = self.variance(fan_in, fan_out).unwrap_or(0.0);
                let sd = variance.sqrt();
                match draw {
                    Draw::Normal => {
                        for o in out.iter_mut() {
                            let z: f64 = StandardNormal.sample(rng);
                            *o = F::of(sd * z);
                        }
                    }
                    Draw::Uniform => {
                        let limit = (3.0 * variance).sqrt();
                        for o in out.iter_mut() {
                            *o = F::of(rng.random_range(-limit..=limit));
                        }
                    }
                }
            }
        }
    }
}

impl FromStr for Init {
    type Err = ConfigError;

    /// Parses an initializer name, e.g. `he`, `glorot`, `lecun-uniform`, `orthogonal`.
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let he = |draw, fan| Init::He {
            draw,
            fan,
            slope: 0.0,
        };
        Ok(match text.trim().to_ascii_lowercase().as_str() {
            "he" | "he-normal" => he(Draw::Normal, Fan::In),
            "he-uniform" => he(Draw::Uniform, Fan::In),
            "he-fan-out" => he(Draw::Normal, Fan::Out),
            "he-uniform-fan-out" => he(Draw::Uniform, Fan::Out),
            "glorot" | "glorot-uniform" => Init::Glorot {
                draw: Draw::Uniform,
            },
            "glorot-normal" => Init::Glorot { draw: Draw::Normal },
            "lecun" | "lecun-normal" => Init::Lecun { draw: Draw::Normal },
            "lecun-uniform" => Init::Lecun {
                draw: Draw::Uniform,
            },
            "orthogonal" => Init::Orthogonal { gain: 1.0 },
            "zero" => Init::ZERO,
            _ => {
                return Err(ConfigError::UnknownName {
                    kind: "initializer",
                    name: text.to_string(),
                    known: INIT_NAMES.join(", "),
                })
            }
        })
    }
}

/// Adapts an initializer to the rectifier slope that follows it: He's gain uses the
/// activation's negative slope. Other schemes are returned unchanged.
pub fn with_slope(init: Init, slope: f64) -> Init {
    match init {
        Init::He { draw, fan, .. } => Init::He { draw, fan, slope },
        other => other,
    }
}

/// A rows × cols matrix (row-major) with orthonormal columns if rows ≥ cols, else orthonormal
/// rows: Householder QR of a standard Gaussian matrix, with the signs of R's diagonal moved into
/// Q (Mezzadri 2007), as Saxe et al. 2014 prescribe.
fn orthogonal(rows: usize, cols: usize, rng: &mut Rng) -> Vec<f64> {
    let (tall, short) = (rows.max(cols), rows.min(cols));
    // a: tall × short, column-major for convenient column operations.
    let mut a: Vec<f64> = (0..tall * short)
        .map(|_| StandardNormal.sample(rng))
        .collect();
    let q = householder_q(&mut a, tall, short);
    let mut out = vec![0.0; rows * cols];
    for i in 0..tall {
        for j in 0..short {
            let v = q[j * tall + i];
            if rows >= cols {
                out[i * cols + j] = v;
            } else {
                out[j * cols + i] = v;
            }
        }
    }
    out
}

/// Thin Q (column-major m × n) of the QR factorization of the column-major m × n matrix `a`
/// (m ≥ n), with the column signs chosen so that R has a positive diagonal.
fn householder_q(a: &mut [f64], m: usize, n: usize) -> Vec<f64> {
    let mut reflectors: Vec<Vec<f64>> = Vec::with_capacity(n);
    let mut diag_sign = vec![1.0; n];
    for k in 0..n {
        let col = &a[k * m..(k + 1) * m];
        let norm = col[k..].iter().map(|v| v * v).sum::<f64>().sqrt();
        let alpha = if col[k] > 0.0 { -norm } else { norm };
        let mut v: Vec<f64> = col[k..].to_vec();
        v[0] -= alpha;
        let vnorm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
        if vnorm > 0.0 {
            v.iter_mut().for_each(|x| *x /= vnorm);
        }
        // Apply H = I − 2vvᵀ to the remaining columns.
        for j in k..n {
            let c = &mut a[j * m + k..(j + 1) * m];
            let dot: f64 = v.iter().zip(c.iter()).map(|(x, y)| x * y).sum();
            c.iter_mut().zip(&v).for_each(|(y, x)| *y -= 2.0 * dot * x);
        }
        diag_sign[k] = if a[k * m + k] < 0.0 { -1.0 } else { 1.0 };
        reflectors.push(v);
    }
    // Q = H_0 H_1 … H_{n−1} applied to the first n columns of the identity.
    let mut q = vec![0.0; m * n];
    for j in 0..n {
        q[j * m + j] = 1.0;
    }
    for k in (0..n).rev() {
        let v = &reflectors[k];
        for j in 0..n {
            let c = &mut q[j * m + k..(j + 1) * m];
            let dot: f64 = v.iter().zip(c.iter()).map(|(x, y)| x * y).sum();
            c.iter_mut().zip(v).for_each(|(y, x)| *y -= 2.0 * dot * x);
        }
    }
    for (j, s) in diag_sign.iter().enumerate() {
        q[j * m..(j + 1) * m].iter_mut().for_each(|x| *x *= s);
    }
    q
}

/// The name the command accepts (`he`, `he-uniform`, `glorot`, ...), with the leaky gain's
/// slope or the constant when they are not the defaults.
impl std::fmt::Display for Init {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match *self {
            Init::He { draw, fan, slope } => {
                let name = match (draw, fan) {
                    (Draw::Normal, Fan::In) => "he",
                    (Draw::Uniform, Fan::In) => "he-uniform",
                    (Draw::Normal, Fan::Out) => "he-fan-out",
                    (Draw::Uniform, Fan::Out) => "he-uniform-fan-out",
                };
                if slope == 0.0 {
                    write!(f, "{name}")
                } else {
                    write!(f, "{name} (leaky gain, slope {slope})")
                }
            }
            Init::Glorot {
                draw: Draw::Uniform,
            } => write!(f, "glorot"),
            Init::Glorot { draw: Draw::Normal } => write!(f, "glorot-normal"),
            Init::Lecun { draw: Draw::Normal } => write!(f, "lecun"),
            Init::Lecun {
                draw: Draw::Uniform,
            } => write!(f, "lecun-uniform"),
            Init::Orthogonal { gain: 1.0 } => write!(f, "orthogonal"),
            Init::Orthogonal { gain } => write!(f, "orthogonal (gain {gain})"),
            Init::Constant { value: 0.0 } => write!(f, "zero"),
            Init::Constant { value } => write!(f, "constant {value}"),
        }
    }
}
