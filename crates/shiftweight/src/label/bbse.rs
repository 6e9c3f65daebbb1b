//! The confusion-matrix estimate of the target class proportions, BBSE (Lipton, Wang & Smola
//! 2018, "Detecting and correcting for label shift with black box predictors", ICML).
//!
//! Let yhat be the classifier's predicted class (the largest probability). On held-out source
//! rows, A[i, j] = P_s(yhat = i | y = j) (columns sum to 1); on target rows, mu\[i\] = P_t(yhat = i).
//! When p(x | y) is the same in both populations, so is A, and mu = A q, hence q = A^{-1} mu.
//! This is the paper's w = C^{-1} mu with C[i, j] = P_s(yhat = i, y = j) = A[i, j] p(j), since
//! q = p * w elementwise. The raw solution sums to 1 (the columns of A do) but can have negative
//! entries when a class is rare or the classifier confuses classes; the reported proportions are
//! the raw ones clipped at 0 and renormalised, with a warning.
//!
//! Interval: delta method over both samples, conditional on the source class counts n_j.
//! dq = A^{-1} (dmu - dA q), with the multinomial covariances of the target's predicted-class
//! shares and of every column of A:
//!
//! Cov(q) = A^{-1} [ (diag(mu) - mu mu^T) / n_t + sum_j q_j^2 (diag(a_j) - a_j a_j^T) / n_j ] A^{-T},
//!
//! and the interval is q_j +- z sqrt(Cov_jj), clipped to [0, 1]. Cost O(n K + K^3).
//!
//! The error of the estimate grows with 1 / sigma_min(A) (Lipton et al. 2018, Theorem 3): when the
//! classifier cannot tell classes apart the matrix is near-singular and the estimate unstable.
//! A condition number above [`CONDITION_WARNING`] gives a warning naming the classes whose
//! predictions go more often to another class than to themselves; an exactly singular matrix is
//! an error naming the classes never predicted.

use super::{normal_quantile, predicted_classes};
use crate::data::Matrix;
use crate::error::{Error, Result};
use faer::prelude::*;
use faer::Mat;
use serde::{Deserialize, Serialize};

/// Condition number of A above which a warning is given. A project threshold, not a published
/// one: at 100 a 1% error in mu can become a 100% error in q.
pub const CONDITION_WARNING: f64 = 100.0;

/// The confusion-matrix estimate and its delta-method interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BbseEstimate {
    /// A^{-1} mu before clipping (sums to 1; may have negative entries).
    pub raw_proportions: Vec<f64>,
    /// The raw proportions clipped at 0 and renormalised.
    pub proportions: Vec<f64>,
    /// Delta-method standard errors of the raw proportions.
    pub std_errors: Vec<f64>,
    /// Lower interval ends, clipped to [0, 1].
    pub interval_low: Vec<f64>,
    /// Upper interval ends, clipped to [0, 1].
    pub interval_high: Vec<f64>,
    /// A\[i\]\[j\] = share of source rows of class j predicted as class i (row-major, K x K).
    pub confusion: Vec<Vec<f64>>,
    /// Shares of target rows predicted as each class (mu).
    pub target_predicted_shares: Vec<f64>,
    /// Condition number of A (largest over smallest singular value).
    pub condition_number: f64,
    /// Warnings (near-singular matrix, clipped proportions).
    pub warnings: Vec<String>,
}

/// The conditional confusion matrix A (K x K, column j = predicted-class shares of class j).
fn confusion(pred: &[usize], labels: &[usize], counts: &[usize]) -> Mat<f64> {
    let k = counts.len();
    let mut a = Mat::<f64>::zeros(k, k);
    for (&i, &j) in pred.iter().zip(labels) {
        a[(i, j)] += 1.0;
    }
    for j in 0..k {
        for i in 0..k {
            a[(i, j)] /= counts[j] as f64;
        }
    }
    a
}

/// BBSE on checked probabilities (`ps` source, `pt` target) and source labels with their counts.
pub fn estimate(
    ps: &Matrix,
    labels: &[usize],
    counts: &[usize],
    pt: &Matrix,
    level: f64,
) -> Result<BbseEstimate> {
    let k = counts.len();
    let a = confusion(&predicted_classes(ps), labels, counts);
    let pred_t = predicted_classes(pt);
    let n_t = pt.rows() as f64;
    let mut mu = vec![0.0; k];
    for &i in &pred_t {
        mu[i] += 1.0 / n_t;
    }
    let sv = a.singular_values().map_err(|e| Error::Numerical {
        context: "BBSE confusion matrix".into(),
        reason: format!("{e:?}"),
    })?;
    let smax = sv.iter().cloned().fold(0.0, f64::max);
    let smin = sv.iter().cloned().fold(f64::INFINITY, f64::min);
    if !(smin > 1e-12 * smax) {
        let never: Vec<usize> = (0..k)
            .filter(|&i| (0..k).all(|j| a[(i, j)] == 0.0))
            .collect();
        let why = if never.is_empty() {
            "some classes are predicted in exactly the same proportions as a mix of others".into()
        } else {
            format!("the classifier never predicts class(es) {never:?} on the labelled source rows")
        };
        return Err(Error::param(
            "source_probabilities",
            format!(
                "the confusion matrix is singular ({why}); the confusion-matrix method cannot \
                 separate these classes. Use a classifier that tells them apart, or merge them"
            ),
        ));
    }
    let condition_number = smax / smin;
    let lu = a.partial_piv_lu();
    let a_inv = lu.solve(Mat::<f64>::identity(k, k));
    let q: Vec<f64> = (0..k)
        .map(|i| (0..k).map(|j| a_inv[(i, j)] * mu[j]).sum())
        .collect();

    // Middle of the sandwich: target multinomial + every source column's multinomial.
    let mut m = Mat::<f64>::zeros(k, k);
    for i in 0..k {
        for l in 0..k {
            let d = if i == l { 1.0 } else { 0.0 };
            let mut v = (d * mu[i] - mu[i] * mu[l]) / n_t;
            for j in 0..k {
                let (ai, al) = (a[(i, j)], a[(l, j)]);
                v += q[j] * q[j] * (d * ai - ai * al) / counts[j] as f64;
            }
            m[(i, l)] = v;
        }
    }
    let cov = &a_inv * &m * a_inv.transpose();
    let z = normal_quantile(level);
    let std_errors: Vec<f64> = (0..k).map(|j| cov[(j, j)].max(0.0).sqrt()).collect();
    let interval_low = (0..k)
        .map(|j| (q[j] - z * std_errors[j]).clamp(0.0, 1.0))
        .collect();
    let interval_high = (0..k)
        .map(|j| (q[j] + z * std_errors[j]).clamp(0.0, 1.0))
        .collect();

    let mut warnings = Vec::new();
    if condition_number > CONDITION_WARNING {
        let weak: Vec<usize> = (0..k)
            .filter(|&j| (0..k).any(|i| i != j && a[(i, j)] >= a[(j, j)]))
            .collect();
        warnings.push(format!(
            "the confusion matrix is near-singular (condition number {condition_number:.1}): the \
             classifier confuses classes{}; the confusion-matrix estimate is unstable",
            if weak.is_empty() {
                String::new()
            } else {
                format!(" (class(es) {weak:?} are predicted as another class at least as often as as themselves)")
            }
        ));
    }
    let clipped: Vec<f64> = q.iter().map(|v| v.max(0.0)).collect();
    let total: f64 = clipped.iter().sum();
    if q.iter().any(|v| *v < 0.0) {
        let neg: Vec<usize> = (0..k).filter(|&j| q[j] < 0.0).collect();
        warnings.push(format!(
            "the confusion-matrix solution is negative for class(es) {neg:?}; set to 0 and the \
             others rescaled (a sign of a rare class or a confused classifier)"
        ));
    }
    let proportions = clipped.iter().map(|v| v / total).collect();
    Ok(BbseEstimate {
        raw_proportions: q,
        proportions,
        std_errors,
        interval_low,
        interval_high,
        confusion: (0..k)
            .map(|i| (0..k).map(|j| a[(i, j)]).collect())
            .collect(),
        target_predicted_shares: mu,
        condition_number,
        warnings,
    })
}
