//! Weighted losses and their aggregation: the arithmetic behind importance-weighted
//! cross-validation (IWCV), the weighted-versus-unweighted comparison and stand-alone weighted
//! metrics with confidence intervals.
//!
//! **Per-row values.** [`Metric::row_values`] turns labels and predictions into one value per row:
//! log loss `-ln p(y_i)`, Brier score `(p_i - y_i)^2` (binary), accuracy `1[yhat_i = y_i]`,
//! squared error `(y_i - yhat_i)^2`, absolute error `|y_i - yhat_i|`.
//!
//! **Weighted mean.** With importance weights `w_i = p_target(x_i) / p_source(x_i)` the target risk
//! is estimated by the self-normalised mean `m = sum_i w_i l_i / sum_i w_i` (invariant to the
//! overall scale of the weights). Its standard error is the linearisation (sandwich) estimate of a
//! ratio estimator, `se^2 = n/(n-1) * sum_i w_i^2 (l_i - m)^2 / (sum_i w_i)^2` over the `n` rows with
//! positive weight; with equal weights it is the usual `s / sqrt(n)`. The Kish effective sample size
//! `(sum w)^2 / sum w^2` (Kish 1965) is reported beside it: few effective rows mean an unreliable
//! estimate whatever its nominal size.
//!
//! **IWCV** (Sugiyama, Krauledat, Mueller 2007, JMLR 8): every held-out evaluation belongs to a
//! fold; a fold's value is the weighted mean of its held-out losses, the estimate is the mean over
//! folds (with equal weights: exactly the mean of scikit-learn's `cross_val_score`), and its
//! standard error combines the per-fold standard errors as if folds were independent,
//! `se^2 = sum_k se_k^2 / K^2` (common practice; it ignores the dependence between folds created by
//! shared training rows, so it is somewhat optimistic).
//!
//! **Paired comparison.** Two training procedures evaluated on the same held-out rows are compared
//! through the per-row differences of their losses, which removes the shared row-to-row variation.
//!
//! **Intervals.** [`metric_interval`] gives a normal-approximation interval `m +- z se` or a seeded
//! percentile bootstrap over rows (Efron 1979) of the self-normalised mean.
//!
//! Complexity: O(n) per aggregate; the bootstrap is O(B n), parallel over replicates and
//! deterministic for any thread count.

use crate::data::{validate_weights, MatrixView};
use crate::error::{Error, Result};
use crate::order::quantile_of_sorted;
use rand::Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

/// Probabilities are clipped to [EPS, 1 - EPS] before taking logarithms.
pub const PROBABILITY_EPS: f64 = f64::EPSILON;

/// A per-row loss or score.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Metric {
    /// `-ln p(y_i)` from class probabilities (lower is better).
    LogLoss,
    /// `(p_i - y_i)^2` with `p_i` the probability of the second class, binary only (lower is better).
    Brier,
    /// `1[yhat_i = y_i]` (higher is better).
    Accuracy,
    /// `(y_i - yhat_i)^2` (lower is better).
    SquaredError,
    /// `|y_i - yhat_i|` (lower is better).
    AbsoluteError,
}

impl Metric {
    /// Every metric, in a fixed order.
    pub const ALL: [Metric; 5] = [
        Metric::LogLoss,
        Metric::Brier,
        Metric::Accuracy,
        Metric::SquaredError,
        Metric::AbsoluteError,
    ];

    /// The name used in the APIs: `log_loss`, `brier`, `accuracy`, `squared_error`, `absolute_error`.
    pub fn name(&self) -> &'static str {
        match self {
            Metric::LogLoss => "log_loss",
            Metric::Brier => "brier",
            Metric::Accuracy => "accuracy",
            Metric::SquaredError => "squared_error",
            Metric::AbsoluteError => "absolute_error",
        }
    }

    /// Parses a metric name (see [`Metric::name`]).
    pub fn from_name(name: &str) -> Result<Self> {
        Self::ALL
            .into_iter()
            .find(|m| m.name() == name)
            .ok_or_else(|| {
                let names: Vec<&str> = Self::ALL.iter().map(|m| m.name()).collect();
                Error::param(
                    "scoring",
                    format!("unknown metric {name:?}; use one of {names:?}"),
                )
            })
    }

    /// True when larger values are better (accuracy); false for losses.
    pub fn greater_is_better(&self) -> bool {
        matches!(self, Metric::Accuracy)
    }

    /// True when the metric needs class probabilities rather than point predictions.
    pub fn needs_probabilities(&self) -> bool {
        matches!(self, Metric::LogLoss | Metric::Brier)
    }

    /// One value per row.
    ///
    /// - Probability metrics: `y_true` holds class indices 0..k-1 and `pred` is the n x k matrix of
    ///   class probabilities (Brier: k = 2, the second column is the positive class).
    /// - Point metrics: `pred` is an n x 1 matrix of predictions; for accuracy, labels and
    ///   predictions are compared for equality (encode classes as numbers first).
    pub fn row_values(&self, y_true: &[f64], pred: MatrixView) -> Result<Vec<f64>> {
        let n = pred.rows();
        if y_true.len() != n {
            return Err(Error::LengthMismatch {
                argument: "y_true".into(),
                expected: n,
                found: y_true.len(),
            });
        }
        if let Some(i) = y_true.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: "y_true".into(),
                row: i,
                column: 0,
                value: y_true[i],
            });
        }
        pred.validate("y_pred", 0)?;
        if self.needs_probabilities() {
            let k = pred.cols();
            if k < 2 {
                return Err(Error::param(
                    "y_pred",
                    format!(
                        "{} needs a probability column per class (at least 2), got {k}",
                        self.name()
                    ),
                ));
            }
            if *self == Metric::Brier && k != 2 {
                return Err(Error::param("y_pred", format!("the Brier score is defined here for two classes, got {k} probability columns")));
            }
            if let Some(pos) = pred
                .as_slice()
                .iter()
                .position(|p| !(0.0..=1.0).contains(p))
            {
                return Err(Error::param(
                    "y_pred",
                    format!(
                        "probabilities must lie in [0, 1]; row {}, column {} has {}",
                        pos / k,
                        pos % k,
                        pred.as_slice()[pos]
                    ),
                ));
            }
            let mut out = Vec::with_capacity(n);
            for (i, &y) in y_true.iter().enumerate() {
                if y < 0.0 || y.fract() != 0.0 || y as usize >= k {
                    return Err(Error::param(
                        "y_true",
                        format!("row {i} has class index {y}, expected an integer in 0..{k}"),
                    ));
                }
                let row = pred.row(i);
                out.push(match self {
                    Metric::LogLoss => -row[y as usize]
                        .clamp(PROBABILITY_EPS, 1.0 - PROBABILITY_EPS)
                        .ln(),
                    _ => (row[1] - y).powi(2),
                });
            }
            Ok(out)
        } else {
            if pred.cols() != 1 {
                return Err(Error::param(
                    "y_pred",
                    format!(
                        "{} needs one prediction per row, got {} columns",
                        self.name(),
                        pred.cols()
                    ),
                ));
            }
            let p = pred.as_slice();
            Ok(y_true
                .iter()
                .zip(p)
                .map(|(y, q)| match self {
                    Metric::Accuracy => f64::from(u8::from(y == q)),
                    Metric::SquaredError => (y - q).powi(2),
                    _ => (y - q).abs(),
                })
                .collect())
        }
    }
}

/// A weighted mean of per-row values with its uncertainty.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WeightedMean {
    /// `sum w l / sum w`.
    pub estimate: f64,
    /// Linearisation standard error (see the module docs); NaN with fewer than 2 weighted rows.
    pub std_error: f64,
    /// Kish effective sample size `(sum w)^2 / sum w^2`.
    pub ess: f64,
    /// Number of rows (including zero-weight rows).
    pub n: usize,
    /// Sum of the weights.
    pub total_weight: f64,
}

/// Weighted mean of `values` with `weights` (None: equal weights), with its standard error and ESS.
pub fn weighted_mean(values: &[f64], weights: Option<&[f64]>) -> Result<WeightedMean> {
    let n = values.len();
    if n == 0 {
        return Err(Error::TooFewRows {
            argument: "values".into(),
            found: 0,
            required: 1,
        });
    }
    if let Some(i) = values.iter().position(|v| v.is_nan()) {
        return Err(Error::NonFinite {
            argument: "values".into(),
            row: i,
            column: 0,
            value: values[i],
        });
    }
    if let Some(w) = weights {
        validate_weights(w, n, "weights")?;
    }
    let w = |i: usize| weights.map_or(1.0, |w| w[i]);
    let (mut sw, mut sw2, mut swl) = (0.0, 0.0, 0.0);
    let mut positive = 0usize;
    for (i, l) in values.iter().enumerate() {
        let wi = w(i);
        if wi > 0.0 {
            positive += 1;
            sw += wi;
            sw2 += wi * wi;
            swl += wi * l;
        }
    }
    let m = swl / sw;
    let std_error = if positive < 2 || !m.is_finite() {
        f64::NAN
    } else {
        let s: f64 = values
            .iter()
            .enumerate()
            .filter(|(i, _)| w(*i) > 0.0)
            .map(|(i, l)| (w(i) * (l - m)).powi(2))
            .sum();
        (s / (sw * sw) * positive as f64 / (positive - 1) as f64).sqrt()
    };
    Ok(WeightedMean {
        estimate: m,
        std_error,
        ess: sw * sw / sw2,
        n,
        total_weight: sw,
    })
}

/// The result of (importance-weighted) cross-validation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CrossValidated {
    /// Mean over folds of the weighted fold means: the IWCV estimate of target risk.
    pub estimate: f64,
    /// Its standard error (per-fold standard errors combined as independent).
    pub std_error: f64,
    /// Mean over folds of the unweighted fold means: the ordinary CV estimate for the same fits.
    pub unweighted_estimate: f64,
    /// Standard error of `unweighted_estimate`.
    pub unweighted_std_error: f64,
    /// One weighted summary per fold.
    pub per_fold: Vec<WeightedMean>,
    /// Unweighted fold means.
    pub per_fold_unweighted: Vec<f64>,
}

fn fold_groups(n: usize, fold: &[usize], n_folds: usize) -> Result<Vec<Vec<usize>>> {
    if fold.len() != n {
        return Err(Error::LengthMismatch {
            argument: "fold".into(),
            expected: n,
            found: fold.len(),
        });
    }
    if n_folds == 0 {
        return Err(Error::param("n_folds", "must be at least 1"));
    }
    let mut groups = vec![Vec::new(); n_folds];
    for (i, &f) in fold.iter().enumerate() {
        if f >= n_folds {
            return Err(Error::param(
                "fold",
                format!("entry {i} names fold {f} but there are {n_folds} folds"),
            ));
        }
        groups[f].push(i);
    }
    if let Some(k) = groups.iter().position(|g| g.is_empty()) {
        return Err(Error::param(
            "fold",
            format!("fold {k} has no held-out rows"),
        ));
    }
    Ok(groups)
}

/// Combines per-row held-out values into the cross-validated estimate. `fold[i]` names the fold in
/// which value `i` was held out (a row may appear in several folds for splitters that are not
/// partitions). Every fold needs at least one row of positive weight.
pub fn cross_validated(
    values: &[f64],
    weights: &[f64],
    fold: &[usize],
    n_folds: usize,
) -> Result<CrossValidated> {
    let n = values.len();
    validate_weights(weights, n, "weights")?;
    let groups = fold_groups(n, fold, n_folds)?;
    let mut per_fold = Vec::with_capacity(n_folds);
    let mut per_fold_unweighted = Vec::with_capacity(n_folds);
    let mut unweighted_var = 0.0;
    for (k, g) in groups.iter().enumerate() {
        let v: Vec<f64> = g.iter().map(|&i| values[i]).collect();
        let w: Vec<f64> = g.iter().map(|&i| weights[i]).collect();
        if w.iter().all(|x| *x == 0.0) {
            return Err(Error::InvalidWeights {
                argument: "weights".into(),
                reason: format!("every held-out row of fold {k} has weight zero, so the fold says nothing about the target"),
            });
        }
        per_fold.push(weighted_mean(&v, Some(&w))?);
        let u = weighted_mean(&v, None)?;
        per_fold_unweighted.push(u.estimate);
        unweighted_var += u.std_error.powi(2);
    }
    let kf = n_folds as f64;
    let estimate = per_fold.iter().map(|f| f.estimate).sum::<f64>() / kf;
    let std_error = per_fold
        .iter()
        .map(|f| f.std_error.powi(2))
        .sum::<f64>()
        .sqrt()
        / kf;
    let unweighted_estimate = per_fold_unweighted.iter().sum::<f64>() / kf;
    Ok(CrossValidated {
        estimate,
        std_error,
        unweighted_estimate,
        unweighted_std_error: unweighted_var.sqrt() / kf,
        per_fold,
        per_fold_unweighted,
    })
}

/// Mean of per-fold values and its standard error `sd / sqrt(K)` (for user-supplied metrics, where
/// no per-row values exist).
pub fn fold_average(per_fold: &[f64]) -> Result<(f64, f64)> {
    let k = per_fold.len();
    if k == 0 {
        return Err(Error::TooFewRows {
            argument: "per_fold".into(),
            found: 0,
            required: 1,
        });
    }
    if let Some(i) = per_fold.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFinite {
            argument: "per_fold".into(),
            row: i,
            column: 0,
            value: per_fold[i],
        });
    }
    Ok(mean_and_std_error(per_fold))
}

/// Mean of `v` and the standard error of that mean, `s / sqrt(k)` with `s` the sample standard
/// deviation (denominator k - 1). With fewer than two values the sample standard deviation is
/// undefined and the standard error is NaN, as `scipy.stats.sem` and `numpy.std(ddof=1)` give.
/// The one mean-and-standard-error of the crate (per-fold scores of every cross-validation).
pub(crate) fn mean_and_std_error(v: &[f64]) -> (f64, f64) {
    let k = v.len() as f64;
    let mean = v.iter().sum::<f64>() / k;
    if v.len() < 2 {
        return (mean, f64::NAN);
    }
    let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (k - 1.0);
    (mean, (var / k).sqrt())
}

/// What the evidence says about weighting.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum WeightingVerdict {
    /// The weighted fit is estimated better by more than `z` standard errors.
    FavoursWeighting,
    /// The unweighted fit is estimated better by more than `z` standard errors.
    FavoursNoWeighting,
    /// The difference is within `z` standard errors.
    NoClearDifference,
}

impl WeightingVerdict {
    /// Snake-case name.
    pub fn name(&self) -> &'static str {
        match self {
            WeightingVerdict::FavoursWeighting => "favours_weighting",
            WeightingVerdict::FavoursNoWeighting => "favours_no_weighting",
            WeightingVerdict::NoClearDifference => "no_clear_difference",
        }
    }
}

/// Side-by-side estimate of target risk with and without weighted training.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WeightingComparison {
    /// IWCV result of the procedure trained with weights.
    pub weighted: CrossValidated,
    /// IWCV result of the procedure trained without weights (still scored with weights).
    pub unweighted: CrossValidated,
    /// Mean over folds of (weighted - unweighted) target risk.
    pub difference: f64,
    /// Standard error of the difference (paired over the same held-out rows).
    pub difference_std_error: f64,
    /// True when larger values are better (accuracy).
    pub greater_is_better: bool,
    /// The verdict at `z` standard errors.
    pub verdict: WeightingVerdict,
    /// The number of standard errors used for the verdict.
    pub z: f64,
}

/// Compares two training procedures evaluated on the same held-out rows: `with_weights[i]` and
/// `without_weights[i]` are the losses of the weighted and the unweighted fit on held-out entry `i`.
/// The verdict needs the difference to exceed `z` standard errors (e.g. 2).
pub fn compare_weighting(
    with_weights: &[f64],
    without_weights: &[f64],
    weights: &[f64],
    fold: &[usize],
    n_folds: usize,
    greater_is_better: bool,
    z: f64,
) -> Result<WeightingComparison> {
    if without_weights.len() != with_weights.len() {
        return Err(Error::LengthMismatch {
            argument: "without_weights".into(),
            expected: with_weights.len(),
            found: without_weights.len(),
        });
    }
    if !(z.is_finite() && z > 0.0) {
        return Err(Error::param(
            "z",
            format!("must be finite and > 0, got {z}"),
        ));
    }
    let weighted = cross_validated(with_weights, weights, fold, n_folds)?;
    let unweighted = cross_validated(without_weights, weights, fold, n_folds)?;
    let diff: Vec<f64> = with_weights
        .iter()
        .zip(without_weights)
        .map(|(a, b)| a - b)
        .collect();
    let d = cross_validated(&diff, weights, fold, n_folds)?;
    Ok(finish_comparison(
        weighted,
        unweighted,
        d.estimate,
        d.std_error,
        greater_is_better,
        z,
    ))
}

fn verdict_of(difference: f64, se: f64, greater_is_better: bool, z: f64) -> WeightingVerdict {
    let gain = if greater_is_better {
        difference
    } else {
        -difference
    };
    if se.is_finite() && gain > z * se {
        WeightingVerdict::FavoursWeighting
    } else if se.is_finite() && -gain > z * se {
        WeightingVerdict::FavoursNoWeighting
    } else if se == 0.0 && gain != 0.0 {
        if gain > 0.0 {
            WeightingVerdict::FavoursWeighting
        } else {
            WeightingVerdict::FavoursNoWeighting
        }
    } else {
        WeightingVerdict::NoClearDifference
    }
}

fn finish_comparison(
    weighted: CrossValidated,
    unweighted: CrossValidated,
    difference: f64,
    difference_std_error: f64,
    greater_is_better: bool,
    z: f64,
) -> WeightingComparison {
    let verdict = verdict_of(difference, difference_std_error, greater_is_better, z);
    WeightingComparison {
        weighted,
        unweighted,
        difference,
        difference_std_error,
        greater_is_better,
        verdict,
        z,
    }
}

/// The same comparison from per-fold values only (user-supplied metrics): the standard error of the
/// difference is that of the per-fold differences.
pub fn compare_weighting_per_fold(
    with_weights: &[f64],
    without_weights: &[f64],
    greater_is_better: bool,
    z: f64,
) -> Result<(f64, f64, WeightingVerdict)> {
    if without_weights.len() != with_weights.len() {
        return Err(Error::LengthMismatch {
            argument: "without_weights".into(),
            expected: with_weights.len(),
            found: without_weights.len(),
        });
    }
    if !(z.is_finite() && z > 0.0) {
        return Err(Error::param(
            "z",
            format!("must be finite and > 0, got {z}"),
        ));
    }
    let diff: Vec<f64> = with_weights
        .iter()
        .zip(without_weights)
        .map(|(a, b)| a - b)
        .collect();
    let (m, se) = fold_average(&diff)?;
    Ok((m, se, verdict_of(m, se, greater_is_better, z)))
}

/// How [`metric_interval`] builds its interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum IntervalMethod {
    /// `m +- z se` with the linearisation standard error (its width scales like 1/sqrt(ESS)).
    Normal,
    /// Percentile interval of the weighted mean over seeded bootstrap resamples of the rows.
    Bootstrap,
}

/// A weighted metric with a confidence interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MetricInterval {
    /// The weighted mean, its standard error and the ESS.
    pub summary: WeightedMean,
    /// Lower end of the interval.
    pub lower: f64,
    /// Upper end of the interval.
    pub upper: f64,
    /// Confidence level in (0, 1).
    pub confidence: f64,
    /// How the interval was built.
    pub method: IntervalMethod,
}

const BOOTSTRAP_TAG: u64 = 0x626f_6f74_7374;

/// Weighted mean of per-row `values` with a confidence interval that accounts for the weights.
/// `n_boot` and `seed` are used by the bootstrap only.
pub fn metric_interval(
    values: &[f64],
    weights: Option<&[f64]>,
    confidence: f64,
    method: IntervalMethod,
    n_boot: usize,
    seed: u64,
) -> Result<MetricInterval> {
    if !(confidence > 0.0 && confidence < 1.0) {
        return Err(Error::param(
            "confidence",
            format!("must lie strictly between 0 and 1, got {confidence}"),
        ));
    }
    let summary = weighted_mean(values, weights)?;
    if let Some(i) = values.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFinite {
            argument: "values".into(),
            row: i,
            column: 0,
            value: values[i],
        });
    }
    let (lower, upper) = match method {
        IntervalMethod::Normal => {
            let z = Normal::standard().inverse_cdf(0.5 + confidence / 2.0);
            (
                summary.estimate - z * summary.std_error,
                summary.estimate + z * summary.std_error,
            )
        }
        IntervalMethod::Bootstrap => {
            if n_boot < 10 {
                return Err(Error::param(
                    "n_boot",
                    format!("must be at least 10, got {n_boot}"),
                ));
            }
            let n = values.len();
            let w = |i: usize| weights.map_or(1.0, |w| w[i]);
            let mut stats: Vec<f64> = (0..n_boot)
                .into_par_iter()
                .map(|b| {
                    let mut r = crate::random::rng((seed ^ BOOTSTRAP_TAG).wrapping_add(b as u64));
                    let (mut sw, mut swl) = (0.0, 0.0);
                    for _ in 0..n {
                        let i = r.random_range(0..n);
                        sw += w(i);
                        swl += w(i) * values[i];
                    }
                    if sw > 0.0 {
                        swl / sw
                    } else {
                        f64::NAN
                    }
                })
                .collect();
            stats.retain(|v| v.is_finite());
            if stats.len() < n_boot / 2 {
                return Err(Error::InvalidWeights {
                    argument: "weights".into(),
                    reason: "most bootstrap resamples held no row of positive weight; too few rows carry weight".into(),
                });
            }
            stats.sort_by(f64::total_cmp);
            let a = (1.0 - confidence) / 2.0;
            (
                quantile_of_sorted(&stats, a),
                quantile_of_sorted(&stats, 1.0 - a),
            )
        }
    };
    Ok(MetricInterval {
        summary,
        lower,
        upper,
        confidence,
        method,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equal_weights_give_the_plain_mean_and_its_standard_error() {
        // Hand-worked: values 1, 2, 3, 6: mean 3, sample variance 14/3, se = sqrt(14/3 / 4).
        let m = weighted_mean(&[1.0, 2.0, 3.0, 6.0], None).unwrap();
        assert!((m.estimate - 3.0).abs() < 1e-15);
        assert!((m.std_error - (14.0f64 / 12.0).sqrt()).abs() < 1e-14);
        assert!((m.ess - 4.0).abs() < 1e-12);
        let scaled = weighted_mean(&[1.0, 2.0, 3.0, 6.0], Some(&[5.0; 4])).unwrap();
        assert!((scaled.std_error - m.std_error).abs() < 1e-14);
    }

    #[test]
    fn mean_and_standard_error_match_scipy_sem() {
        // Reference: numpy.mean and scipy.stats.sem (ddof=1) of [0.3, -1.2, 2.5, 0.7, 1.9] give
        // 0.8399999999999999 and 0.6462197768561404 (numpy 2, scipy 1.x, run for this test).
        let (m, se) = mean_and_std_error(&[0.3, -1.2, 2.5, 0.7, 1.9]);
        assert!((m - 0.84).abs() < 1e-15);
        assert!((se - 0.6462197768561404).abs() < 1e-15);
        // One value: scipy.stats.sem([4.0]) is nan (the sample sd is undefined).
        let (m1, se1) = mean_and_std_error(&[4.0]);
        assert_eq!(m1, 4.0);
        assert!(se1.is_nan());
        assert!(fold_average(&[4.0]).unwrap().1.is_nan());
    }

    #[test]
    fn integer_weights_equal_repeated_rows_for_the_mean() {
        let m = weighted_mean(&[1.0, 4.0], Some(&[3.0, 1.0])).unwrap();
        assert!((m.estimate - 7.0 / 4.0).abs() < 1e-15);
        assert!((m.ess - 16.0 / 10.0).abs() < 1e-12);
    }

    #[test]
    fn row_values_by_hand() {
        let p = [0.2, 0.8, 0.6, 0.4];
        let v = Metric::LogLoss
            .row_values(&[1.0, 0.0], MatrixView::new(&p, 2, 2).unwrap())
            .unwrap();
        assert!((v[0] + 0.8f64.ln()).abs() < 1e-15 && (v[1] + 0.6f64.ln()).abs() < 1e-15);
        let b = Metric::Brier
            .row_values(&[1.0, 0.0], MatrixView::new(&p, 2, 2).unwrap())
            .unwrap();
        assert!((b[0] - 0.04).abs() < 1e-15 && (b[1] - 0.16).abs() < 1e-15);
        assert!(Metric::LogLoss
            .row_values(&[2.0, 0.0], MatrixView::new(&p, 2, 2).unwrap())
            .is_err());
        let a = Metric::Accuracy
            .row_values(&[1.0, 2.0], MatrixView::new(&[1.0, 3.0], 2, 1).unwrap())
            .unwrap();
        assert_eq!(a, vec![1.0, 0.0]);
    }

    #[test]
    fn cross_validated_is_mean_of_fold_means() {
        let v = [1.0, 2.0, 3.0, 10.0, 20.0];
        let fold = [0, 0, 0, 1, 1];
        let cv = cross_validated(&v, &[1.0; 5], &fold, 2).unwrap();
        assert!((cv.estimate - (2.0 + 15.0) / 2.0).abs() < 1e-14);
        assert!((cv.unweighted_estimate - cv.estimate).abs() < 1e-14);
        assert!(cross_validated(&v, &[0.0, 0.0, 0.0, 1.0, 1.0], &fold, 2).is_err());
        assert!(cross_validated(&v, &[1.0; 5], &[0, 0, 0, 0, 0], 2).is_err());
    }

    #[test]
    fn verdict_follows_the_sign_convention() {
        assert_eq!(
            verdict_of(-1.0, 0.1, false, 2.0),
            WeightingVerdict::FavoursWeighting
        );
        assert_eq!(
            verdict_of(-1.0, 0.1, true, 2.0),
            WeightingVerdict::FavoursNoWeighting
        );
        assert_eq!(
            verdict_of(0.1, 0.1, false, 2.0),
            WeightingVerdict::NoClearDifference
        );
    }

    #[test]
    fn bootstrap_is_seeded_and_brackets_the_mean() {
        let v: Vec<f64> = (0..200).map(|i| ((i * 37) % 17) as f64).collect();
        let w: Vec<f64> = (0..200).map(|i| 0.5 + (i % 5) as f64).collect();
        let a = metric_interval(&v, Some(&w), 0.9, IntervalMethod::Bootstrap, 500, 3).unwrap();
        let b = metric_interval(&v, Some(&w), 0.9, IntervalMethod::Bootstrap, 500, 3).unwrap();
        assert_eq!(a, b);
        assert!(a.lower < a.summary.estimate && a.summary.estimate < a.upper);
        assert!(metric_interval(&v, None, 1.0, IntervalMethod::Normal, 0, 0).is_err());
    }
}
