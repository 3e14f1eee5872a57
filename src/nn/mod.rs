//! The network: activations, initializers, layers, the network itself, losses and the
//! finite-difference gradient checker.

pub mod activation;
pub(crate) mod buffer;
pub mod error;
pub mod gradcheck;
pub mod init;
pub mod layer;
pub mod loss;
pub mod network;
