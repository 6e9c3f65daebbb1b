//! Density ratio from a probabilistic classifier of target-vs-source rows, with the class-prior
//! correction (Bickel, Brueckner, Scheffer 2009, JMLR 10; common practice).
//!
//! Label the pooled rows y = 1 (target) and y = 0 (source) and fit an L2-penalised logistic
//! regression on a feature map phi of the standardised rows:
//!
//! ```text
//! minimise  sum_i logloss(y_i, eta_i) + (l2/2) |beta|^2,   eta(x) = b + beta' phi(x)
//! ```
//!
//! (the intercept b is unpenalised: scikit-learn's `LogisticRegression(C = 1/l2)`). By Bayes' rule
//! p(target | x) / p(source | x) = (n_t p_t(x)) / (n_s p_s(x)), so
//!
//! ```text
//! log w(x) = eta(x) + ln(n_s / n_t)
//! ```
//!
//! and the weight is its exponential, with log w capped at [`LOG_WEIGHT_CAP`] so it never overflows.
//! The fit reuses the weighted Newton solver of [`crate::learn`].
//!
//! Feature maps (`phi`, on pooled-standardised rows z):
//! - `Linear`: phi(z) = z (d features); the log-ratio is linear, exact for two Gaussians with one
//!   shared covariance.
//! - `Quadratic`: z and every product z_j z_k (j <= k): d + d(d+1)/2 features; the log-ratio of any
//!   two Gaussians is quadratic, so this family contains it exactly.
//! - `Fourier`: `n_fourier` (default 100) random Fourier features sqrt(2/D) cos(omega_l' z + b_l),
//!   omega_l ~ N(0, I / sigma^2), b_l ~ U[0, 2 pi), which approximate a Gaussian kernel of width
//!   sigma (Rahimi & Recht 2007, NIPS 20); sigma defaults to the median pairwise distance of the
//!   standardised rows (median heuristic). Frequencies and offsets are seeded and stored in the
//!   model file, so a loaded model scores new rows identically.
//!
//! Cross-fitting: source and target rows are each split into `folds` seeded folds; the weight of a
//! source row comes from the model fitted with that row's fold held out (so no row's weight is
//! scored by a model that saw it), with the class-prior factor of that model's own training counts.
//! The held-out rows get weight 0 in the solver, which is the same problem as dropping them (no
//! copies). `ratio(X)` on new rows uses the model fitted on all rows. When `l2` is `None`, it is
//! chosen from `l2_grid` by the out-of-fold log-loss of the same folds. The standardiser, the
//! median-heuristic width and the Fourier frequencies use the pooled rows without labels.
//!
//! Starts: for each penalty the first fold is solved from the solver's usual start; the other
//! folds start from its solution and the fit on all rows from the mean of the fold solutions. These
//! differ from each other by sampling error only, so those solves take about two Newton steps
//! instead of five or six; every solve still runs to the same tolerance, so the results are the
//! ones each fold would reach alone (tested).
//!
//! Complexity, for n = n_s + n_t rows and p mapped features: O(n p) memory for the pooled mapped
//! rows (one copy of the input with linear features); each Newton iteration is O(n p^2 + p^3); a
//! fit is (folds + 1) x |grid| solves, the first of each penalty 3-6 iterations after a start on a
//! subsample, the others about 2. Scoring m new rows is O(m p d) in fixed-size chunks.

use super::{
    fit_meta, fit_standardizer, params, EstimatorKind, FittedRatio, RatioEstimator, RatioForm,
    ScoreRow, Selection,
};
use crate::data::{kfold_assignment, validate_pair, Matrix, MatrixView};
use crate::error::{Error, Result};
use crate::kernel;
use crate::learn::{fit_logistic_unchecked, fit_logistic_warm, log1pexp};
use crate::par::CHUNK_ROWS;
use rand::Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Largest log-weight kept: exp(700) ~ 1e304 is still finite in double precision.
pub const LOG_WEIGHT_CAP: f64 = 700.0;
/// Newton iterations allowed per logistic fit.
const MAX_ITER: usize = 100;
/// Newton stopping tolerance (largest gradient entry relative to the total weight).
const TOL: f64 = 1e-10;

/// Which feature map the classifier uses (configuration; see the module docs).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Features {
    /// The standardised features themselves.
    Linear,
    /// Standardised features and all their pairwise products (including squares).
    Quadratic,
    /// Random Fourier features of a Gaussian kernel.
    Fourier,
}

impl Features {
    /// Parses "linear", "quadratic" or "fourier".
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "linear" => Ok(Features::Linear),
            "quadratic" => Ok(Features::Quadratic),
            "fourier" => Ok(Features::Fourier),
            other => Err(Error::param(
                "features",
                format!("must be \"linear\", \"quadratic\" or \"fourier\", got {other:?}"),
            )),
        }
    }
    /// The name accepted by [`Features::parse`].
    pub fn name(&self) -> &'static str {
        match self {
            Features::Linear => "linear",
            Features::Quadratic => "quadratic",
            Features::Fourier => "fourier",
        }
    }
}

/// A fitted feature map, as stored in the model file (acts on standardised rows).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "map", rename_all = "snake_case")]
pub enum FeatureMap {
    /// phi(z) = z.
    Linear,
    /// phi(z) = (z, z_j z_k for j <= k), in that order.
    Quadratic,
    /// phi(z)_l = sqrt(2/D) cos(omega_l' z + offset_l).
    Fourier {
        /// Kernel width the frequencies were drawn for (standardised units).
        sigma: f64,
        /// D x d matrix of frequencies omega_l, one per row.
        frequencies: Matrix,
        /// D phase offsets in [0, 2 pi).
        offsets: Vec<f64>,
    },
}

impl FeatureMap {
    /// Short name: "linear", "quadratic" or "fourier".
    pub fn name(&self) -> &'static str {
        match self {
            FeatureMap::Linear => "linear",
            FeatureMap::Quadratic => "quadratic",
            FeatureMap::Fourier { .. } => "fourier",
        }
    }

    /// Number of mapped features for `d` input features.
    pub fn dim(&self, d: usize) -> usize {
        match self {
            FeatureMap::Linear => d,
            FeatureMap::Quadratic => d + d * (d + 1) / 2,
            FeatureMap::Fourier { offsets, .. } => offsets.len(),
        }
    }

    /// Maps one standardised row `z` into `out` (length `self.dim(z.len())`).
    pub fn map_into(&self, z: &[f64], out: &mut [f64]) {
        match self {
            FeatureMap::Linear => out.copy_from_slice(z),
            FeatureMap::Quadratic => {
                let d = z.len();
                out[..d].copy_from_slice(z);
                let mut k = d;
                for j in 0..d {
                    for l in j..d {
                        out[k] = z[j] * z[l];
                        k += 1;
                    }
                }
            }
            FeatureMap::Fourier {
                frequencies,
                offsets,
                ..
            } => {
                let scale = (2.0 / offsets.len() as f64).sqrt();
                for (l, o) in out.iter_mut().enumerate() {
                    let t: f64 = frequencies.row(l).iter().zip(z).map(|(a, b)| a * b).sum();
                    *o = scale * (t + offsets[l]).cos();
                }
            }
        }
    }

    /// Maps every row of an already standardised matrix (rows in parallel chunks).
    pub fn map_matrix(&self, z: MatrixView) -> Matrix {
        let p = self.dim(z.cols());
        let mut data = vec![0.0; z.rows() * p];
        if p > 0 {
            data.par_chunks_mut(CHUNK_ROWS * p)
                .enumerate()
                .for_each(|(k, chunk)| {
                    for (r, out) in chunk.chunks_exact_mut(p).enumerate() {
                        self.map_into(z.row(k * CHUNK_ROWS + r), out);
                    }
                });
        }
        Matrix::new(data, z.rows(), p).expect("shape is consistent by construction")
    }

    /// Draws a Fourier map: D frequencies ~ N(0, I / sigma^2), offsets ~ U[0, 2 pi) (seeded).
    pub fn fourier(d: usize, n_features: usize, sigma: f64, seed: u64) -> Self {
        let mut r = crate::random::rng(seed ^ 0x7266_6672_6571);
        let freq: Vec<f64> = (0..n_features * d)
            .map(|_| {
                let g: f64 = StandardNormal.sample(&mut r);
                g / sigma
            })
            .collect();
        let offsets = (0..n_features)
            .map(|_| r.random::<f64>() * std::f64::consts::TAU)
            .collect();
        FeatureMap::Fourier {
            sigma,
            frequencies: Matrix::new(freq, n_features, d)
                .expect("shape is consistent by construction"),
            offsets,
        }
    }

    /// Checks a loaded map against the number of input features.
    pub(crate) fn check(&self, d: usize) -> Result<()> {
        if let FeatureMap::Fourier {
            sigma,
            frequencies,
            offsets,
        } = self
        {
            frequencies.check_shape("frequencies")?;
            if frequencies.cols() != d || frequencies.rows() != offsets.len() || offsets.is_empty()
            {
                return Err(Error::ModelFile(format!(
                    "Fourier map has a {} x {} frequency matrix and {} offsets for {d} features",
                    frequencies.rows(),
                    frequencies.cols(),
                    offsets.len()
                )));
            }
            if !(sigma.is_finite() && *sigma > 0.0)
                || frequencies
                    .as_slice()
                    .iter()
                    .chain(offsets)
                    .any(|v| !v.is_finite())
            {
                return Err(Error::ModelFile(
                    "Fourier map holds a non-finite value or a width <= 0".into(),
                ));
            }
        }
        Ok(())
    }
}

/// log w = eta + log_prior_ratio, capped at [`LOG_WEIGHT_CAP`], exponentiated.
#[inline]
pub fn weight_from_logit(eta: f64, log_prior_ratio: f64) -> f64 {
    (eta + log_prior_ratio).min(LOG_WEIGHT_CAP).exp()
}

/// Probabilistic-classifier ratio configuration. Build with [`ClassifierRatio::new`] and setters.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ClassifierRatio {
    /// Penalty strength (> 0) on the coefficients, intercept unpenalised (default `Some(1.0)`;
    /// scikit-learn's `C = 1/l2`). `None` chooses it from `l2_grid` by out-of-fold log-loss.
    pub l2: Option<f64>,
    /// Feature map (default linear).
    pub features: Features,
    /// Number of random Fourier features (default 100, at least 1; `Fourier` only).
    pub n_fourier: usize,
    /// Width of the Fourier kernel in standardised units; `None` (default) is the median pairwise
    /// distance of the standardised pooled rows.
    pub fourier_sigma: Option<f64>,
    /// Number of cross-fitting folds (default 5, at least 2).
    pub folds: usize,
    /// Seed of the folds, the median-heuristic subsample and the Fourier draws (default 0).
    pub seed: u64,
    /// Candidate penalties when `l2` is `None` (default 0.01, 0.1, 1, 10, 100, 1000).
    pub l2_grid: Vec<f64>,
}

impl Default for ClassifierRatio {
    fn default() -> Self {
        Self {
            l2: Some(1.0),
            features: Features::Linear,
            n_fourier: 100,
            fourier_sigma: None,
            folds: 5,
            seed: 0,
            l2_grid: vec![0.01, 0.1, 1.0, 10.0, 100.0, 1000.0],
        }
    }
}

impl ClassifierRatio {
    /// Defaults: l2 = 1, linear features, 5 folds, seed 0.
    pub fn new() -> Self {
        Self::default()
    }
    /// Penalty strength (> 0), or `None` to choose it from the grid.
    pub fn l2(mut self, l2: Option<f64>) -> Self {
        self.l2 = l2;
        self
    }
    /// Feature map.
    pub fn features(mut self, f: Features) -> Self {
        self.features = f;
        self
    }
    /// Number of random Fourier features (>= 1).
    pub fn n_fourier(mut self, n: usize) -> Self {
        self.n_fourier = n;
        self
    }
    /// Fourier kernel width (> 0), or `None` for the median heuristic.
    pub fn fourier_sigma(mut self, s: Option<f64>) -> Self {
        self.fourier_sigma = s;
        self
    }
    /// Cross-fitting folds (>= 2).
    pub fn folds(mut self, k: usize) -> Self {
        self.folds = k;
        self
    }
    /// Seed of every random choice.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Penalty grid used when `l2` is `None` (each finite and > 0).
    pub fn l2_grid(mut self, g: Vec<f64>) -> Self {
        self.l2_grid = g;
        self
    }

    /// Rejects out-of-range settings with an error naming the parameter.
    pub fn check(&self) -> Result<()> {
        if let Some(l) = self.l2 {
            if !(l.is_finite() && l > 0.0) {
                return Err(Error::param(
                    "l2",
                    format!("must be finite and > 0, got {l}"),
                ));
            }
        }
        if self.n_fourier == 0 {
            return Err(Error::param("n_fourier", "must be at least 1"));
        }
        if let Some(s) = self.fourier_sigma {
            kernel::check_sigma("fourier_sigma", s)?;
        }
        crate::data::check_folds(self.folds)?;
        super::check_grid("l2_grid", &self.l2_grid, false)?;
        Ok(())
    }
}

/// Out-of-fold results for one penalty.
struct CrossFit {
    /// Mean held-out log-loss over all pooled rows.
    log_loss: f64,
    /// Out-of-fold log-weights of the source rows (class-prior factor included).
    source_log_w: Vec<f64>,
    /// Mean of the fold solutions (raw feature scale): the start of the fit on all rows.
    mean_coef: Vec<f64>,
    mean_intercept: f64,
}

/// Fits one penalty on every fold and collects the out-of-fold results. The first fold is fitted
/// from the usual start; the others (in parallel) start from its solution, which differs from
/// theirs by sampling error only, so each needs about two passes over the rows instead of five
/// or six. Every fit is solved to the same tolerance, so the start changes nothing beyond it.
fn cross_fit(
    phi: MatrixView,
    y: &[f64],
    fold: &[usize],
    n_s: usize,
    k: usize,
    l2: f64,
) -> Result<CrossFit> {
    let n = phi.rows();
    let fit_fold = |j: usize, start: Option<(&[f64], f64)>| -> Result<FoldFit> {
        let w: Vec<f64> = fold
            .iter()
            .map(|f| if *f == j { 0.0 } else { 1.0 })
            .collect();
        let (n_s_in, n_t_in) =
            (0..n)
                .filter(|i| fold[*i] != j)
                .fold((0usize, 0usize), |(a, b), i| {
                    if i < n_s {
                        (a + 1, b)
                    } else {
                        (a, b + 1)
                    }
                });
        let log_prior = (n_s_in as f64 / n_t_in as f64).ln();
        let (coef, b, _) = match start {
            Some(st) => fit_logistic_warm(phi, y, &w, l2, MAX_ITER, TOL, st)?,
            None => fit_logistic_unchecked(phi, y, &w, l2, MAX_ITER, TOL)?,
        };
        // Held-out rows in parallel chunks; the loss is summed in chunk order (deterministic).
        let held: Vec<usize> = (0..n).filter(|i| fold[*i] == j).collect();
        let parts: Vec<(f64, Vec<(usize, f64)>)> = held
            .par_chunks(CHUNK_ROWS)
            .map(|rows| {
                let mut loss = 0.0;
                let mut out = Vec::new();
                for &i in rows {
                    let eta = b + phi
                        .row(i)
                        .iter()
                        .zip(&coef)
                        .map(|(a, c)| a * c)
                        .sum::<f64>();
                    loss += log1pexp(eta) - y[i] * eta;
                    if i < n_s {
                        out.push((i, eta + log_prior));
                    }
                }
                (loss, out)
            })
            .collect();
        let mut loss = 0.0;
        let mut out = Vec::with_capacity(held.len());
        for (l, o) in parts {
            loss += l;
            out.extend(o);
        }
        Ok(FoldFit {
            loss,
            rows: out,
            coef,
            intercept: b,
        })
    };
    let first = fit_fold(0, None)?;
    let rest: Vec<Result<FoldFit>> = (1..k)
        .into_par_iter()
        .map(|j| fit_fold(j, Some((&first.coef, first.intercept))))
        .collect();
    let mut per_fold = vec![Ok(first)];
    per_fold.extend(rest);
    let p = phi.cols();
    let mut mean_coef = vec![0.0; p];
    let mut mean_intercept = 0.0;
    let mut total = 0.0;
    let mut source_log_w = vec![0.0; n_s];
    for r in per_fold {
        let ff = r?;
        total += ff.loss;
        for (i, v) in ff.rows {
            source_log_w[i] = v;
        }
        for (m, c) in mean_coef.iter_mut().zip(&ff.coef) {
            *m += c / k as f64;
        }
        mean_intercept += ff.intercept / k as f64;
    }
    Ok(CrossFit {
        log_loss: total / n as f64,
        source_log_w,
        mean_coef,
        mean_intercept,
    })
}

/// One fold's fit: held-out log-loss, out-of-fold source log-weights, and its solution.
struct FoldFit {
    loss: f64,
    rows: Vec<(usize, f64)>,
    coef: Vec<f64>,
    intercept: f64,
}

impl ClassifierRatio {
    /// The feature map of the classifier and the parameters it adds to the model's record (the
    /// Fourier width, by the median heuristic over `zs` and `zt` unless given, and the feature
    /// count).
    fn feature_map(
        &self,
        zs: MatrixView,
        zt: MatrixView,
        d: usize,
    ) -> (FeatureMap, Vec<(&'static str, f64)>) {
        let mut extra = Vec::new();
        let map = match self.features {
            Features::Linear => FeatureMap::Linear,
            Features::Quadratic => FeatureMap::Quadratic,
            Features::Fourier => {
                let sigma = match self.fourier_sigma {
                    Some(s) => s,
                    None => kernel::median_distance(&[zs, zt], self.seed),
                };
                extra.push(("fourier_sigma", sigma));
                extra.push(("n_fourier", self.n_fourier as f64));
                FeatureMap::fourier(d, self.n_fourier, sigma, self.seed)
            }
        };
        (map, extra)
    }
}

/// The penalty of `grid` with the lowest out-of-fold log-loss, its cross-fit, the table of every
/// penalty's score, and the penalties whose fit failed numerically (skipped, with the reason,
/// when the grid has more than one; otherwise the error is returned). One [`cross_fit`] per
/// penalty.
fn choose_penalty(
    phi: MatrixView,
    y: &[f64],
    fold: &[usize],
    n_s: usize,
    k: usize,
    grid: &[f64],
) -> Result<(f64, CrossFit, Vec<ScoreRow>, Vec<String>)> {
    let mut table = Vec::new();
    let mut best: Option<(f64, CrossFit)> = None;
    let mut failures = Vec::new();
    for &l2 in grid {
        match cross_fit(phi, y, fold, n_s, k, l2) {
            Ok(cf) => {
                table.push(ScoreRow {
                    params: params([("l2", l2)]),
                    score: cf.log_loss,
                });
                if best.as_ref().is_none_or(|(_, b)| cf.log_loss < b.log_loss) {
                    best = Some((l2, cf));
                }
            }
            Err(e @ Error::Numerical { .. }) if grid.len() > 1 => {
                table.push(ScoreRow {
                    params: params([("l2", l2)]),
                    score: f64::INFINITY,
                });
                failures.push(format!("penalty {l2}: {e}"));
            }
            Err(e) => return Err(e),
        }
    }
    let (l2, cf) = best.ok_or_else(|| Error::Numerical {
        context: "classifier ratio".into(),
        reason: format!(
            "no penalty of the grid could be fitted: {}",
            failures.join("; ")
        ),
    })?;
    Ok((l2, cf, table, failures))
}

/// Warnings about the chosen cross-fit: a held-out log-loss no better than the constant guess
/// n_t / n (chance level), and source log-weights capped at [`LOG_WEIGHT_CAP`].
fn fit_warnings(cf: &CrossFit, n_s: usize, n_t: usize) -> Vec<String> {
    let mut warnings = Vec::new();
    let n = (n_s + n_t) as f64;
    let chance = -(n_s as f64 / n * (n_s as f64 / n).ln() + n_t as f64 / n * (n_t as f64 / n).ln());
    if cf.log_loss >= chance {
        warnings.push(format!(
            "the classifier tells target from source rows no better than chance on held-out rows \
             (log-loss {:.4} vs {:.4} for a constant guess): no shift is detectable with these features",
            cf.log_loss, chance
        ));
    }
    let capped = cf
        .source_log_w
        .iter()
        .filter(|v| **v > LOG_WEIGHT_CAP)
        .count();
    if capped > 0 {
        warnings.push(format!(
            "{capped} source row(s) had log-weights above {LOG_WEIGHT_CAP} and were capped: \
             the source barely covers the target there"
        ));
    }
    warnings
}

impl RatioEstimator for ClassifierRatio {
    /// Holds the penalty fixed when it was searched (`l2` is `None`).
    fn with_chosen(&self, chosen: &BTreeMap<String, f64>) -> Option<super::BoxedEstimator> {
        let l2 = chosen.get("l2").copied().filter(|_| self.l2.is_none())?;
        Some(Box::new(self.clone().l2(Some(l2))))
    }

    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, self.folds.max(2))?;
        let (st, mut warnings) = fit_standardizer(source, target);
        let (n_s, n_t, d) = (source.rows(), target.rows(), source.cols());
        // Standardised rows pooled in one buffer: source first, then target.
        let mut zbuf = vec![0.0; (n_s + n_t) * d];
        {
            let (a, b) = zbuf.split_at_mut(n_s * d);
            st.transform_into(&source, a);
            st.transform_into(&target, b);
        }
        let z = Matrix::new(zbuf, n_s + n_t, d)?;
        let zs = MatrixView::new(&z.as_slice()[..n_s * d], n_s, d)?;
        let zt = MatrixView::new(&z.as_slice()[n_s * d..], n_t, d)?;
        let (map, extra) = self.feature_map(zs, zt, d);
        // Pooled mapped rows: source first, then target; y = 1 marks target rows. The linear map
        // is the identity on standardised rows: no mapped copy is made.
        let phi = match map {
            FeatureMap::Linear => z,
            _ => map.map_matrix(z.view()),
        };
        let p = phi.cols();
        let y: Vec<f64> = (0..n_s + n_t)
            .map(|i| if i < n_s { 0.0 } else { 1.0 })
            .collect();
        let k = self.folds;
        let mut fold = kfold_assignment(n_s, k, self.seed ^ 0x636c_6673)?;
        fold.extend(kfold_assignment(n_t, k, self.seed ^ 0x636c_6674)?);

        let grid: Vec<f64> = match self.l2 {
            Some(l) => vec![l],
            None => self.l2_grid.clone(),
        };
        let (l2, cf, table, failures) = choose_penalty(phi.view(), &y, &fold, n_s, k, &grid)?;
        for f in failures {
            warnings.push(format!(
                "the logistic fit failed for {f}; that penalty was skipped"
            ));
        }
        warnings.extend(fit_warnings(&cf, n_s, n_t));

        let ones = vec![1.0; n_s + n_t];
        // The fit on all rows starts from the mean of the fold solutions (within sampling error
        // of it).
        let (coef, intercept, _) = fit_logistic_warm(
            phi.view(),
            &y,
            &ones,
            l2,
            MAX_ITER,
            TOL,
            (&cf.mean_coef, cf.mean_intercept),
        )?;
        let log_prior_ratio = (n_s as f64 / n_t as f64).ln();
        let mut chosen = params([
            ("l2", l2),
            ("folds", k as f64),
            ("n_mapped_features", p as f64),
        ]);
        chosen.extend(extra.iter().map(|(a, b)| (a.to_string(), *b)));
        Ok(FittedRatio {
            kind: EstimatorKind::Classifier,
            standardizer: st,
            form: RatioForm::LogLinear {
                map,
                coef,
                intercept,
                log_prior_ratio,
            },
            source_weights: cf
                .source_log_w
                .iter()
                .map(|v| weight_from_logit(*v, 0.0))
                .collect(),
            selection: Selection {
                criterion:
                    "out-of-fold log-loss of the target-vs-source classifier (cross-fitting)".into(),
                chosen,
                table,
                ..Default::default()
            },
            meta: fit_meta(&source, &target, self.seed),
            warnings,
            encoding: None,
            cap: None,
        })
    }
}

/// Weights from out-of-fold classifier probabilities, with the number of rows clipped.
#[derive(Debug, Clone, PartialEq)]
pub struct ProbabilityWeights {
    /// w_i = p_i / (1 - p_i) * n_source / n_target, after clipping p_i to [clip, 1 - clip].
    pub weights: Vec<f64>,
    /// How many probabilities were inside (0, clip) or (1 - clip, 1) and were clipped.
    pub n_clipped: usize,
}

/// Importance weights from any classifier's out-of-fold probabilities p_i = P(target | x_i).
///
/// `n_source` and `n_target` are the numbers of source and target rows the classifier was trained
/// on (its class prior); w_i = p_i / (1 - p_i) * n_source / n_target (Bickel et al. 2009; common
/// practice). Probabilities within `clip` of 0 or 1 are clipped to [clip, 1 - clip] and counted;
/// a probability outside the open interval (0, 1), or non-finite, is an error naming the first
/// such index. `clip` must lie in (0, 0.5).
pub fn ratio_from_probabilities(
    p_target: &[f64],
    n_source: usize,
    n_target: usize,
    clip: f64,
) -> Result<ProbabilityWeights> {
    if !(clip > 0.0 && clip < 0.5) {
        return Err(Error::param(
            "clip",
            format!("must be in (0, 0.5), got {clip}"),
        ));
    }
    if n_source == 0 {
        return Err(Error::param("n_source", "must be at least 1"));
    }
    if n_target == 0 {
        return Err(Error::param("n_target", "must be at least 1"));
    }
    if let Some(i) = p_target
        .iter()
        .position(|p| !(p.is_finite() && *p > 0.0 && *p < 1.0))
    {
        return Err(Error::param(
            "p_target",
            format!(
                "entry {i} is {}: probabilities must be finite and strictly between 0 and 1 \
                 (exactly 0 or 1 would give a weight of 0 or infinity; clip or calibrate them first)",
                p_target[i]
            ),
        ));
    }
    let prior = n_source as f64 / n_target as f64;
    let mut n_clipped = 0;
    let weights = p_target
        .iter()
        .map(|&p| {
            let q = p.clamp(clip, 1.0 - clip);
            if q != p {
                n_clipped += 1;
            }
            q / (1.0 - q) * prior
        })
        .collect();
    Ok(ProbabilityWeights { weights, n_clipped })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::Normal;

    fn gaussian_1d(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
        let mut r = crate::random::rng(seed);
        let g = Normal::new(mean, sd).unwrap();
        (0..n).map(|_| g.sample(&mut r)).collect()
    }

    /// Analytic log-ratio of N(2, 0.25^2) over N(1, 0.5^2).
    fn true_log_ratio(x: f64) -> f64 {
        (0.5f64 / 0.25).ln() - (x - 2.0).powi(2) / (2.0 * 0.0625) + (x - 1.0).powi(2) / (2.0 * 0.25)
    }

    #[test]
    // Sampling error, measured: over 12 seeds at n = 5,000 a side, the unpenalised maximum-
    // likelihood x^2 coefficient (scikit-learn LogisticRegression, and ours, which agreed to
    // 0.05) had mean -5.84 and sd 0.45, so a 0.6 tolerance would fail about 1 seed in 5 at
    // that size. At n = 50,000 the sd scales to about 0.14 and the tolerance is over 4 sd.
    fn quadratic_features_recover_gaussian_log_ratio() {
        // reference: analytic ratio of two normal densities; source N(1, 0.5^2), target
        // N(2, 0.25^2), a toy from the covariate-shift literature (from memory).
        let n = 50_000;
        let s = gaussian_1d(n, 1.0, 0.5, 1);
        let t = gaussian_1d(n, 2.0, 0.25, 2);
        let m = ClassifierRatio::new()
            .features(Features::Quadratic)
            .l2(Some(1e-3))
            .fit(
                MatrixView::new(&s, n, 1).unwrap(),
                MatrixView::new(&t, n, 1).unwrap(),
            )
            .unwrap();
        // The fitted log-ratio is exactly quadratic in x: compare its second difference (the x^2
        // coefficient times 2h^2) and values in the bulk of the target with the analytic ones.
        let xs = [1.5, 2.0, 2.5];
        let w = m.ratio(MatrixView::new(&xs, 3, 1).unwrap()).unwrap();
        let lw: Vec<f64> = w.iter().map(|v| v.ln()).collect();
        let a_fit = (lw[0] - 2.0 * lw[1] + lw[2]) / (2.0 * 0.25);
        assert!(
            (a_fit - (-6.0)).abs() < 0.6,
            "x^2 coefficient {a_fit}, analytic -6"
        );
        for (x, l) in xs.iter().zip(&lw) {
            assert!(
                (l - true_log_ratio(*x)).abs() < 0.25,
                "log w({x}) = {l}, analytic {}",
                true_log_ratio(*x)
            );
        }
    }

    #[test]
    fn warm_started_folds_equal_each_fold_fitted_from_the_usual_start() {
        // The folds after the first start from its solution and the all-rows fit from their
        // mean; each must still be the fold's own optimum: refit every fold from the usual start
        // on the same pooled, standardised rows and compare the out-of-fold log-weights.
        let (n_s, n_t) = (300, 200);
        let mut s = gaussian_1d(2 * n_s, 0.0, 1.0, 11);
        let mut t = gaussian_1d(2 * n_t, 0.6, 0.8, 12);
        s.iter_mut().skip(1).step_by(2).for_each(|v| *v *= 2.0);
        t.iter_mut()
            .skip(1)
            .step_by(2)
            .for_each(|v| *v = 2.0 * *v - 0.5);
        let (sv, tv) = (
            MatrixView::new(&s, n_s, 2).unwrap(),
            MatrixView::new(&t, n_t, 2).unwrap(),
        );
        let est = ClassifierRatio::new().l2(Some(0.5));
        let m = est.fit(sv, tv).unwrap();
        let st = crate::data::Standardizer::fit(&[sv, tv]);
        let mut z = st.transform(&sv).into_vec();
        z.extend(st.transform(&tv).into_vec());
        let zv = MatrixView::new(&z, n_s + n_t, 2).unwrap();
        let y: Vec<f64> = (0..n_s + n_t)
            .map(|i| f64::from(u8::from(i >= n_s)))
            .collect();
        let mut fold = kfold_assignment(n_s, 5, est.seed ^ 0x636c_6673).unwrap();
        fold.extend(kfold_assignment(n_t, 5, est.seed ^ 0x636c_6674).unwrap());
        for j in 0..5 {
            let w: Vec<f64> = fold.iter().map(|f| f64::from(u8::from(*f != j))).collect();
            let n_s_in = (0..n_s).filter(|i| fold[*i] != j).count() as f64;
            let n_t_in = (n_s..n_s + n_t).filter(|i| fold[*i] != j).count() as f64;
            let (c, b, _) = fit_logistic_unchecked(zv, &y, &w, 0.5, MAX_ITER, TOL).unwrap();
            for i in (0..n_s).filter(|i| fold[*i] == j) {
                let eta = b + c[0] * zv.row(i)[0] + c[1] * zv.row(i)[1];
                let want = weight_from_logit(eta + (n_s_in / n_t_in).ln(), 0.0);
                let got = m.source_weights[i];
                assert!(
                    (got - want).abs() <= 1e-8 * want,
                    "fold {j}, row {i}: {got} vs {want}"
                );
            }
        }
    }

    #[test]
    fn source_weights_are_cross_fitted_and_scaled() {
        let s = gaussian_1d(200, 0.0, 1.0, 3);
        let t = gaussian_1d(100, 0.5, 1.0, 4);
        let (sv, tv) = (
            MatrixView::new(&s, 200, 1).unwrap(),
            MatrixView::new(&t, 100, 1).unwrap(),
        );
        let m = ClassifierRatio::new().fit(sv, tv).unwrap();
        let full = m.ratio(sv).unwrap();
        // Out-of-fold weights differ from the all-rows model's, but not by much.
        assert!(m.source_weights.iter().zip(&full).any(|(a, b)| a != b));
        let rel: f64 = m
            .source_weights
            .iter()
            .zip(&full)
            .map(|(a, b)| (a - b).abs() / b)
            .sum::<f64>()
            / 200.0;
        assert!(rel < 0.2, "mean relative difference {rel}");
        // Class-prior factor (Bickel et al. 2009): the mean source weight estimates E_s[w] = 1.
        let mean: f64 = m.source_weights.iter().sum::<f64>() / 200.0;
        assert!((mean - 1.0).abs() < 0.15, "mean weight {mean}");
        // Round trip through the model file scores identically.
        let again = FittedRatio::from_json(&m.to_json().unwrap()).unwrap();
        assert_eq!(again.ratio(sv).unwrap(), full);
    }

    #[test]
    fn fourier_model_round_trips_and_chooses_l2() {
        let s = gaussian_1d(150, 0.0, 1.0, 5);
        let t = gaussian_1d(150, 1.0, 1.0, 6);
        let (sv, tv) = (
            MatrixView::new(&s, 150, 1).unwrap(),
            MatrixView::new(&t, 150, 1).unwrap(),
        );
        let m = ClassifierRatio::new()
            .features(Features::Fourier)
            .n_fourier(20)
            .l2(None)
            .fit(sv, tv)
            .unwrap();
        assert_eq!(m.selection.table.len(), 6);
        assert!(m.selection.chosen["fourier_sigma"] > 0.0);
        let text = m.to_json().unwrap();
        let again = FittedRatio::from_json(&text).unwrap();
        assert_eq!(again.ratio(tv).unwrap(), m.ratio(tv).unwrap());
        assert_eq!(
            m.ratio_one(&[0.3]).unwrap(),
            m.ratio(MatrixView::new(&[0.3], 1, 1).unwrap()).unwrap()[0]
        );
        // A corrupted map is rejected on load.
        let bad = text.replacen("\"offsets\":[", "\"offsets\":[1.0,", 1);
        assert!(matches!(
            FittedRatio::from_json(&bad),
            Err(Error::ModelFile(_))
        ));
    }

    #[test]
    fn probabilities_give_prior_scaled_odds() {
        // reference: w = p/(1-p) * n_s/n_t (Bickel et al. 2009; common practice).
        let r = ratio_from_probabilities(&[0.5, 0.2, 1e-9], 300, 100, 1e-6).unwrap();
        assert!((r.weights[0] - 3.0).abs() < 1e-12);
        assert!((r.weights[1] - 0.25 * 3.0).abs() < 1e-12);
        assert_eq!(r.n_clipped, 1);
        for bad in [0.0, 1.0, -0.1, f64::NAN] {
            match ratio_from_probabilities(&[0.3, bad], 1, 1, 1e-6) {
                Err(Error::InvalidParameter { name, reason }) => {
                    assert_eq!(name, "p_target");
                    assert!(reason.contains("entry 1"), "{reason}");
                }
                other => panic!("unexpected {other:?}"),
            }
        }
        assert!(ratio_from_probabilities(&[0.3], 0, 1, 1e-6).is_err());
        assert!(ratio_from_probabilities(&[0.3], 1, 1, 0.5).is_err());
    }

    #[test]
    fn bad_settings_are_rejected() {
        assert!(ClassifierRatio::new().l2(Some(0.0)).check().is_err());
        assert!(ClassifierRatio::new().folds(1).check().is_err());
        assert!(ClassifierRatio::new().n_fourier(0).check().is_err());
        assert!(Features::parse("cubic").is_err());
        let s = [0.0, 1.0, 2.0];
        let err = ClassifierRatio::new()
            .fit(
                MatrixView::new(&s, 3, 1).unwrap(),
                MatrixView::new(&s, 3, 1).unwrap(),
            )
            .unwrap_err();
        assert!(matches!(err, Error::TooFewRows { .. }), "{err:?}");
    }
}
