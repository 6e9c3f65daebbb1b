//! Classifier two-sample test (Lopez-Paz & Oquab 2017, "Revisiting classifier two-sample tests",
//! ICLR).
//!
//! Label source rows 0 and target rows 1, standardise the pooled rows, and fit a penalised
//! logistic regression (the crate's [`WeightedLogistic`], objective
//! sum_i logloss_i + (l2/2)||beta||^2) to tell them apart. The statistic is the AUC of
//! out-of-sample scores, i.e. U / (n_source n_target) with U the Mann-Whitney (1947) statistic of
//! the target scores against the source scores. Under the null of one common distribution the AUC
//! is near 0.5; a shift that a linear score can see pushes it towards 1. The test is one-sided.
//!
//! Two ways to a valid p-value, chosen by the pooled row count n:
//! - n <= `max_permutation_rows` (default 5,000): every row is scored out of fold by K-fold
//!   cross-fitting (K = `folds`), so all rows both train and score; the p-value is a permutation
//!   test with refits: the labels are permuted B times and the whole cross-fitting is redone,
//!   p = (1 + #{AUC_b >= AUC}) / (1 + B). Exact level for any n. Cost O(B K n d^2) per Newton step.
//!   Using every row matters: a fit-on-half, score-on-half test loses much of the power.
//! - n > `max_permutation_rows`: a seeded half of the rows trains one classifier and the other half
//!   is scored; the p-value is the normal approximation of U on the scored half (tie and
//!   continuity corrected). Valid conditionally on the fitted classifier; at these sizes the lost
//!   half costs little power. Cost O(n d^2) per Newton step.
//!
//! The AUC's 95% interval uses the DeLong (1988) standard error of the scored rows. For the
//! cross-fitted scores it is approximate (the fold models differ and share training rows).
//!
//! A linear score sees shifts of location along any direction (mean shifts, changes of
//! correlation do not all show). For changes of spread or shape use the MMD test.

use super::stats::{auc_summary, mann_whitney_greater};
use super::{pooled_standardized, PValueMethod, ShiftDetails, ShiftTestResult};
use crate::data::{kfold_assignment, validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::learn::{LinearModel, WeightedLogistic};
use crate::random::rng;
use rand::seq::SliceRandom;
use rand::RngCore;
use rayon::prelude::*;

const TAG_FOLDS: u64 = 0x6373_745f_666f_6c64;
const TAG_PERM: u64 = 0x6373_745f_7065_726d;
const TAG_SPLIT: u64 = 0x6373_745f_7370_6c74;

/// Configuration of the classifier two-sample test. See the module docs.
#[derive(Debug, Clone, PartialEq)]
pub struct ClassifierShiftTest {
    /// Cross-fitting folds (>= 2; default 5).
    pub folds: usize,
    /// Logistic penalty (>= 0; default 1.0, scikit-learn's C = 1).
    pub l2: f64,
    /// Label permutations for the permutation p-value (>= 1; default 200).
    pub permutations: usize,
    /// Largest pooled row count for the permutation test; above it the held-out split is used
    /// (default 5,000).
    pub max_permutation_rows: usize,
    /// Seed of the folds, permutations and split (default 0).
    pub seed: u64,
}

impl Default for ClassifierShiftTest {
    fn default() -> Self {
        Self {
            folds: 5,
            l2: 1.0,
            permutations: 200,
            max_permutation_rows: 5_000,
            seed: 0,
        }
    }
}

impl ClassifierShiftTest {
    /// Defaults: 5 folds, l2 = 1, 200 permutations, permutation test up to 5,000 pooled rows.
    pub fn new() -> Self {
        Self::default()
    }
    /// Cross-fitting folds (>= 2).
    pub fn folds(mut self, k: usize) -> Self {
        self.folds = k;
        self
    }
    /// Logistic penalty (>= 0).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }
    /// Number of label permutations (>= 1).
    pub fn permutations(mut self, b: usize) -> Self {
        self.permutations = b;
        self
    }
    /// Pooled-row threshold between the permutation test and the held-out split.
    pub fn max_permutation_rows(mut self, n: usize) -> Self {
        self.max_permutation_rows = n;
        self
    }
    /// Seed of every random step.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    fn check(&self) -> Result<()> {
        crate::data::check_folds(self.folds)?;
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::param(
                "l2",
                format!("must be finite and >= 0, got {}", self.l2),
            ));
        }
        if self.permutations == 0 {
            return Err(Error::param("permutations", "must be at least 1"));
        }
        Ok(())
    }

    fn describe(&self) -> String {
        format!(
            "logistic regression on standardised features, penalty {}",
            self.l2
        )
    }

    /// Runs the test of `source` against `target` (same columns, at least 2 rows each).
    pub fn run(&self, source: MatrixView, target: MatrixView) -> Result<ShiftTestResult> {
        self.check()?;
        validate_pair(&source, &target, 2)?;
        let (ns, nt) = (source.rows(), target.rows());
        let n = ns + nt;
        let (z, y) = pooled_standardized(source, target);
        let zv = z.view();
        let mut notes = Vec::new();
        if n <= self.max_permutation_rows {
            if n < self.folds {
                return Err(Error::TooFewRows {
                    argument: "source and target together".into(),
                    found: n,
                    required: self.folds,
                });
            }
            let fold = kfold_assignment(n, self.folds, self.seed ^ TAG_FOLDS)?;
            let (scores, _) = cross_fit(zv, &y, &fold, self.folds, self.l2)?;
            let obs = auc_summary(&scores[ns..], &scores[..ns])?;
            // Pre-draw the permuted label vectors sequentially (seeded), refit in parallel.
            let mut r = rng(self.seed ^ TAG_PERM);
            let seeds: Vec<u64> = (0..self.permutations).map(|_| r.next_u64()).collect();
            let perm_auc: Vec<Result<f64>> = seeds
                .par_iter()
                .map(|&s| {
                    let mut idx: Vec<usize> = (0..n).collect();
                    idx.shuffle(&mut rng(s));
                    // Rows idx[..ns] are labelled source, the rest target.
                    let mut yp = vec![1.0; n];
                    for &i in &idx[..ns] {
                        yp[i] = 0.0;
                    }
                    let (sc, _) = cross_fit(zv, &yp, &fold, self.folds, self.l2)?;
                    let pos: Vec<f64> = idx[ns..].iter().map(|&i| sc[i]).collect();
                    let neg: Vec<f64> = idx[..ns].iter().map(|&i| sc[i]).collect();
                    Ok(auc_summary(&pos, &neg)?.auc)
                })
                .collect();
            let mut exceed = 0usize;
            for a in perm_auc {
                if a? >= obs.auc - 1e-12 {
                    exceed += 1;
                }
            }
            let p_value = (1 + exceed) as f64 / (1 + self.permutations) as f64;
            notes.push(format!(
                "every row scored out of fold ({}-fold cross-fitting); p-value from {} label permutations with refits",
                self.folds, self.permutations
            ));
            Ok(ShiftTestResult {
                method: "classifier".into(),
                statistic: obs.auc,
                p_value,
                p_value_method: PValueMethod::Permutation,
                permutations: self.permutations,
                n_source: ns,
                n_target: nt,
                n_features: source.cols(),
                seed: self.seed,
                details: ShiftDetails::Classifier {
                    auc: obs.auc,
                    auc_std_error: obs.std_error,
                    auc_ci_low: obs.ci_low,
                    auc_ci_high: obs.ci_high,
                    classifier: self.describe(),
                    l2: self.l2,
                    folds: self.folds,
                    n_scored: n,
                },
                notes,
            })
        } else {
            let half = kfold_assignment(n, 2, self.seed ^ TAG_SPLIT)?;
            let train: Vec<usize> = (0..n).filter(|&i| half[i] == 0).collect();
            let test: Vec<usize> = (0..n).filter(|&i| half[i] == 1).collect();
            let model = fit_rows(zv, &y, &train, self.l2)?.ok_or_else(|| {
                Error::param("source/target", "the training half holds rows of one sample only; add rows to the smaller sample")
            })?;
            let xt = zv.select_rows(&test);
            let sc = model.decision_function(xt.view())?;
            let pos: Vec<f64> = test
                .iter()
                .zip(&sc)
                .filter(|(i, _)| y[**i] == 1.0)
                .map(|(_, s)| *s)
                .collect();
            let neg: Vec<f64> = test
                .iter()
                .zip(&sc)
                .filter(|(i, _)| y[**i] == 0.0)
                .map(|(_, s)| *s)
                .collect();
            let obs = auc_summary(&pos, &neg)?;
            let (_, p_value) = mann_whitney_greater(&pos, &neg)?;
            notes.push(format!(
                "{n} pooled rows exceed max_permutation_rows = {}: classifier fitted on a seeded half, \
                 the other half scored, p-value from the normal approximation of the Mann-Whitney U",
                self.max_permutation_rows
            ));
            Ok(ShiftTestResult {
                method: "classifier".into(),
                statistic: obs.auc,
                p_value,
                p_value_method: PValueMethod::HeldOutNormal,
                permutations: 0,
                n_source: ns,
                n_target: nt,
                n_features: source.cols(),
                seed: self.seed,
                details: ShiftDetails::Classifier {
                    auc: obs.auc,
                    auc_std_error: obs.std_error,
                    auc_ci_low: obs.ci_low,
                    auc_ci_high: obs.ci_high,
                    classifier: self.describe(),
                    l2: self.l2,
                    folds: 0,
                    n_scored: test.len(),
                },
                notes,
            })
        }
    }
}

/// Fits the logistic classifier on the rows `idx` of `z` with labels `y`. `None` when those rows
/// hold one class only (no classifier can be fitted; the caller scores them all equally).
pub(crate) fn fit_rows(
    z: MatrixView,
    y: &[f64],
    idx: &[usize],
    l2: f64,
) -> Result<Option<LinearModel>> {
    let yt: Vec<f64> = idx.iter().map(|&i| y[i]).collect();
    let ones = yt.iter().filter(|v| **v == 1.0).count();
    if ones == 0 || ones == yt.len() {
        return Ok(None);
    }
    let xt = z.select_rows(idx);
    WeightedLogistic::new()
        .l2(l2)
        .fit(xt.view(), &yt, None)
        .map(Some)
}

/// K-fold cross-fitting: each row's score is the linear predictor of the model fitted on the
/// other folds. Returns the scores and the fold models (`None` for a fold whose training rows hold
/// one class; its rows then score 0).
pub(crate) fn cross_fit(
    z: MatrixView,
    y: &[f64],
    fold: &[usize],
    k: usize,
    l2: f64,
) -> Result<(Vec<f64>, Vec<Option<LinearModel>>)> {
    let n = z.rows();
    let mut scores = vec![0.0; n];
    let mut models = Vec::with_capacity(k);
    for f in 0..k {
        let train: Vec<usize> = (0..n).filter(|&i| fold[i] != f).collect();
        let model = fit_rows(z, y, &train, l2)?;
        if let Some(m) = &model {
            for i in (0..n).filter(|&i| fold[i] == f) {
                scores[i] = z
                    .row(i)
                    .iter()
                    .zip(&m.coef)
                    .map(|(a, b)| a * b)
                    .sum::<f64>()
                    + m.intercept;
            }
        }
        models.push(model);
    }
    Ok((scores, models))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::{Distribution, StandardNormal};

    fn gaussian(n: usize, d: usize, shift: f64, seed: u64) -> Vec<f64> {
        let mut r = rng(seed);
        (0..n * d)
            .map(|k| {
                let v: f64 = StandardNormal.sample(&mut r);
                v + if k % d == 0 { shift } else { 0.0 }
            })
            .collect()
    }

    #[test]
    fn detects_a_clear_shift_and_reports_both_routes() {
        let s = gaussian(150, 3, 0.0, 1);
        let t = gaussian(150, 3, 1.0, 2);
        let (sv, tv) = (
            MatrixView::new(&s, 150, 3).unwrap(),
            MatrixView::new(&t, 150, 3).unwrap(),
        );
        let r = ClassifierShiftTest::new()
            .permutations(49)
            .run(sv, tv)
            .unwrap();
        assert_eq!(r.p_value_method, PValueMethod::Permutation);
        // Smallest attainable permutation p-value (1 + 0) / (1 + 49).
        assert!((r.p_value - 0.02).abs() < 1e-12, "{}", r.p_value);
        assert!(r.statistic > 0.7);
        let h = ClassifierShiftTest::new()
            .max_permutation_rows(10)
            .run(sv, tv)
            .unwrap();
        assert_eq!(h.p_value_method, PValueMethod::HeldOutNormal);
        assert!(h.p_value < 1e-4);
        let again = ShiftTestResult::from_json(&r.to_json().unwrap()).unwrap();
        assert_eq!(again, r);
    }

    #[test]
    fn bad_options_are_errors() {
        let s = gaussian(10, 2, 0.0, 1);
        let sv = MatrixView::new(&s, 10, 2).unwrap();
        assert!(ClassifierShiftTest::new().folds(1).run(sv, sv).is_err());
        assert!(ClassifierShiftTest::new()
            .permutations(0)
            .run(sv, sv)
            .is_err());
        let t = [1.0, 2.0, 3.0];
        assert!(matches!(
            ClassifierShiftTest::new().run(sv, MatrixView::new(&t, 1, 3).unwrap()),
            Err(Error::TooFewRows { .. }) | Err(Error::FeatureCountMismatch { .. })
        ));
    }
}
