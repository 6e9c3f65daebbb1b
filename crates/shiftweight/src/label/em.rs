//! Maximum-likelihood target class proportions by EM (Saerens, Latinne & Decaestecker 2002,
//! "Adjusting the outputs of a classifier to new a priori probabilities: a simple procedure",
//! Neural Computation 14, 21-41), on probabilities calibrated on the source first
//! ([`super::calibrate`], Alexandari, Kundaje & Shrikumar 2020).
//!
//! With pi_iy the calibrated source posteriors of target row i and p_y the source class shares,
//! p(x | y) unchanged means the target density is sum_y q_y p(x | y), and the target
//! log-likelihood as a function of q, up to a constant, is
//!
//! L(q) = sum_i ln sum_y q_y pi_iy / p_y, q in the simplex.
//!
//! L is concave; EM climbs it monotonically: E-step pi'_iy proportional to (q_y / p_y) pi_iy,
//! M-step q_y = mean_i pi'_iy. Each iteration is O(n_t K); iteration stops when no proportion
//! moves by more than 1e-10 or after `max_iter` iterations (then a warning).
//!
//! Interval: a seeded percentile bootstrap. Each replicate resamples the source rows within each
//! class (class counts kept) and the target rows, refits the calibration and reruns EM (both
//! warm-started from the full-data fit); the interval is the (1 - level)/2 and (1 + level)/2
//! quantiles of the replicates (linear interpolation, numpy's default). Why not the observed
//! information of L: the estimate also depends on the calibration and on the class shares fitted
//! on the source, whose uncertainty L's curvature leaves out, and the Wald interval behaves
//! badly when a proportion is near 0, where a percentile interval stays inside [0, 1].
//! Cost: `bootstrap` x (calibration O(n_s K^2) per Newton step + EM), replicates in parallel;
//! the result does not depend on the thread count (every replicate has its own seeded stream).

use super::calibrate::Calibration;
use crate::data::Matrix;
use crate::error::Result;
use crate::random::rng;
use rand::Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

const TAG_BOOT: u64 = 0x6c61_6265_6c5f_6273;
/// Convergence tolerance of EM: the largest change of any proportion in one iteration.
pub const EM_TOLERANCE: f64 = 1e-10;

/// Options of [`estimate`].
#[derive(Debug, Clone, PartialEq)]
pub struct EmOptions {
    /// Confidence level of the interval.
    pub level: f64,
    /// Bootstrap replicates (0 = no interval).
    pub bootstrap: usize,
    /// Seed of the bootstrap.
    pub seed: u64,
    /// Largest number of EM iterations.
    pub max_iter: usize,
}

/// The EM estimate on calibrated probabilities.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EmEstimate {
    /// Maximum-likelihood target proportions.
    pub proportions: Vec<f64>,
    /// Lower interval ends (absent without bootstrap).
    pub interval_low: Option<Vec<f64>>,
    /// Upper interval ends (absent without bootstrap).
    pub interval_high: Option<Vec<f64>>,
    /// Bootstrap standard deviation of each proportion (absent without bootstrap).
    pub bootstrap_std: Option<Vec<f64>>,
    /// EM iterations on the full data.
    pub iterations: usize,
    /// Whether EM met its tolerance.
    pub converged: bool,
    /// Mean target log-likelihood gain over the source mix, (L(q) - L(p)) / n_t (>= 0).
    pub log_likelihood_gain: f64,
    /// The calibration fitted on the source rows and applied to the target rows.
    pub calibration: Calibration,
    /// Bootstrap replicates that failed (calibration could not be fitted); they are left out.
    pub failed_replicates: usize,
    /// Warnings (no convergence).
    pub warnings: Vec<String>,
}

/// Outcome of one EM run.
#[derive(Debug, Clone, PartialEq)]
pub struct EmFit {
    /// The fixed point reached.
    pub proportions: Vec<f64>,
    /// Iterations used.
    pub iterations: usize,
    /// Whether the tolerance was met.
    pub converged: bool,
}

/// Mean target log-likelihood (1/n) sum_i ln sum_y q_y pi_iy / p_y.
pub fn mean_log_likelihood(posteriors: &Matrix, priors: &[f64], q: &[f64]) -> f64 {
    let n = posteriors.rows();
    let mut total = 0.0;
    for i in 0..n {
        let s: f64 = posteriors
            .row(i)
            .iter()
            .zip(q.iter().zip(priors))
            .map(|(pi, (qy, py))| pi * qy / py)
            .sum();
        total += s.ln();
    }
    total / n as f64
}

/// Runs EM from `start` on source posteriors of target rows. O(n K) per iteration.
pub fn fixed_point(posteriors: &Matrix, priors: &[f64], start: &[f64], max_iter: usize) -> EmFit {
    let (n, k) = (posteriors.rows(), posteriors.cols());
    let mut q = start.to_vec();
    let mut next = vec![0.0; k];
    let mut w = vec![0.0; k];
    for it in 1..=max_iter {
        for y in 0..k {
            w[y] = q[y] / priors[y];
        }
        next.iter_mut().for_each(|v| *v = 0.0);
        for i in 0..n {
            let row = posteriors.row(i);
            let s: f64 = row.iter().zip(&w).map(|(a, b)| a * b).sum();
            if s > 0.0 {
                for y in 0..k {
                    next[y] += row[y] * w[y] / s;
                }
            }
        }
        let total: f64 = next.iter().sum();
        let mut change: f64 = 0.0;
        for y in 0..k {
            let v = next[y] / total;
            change = change.max((v - q[y]).abs());
            q[y] = v;
        }
        if change < EM_TOLERANCE {
            return EmFit {
                proportions: q,
                iterations: it,
                converged: true,
            };
        }
    }
    EmFit {
        proportions: q,
        iterations: max_iter,
        converged: false,
    }
}

/// Calibrates on the source, runs EM on the target, and bootstraps the interval.
pub fn estimate(
    ps: &Matrix,
    labels: &[usize],
    counts: &[usize],
    pt: &Matrix,
    opts: &EmOptions,
) -> Result<EmEstimate> {
    let k = counts.len();
    let n_s = ps.rows();
    let priors: Vec<f64> = counts.iter().map(|&c| c as f64 / n_s as f64).collect();
    let calibration = Calibration::fit(ps, labels, None)?;
    let mut warnings = Vec::new();
    if !calibration.converged {
        warnings.push(format!(
            "the calibration did not converge (inverse temperature {:.3} after {} steps); the \
             classifier may make almost no error on the source rows, which suggests the source \
             probabilities are not out of fold",
            calibration.inverse_temperature, calibration.iterations
        ));
    }
    let post = calibration.apply(pt);
    let fit = fixed_point(&post, &priors, &priors, opts.max_iter);
    if !fit.converged {
        warnings.push(format!(
            "EM did not converge in {} iterations; raise max_iter",
            opts.max_iter
        ));
    }
    let log_likelihood_gain = mean_log_likelihood(&post, &priors, &fit.proportions)
        - mean_log_likelihood(&post, &priors, &priors);

    let (mut interval_low, mut interval_high, mut bootstrap_std) = (None, None, None);
    let mut failed_replicates = 0;
    if opts.bootstrap > 0 {
        let by_class: Vec<Vec<usize>> = (0..k)
            .map(|j| (0..n_s).filter(|&i| labels[i] == j).collect())
            .collect();
        let n_t = pt.rows();
        let reps: Vec<Option<Vec<f64>>> = (0..opts.bootstrap)
            .into_par_iter()
            .map(|b| {
                let mut r =
                    rng(opts.seed ^ TAG_BOOT ^ (b as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15));
                let mut src_idx = Vec::with_capacity(n_s);
                for rows in &by_class {
                    for _ in 0..rows.len() {
                        src_idx.push(rows[r.random_range(0..rows.len())]);
                    }
                }
                let tgt_idx: Vec<usize> = (0..n_t).map(|_| r.random_range(0..n_t)).collect();
                let ps_b = ps.view().select_rows(&src_idx);
                let labels_b: Vec<usize> = src_idx.iter().map(|&i| labels[i]).collect();
                let cal = Calibration::fit(&ps_b, &labels_b, Some(&calibration)).ok()?;
                let post_b = cal.apply(&pt.view().select_rows(&tgt_idx));
                Some(fixed_point(&post_b, &priors, &fit.proportions, opts.max_iter).proportions)
            })
            .collect();
        let ok: Vec<Vec<f64>> = reps.into_iter().flatten().collect();
        failed_replicates = opts.bootstrap - ok.len();
        if failed_replicates > 0 {
            warnings.push(format!(
                "{failed_replicates} of {} bootstrap replicates failed to calibrate and were left out",
                opts.bootstrap
            ));
        }
        if ok.len() >= 2 {
            let alpha = (1.0 - opts.level) / 2.0;
            let (mut lo, mut hi, mut sd) = (vec![0.0; k], vec![0.0; k], vec![0.0; k]);
            for j in 0..k {
                let mut v: Vec<f64> = ok.iter().map(|q| q[j]).collect();
                v.sort_by(f64::total_cmp);
                lo[j] = crate::order::quantile_of_sorted(&v, alpha);
                hi[j] = crate::order::quantile_of_sorted(&v, 1.0 - alpha);
                let m = v.iter().sum::<f64>() / v.len() as f64;
                sd[j] = (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64)
                    .sqrt();
            }
            (interval_low, interval_high, bootstrap_std) = (Some(lo), Some(hi), Some(sd));
        }
    }
    Ok(EmEstimate {
        proportions: fit.proportions,
        interval_low,
        interval_high,
        bootstrap_std,
        iterations: fit.iterations,
        converged: fit.converged,
        log_likelihood_gain,
        calibration,
        failed_replicates,
        warnings,
    })
}
