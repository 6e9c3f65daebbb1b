//! Weighted split conformal prediction under covariate shift (Tibshirani, Barber, Candes, Ramdas
//! 2019, "Conformal prediction under covariate shift", NeurIPS 32).
//!
//! A model is fitted on one part of the source rows; the other part (the *calibration* rows, with
//! importance weights `w_i`) gives non-conformity scores `s_i`. For a new row `x` with weight `w(x)`
//! the calibration scores get probabilities `p_i = w_i / (sum_j w_j + w(x))`, and the remaining mass
//! `p_x = w(x) / (sum_j w_j + w(x))` sits at `+infinity`. The threshold `q(x)` is the
//! `(1 - alpha)`-quantile of that distribution: the smallest calibration score whose cumulative mass
//! reaches `1 - alpha`, or `+infinity` when the finite scores never reach it. The set
//! `{y : s(x, y) <= q(x)}` then covers the target label with probability at least `1 - alpha` when
//! the weights are the true ratio `p_target / p_source` (and the data are exchangeable under it).
//!
//! With equal weights this is ordinary split conformal prediction: `q` is the
//! `ceil((1 - alpha)(n + 1))`-th smallest score, infinite when that exceeds `n`. An infinite
//! threshold is reported as such (an interval of the whole line, a set of every class): it is the
//! honest answer when a row's weight is large compared with the calibration weight mass, i.e. when
//! the calibration rows hardly cover that region of the target.
//!
//! Scores: regression uses the absolute residual `|y - mu(x)|`, giving intervals `mu(x) +- q(x)`;
//! classification uses `1 - p(y | x)` (Sadinle, Lei, Wasserman 2019, JASA 114), giving the set of
//! classes with `p(c | x) >= 1 - q(x)`.
//!
//! Complexity: O(n log n) to sort the calibration scores, then O(log n) per new row (plus O(k) per
//! row for class sets).

use crate::data::{validate_weights, MatrixView};
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};

/// Sorted calibration scores with their cumulative weights.
#[derive(Debug, Clone)]
struct Calibration {
    scores: Vec<f64>,
    cumulative: Vec<f64>,
    total: f64,
}

impl Calibration {
    fn new(scores: &[f64], weights: Option<&[f64]>) -> Result<Self> {
        let n = scores.len();
        if n == 0 {
            return Err(Error::TooFewRows {
                argument: "calibration rows".into(),
                found: 0,
                required: 1,
            });
        }
        if let Some(i) = scores.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: "calibration scores".into(),
                row: i,
                column: 0,
                value: scores[i],
            });
        }
        if let Some(w) = weights {
            validate_weights(w, n, "cal_weights")?;
        }
        let mut order: Vec<usize> = (0..n).collect();
        order.sort_by(|a, b| scores[*a].total_cmp(&scores[*b]));
        let mut acc = 0.0;
        let mut cumulative = Vec::with_capacity(n);
        for &i in &order {
            acc += weights.map_or(1.0, |w| w[i]);
            cumulative.push(acc);
        }
        Ok(Self {
            scores: order.iter().map(|&i| scores[i]).collect(),
            cumulative,
            total: acc,
        })
    }

    /// The (1 - alpha)-quantile of sum_i p_i delta_{s_i} + p_x delta_{+inf}.
    fn threshold(&self, w_new: f64, alpha: f64) -> f64 {
        let target = (1.0 - alpha) * (self.total + w_new);
        // Relative slack of a few ulps so that exact ties in the arithmetic (equal weights) resolve
        // as in exact arithmetic.
        let target = target - 1e-12 * target.abs();
        let k = self.cumulative.partition_point(|c| *c < target);
        if k < self.scores.len() {
            self.scores[k]
        } else {
            f64::INFINITY
        }
    }
}

fn check_alpha(alpha: f64) -> Result<()> {
    if !(alpha > 0.0 && alpha < 1.0) {
        return Err(Error::param(
            "alpha",
            format!("the miscoverage level must lie strictly between 0 and 1, got {alpha}"),
        ));
    }
    Ok(())
}

fn check_new_weights(w: Option<&[f64]>, m: usize) -> Result<()> {
    if let Some(w) = w {
        if w.len() != m {
            return Err(Error::LengthMismatch {
                argument: "weights".into(),
                expected: m,
                found: w.len(),
            });
        }
        if let Some(i) = w.iter().position(|v| !v.is_finite() || *v < 0.0) {
            return Err(Error::InvalidWeights {
                argument: "weights".into(),
                reason: format!("entry {i} is {} (weights must be finite and >= 0)", w[i]),
            });
        }
    }
    Ok(())
}

/// Prediction intervals for regression.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConformalIntervals {
    /// Lower ends (`-inf` where the threshold is infinite).
    pub lower: Vec<f64>,
    /// Upper ends (`+inf` where the threshold is infinite).
    pub upper: Vec<f64>,
    /// The residual threshold q(x) of every row (half-width of its interval).
    pub threshold: Vec<f64>,
    /// Rows whose interval is the whole line.
    pub n_infinite: usize,
}

/// Weighted split conformal intervals `pred +- q(x)` from calibration labels and predictions.
/// `cal_weights = None` and `weights = None` give ordinary split conformal; give both or neither.
pub fn regression_intervals(
    y_cal: &[f64],
    pred_cal: &[f64],
    cal_weights: Option<&[f64]>,
    pred: &[f64],
    weights: Option<&[f64]>,
    alpha: f64,
) -> Result<ConformalIntervals> {
    check_alpha(alpha)?;
    if pred_cal.len() != y_cal.len() {
        return Err(Error::LengthMismatch {
            argument: "calibration predictions".into(),
            expected: y_cal.len(),
            found: pred_cal.len(),
        });
    }
    // Name the input a user can fix, before the scores built from it are checked.
    for (values, argument) in [(y_cal, "y_cal"), (pred_cal, "calibration predictions")] {
        if let Some(i) = values.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: argument.into(),
                row: i,
                column: 0,
                value: values[i],
            });
        }
    }
    if cal_weights.is_some() != weights.is_some() {
        return Err(Error::param(
            "weights",
            "give weights for both the calibration rows and the rows to predict, or for neither",
        ));
    }
    if let Some(i) = pred.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFinite {
            argument: "predictions".into(),
            row: i,
            column: 0,
            value: pred[i],
        });
    }
    check_new_weights(weights, pred.len())?;
    let scores: Vec<f64> = y_cal
        .iter()
        .zip(pred_cal)
        .map(|(y, p)| (y - p).abs())
        .collect();
    let cal = Calibration::new(&scores, cal_weights)?;
    let threshold: Vec<f64> = (0..pred.len())
        .map(|j| cal.threshold(weights.map_or(1.0, |w| w[j]), alpha))
        .collect();
    let lower = pred.iter().zip(&threshold).map(|(p, q)| p - q).collect();
    let upper = pred.iter().zip(&threshold).map(|(p, q)| p + q).collect();
    let n_infinite = threshold.iter().filter(|q| q.is_infinite()).count();
    Ok(ConformalIntervals {
        lower,
        upper,
        threshold,
        n_infinite,
    })
}

/// Prediction sets for classification.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConformalSets {
    /// Row-major m x k membership: `members[j * k + c]` is true when class `c` is in row j's set.
    pub members: Vec<bool>,
    /// Number of classes k.
    pub n_classes: usize,
    /// The score threshold q(x) of every row (`+inf`: every class is in the set).
    pub threshold: Vec<f64>,
    /// Rows whose threshold is infinite.
    pub n_infinite: usize,
}

/// Weighted split conformal class sets from calibration class probabilities (`proba_cal`, n x k),
/// calibration class indices `label_cal` (0..k-1), and the probabilities of the rows to predict.
pub fn classification_sets(
    proba_cal: MatrixView,
    label_cal: &[f64],
    cal_weights: Option<&[f64]>,
    proba: MatrixView,
    weights: Option<&[f64]>,
    alpha: f64,
) -> Result<ConformalSets> {
    check_alpha(alpha)?;
    let k = proba_cal.cols();
    proba.expect_cols("probabilities of the rows to predict", k)?;
    if label_cal.len() != proba_cal.rows() {
        return Err(Error::LengthMismatch {
            argument: "y_cal".into(),
            expected: proba_cal.rows(),
            found: label_cal.len(),
        });
    }
    if cal_weights.is_some() != weights.is_some() {
        return Err(Error::param(
            "weights",
            "give weights for both the calibration rows and the rows to predict, or for neither",
        ));
    }
    proba_cal.validate("calibration probabilities", 1)?;
    proba.validate("probabilities", 0)?;
    check_new_weights(weights, proba.rows())?;
    let mut scores = Vec::with_capacity(label_cal.len());
    for (i, &y) in label_cal.iter().enumerate() {
        if y < 0.0 || y.fract() != 0.0 || y as usize >= k {
            return Err(Error::param(
                "y_cal",
                format!("row {i} has class index {y}, expected an integer in 0..{k}"),
            ));
        }
        scores.push(1.0 - proba_cal.row(i)[y as usize]);
    }
    let cal = Calibration::new(&scores, cal_weights)?;
    let m = proba.rows();
    let mut members = Vec::with_capacity(m * k);
    let mut threshold = Vec::with_capacity(m);
    for j in 0..m {
        let q = cal.threshold(weights.map_or(1.0, |w| w[j]), alpha);
        members.extend(proba.row(j).iter().map(|p| 1.0 - p <= q));
        threshold.push(q);
    }
    let n_infinite = threshold.iter().filter(|q| q.is_infinite()).count();
    Ok(ConformalSets {
        members,
        n_classes: k,
        threshold,
        n_infinite,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equal_weights_give_the_order_statistic() {
        // n = 9 scores 1..9, alpha = 0.2: ceil(0.8 * 10) = 8th smallest = 8.
        let y: Vec<f64> = (1..=9).map(f64::from).collect();
        let r = regression_intervals(&y, &[0.0; 9], None, &[0.0], None, 0.2).unwrap();
        assert_eq!(r.threshold, vec![8.0]);
        // alpha = 0.05: ceil(0.95 * 10) = 10 > 9: infinite.
        let r = regression_intervals(&y, &[0.0; 9], None, &[0.0, 1.0], None, 0.05).unwrap();
        assert!(
            r.threshold[0].is_infinite() && r.n_infinite == 2 && r.lower[1] == f64::NEG_INFINITY
        );
    }

    #[test]
    fn heavy_new_row_weight_gives_infinite_interval() {
        let y: Vec<f64> = (1..=9).map(f64::from).collect();
        let r = regression_intervals(
            &y,
            &[0.0; 9],
            Some(&[1.0; 9]),
            &[0.0, 0.0],
            Some(&[0.5, 50.0]),
            0.2,
        )
        .unwrap();
        assert!(r.threshold[0].is_finite() && r.threshold[1].is_infinite());
    }

    #[test]
    fn bad_inputs_are_named() {
        assert!(regression_intervals(&[1.0], &[1.0], None, &[0.0], None, 1.5).is_err());
        assert!(regression_intervals(&[1.0], &[1.0], Some(&[1.0]), &[0.0], None, 0.1).is_err());
        assert!(
            regression_intervals(&[1.0], &[1.0], Some(&[1.0]), &[0.0], Some(&[-1.0]), 0.1).is_err()
        );
    }
}
