//! The one error type of the crate. Every variant carries the facts a user needs to fix the input:
//! which argument, which row or column, what was expected.

use thiserror::Error;

/// Errors returned by every fallible function of the crate.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum Error {
    /// A matrix argument has the wrong number of columns.
    #[error("`{argument}` has {found} feature column(s) but {expected} were expected (the number of columns of the data the model was fitted on)")]
    FeatureCountMismatch {
        argument: String,
        expected: usize,
        found: usize,
    },
    /// A value is NaN or infinite.
    #[error("`{argument}` has a non-finite value ({value}) at row {row}, column {column}; remove or impute it first")]
    NonFinite {
        argument: String,
        row: usize,
        column: usize,
        value: f64,
    },
    /// Too few rows to do the job.
    #[error("`{argument}` has {found} row(s) but at least {required} are needed")]
    TooFewRows {
        argument: String,
        found: usize,
        required: usize,
    },
    /// No feature columns at all.
    #[error("`{argument}` has no feature columns")]
    NoFeatures { argument: String },
    /// The flat buffer does not have rows * cols elements.
    #[error("`{argument}`: buffer of length {len} cannot hold {rows} rows x {cols} columns")]
    ShapeMismatch {
        argument: String,
        len: usize,
        rows: usize,
        cols: usize,
    },
    /// A vector argument has the wrong length.
    #[error("`{argument}` has length {found} but {expected} was expected")]
    LengthMismatch {
        argument: String,
        expected: usize,
        found: usize,
    },
    /// A hyperparameter or option is out of its valid range.
    #[error("invalid value for `{name}`: {reason}")]
    InvalidParameter { name: String, reason: String },
    /// Weights that are negative, NaN, or all zero.
    #[error("invalid weights in `{argument}`: {reason}")]
    InvalidWeights { argument: String, reason: String },
    /// The operation is not defined for this estimator (e.g. KMM on new rows).
    #[error("{0}")]
    Unsupported(String),
    /// A numerical routine failed (singular system, no convergence).
    #[error("numerical failure in {context}: {reason}")]
    Numerical { context: String, reason: String },
    /// A table has no column of the given name.
    #[error("`{argument}` has no column named `{column}`")]
    MissingColumn { argument: String, column: String },
    /// A table column cannot be used as it is (wrong type, bad value, repeated name, ...).
    #[error("column `{column}` {reason}")]
    BadColumn { column: String, reason: String },
    /// A model document is malformed, of another format, or of an unsupported version.
    #[error("model file rejected: {0}")]
    ModelFile(String),
}

/// Result alias used throughout the crate.
pub type Result<T, E = Error> = std::result::Result<T, E>;

impl Error {
    /// Shorthand for [`Error::InvalidParameter`].
    pub fn param(name: &str, reason: impl Into<String>) -> Self {
        Error::InvalidParameter {
            name: name.to_string(),
            reason: reason.into(),
        }
    }

    /// True when the cause is the caller's input (maps to Python's ValueError).
    pub fn is_input_error(&self) -> bool {
        !matches!(self, Error::Numerical { .. })
    }
}
