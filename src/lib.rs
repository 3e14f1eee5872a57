//! # relume
//!
//! Train small rectifier-family neural regressors on tabular data, on the CPU, in pure Rust.
//!
//! The pieces, bottom up:
//! - [`Scalar`]: `f32` for training, `f64` for gradient checks.
//! - [`Activation`]: ReLU and its relatives (leaky, PReLU, randomized leaky, ELU, SELU, CELU,
//!   GELU, SiLU, Mish, softplus, capped) and the tanh / sigmoid baselines.
//! - [`Init`]: He, Glorot, LeCun, orthogonal and constant initializers, always seeded.
//! - [`layer`]: the [`Layer`] trait with affine, pointwise activation, PReLU and dropout layers.
//! - [`Network`] and [`NetworkPlan`]: a stack of layers with flat parameter and gradient views.
//! - [`Loss`]: MSE, MAE, Huber and quantile.
//! - [`gradcheck`]: finite-difference verification of every gradient.
//! - [`optim`]: optimizers over the flat parameter vector.
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

pub mod activation;
pub mod atomic;
mod buffer;
pub mod compare;
pub mod data;
pub mod ensemble;
pub mod error;
pub mod gradcheck;
pub mod init;
pub mod interval;
pub mod kernels;
pub mod layer;
pub mod loss;
pub mod metrics;
pub mod model;
pub mod monitor;
pub mod network;
pub mod objective;
pub mod optim;
pub mod penalty;
pub mod predict;
pub mod recipe;
pub mod report;
pub mod scalar;
pub mod scale;
pub mod schedule;
pub mod shard;
pub mod stats;
pub mod train;

pub use activation::Activation;
pub use data::{Encoder, EncoderSpec, Table};
pub use error::{ConfigError, ShapeError};
pub use gradcheck::{check_gradients, CheckOptions, GradReport};
pub use init::{Draw, Fan, Init};
pub use layer::{Layer, LayerSpec, Pass};
pub use loss::Loss;
pub use model::Model;
pub use monitor::{Monitor, MonitorConfig, Revival};
pub use network::{Network, NetworkPlan};
pub use objective::Objective;
pub use optim::{Adam, Optimizer, OptimizerChoice};
pub use penalty::Penalty;
pub use predict::Predictor;
pub use recipe::{Overrides, Recipe, Trained};
pub use report::RunReport;
pub use scalar::Scalar;
pub use scale::Standardizer;
pub use schedule::Schedule;
pub use train::{train, TrainConfig, TrainError, TrainSummary};

/// The README's code, compiled and run as a doctest so it stays true.
#[cfg(doctest)]
#[doc = include_str!("../README.md")]
pub struct ReadmeDoctest;
