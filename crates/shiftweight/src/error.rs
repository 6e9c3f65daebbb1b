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
        /// Name of the argument at fault.
        argument: String,
        /// What was expected.
        expected: usize,
        /// What was found.
        found: usize,
    },
    /// A value is NaN or infinite.
    #[error("`{argument}` has a non-finite value ({value}) at row {row}, column {column}; remove or impute it first")]
    NonFinite {
        /// Name of the argument at fault.
        argument: String,
        /// Row of the value (0-based).
        row: usize,
        /// Column of the value (0-based).
        column: usize,
        /// The offending value.
        value: f64,
    },
    /// Too few rows to do the job.
    #[error("`{argument}` has {found} row(s) but at least {required} are needed")]
    TooFewRows {
        /// Name of the argument at fault.
        argument: String,
        /// What was found.
        found: usize,
        /// The least number needed.
        required: usize,
    },
    /// No feature columns at all.
    #[error("`{argument}` has no feature columns")]
    NoFeatures {
        /// Name of the argument at fault.
        argument: String,
    },
    /// The flat buffer does not have rows * cols elements.
    #[error("`{argument}`: buffer of length {len} cannot hold {rows} rows x {cols} columns")]
    ShapeMismatch {
        /// Name of the argument at fault.
        argument: String,
        /// Length of the buffer.
        len: usize,
        /// Rows claimed.
        rows: usize,
        /// Columns claimed.
        cols: usize,
    },
    /// A vector argument has the wrong length.
    #[error("`{argument}` has length {found} but {expected} was expected")]
    LengthMismatch {
        /// Name of the argument at fault.
        argument: String,
        /// What was expected.
        expected: usize,
        /// What was found.
        found: usize,
    },
    /// A hyperparameter or option is out of its valid range.
    #[error("invalid value for `{name}`: {reason}")]
    InvalidParameter {
        /// Name of the parameter.
        name: String,
        /// Why the value is refused.
        reason: String,
    },
    /// Weights that are negative, NaN, or all zero.
    #[error("invalid weights in `{argument}`: {reason}")]
    InvalidWeights {
        /// Name of the argument at fault.
        argument: String,
        /// Why the weights are refused.
        reason: String,
    },
    /// The operation is not defined for this estimator (e.g. KMM on new rows).
    #[error("{0}")]
    Unsupported(String),
    /// A numerical routine failed (singular system, no convergence).
    #[error("numerical failure in {context}: {reason}")]
    Numerical {
        /// The routine that failed.
        context: String,
        /// How it failed.
        reason: String,
    },
    /// A table has no column of the given name.
    #[error("`{argument}` has no column named `{column}`")]
    MissingColumn {
        /// Name of the table argument.
        argument: String,
        /// The column that is missing.
        column: String,
    },
    /// A table column cannot be used as it is (wrong type, bad value, repeated name, ...).
    #[error("column `{column}` {reason}")]
    BadColumn {
        /// The column at fault.
        column: String,
        /// Why it cannot be used.
        reason: String,
    },
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
