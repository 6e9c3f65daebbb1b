//! Shift detection: is the target sample drawn from the same distribution as the source sample,
//! and if not, in which features does it differ?
//!
//! - [`ClassifierShiftTest`]: the classifier two-sample test (Lopez-Paz & Oquab 2017). A
//!   source-vs-target logistic classifier on the standardised features scores every row out of
//!   fold; the statistic is the AUC of those scores, i.e. the Mann-Whitney (1947) U statistic over
//!   n_source * n_target. Its p-value comes from a permutation test with refits (small and medium
//!   samples) or from a held-out split with the normal distribution of U (large samples).
//! - [`MmdShiftTest`]: the kernel two-sample test of Gretton et al. (2012) with the unbiased MMD^2
//!   statistic and a permutation p-value (small and medium samples), or the block estimator with a
//!   p-value from relabelling the rows within every block (large samples).
//! - [`FeatureShift`]: one two-sample test per feature (Kolmogorov-Smirnov or chi-square), effect
//!   sizes in standard units, Benjamini-Hochberg (1995) adjusted p-values, and the drop in the
//!   classifier's AUC when the feature is permuted.
//!
//! What the p-values mean: under the null hypothesis that source and target rows are independent
//! draws from one distribution, P(p <= alpha) <= alpha for every alpha (exactly for the
//! permutation p-values with the +1 correction, including the block MMD test, and asymptotically
//! for the held-out normal approximation of the classifier test). A small
//! p-value says the samples differ by more than sampling noise; it does not say the difference
//! matters. Read the effect sizes (AUC, MMD^2, standardised differences) for that.
//!
//! Every random step (folds, permutations, subsamples) is seeded.

mod classifier;
mod features;
mod kolmogorov;
mod mmd;
mod stats;
mod typed;

pub use classifier::ClassifierShiftTest;
pub use features::{FeatureKind, FeatureShift, FeatureShiftRow, FeatureShiftTable};
pub use kolmogorov::kolmogorov_sf;
pub use mmd::MmdShiftTest;
pub use stats::{
    auc_summary, benjamini_hochberg, chi_square_two_rows, ks_two_sample, ks_two_sample_with,
    mann_whitney_greater, standardized_mean_difference, wasserstein1, AucSummary, ChiSquareResult,
    KsMode, KsResult,
};
pub use typed::{two_proportion_test, TwoProportions};

use crate::error::Result;
use crate::model;
use serde::{Deserialize, Serialize};

/// Format tag of serialised [`ShiftTestResult`] documents.
pub const SHIFT_TEST_FORMAT: &str = "shiftweight.shift-test";
/// Format tag of serialised [`FeatureShiftTable`] documents.
pub const FEATURE_SHIFT_FORMAT: &str = "shiftweight.feature-shift";

/// How the p-value of a shift test was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PValueMethod {
    /// Permutation test: labels permuted, the whole statistic recomputed (classifier refitted),
    /// p = (1 + #{permuted >= observed}) / (1 + permutations). Exact level under the null.
    Permutation,
    /// Held-out split: classifier fitted on one half, U statistic of the other half referred to its
    /// normal approximation with tie and continuity corrections. Valid conditionally on the fit.
    HeldOutNormal,
    /// Block MMD^2 estimates averaged over disjoint blocks; the rows of every block are relabelled
    /// at random (independently across blocks) and the mean recomputed, p = (1 + #{permuted >=
    /// observed}) / (1 + permutations). Exact level under the null, like [`Self::Permutation`].
    BlockPermutation,
}

impl PValueMethod {
    /// Short name used in reports.
    pub fn name(&self) -> &'static str {
        match self {
            PValueMethod::Permutation => "permutation",
            PValueMethod::HeldOutNormal => "held_out_normal",
            PValueMethod::BlockPermutation => "block_permutation",
        }
    }
}

/// Method-specific facts of a shift test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ShiftDetails {
    /// Classifier two-sample test.
    Classifier {
        /// AUC of the target-vs-source scores (0.5: no separation; 1: perfect).
        auc: f64,
        /// DeLong standard error of the AUC.
        auc_std_error: f64,
        /// Lower end of the 95% confidence interval of the AUC.
        auc_ci_low: f64,
        /// Upper end of the 95% confidence interval of the AUC.
        auc_ci_high: f64,
        /// Description of the classifier.
        classifier: String,
        /// Penalty of the logistic regression.
        l2: f64,
        /// Folds of the cross-fitting (0 for the held-out split).
        folds: usize,
        /// Rows whose scores enter the AUC.
        n_scored: usize,
    },
    /// Kernel two-sample test.
    Mmd {
        /// The MMD^2 estimate (unbiased; for blocks, the mean of the block estimates).
        mmd2: f64,
        /// Gaussian kernel width in standardised units.
        sigma: f64,
        /// Whether sigma was chosen by the median heuristic.
        sigma_from_median: bool,
        /// `quadratic` (all pairs) or `block`.
        estimator: String,
        /// Number of blocks (0 for the quadratic estimator).
        blocks: usize,
        /// Rows per block (0 for the quadratic estimator).
        block_size: usize,
    },
}

/// The outcome of a two-sample shift test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShiftTestResult {
    /// `classifier` or `mmd`.
    pub method: String,
    /// The test statistic: the AUC (classifier) or MMD^2 (mmd).
    pub statistic: f64,
    /// The p-value (see [`PValueMethod`] for how it was obtained).
    pub p_value: f64,
    /// How the p-value was obtained.
    pub p_value_method: PValueMethod,
    /// Permutations used (0 when the p-value is not a permutation p-value).
    pub permutations: usize,
    /// Source rows.
    pub n_source: usize,
    /// Target rows.
    pub n_target: usize,
    /// Features.
    pub n_features: usize,
    /// Seed of every random step.
    pub seed: u64,
    /// Method-specific facts.
    pub details: ShiftDetails,
    /// Notes about the run (e.g. why an approximation was used).
    pub notes: Vec<String>,
}

impl ShiftTestResult {
    /// JSON document `{"format": "shiftweight.shift-test", "version": 1, "model": {...}}`.
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(SHIFT_TEST_FORMAT, self)
    }
    /// Reads a document written by [`ShiftTestResult::to_json`].
    pub fn from_json(text: &str) -> Result<Self> {
        model::from_json_tagged(SHIFT_TEST_FORMAT, text)
    }
}

/// Pools source and target into one standardised matrix (source rows first) with the labels
/// 0 (source) / 1 (target). Shared by the classifier test and the permutation importance.
pub(crate) fn pooled_standardized(
    source: crate::MatrixView,
    target: crate::MatrixView,
) -> (crate::Matrix, Vec<f64>) {
    let st = crate::Standardizer::fit(&[source, target]);
    let d = source.cols();
    let n = source.rows() + target.rows();
    let mut data = vec![0.0; n * d];
    for i in 0..source.rows() {
        st.transform_row(source.row(i), &mut data[i * d..(i + 1) * d]);
    }
    for i in 0..target.rows() {
        let r = source.rows() + i;
        st.transform_row(target.row(i), &mut data[r * d..(r + 1) * d]);
    }
    let mut y = vec![0.0; source.rows()];
    y.resize(n, 1.0);
    (crate::Matrix::new(data, n, d).expect("n * d buffer"), y)
}
