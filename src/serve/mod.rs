//! Shipping a model: the versioned model file, the frozen predictor, prediction intervals,
//! metrics and atomic saves.

pub mod atomic;
pub mod interval;
pub mod metrics;
pub mod model;
pub(crate) mod path;
pub mod predict;
pub mod request;
