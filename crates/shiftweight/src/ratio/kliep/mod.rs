//! KLIEP, the Kullback-Leibler importance estimation procedure (Sugiyama, Suzuki, Nakajima,
//! Kashima, von Buenau, Kawanabe 2008, Annals of the Institute of Statistical Mathematics 60).
//!
//! Model: r(x) = sum_l alpha_l k(x, c_l) with Gaussian kernels at `b` centres drawn from the
//! target. KLIEP maximises the likelihood of the target rows under the density r(x) p_source(x):
//!
//! ```text
//! maximise    1/n_t sum_t log( sum_l alpha_l k(x_t, c_l) )
//! subject to  1/n_s sum_s sum_l alpha_l k(x_s, c_l) = 1,   alpha >= 0
//! ```
//!
//! Solver: `sqp` (sequential quadratic programming on the simplex, with the updatable
//! Cholesky factor of `factor`).
//!
//! Width selection (`sigma = None`): likelihood cross-validation over `sigma_multiples` x the
//! median pairwise distance, with `folds` seeded folds. Two variants:
//! - [`KliepCv::SourceAndTarget`] (default): target AND source rows are split into folds; the
//!   normalisation constraint is fitted on the training-fold source rows only, and the held-out
//!   score is the log-likelihood of the held-out target rows under the model re-normalised on the
//!   held-out source rows, mean_t log r(x_t) - log mean_s r(x_s). A width whose weights explode
//!   on source rows the fit did not see is penalised.
//! - [`KliepCv::TargetOnly`]: the paper's criterion (Sugiyama et al. 2008, section 4): only target
//!   rows are held out, the constraint uses every source row, and the score is mean_t log r(x_t).
//!   Because the source rows that enforce the normalisation are also the rows it is judged on, it
//!   can favour narrow widths whose weights are large on unseen source rows.
//!
//! Choice among the widths: the one-standard-error rule (Breiman, Friedman, Olshen, Stone 1984,
//! section 3.4.3; Hastie, Tibshirani, Friedman 2009, section 7.10). The score of a width is the
//! mean over folds and its standard error is the fold-to-fold sd / sqrt(folds); the widest width
//! whose mean is within `se_margin` (default 1) standard errors of the best mean is chosen. Why:
//! the held-out log-likelihood is biased towards narrow widths. A narrow kernel puts large
//! coefficients on centres with little source mass near them, so the ratio has spikes where the
//! source is sparse; the held-out normaliser log mean_s r(x_s) usually misses those spikes (the
//! log of a mean of heavy-tailed values is biased low, Jensen's inequality), and the spikes
//! dominate the squared error under the source. `se_margin = 0` restores the plain best-mean choice.
//!
//! In both variants, the centres used in fold k are the centres whose target row is not held out
//! in fold k (a held-out row that is itself a centre would score k(x, x) = 1 and favour narrow
//! widths). The table records, per width, minus the mean held-out log-likelihood (lower is better).
//!
//! Complexity: O((n_s + n_t) b d) per width for kernel values and (folds + 1) fits per width.
//! Per solver iteration: one O(n_t b) pass for objective and gradient (one more per backtracking
//! step), O(n_t b) for 1/u, then either O(n_t |F|^2) for the Hessian block of the free columns
//! F plus one O(n_t b) pass per freed column and per multiplier check (small free sets), or
//! O(n_t b^2) for the whole block plus O(b |F|) per multiplier check (free sets of b/4 or more),
//! and O(|F|^2) per active-set step for the factor update and solve (O(|F|^3) when the factor
//! is formed afresh). Memory O((n_s + n_t) b) for the kernel
//! values of one width.

use super::{
    fit_meta, params, standardise_pair, EstimatorKind, FittedRatio, RatioEstimator, RatioForm,
    ScoreRow, Selection,
};
use crate::data::{kfold_assignment, validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par;
use crate::simd::{dot_portable, with_wide_simd};
use sqp::solve_kliep_batch;
use std::collections::BTreeMap;

mod factor;
mod sqp;
#[cfg(test)]
mod tests;

const TARGET_FOLD_TAG: u64 = 0x6b6c_6965_7074;
const SOURCE_FOLD_TAG: u64 = 0x6b6c_6965_7073;

/// Which rows likelihood cross-validation holds out.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum KliepCv {
    /// Hold out source and target rows; the constraint is fitted on training-fold source rows and
    /// the held-out source rows enter the score (default; see the module doc).
    #[default]
    SourceAndTarget,
    /// Hold out target rows only (Sugiyama et al. 2008).
    TargetOnly,
}

impl KliepCv {
    /// Short name: `"source_and_target"` or `"target_only"`.
    pub fn name(&self) -> &'static str {
        match self {
            KliepCv::SourceAndTarget => "source_and_target",
            KliepCv::TargetOnly => "target_only",
        }
    }
    /// Parses a short name.
    pub fn from_name(s: &str) -> Result<Self> {
        match s {
            "source_and_target" => Ok(KliepCv::SourceAndTarget),
            "target_only" => Ok(KliepCv::TargetOnly),
            other => Err(Error::param(
                "cv",
                format!(
                    "unknown variant {other:?}; expected \"source_and_target\" or \"target_only\""
                ),
            )),
        }
    }
}

/// KLIEP configuration. Build with [`KLRatio::new`] and the setters.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct KLRatio {
    /// Kernel width in standardised units; `None` (default) chooses it by likelihood CV.
    pub sigma: Option<f64>,
    /// Number of kernel centres drawn from the target (default 200, at least 1; capped at n_t).
    pub n_basis: usize,
    /// Cross-validation folds (default 5, at least 2).
    pub folds: usize,
    /// Seed of centres, folds and the median-heuristic subsample (default 0).
    pub seed: u64,
    /// Which rows the cross-validation holds out (default source and target).
    pub cv: KliepCv,
    /// Candidate widths as multiples of the median distance (default 1/8 ... 8, seven values).
    pub sigma_multiples: Vec<f64>,
    /// Stop when the certified bound on the objective gap is below this (default 1e-6, > 0).
    pub tol: f64,
    /// Most solver iterations per fit (default 10,000, at least 1; a cap that should never bind).
    pub max_iter: usize,
    /// One-standard-error rule: the widest width whose mean CV score is within this many
    /// standard errors of the best is chosen (default 1.0; 0 picks the best mean).
    pub se_margin: f64,
}

impl Default for KLRatio {
    fn default() -> Self {
        Self {
            sigma: None,
            n_basis: 200,
            folds: 5,
            seed: 0,
            cv: KliepCv::SourceAndTarget,
            sigma_multiples: vec![0.125, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0],
            tol: 1e-6,
            max_iter: 10_000,
            se_margin: 1.0,
        }
    }
}

impl KLRatio {
    /// Defaults: width by source-and-target likelihood CV, 200 centres, 5 folds, seed 0.
    pub fn new() -> Self {
        Self::default()
    }
    /// Fixes the kernel width (standardised units, > 0).
    pub fn sigma(mut self, sigma: Option<f64>) -> Self {
        self.sigma = sigma;
        self
    }
    /// Number of centres (>= 1).
    pub fn n_basis(mut self, n: usize) -> Self {
        self.n_basis = n;
        self
    }
    /// Cross-validation folds (>= 2).
    pub fn folds(mut self, k: usize) -> Self {
        self.folds = k;
        self
    }
    /// Seed of every random choice.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Cross-validation variant.
    pub fn cv(mut self, cv: KliepCv) -> Self {
        self.cv = cv;
        self
    }
    /// Width grid, as multiples of the median distance (each > 0).
    pub fn sigma_multiples(mut self, m: Vec<f64>) -> Self {
        self.sigma_multiples = m;
        self
    }
    /// Stopping tolerance on the certified objective gap (> 0).
    pub fn tol(mut self, tol: f64) -> Self {
        self.tol = tol;
        self
    }
    /// Most solver iterations per fit (>= 1).
    pub fn max_iter(mut self, n: usize) -> Self {
        self.max_iter = n;
        self
    }

    /// Margin of the one-standard-error width rule, in standard errors (finite, >= 0).
    pub fn se_margin(mut self, m: f64) -> Self {
        self.se_margin = m;
        self
    }

    /// Rejects out-of-range settings with an error naming the parameter.
    pub fn check(&self) -> Result<()> {
        if let Some(s) = self.sigma {
            kernel::check_sigma("sigma", s)?;
        }
        if self.n_basis == 0 {
            return Err(Error::param("n_basis", "must be at least 1"));
        }
        crate::data::check_folds(self.folds)?;
        super::check_grid("sigma_multiples", &self.sigma_multiples, false)?;
        if !(self.tol.is_finite() && self.tol > 0.0) {
            return Err(Error::param(
                "tol",
                format!("must be finite and > 0, got {}", self.tol),
            ));
        }
        if self.max_iter == 0 {
            return Err(Error::param("max_iter", "must be at least 1"));
        }
        if !(self.se_margin.is_finite() && self.se_margin >= 0.0) {
            return Err(Error::param(
                "se_margin",
                format!("must be finite and >= 0, got {}", self.se_margin),
            ));
        }
        Ok(())
    }
}

/// Row-major kernel matrix of `x` against `centres` (n x b), computed chunk by chunk in parallel.
fn kernel_matrix(x: MatrixView, centres: MatrixView, sigma: f64) -> Vec<f64> {
    use rayon::prelude::*;
    let b = centres.rows();
    let c_sq = kernel::row_sq_norms(centres);
    let mut out = vec![0.0; x.rows() * b];
    out.par_chunks_mut(crate::par::CHUNK_ROWS * b.max(1))
        .enumerate()
        .for_each(|(k, o)| {
            let start = k * crate::par::CHUNK_ROWS;
            let m = o.len() / b.max(1);
            kernel::kernel_block_into(x.slice_rows(start, start + m), centres, &c_sq, sigma, o);
        });
    out
}

/// r at every row of a kernel matrix with `b` columns whose label in `fold` is `f`.
fn evaluate_fold(a: &[f64], b: usize, fold: &[usize], f: usize, alpha: &[f64]) -> Vec<f64> {
    with_wide_simd(|| {
        a.chunks_exact(b)
            .zip(fold)
            .filter(|(_, &g)| g == f)
            .map(|(row, _)| dot_portable(row, alpha))
            .collect()
    })
}

/// Minus the held-out log-likelihood of one width in each fold (lower is better); `None` when
/// some fold has a target row with no kernel mass or a held-out normaliser that is not finite.
/// The `k` fold fits share the target kernel matrix, each reading only its training rows
/// ([`solve_kliep_batch`]).
#[allow(clippy::too_many_arguments)]
fn cv_score(
    kt: &[f64],
    ks: &[f64],
    b: usize,
    centre_rows: &[usize],
    fold_t: &[usize],
    fold_s: &[usize],
    k: usize,
    cfg: &KLRatio,
) -> Option<Vec<f64>> {
    // Per-fold column sums of the source kernel rows; the training rows of fold f are all rows
    // but fold f's (source-and-target) or every row (target-only).
    let mut fold_sums = vec![vec![0.0f64; b]; k];
    let mut fold_rows = vec![0usize; k];
    for (row, &f) in ks.chunks_exact(b).zip(fold_s) {
        par::add_into(&mut fold_sums[f], row);
        fold_rows[f] += 1;
    }
    let mut total = vec![0.0f64; b];
    for s in &fold_sums {
        par::add_into(&mut total, s);
    }
    let n_s = fold_s.len();
    let mut problems = Vec::with_capacity(k);
    for f in 0..k {
        // Centres whose target row is held out in fold f are not used in fold f.
        let h: Vec<f64> = (0..b)
            .map(|l| {
                if fold_t[centre_rows[l]] == f {
                    return 0.0;
                }
                match cfg.cv {
                    KliepCv::SourceAndTarget => {
                        (total[l] - fold_sums[f][l]) / (n_s - fold_rows[f]).max(1) as f64
                    }
                    KliepCv::TargetOnly => total[l] / n_s as f64,
                }
            })
            .collect();
        if (0..b).all(|l| fold_t[centre_rows[l]] == f) {
            return None;
        }
        problems.push((h, Some(f)));
    }
    let sols = solve_kliep_batch(kt, b, Some(fold_t), &problems, cfg.tol, cfg.max_iter);
    let mut per_fold = Vec::with_capacity(k);
    for (f, sol) in sols.into_iter().enumerate() {
        let sol = sol?;
        let rt = evaluate_fold(kt, b, fold_t, f, &sol.alpha);
        if rt.is_empty() || rt.iter().any(|v| !(*v > 0.0)) {
            return None;
        }
        let mut score = rt.iter().map(|v| v.ln()).sum::<f64>() / rt.len() as f64;
        if cfg.cv == KliepCv::SourceAndTarget {
            let rs = evaluate_fold(ks, b, fold_s, f, &sol.alpha);
            let mean_s = rs.iter().sum::<f64>() / rs.len() as f64;
            if !(mean_s > 0.0 && mean_s.is_finite()) {
                return None;
            }
            score -= mean_s.ln();
        }
        per_fold.push(-score);
    }
    Some(per_fold)
}

/// The width chosen from per-width (mean, standard error) CV scores: the widest width whose mean
/// is within `se_margin` standard errors of the best mean (the one-standard-error rule; Breiman,
/// Friedman, Olshen, Stone 1984, section 3.4.3; Hastie, Tibshirani, Friedman 2009, section 7.10).
/// `None` when no width has a finite score.
fn choose_width(sigmas: &[f64], stats: &[Option<(f64, f64)>], se_margin: f64) -> Option<usize> {
    let (best, (best_mean, best_se)) = stats
        .iter()
        .enumerate()
        .filter_map(|(i, s)| s.filter(|(m, _)| m.is_finite()).map(|s| (i, s)))
        .min_by(|a, b| a.1 .0.total_cmp(&b.1 .0))?;
    let limit = best_mean + se_margin * best_se;
    let mut chosen = best;
    for (i, s) in stats.iter().enumerate() {
        if let Some((m, _)) = s {
            if *m <= limit && sigmas[i] > sigmas[chosen] {
                chosen = i;
            }
        }
    }
    Some(chosen)
}

impl RatioEstimator for KLRatio {
    /// Holds the kernel width fixed when it was searched (`sigma` is `None`).
    fn with_chosen(&self, chosen: &BTreeMap<String, f64>) -> Option<crate::ratio::BoxedEstimator> {
        let sigma = chosen
            .get("sigma")
            .copied()
            .filter(|_| self.sigma.is_none())?;
        let mut e = self.clone();
        e.sigma = Some(sigma);
        Some(Box::new(e))
    }

    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, self.folds.max(2))?;
        let (st, zs, zt, warnings) = standardise_pair(source, target);
        let (n_s, n_t) = (zs.rows(), zt.rows());
        // Centres: seeded target rows, remembering which rows they are (for the CV).
        let b = self.n_basis.min(n_t);
        let centre_rows = {
            use rand::seq::index::sample;
            let mut r = crate::random::rng(self.seed ^ 0x6365_6e74_7265);
            let mut idx = sample(&mut r, n_t, b).into_vec();
            idx.sort_unstable();
            idx
        };
        let centres = zt.view().select_rows(&centre_rows);
        let median = kernel::median_distance(&[zs.view(), zt.view()], self.seed);
        let sigmas: Vec<f64> = match self.sigma {
            Some(s) => vec![s],
            None => self.sigma_multiples.iter().map(|m| m * median).collect(),
        };

        let mut table = Vec::new();
        let mut best = 0usize;
        if sigmas.len() > 1 {
            let fold_t = kfold_assignment(n_t, self.folds, self.seed ^ TARGET_FOLD_TAG)?;
            let fold_s = kfold_assignment(n_s, self.folds, self.seed ^ SOURCE_FOLD_TAG)?;
            // Per width: mean and standard error (sd / sqrt(folds)) of the per-fold scores.
            let mut stats: Vec<Option<(f64, f64)>> = Vec::with_capacity(sigmas.len());
            for &sigma in &sigmas {
                let kt = kernel_matrix(zt.view(), centres.view(), sigma);
                let ks = kernel_matrix(zs.view(), centres.view(), sigma);
                let per_fold = cv_score(
                    &kt,
                    &ks,
                    b,
                    &centre_rows,
                    &fold_t,
                    &fold_s,
                    self.folds,
                    self,
                );
                let st = per_fold.map(|v| crate::metrics::mean_and_std_error(&v));
                let (score, se) = st.unwrap_or((f64::INFINITY, f64::NAN));
                table.push(ScoreRow {
                    params: params([("sigma", sigma), ("std_error", se)]),
                    score,
                });
                stats.push(st);
            }
            best = choose_width(&sigmas, &stats, self.se_margin).ok_or_else(|| Error::Numerical {
                context: "KLIEP likelihood cross-validation".into(),
                reason: "no candidate width gave a finite held-out score; try larger sigma_multiples".into(),
            })?;
        }
        let sigma = sigmas[best];
        let kt = kernel_matrix(zt.view(), centres.view(), sigma);
        let h = crate::ratio::lsif::kernel_sums(zs.view(), centres.view(), &[sigma], false)
            .sum
            .remove(0);
        let h: Vec<f64> = h.iter().map(|v| v / n_s as f64).collect();
        let sol = solve_kliep_batch(&kt, b, None, &[(h.clone(), None)], self.tol, self.max_iter)
            .pop()
            .flatten()
            .ok_or_else(|| Error::Numerical {
            context: "KLIEP fit".into(),
            reason: format!(
                "the kernel width {sigma} is so small that some target row has no kernel mass at any centre; use a larger sigma"
            ),
        })?;
        let mut warnings = warnings;
        if sol.gap > self.tol {
            warnings.push(format!(
                "KLIEP stopped after {} iterations with objective gap bound {:.3e} > tol = {:.1e} ({})",
                sol.iterations, sol.gap, self.tol,
                if sol.iterations >= self.max_iter {
                    "max_iter reached; raise it for a tighter fit"
                } else {
                    "no further progress at floating-point precision; a tol this small cannot be certified here"
                }
            ));
        }
        let n_zero_h = h.iter().filter(|v| **v <= 0.0).count();
        if n_zero_h > 0 {
            warnings.push(format!(
                "{n_zero_h} centre(s) have no source mass at this width and were given coefficient 0"
            ));
        }
        let mut fitted = FittedRatio {
            kind: EstimatorKind::Kliep,
            standardizer: st,
            form: RatioForm::KernelExpansion { sigma, centres, coef: sol.alpha },
            source_weights: Vec::new(),
            selection: Selection {
                criterion: format!(
                    "minus held-out log-likelihood, {}-fold likelihood CV holding out {} rows (Sugiyama et al. 2008{})",
                    self.folds,
                    if self.cv == KliepCv::SourceAndTarget { "source and target" } else { "target" },
                    if self.cv == KliepCv::SourceAndTarget { ", normalised on held-out source rows" } else { "" }
                ),
                chosen: params([
                    ("sigma", sigma),
                    ("n_basis", b as f64),
                    ("folds", self.folds as f64),
                    ("median_distance", median),
                    ("objective", sol.objective),
                    ("gap_bound", sol.gap),
                    ("iterations", sol.iterations as f64),
                    ("cv_holds_out_source", if self.cv == KliepCv::SourceAndTarget { 1.0 } else { 0.0 }),
                    ("se_margin", self.se_margin),
                ]),
                table,
                ..Default::default()
            },
            meta: fit_meta(&source, &target, self.seed),
            warnings,
            encoding: None,
            cap: None,
        };
        fitted.source_weights = fitted.ratio(source)?;
        Ok(fitted)
    }
}
