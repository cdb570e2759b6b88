//! Error types of the core crate.

use thiserror::Error;

/// A numerical failure: which quantity, and why. Filters add their label and the step.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum NumericError {
    /// A matrix that must be symmetric positive-definite is not (its Cholesky factorisation failed).
    #[error("{quantity} is not positive-definite (Cholesky factorisation failed)")]
    NotPositiveDefinite {
        /// Which matrix, e.g. "predicted covariance".
        quantity: &'static str,
    },
    /// A value that must be finite is NaN or infinite.
    #[error("{quantity} is not finite (NaN or infinity)")]
    NonFinite {
        /// Which value, e.g. "transition output".
        quantity: &'static str,
    },
}

/// A parameter could not be set: unknown name, or a value outside its domain.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ParamError {
    /// No parameter of that name.
    #[error("model '{model}' has no parameter '{name}'; its parameters are: {valid}")]
    Unknown {
        /// Model name.
        model: String,
        /// The name given.
        name: String,
        /// Comma-separated valid names.
        valid: String,
    },
    /// The value lies outside the parameter's domain.
    #[error("parameter '{name}' of model '{model}' must be {expected}, got {value}")]
    OutOfDomain {
        /// Model name.
        model: String,
        /// Parameter name.
        name: String,
        /// The value given.
        value: f64,
        /// The domain in words, e.g. "> 0".
        expected: String,
    },
}
