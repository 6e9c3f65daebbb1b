//! Bias-corrected temperature scaling (Alexandari, Kundaje & Shrikumar 2020; temperature scaling
//! itself: Guo, Pleiss, Sun & Weinberger 2017, "On calibration of modern neural networks", ICML).
//!
//! With l_ik = ln p_ik the classifier's log-probabilities (a valid set of logits: softmax is
//! unchanged by a constant per row), the calibrated probabilities are
//!
//! pi_ik = softmax_k(a l_ik + b_k), a = 1 / T > 0, b_{K-1} = 0,
//!
//! and (a, b) minimise the negative log-likelihood of the labelled held-out source rows,
//! sum_i [ logsumexp_k(a l_ik + b_k) - a l_{i,y_i} - b_{y_i} ]. The objective is convex (a
//! multinomial log-likelihood linear in the K parameters), so Newton's method with backtracking
//! finds its minimum; each step is O(n K^2 + K^3). At the minimum the gradient in b_k is zero,
//! i.e. the calibrated probabilities average exactly to the source class shares: the calibrated
//! model and the source priors used by EM agree, which is the point of the bias terms.
//!
//! Probabilities are floored at 1e-300 before the logarithm, so a zero stays a very small value.

use crate::data::Matrix;
use crate::error::{Error, Result};
use faer::prelude::*;
use faer::{Mat, Side};
use serde::{Deserialize, Serialize};

const FLOOR: f64 = 1e-300;
/// Largest inverse temperature: a source on which the classifier makes no error has no finite
/// optimum (a grows without bound); the fit stops here and says so.
pub const MAX_INVERSE_TEMPERATURE: f64 = 1e3;

/// A fitted calibration map softmax(a ln p + b).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Calibration {
    /// a = 1 / T, the inverse temperature (> 0).
    pub inverse_temperature: f64,
    /// b_k, the per-class bias (last entry 0).
    pub bias: Vec<f64>,
    /// Newton iterations used.
    pub iterations: usize,
    /// Whether the gradient reached its tolerance (false also when `inverse_temperature` hit
    /// [`MAX_INVERSE_TEMPERATURE`]).
    pub converged: bool,
    /// Mean negative log-likelihood of the source rows before calibration.
    pub log_loss_before: f64,
    /// Mean negative log-likelihood of the source rows after calibration.
    pub log_loss_after: f64,
}

/// Calibrated probabilities of one row into `out`; returns ln sum exp (the row's normaliser).
fn calibrated_row(row: &[f64], a: f64, b: &[f64], out: &mut [f64]) -> f64 {
    let mut m = f64::NEG_INFINITY;
    for (k, p) in row.iter().enumerate() {
        out[k] = a * p.max(FLOOR).ln() + b[k];
        m = m.max(out[k]);
    }
    let mut s = 0.0;
    for v in out.iter_mut() {
        *v = (*v - m).exp();
        s += *v;
    }
    for v in out.iter_mut() {
        *v /= s;
    }
    m + s.ln()
}

/// Mean negative log-likelihood of labelled rows under softmax(a ln p + b).
fn mean_nll(p: &Matrix, labels: &[usize], a: f64, b: &[f64]) -> f64 {
    let k = p.cols();
    let mut buf = vec![0.0; k];
    let mut total = 0.0;
    for (i, &y) in labels.iter().enumerate() {
        let row = p.row(i);
        let lse = calibrated_row(row, a, b, &mut buf);
        total += lse - a * row[y].max(FLOOR).ln() - b[y];
    }
    total / labels.len() as f64
}

impl Calibration {
    /// Fits (a, b) on checked probabilities `p` of labelled rows, starting from `start` (or the
    /// identity). Newton steps on the mean objective until the largest gradient entry is below
    /// 1e-9 or 100 steps.
    pub fn fit(p: &Matrix, labels: &[usize], start: Option<&Calibration>) -> Result<Self> {
        let (n, k) = (p.rows(), p.cols());
        let nf = n as f64;
        let dim = k; // a, b_0 .. b_{K-2}
        let (mut a, mut b) = match start {
            Some(c) => (c.inverse_temperature, c.bias.clone()),
            None => (1.0, vec![0.0; k]),
        };
        let log_loss_before = mean_nll(p, labels, 1.0, &vec![0.0; k]);
        let mut f = mean_nll(p, labels, a, &b);
        let mut pi = vec![0.0; k];
        let mut converged = false;
        let mut iterations = 0;
        for _ in 0..100 {
            let mut g = vec![0.0; dim];
            let mut h = Mat::<f64>::zeros(dim, dim);
            for (i, &y) in labels.iter().enumerate() {
                let row = p.row(i);
                calibrated_row(row, a, &b, &mut pi);
                let l: Vec<f64> = row.iter().map(|v| v.max(FLOOR).ln()).collect();
                let el: f64 = pi.iter().zip(&l).map(|(x, y)| x * y).sum();
                let el2: f64 = pi.iter().zip(&l).map(|(x, y)| x * y * y).sum();
                g[0] += el - l[y];
                h[(0, 0)] += el2 - el * el;
                for c in 0..k - 1 {
                    let ind = if c == y { 1.0 } else { 0.0 };
                    g[1 + c] += pi[c] - ind;
                    let hab = pi[c] * (l[c] - el);
                    h[(0, 1 + c)] += hab;
                    h[(1 + c, 0)] += hab;
                    for d in 0..k - 1 {
                        let diag = if c == d { pi[c] } else { 0.0 };
                        h[(1 + c, 1 + d)] += diag - pi[c] * pi[d];
                    }
                }
            }
            for v in g.iter_mut() {
                *v /= nf;
            }
            let gmax = g.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            if gmax < 1e-9 {
                converged = true;
                break;
            }
            iterations += 1;
            // Newton direction; a tiny ridge keeps it defined when the Hessian is singular (for
            // instance a column of probabilities that is constant).
            let scale = (0..dim).map(|j| h[(j, j)]).fold(0.0f64, f64::max) / nf;
            let ridge = 1e-10 * scale.max(1e-300);
            let mut hm = Mat::<f64>::zeros(dim, dim);
            for r in 0..dim {
                for c in 0..dim {
                    hm[(r, c)] = h[(r, c)] / nf + if r == c { ridge } else { 0.0 };
                }
            }
            let rhs = Mat::<f64>::from_fn(dim, 1, |r, _| -g[r]);
            let step = hm
                .llt(Side::Lower)
                .map_err(|e| Error::Numerical {
                    context: "calibration (bias-corrected temperature scaling)".into(),
                    reason: format!("{e:?}"),
                })?
                .solve(rhs);
            let slope: f64 = (0..dim).map(|r| g[r] * step[(r, 0)]).sum();
            let mut t = 1.0;
            let mut accepted = false;
            for _ in 0..60 {
                let na = a + t * step[(0, 0)];
                if na > 0.0 {
                    let mut nb = b.clone();
                    for c in 0..k - 1 {
                        nb[c] += t * step[(1 + c, 0)];
                    }
                    let nf_ = mean_nll(p, labels, na, &nb);
                    if nf_ <= f + 1e-4 * t * slope {
                        a = na;
                        b = nb;
                        accepted = f - nf_ > 1e-15 * f.abs().max(1.0);
                        f = nf_;
                        break;
                    }
                }
                t *= 0.5;
            }
            if a >= MAX_INVERSE_TEMPERATURE {
                a = MAX_INVERSE_TEMPERATURE;
                f = mean_nll(p, labels, a, &b);
                break;
            }
            if !accepted {
                // No further decrease is possible in double precision: the minimum is reached.
                converged = gmax < 1e-6;
                break;
            }
        }
        Ok(Calibration {
            inverse_temperature: a,
            bias: b,
            iterations,
            converged,
            log_loss_before,
            log_loss_after: f,
        })
    }

    /// Calibrated probabilities of every row of `p`. O(n K).
    pub fn apply(&self, p: &Matrix) -> Matrix {
        let (n, k) = (p.rows(), p.cols());
        let mut out = vec![0.0; n * k];
        for i in 0..n {
            calibrated_row(
                p.row(i),
                self.inverse_temperature,
                &self.bias,
                &mut out[i * k..(i + 1) * k],
            );
        }
        Matrix::new(out, n, k).expect("n * k buffer")
    }

    /// Consistency of a calibration read from a document.
    pub(crate) fn check(&self, k: usize) -> Result<()> {
        if self.bias.len() != k
            || !(self.inverse_temperature > 0.0 && self.inverse_temperature.is_finite())
            || self.bias.iter().any(|v| !v.is_finite())
        {
            return Err(Error::ModelFile(format!(
                "label-shift calibration must have a positive finite inverse temperature and {k} \
                 finite biases"
            )));
        }
        Ok(())
    }
}
