//! Label shift: the class mix changes between source and target while the look of each class,
//! p(x | y), stays the same. Everything here works on a classifier's class probabilities, so any
//! classifier can be used: the caller passes out-of-fold probabilities on labelled source rows
//! (with their labels) and probabilities on unlabelled target rows.
//!
//! - [`LabelShift`] estimates the target class proportions q(y) and fits into a
//!   [`LabelShiftEstimate`], which holds the class weights w(y) = q(y) / p(y) (usable as sample
//!   weights on the source rows) and adjusts probabilities to the target:
//!   p_t(y | x) proportional to w(y) p_s(y | x).
//!   - Confusion-matrix method, BBSE (Lipton, Wang & Smola 2018, "Detecting and correcting for
//!     label shift with black box predictors", ICML): with A[i, j] = P_s(predicted i | class j)
//!     and mu\[i\] = P_t(predicted i), mu = A q, so q = A^{-1} mu. Its interval is the delta method
//!     over both samples (see [`bbse`]).
//!   - Maximum likelihood by EM (Saerens, Latinne & Decaestecker 2002, Neural Computation 14,
//!     21-41) on probabilities calibrated by bias-corrected temperature scaling fitted on the
//!     source's held-out probabilities (Alexandari, Kundaje & Shrikumar 2020, "Maximum likelihood
//!     with bias-corrected calibration is hard-to-beat at label shift adaptation", ICML). The
//!     default. Its interval is a seeded percentile bootstrap over source and target rows (see
//!     [`em`]).
//! - [`ClassMixTest`]: is the predicted-class distribution of the target different from the
//!   source's? The black-box shift test of Rabanser, Guennemann & Lipton (2019, "Failing
//!   loudly", NeurIPS): a chi-square test of the 2 x K table of predicted classes, or a
//!   permutation test when expected counts are small.
//! - [`class_matched_rows`]: a source subsample whose class mix equals the estimated target mix.
//!   A covariate shift test between it and the target asks whether anything is left once the
//!   class mix is accounted for (label shift alone leaves nothing).
//!
//! Cautions: the correction assumes p(x | y) does not change and that the classifier's errors are
//! the same in both populations; it needs a confusion matrix far from singular (classes the model
//! can tell apart); with few target rows the proportions are uncertain and the intervals say so.
//! Decisions about people still need labelled target validation and the review of their domain.

pub mod bbse;
pub mod calibrate;
pub mod em;
mod mix_test;

pub use calibrate::Calibration;
pub use mix_test::{
    class_matched_rows, ClassMixTest, ClassMixTestResult, MixPValueMethod, TELLING_APART,
};

use crate::data::{Matrix, MatrixView};
use crate::error::{Error, Result};
use crate::model;
use serde::{Deserialize, Serialize};

/// Format tag of serialised [`LabelShiftEstimate`] documents.
pub const LABEL_SHIFT_FORMAT: &str = "shiftweight.label-shift";
/// Format tag of serialised [`ClassMixTestResult`] documents.
pub const CLASS_MIX_TEST_FORMAT: &str = "shiftweight.class-mix-test";

/// Cautions printed with every label-shift estimate (documents, reports, notebook views).
pub const LABEL_SHIFT_CAUTION: &str = "Label-shift correction assumes that the look of each \
class, p(x | y), and the classifier's errors are the same in source and target; it does not \
correct covariate or concept shift. It needs a classifier that tells the classes apart (a \
well-conditioned confusion matrix), and with few target rows the proportions are uncertain: read \
the intervals. Decisions about people still need validation on labelled target rows and the \
review of their domain.";

/// Largest distance of a probability row's sum from 1 that is accepted (the row is then divided
/// by its sum); float32 softmax outputs are within about 1e-6.
pub const ROW_SUM_TOLERANCE: f64 = 1e-4;

/// Which estimate of the target class proportions a [`LabelShiftEstimate`] reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LabelShiftMethod {
    /// EM maximum likelihood on calibrated probabilities (the default).
    Em,
    /// The confusion-matrix method (BBSE).
    Bbse,
}

impl LabelShiftMethod {
    /// Short name used in documents and reports.
    pub fn name(&self) -> &'static str {
        match self {
            LabelShiftMethod::Em => "em",
            LabelShiftMethod::Bbse => "bbse",
        }
    }
    /// Parses `em` or `bbse`, naming `method` otherwise.
    pub fn parse(text: &str) -> Result<Self> {
        match text {
            "em" => Ok(LabelShiftMethod::Em),
            "bbse" => Ok(LabelShiftMethod::Bbse),
            other => Err(Error::param(
                "method",
                format!("unknown method {other:?}; use \"em\" or \"bbse\""),
            )),
        }
    }
}

/// Checks a probability matrix: at least two columns, finite entries in [0, 1], rows summing to 1
/// within [`ROW_SUM_TOLERANCE`]. Returns the rows divided by their sums. Errors name `argument`
/// with the row and column.
pub fn check_probabilities(p: MatrixView, argument: &str, k: Option<usize>) -> Result<Matrix> {
    p.validate(argument, 1)?;
    if p.cols() < 2 {
        return Err(Error::param(
            argument,
            format!(
                "needs one column per class (at least 2), got {}; for a binary classifier pass \
                 both columns of predict_proba",
                p.cols()
            ),
        ));
    }
    if let Some(k) = k {
        p.expect_cols(argument, k)?;
    }
    let (n, kk) = (p.rows(), p.cols());
    let mut out = Vec::with_capacity(n * kk);
    for i in 0..n {
        let row = p.row(i);
        if let Some(j) = row.iter().position(|v| *v < 0.0 || *v > 1.0) {
            return Err(Error::param(
                argument,
                format!(
                    "row {i}, column {j} is {}; probabilities must lie in [0, 1]",
                    row[j]
                ),
            ));
        }
        let s: f64 = row.iter().sum();
        if (s - 1.0).abs() > ROW_SUM_TOLERANCE {
            return Err(Error::param(
                argument,
                format!(
                    "row {i} sums to {s}, not 1; pass class probabilities (one column per class)"
                ),
            ));
        }
        out.extend(row.iter().map(|v| v / s));
    }
    Matrix::new(out, n, kk)
}

/// Checks class labels (0..k) and returns the count of each class. Errors name `argument`, the
/// first bad row, and any class with no row.
pub fn class_counts(labels: &[usize], n: usize, k: usize, argument: &str) -> Result<Vec<usize>> {
    if labels.len() != n {
        return Err(Error::LengthMismatch {
            argument: argument.into(),
            expected: n,
            found: labels.len(),
        });
    }
    let mut counts = vec![0usize; k];
    for (i, &y) in labels.iter().enumerate() {
        if y >= k {
            return Err(Error::param(
                argument,
                format!("row {i} has class {y} but the probabilities have {k} columns (classes 0 to {})", k - 1),
            ));
        }
        counts[y] += 1;
    }
    let absent: Vec<usize> = (0..k).filter(|&j| counts[j] == 0).collect();
    if !absent.is_empty() {
        return Err(Error::param(
            argument,
            format!(
                "class(es) {absent:?} have no labelled source row; their source proportion is 0, \
                 so no class weight q/p exists for them. Add labelled rows of these classes or \
                 drop their probability columns"
            ),
        ));
    }
    Ok(counts)
}

/// The predicted class (largest probability; the first on ties) of every row.
pub fn predicted_classes(p: &Matrix) -> Vec<usize> {
    (0..p.rows())
        .map(|i| {
            let row = p.row(i);
            let mut best = 0;
            for (j, v) in row.iter().enumerate() {
                if *v > row[best] {
                    best = j;
                }
            }
            best
        })
        .collect()
}

/// Configuration of the target class-proportion estimate. See the module docs.
#[derive(Debug, Clone, PartialEq)]
pub struct LabelShift {
    /// Which estimate is reported as the target proportions (default [`LabelShiftMethod::Em`]).
    pub method: LabelShiftMethod,
    /// Confidence level of the intervals, in (0, 1) (default 0.95).
    pub level: f64,
    /// Bootstrap replicates of the EM interval (0 = no EM interval; default 200).
    pub bootstrap: usize,
    /// Seed of the bootstrap (default 0).
    pub seed: u64,
    /// Largest number of EM iterations (default 10,000).
    pub max_iter: usize,
    /// Names of the classes, in column order (optional; kept in the document for reports).
    pub class_names: Option<Vec<String>>,
}

impl Default for LabelShift {
    fn default() -> Self {
        Self {
            method: LabelShiftMethod::Em,
            level: 0.95,
            bootstrap: 200,
            seed: 0,
            max_iter: 10_000,
            class_names: None,
        }
    }
}

impl LabelShift {
    /// Defaults: EM on calibrated probabilities, 95% intervals, 200 bootstrap replicates, seed 0.
    pub fn new() -> Self {
        Self::default()
    }
    /// Which estimate is reported (EM or BBSE; both are always computed when possible).
    pub fn method(mut self, method: LabelShiftMethod) -> Self {
        self.method = method;
        self
    }
    /// Confidence level in (0, 1).
    pub fn level(mut self, level: f64) -> Self {
        self.level = level;
        self
    }
    /// Bootstrap replicates of the EM interval (0 skips the interval; at least 20 otherwise).
    pub fn bootstrap(mut self, b: usize) -> Self {
        self.bootstrap = b;
        self
    }
    /// Seed of the bootstrap.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Largest number of EM iterations (>= 1).
    pub fn max_iter(mut self, n: usize) -> Self {
        self.max_iter = n;
        self
    }

    /// Names of the classes in column order (one per probability column).
    pub fn class_names(mut self, names: Vec<String>) -> Self {
        self.class_names = Some(names);
        self
    }

    fn check(&self) -> Result<()> {
        if !(self.level > 0.0 && self.level < 1.0) {
            return Err(Error::param(
                "level",
                format!("must lie strictly between 0 and 1, got {}", self.level),
            ));
        }
        if self.bootstrap != 0 && self.bootstrap < 20 {
            return Err(Error::param(
                "bootstrap",
                format!(
                    "must be 0 (no interval) or at least 20 replicates, got {}",
                    self.bootstrap
                ),
            ));
        }
        if self.max_iter == 0 {
            return Err(Error::param("max_iter", "must be at least 1"));
        }
        Ok(())
    }

    /// Estimates the target class proportions.
    ///
    /// `source_probabilities` (n_s x K): out-of-fold class probabilities of labelled source rows
    /// (never probabilities of rows the classifier was trained on: they are overconfident and bias
    /// both the confusion matrix and the calibration). `source_labels`: their classes, 0..K.
    /// `target_probabilities` (n_t x K): probabilities of unlabelled target rows from the
    /// classifier trained on the source.
    pub fn fit(
        &self,
        source_probabilities: MatrixView,
        source_labels: &[usize],
        target_probabilities: MatrixView,
    ) -> Result<LabelShiftEstimate> {
        self.check()?;
        let ps = check_probabilities(source_probabilities, "source_probabilities", None)?;
        let k = ps.cols();
        let pt = check_probabilities(target_probabilities, "target_probabilities", Some(k))?;
        if let Some(names) = &self.class_names {
            if names.len() != k {
                return Err(Error::LengthMismatch {
                    argument: "class_names".into(),
                    expected: k,
                    found: names.len(),
                });
            }
        }
        let counts = class_counts(source_labels, ps.rows(), k, "source_labels")?;
        let n_s = ps.rows();
        let source_proportions: Vec<f64> = counts.iter().map(|&c| c as f64 / n_s as f64).collect();
        let mut warnings = Vec::new();

        let bbse = match bbse::estimate(&ps, source_labels, &counts, &pt, self.level) {
            Ok(b) => {
                warnings.extend(b.warnings.iter().cloned());
                Some(b)
            }
            Err(e) if self.method == LabelShiftMethod::Em => {
                warnings.push(format!(
                    "the confusion-matrix (BBSE) estimate is not available: {e}"
                ));
                None
            }
            Err(e) => return Err(e),
        };

        let em = if self.method == LabelShiftMethod::Em {
            let fit = em::estimate(
                &ps,
                source_labels,
                &counts,
                &pt,
                &em::EmOptions {
                    level: self.level,
                    bootstrap: self.bootstrap,
                    seed: self.seed,
                    max_iter: self.max_iter,
                },
            )?;
            warnings.extend(fit.warnings.iter().cloned());
            Some(fit)
        } else {
            None
        };

        let (target_proportions, interval_low, interval_high, interval_method) = match (&em, &bbse)
        {
            (Some(e), _) => (
                e.proportions.clone(),
                e.interval_low.clone(),
                e.interval_high.clone(),
                if self.bootstrap > 0 {
                    format!("percentile bootstrap, {} replicates", self.bootstrap)
                } else {
                    "none (bootstrap = 0)".to_string()
                },
            ),
            (None, Some(b)) => (
                b.proportions.clone(),
                Some(b.interval_low.clone()),
                Some(b.interval_high.clone()),
                "delta method (normal)".to_string(),
            ),
            (None, None) => unreachable!("BBSE errors are returned when it is the method"),
        };
        let class_weights: Vec<f64> = target_proportions
            .iter()
            .zip(&source_proportions)
            .map(|(q, p)| q / p)
            .collect();
        let n_t = pt.rows();
        if n_t < 10 * k {
            warnings.push(format!(
                "only {n_t} target rows for {k} classes: the proportions are uncertain; read the \
                 intervals"
            ));
        }
        Ok(LabelShiftEstimate {
            method: self.method,
            n_classes: k,
            class_names: self.class_names.clone(),
            n_source: n_s,
            n_target: n_t,
            level: self.level,
            source_proportions,
            target_proportions,
            interval_low,
            interval_high,
            interval_method,
            class_weights,
            bbse,
            em,
            seed: self.seed,
            warnings,
        })
    }
}

/// Fitted label-shift correction: target class proportions with intervals, class weights, and
/// the calibration used by EM. Saves to a versioned JSON document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LabelShiftEstimate {
    /// The estimate reported in `target_proportions`.
    pub method: LabelShiftMethod,
    /// Number of classes K.
    pub n_classes: usize,
    /// Names of the classes in column order, when given.
    #[serde(default)]
    pub class_names: Option<Vec<String>>,
    /// Labelled source rows.
    pub n_source: usize,
    /// Target rows.
    pub n_target: usize,
    /// Confidence level of the intervals.
    pub level: f64,
    /// p(y): class shares of the labelled source rows.
    pub source_proportions: Vec<f64>,
    /// q(y): estimated target class shares (sum to 1).
    pub target_proportions: Vec<f64>,
    /// Lower ends of the intervals of q(y) (absent for EM without bootstrap).
    pub interval_low: Option<Vec<f64>>,
    /// Upper ends of the intervals of q(y) (absent for EM without bootstrap).
    pub interval_high: Option<Vec<f64>>,
    /// How the intervals were obtained.
    pub interval_method: String,
    /// w(y) = q(y) / p(y): weight of a source row of class y.
    pub class_weights: Vec<f64>,
    /// The confusion-matrix estimate (absent when its matrix is singular and EM is the method).
    pub bbse: Option<bbse::BbseEstimate>,
    /// The EM estimate (absent when the method is BBSE).
    pub em: Option<em::EmEstimate>,
    /// Seed of the bootstrap.
    pub seed: u64,
    /// Warnings in plain words (near-singular confusion matrix, few target rows, no convergence).
    pub warnings: Vec<String>,
}

impl LabelShiftEstimate {
    /// The weight of every source row, w(y_i), for retraining on the target class mix.
    pub fn sample_weights(&self, labels: &[usize]) -> Result<Vec<f64>> {
        labels
            .iter()
            .enumerate()
            .map(|(i, &y)| {
                self.class_weights.get(y).copied().ok_or_else(|| {
                    Error::param(
                        "labels",
                        format!(
                            "row {i} has class {y} but the estimate has {} classes",
                            self.n_classes
                        ),
                    )
                })
            })
            .collect()
    }

    /// Prior-adjusted probabilities for the target: p_t(y | x) proportional to w(y) p_s(y | x)
    /// (Saerens et al. 2002, eq. 2.4). With the EM method the probabilities are first calibrated
    /// with the calibration fitted on the source, as EM used them. O(n K).
    pub fn adjust(&self, probabilities: MatrixView) -> Result<Matrix> {
        let p = check_probabilities(probabilities, "probabilities", Some(self.n_classes))?;
        let p = match &self.em {
            Some(e) if self.method == LabelShiftMethod::Em => e.calibration.apply(&p),
            _ => p,
        };
        Ok(reweight_rows(&p, &self.class_weights))
    }

    /// JSON document `{"format": "shiftweight.label-shift", "version": 1, "model": {...}}`.
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(LABEL_SHIFT_FORMAT, self)
    }

    /// Reads a document written by [`LabelShiftEstimate::to_json`] and checks its consistency.
    pub fn from_json(text: &str) -> Result<Self> {
        let m: Self = model::from_json_tagged(LABEL_SHIFT_FORMAT, text)?;
        let k = m.n_classes;
        let ok_len = [
            m.source_proportions.len(),
            m.target_proportions.len(),
            m.interval_low.as_ref().map_or(k, Vec::len),
            m.interval_high.as_ref().map_or(k, Vec::len),
            m.class_weights.len(),
            m.class_names.as_ref().map_or(k, Vec::len),
        ]
        .iter()
        .all(|&l| l == k);
        if k < 2 || !ok_len {
            return Err(Error::ModelFile(format!(
                "label-shift document declares {k} classes but its vectors have other lengths"
            )));
        }
        if m.class_weights
            .iter()
            .any(|w| !(w.is_finite() && *w >= 0.0))
        {
            return Err(Error::ModelFile(
                "label-shift document has a negative or non-finite class weight".into(),
            ));
        }
        if let Some(e) = &m.em {
            e.calibration.check(k)?;
        }
        Ok(m)
    }
}

/// Rows of `p` multiplied by `w` elementwise and renormalised to sum 1. A row whose reweighted sum
/// is 0 (all its mass on classes of weight 0) is left as the weights alone, normalised.
pub(crate) fn reweight_rows(p: &Matrix, w: &[f64]) -> Matrix {
    let (n, k) = (p.rows(), p.cols());
    let wsum: f64 = w.iter().sum();
    let mut out = Vec::with_capacity(n * k);
    for i in 0..n {
        let row = p.row(i);
        let s: f64 = row.iter().zip(w).map(|(a, b)| a * b).sum();
        if s > 0.0 {
            out.extend(row.iter().zip(w).map(|(a, b)| a * b / s));
        } else {
            out.extend(w.iter().map(|b| b / wsum));
        }
    }
    Matrix::new(out, n, k).expect("n * k buffer")
}

/// Normal quantile for a two-sided interval of the given level.
pub(crate) fn normal_quantile(level: f64) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    Normal::new(0.0, 1.0)
        .expect("standard normal")
        .inverse_cdf(0.5 + level / 2.0)
}

#[cfg(test)]
mod tests;
