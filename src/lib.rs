//! # relume
//!
//! Train small rectifier-family neural regressors on tabular data, on the CPU, in pure Rust.
//!
//! The modules follow the stages a table goes through:
//! - [`kernels`]: the number type ([`Scalar`]: `f32` for training, `f64` for checks), the matrix
//!   product and the SIMD and thread dispatch.
//! - [`nn`]: [`Activation`] (ReLU and its relatives, tanh and sigmoid), [`Init`] (He, Glorot,
//!   LeCun, ...), layers ([`Layer`]), [`Network`] and [`NetworkPlan`], [`Loss`], and
//!   [`check_gradients`] (finite differences).
//! - [`data`]: CSV into a [`Table`], column typing, dates, the [`Encoder`] and splits.
//! - [`fit`]: optimizers, penalties, schedules, the training loop ([`train`]), diagnostics
//!   ([`Monitor`]), scaling, the [`Recipe`] and seed ensembles.
//! - [`serve`]: the versioned [`Model`] file and the [`Predictor`] (ensembles, intervals,
//!   extrapolation flags, attributions).
//! - [`explain`](mod@explain): permutation importance, partial dependence and per-row attributions.
//! - [`sweep`]: paired activation comparisons, the cost of an activation, statistics, shards.
//! - [`report`]: run reports and SVG charts.
//!
//! ```
//! use relume::{Activation, Loss, NetworkPlan, Pass};
//! use ndarray::array;
//!
//! let mut net = NetworkPlan::new(2, &[8, 8], Activation::Relu).build::<f32>(7).unwrap();
//! let x = array![[0.5_f32, -1.0], [1.5, 0.25]];
//! let y = array![[1.0_f32], [0.0]];
//! let out = net.forward(x.view(), Pass::Train).unwrap().to_owned();
//! let mse = Loss::Mse.value(out.view(), y.view()).unwrap();
//! assert!(mse.is_finite());
//! ```

// The stages a table goes through, bottom up: every module imports only from the stages
// above it in this list.
pub mod data;
pub mod explain;
pub mod fit;
pub mod kernels;
pub mod nn;
pub mod report;
pub mod serve;
pub mod sweep;

pub use data::{Encoder, EncoderSpec, Table};
pub use explain::{explain, Dependence, ExplainOptions, Explanation, Importance};
pub use fit::monitor::{Monitor, MonitorConfig, Revival};
pub use fit::objective::Objective;
pub use fit::optim::{Adam, Optimizer, OptimizerChoice};
pub use fit::penalty::Penalty;
pub use fit::recipe::{Overrides, Recipe, Trained};
pub use fit::scale::Standardizer;
pub use fit::schedule::Schedule;
pub use fit::train::{train, TrainConfig, TrainError, TrainSummary};
pub use kernels::scalar::Scalar;
pub use nn::activation::Activation;
pub use nn::error::{ConfigError, ShapeError};
pub use nn::gradcheck::{check_gradients, CheckOptions, GradReport};
pub use nn::init::{Draw, Fan, Init};
pub use nn::layer::{Layer, LayerSpec, Pass};
pub use nn::loss::Loss;
pub use nn::network::{Network, NetworkPlan};
pub use report::RunReport;
pub use serve::model::Model;
pub use serve::predict::{Predictor, RowAttribution};

/// The README's code, compiled and run as a doctest so it stays true.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctest;
