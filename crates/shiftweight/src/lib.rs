//! # shiftweight
//!
//! Tools for a model trained on one population (the *source*, labelled rows) and used on another
//! (the *target*, an unlabelled sample of the inputs it will really see).
//!
//! A short tour:
//! - [`table`]: typed tables (numeric and categorical columns, missing values), their inference
//!   rules and the one encoding into the matrix the estimators use, stored in the model file.
//! - [`data`]: validated row-major matrices ([`MatrixView`]) and the pooled [`data::Standardizer`].
//! - [`ratio`]: importance weights w(x) = p_target(x) / p_source(x). Every estimator implements
//!   [`RatioEstimator`] and fits into a [`FittedRatio`], which scores any number of rows in bounded
//!   memory and saves to a versioned JSON file ([`model`]).
//! - [`detect`]: is there a shift, and where? Classifier and MMD two-sample tests with valid
//!   p-values, and per-feature tests, effect sizes and importances.
//! - [`weights`]: stabilising weights (flattening, PSIS smoothing, clipping, truncation, mean 1);
//!   [`diagnostics`]: Kish ESS, Pareto k and its verdict, concentration, the clipping trade-off,
//!   support overlap.
//! - [`learn`]: importance-weighted logistic and ridge regression.
//! - [`label`]: label shift (the class mix changes, p(x | y) does not): target class proportions
//!   from a classifier's probabilities (BBSE, and EM on calibrated probabilities), class weights,
//!   prior-adjusted probabilities, and a test of the predicted-class mix.
//! - [`metrics`]: weighted losses, IWCV aggregation, the weighted-versus-unweighted comparison and
//!   weighted metrics with confidence intervals.
//! - [`conformal`]: weighted split conformal prediction intervals and sets valid on the target.
//! - [`demo`]: the invented electricity-consumption scenario used by the CLI and notebooks.
//!
//! ```
//! use shiftweight::{LeastSquaresRatio, MatrixView, RatioEstimator};
//! // Source rows around 0, target rows around 1 (one feature).
//! let source: Vec<f64> = (0..200).map(|i| (i as f64 / 200.0) * 2.0 - 1.0).collect();
//! let target: Vec<f64> = (0..200).map(|i| (i as f64 / 200.0) * 2.0).collect();
//! let model = LeastSquaresRatio::new()
//!     .n_basis(50)
//!     .fit(MatrixView::new(&source, 200, 1)?, MatrixView::new(&target, 200, 1)?)?;
//! let w = model.ratio(MatrixView::new(&[-0.9, 0.9], 2, 1)?)?;
//! assert!(w[1] > w[0]); // rows near the target get more weight
//! let again = shiftweight::FittedRatio::from_json(&model.to_json()?)?;
//! assert_eq!(again.ratio(MatrixView::new(&[0.5], 1, 1)?)?, model.ratio(MatrixView::new(&[0.5], 1, 1)?)?);
//! # Ok::<(), shiftweight::Error>(())
//! ```
//!
//! Cautions: weighting corrects covariate shift only (p(x) changes, p(y|x) does not); it cannot
//! correct label or concept shift, and it fails where the source does not cover the target.
//! Validate on labelled target data before relying on it, and defer to the regulations and review
//! processes of the domain when the weights feed decisions about people.

// `!(x > 0.0)` is used deliberately throughout: unlike `x <= 0.0` it is also true for NaN.
#![warn(missing_docs)]
#![allow(clippy::neg_cmp_op_on_partial_ord)]
#![allow(clippy::type_complexity)]

pub mod conformal;
pub mod data;
pub mod demo;
pub mod detect;
pub mod diagnostics;
pub mod error;
pub(crate) mod kernel;
pub mod label;
pub mod learn;
pub mod metrics;
pub mod model;
#[cfg(feature = "ndarray")]
pub mod ndarray_views;
pub(crate) mod order;
pub(crate) mod par;
pub(crate) mod random;
pub mod ratio;
pub(crate) mod simd;
pub mod table;
pub mod weights;

pub use par::CHUNK_ROWS;

pub use data::{Matrix, MatrixView, Standardizer};
pub use detect::{
    ClassifierShiftTest, FeatureShift, FeatureShiftTable, MmdShiftTest, ShiftTestResult,
};
pub use diagnostics::{
    diagnose, effective_sample_size, mean_check, pareto_k, Diagnosis, MeanCheck, Verdict,
};
pub use error::{Error, Result};
pub use ratio::{
    ratio_from_probabilities, AutoRatio, ClassifierRatio, EstimatorKind, FittedRatio, KLRatio,
    KernelMeanMatching, KliepCv, LeastSquaresRatio, RatioEstimator,
};
pub use table::{Column, ColumnKind, Table, TableEncoding};
pub use weights::{stabilize, StabilizeOptions, Stabilized};

/// The kernel routines below the estimators, exported for the crate's own benchmarks
/// (`benches/kernels.rs`); not part of the supported interface and free to change.
#[doc(hidden)]
pub mod bench_internals {
    pub use crate::kernel::{gaussian_from, gram_of_rows, kernel_block_into, row_sq_norms};
}

/// Sets the number of threads of the global pool used by the crate (call once, before any work).
/// Returns an error if the pool was already built.
pub fn set_threads(n: usize) -> Result<()> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build_global()
        .map_err(|e| {
            Error::param(
                "threads",
                format!("the thread pool is already running: {e}"),
            )
        })
}

/// The Rust code blocks of the repository's README, compiled and run as doctests so that the
/// examples users copy keep working (`tests/test_docs.py` checks that every page with a Rust
/// block is listed here; its Python blocks run there).
#[cfg(doctest)]
mod docs_examples {
    #[doc = include_str!("../../../README.md")]
    mod readme {}
}
