//! Error types, one per boundary: configuration (building a network) and shapes (calling it).

use thiserror::Error;

/// A network, layer, activation, initializer or loss was configured with values it cannot use.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ConfigError {
    /// A parameter is outside its valid range.
    #[error("{what}: {detail}")]
    Invalid {
        /// The thing being configured, e.g. "activation elu" or "layer 2 (dropout)".
        what: String,
        /// What is wrong and what is allowed.
        detail: String,
    },
    /// A name (activation, initializer, loss) is not known.
    #[error("unknown {kind} '{name}'; known: {known}")]
    UnknownName {
        /// What kind of name, e.g. "activation".
        kind: &'static str,
        /// The name given.
        name: String,
        /// The accepted names, comma separated.
        known: String,
    },
    /// Two adjacent layers disagree on width.
    #[error("layer {layer} ({kind}) takes {expected} inputs but the layer before it gives {got}")]
    WidthMismatch {
        /// Index of the layer being added (0 = first).
        layer: usize,
        /// The layer's kind.
        kind: String,
        /// Width the layer takes.
        expected: usize,
        /// Width the previous layer (or the network input) gives.
        got: usize,
    },
}

impl ConfigError {
    /// Shorthand for [`ConfigError::Invalid`].
    pub fn invalid(what: impl Into<String>, detail: impl Into<String>) -> Self {
        ConfigError::Invalid {
            what: what.into(),
            detail: detail.into(),
        }
    }
}

/// An array passed to the library has the wrong shape for what it is used with.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("{what}: expected shape {expected:?}, got {got:?}")]
pub struct ShapeError {
    /// Which array, e.g. "network input" or "loss target".
    pub what: String,
    /// The expected (rows, columns); `usize::MAX` stands for "any".
    pub expected: (usize, usize),
    /// The shape given.
    pub got: (usize, usize),
}

impl ShapeError {
    /// Builds a shape error.
    pub fn new(what: impl Into<String>, expected: (usize, usize), got: (usize, usize)) -> Self {
        ShapeError {
            what: what.into(),
            expected,
            got,
        }
    }
}
