//! Kernel mean matching, KMM (Huang, Smola, Gretton, Borgwardt, Schoelkopf 2007, "Correcting
//! sample selection bias by unlabeled data", NIPS 19).
//!
//! KMM chooses one weight per source row so that the weighted source mean of the Gaussian feature
//! map matches the target mean, without fitting a density. With `n` source rows x_i, `m` target
//! rows t_j, K_ik = k(x_i, x_k) and kappa_i = (n / m) sum_j k(x_i, t_j), it solves the quadratic
//! program
//!
//! ```text
//! minimise    1/2 beta' (K + c sqrt(n) I) beta - kappa' beta
//! subject to  0 <= beta_i <= B                  (bound on any single weight)
//!             |sum_i beta_i - n| <= n eps         (weights average close to 1)
//! ```
//!
//! (with c = 0, the squared maximum mean discrepancy between the weighted source and the target,
//! up to the factor 1/n^2 and a constant) with the interior-point solver clarabel, through its
//! supernodal sparse LDL back end built on faer (the `faer-sparse` feature): the kernel block of
//! the KKT system is dense, and the supernodal factorisation runs it through dense kernels.
//!
//! Ridge. The exact matching (c = 0) fits the sampling noise of the target's kernel mean and
//! drives many weights to 0. The ridge c sqrt(n) ||beta||^2 / 2 (Tikhonov regularisation; relative to
//! the O(n^2) quadratic term it shrinks like 1/sqrt(n), so the estimator stays consistent)
//! trades matching accuracy for weight variance.
//!
//! Selection (`sigma` or `ridge` unset): the discrepancy principle (Morozov 1966, "On the solution
//! of functional equations by the method of regularization", Soviet Math. Doklady 7; citation
//! details from memory) over `sigma_multiples` x the median pairwise distance and `ridge_grid`.
//! KMM is a regularised inverse problem: as the ridge goes to 0 the weighted source matches the
//! target's kernel mean ever more closely, fitting the source sample's own noise with weights far
//! from the true ratio. Even the true weights do not match exactly. With the squared MMD (Gretton
//! et al. 2012, JMLR 13) between the weighted source and the target,
//!
//! ```text
//! D(beta) = beta' K_e beta / n^2 - 2 / (n m) sum_ij beta_i k_e(x_i, t_j) + U,
//! ```
//!
//! where U is the unbiased U-statistic of ||mu_T||^2 = E k_e(t, t'), the true weights w give
//! E D(w) = (E_source[w^2] - ||mu_T||^2) / n (the target's sampling noise cancels through U).
//! The principle: do not match more closely than that noise level. For each candidate the QP is
//! solved against all target rows, and D(beta) and its noise level N(beta) = (mean(beta^2) - U) / n
//! are computed with one evaluation kernel k_e (the median-heuristic width, so that candidates of
//! different widths are judged on one scale). The chosen candidate is the most regularised one
//! whose discrepancy is within its noise level (D <= N): the largest ridge, then the widest width
//! at that ridge. If no candidate reaches its noise level, the one with the smallest excess D - N
//! is chosen, with a warning. The table records D as the score and N as `noise_level`. U uses at
//! most `NOISE_ROWS` seeded target rows. Above `block_rows` source rows the selection runs on the
//! first seeded block (n = its size) against all target rows.
//!
//! The selection solves |sigma grid| x |ridge grid| QPs; when the source is one block, the chosen
//! candidate's solution is the fit (no further solve).
//!
//! Defaults: `B = 1000` and `eps = (sqrt(n) - 1) / sqrt(n)`, the settings of the experiments of
//! Huang et al. (2007) (from memory; the paper's analysis asks for eps of order B / sqrt(n)).
//! The fitted weights are the QP solution itself, not rescaled.
//!
//! KMM is transductive: it yields weights for the source rows it was fitted on and nothing for
//! other rows, so the fitted model has [`RatioForm::SourceOnly`] and `ratio(X)` is an error.
//!
//! Large inputs: the exact QP needs the n x n kernel matrix and a dense factorisation of it.
//! Above `block_rows` source rows (default 500), the source rows are shuffled with the seed and
//! cut into blocks of nearly equal size (at most `block_rows` each); each block is matched on its
//! own against the whole target (the same QP with n = block size, its own kappa and its own
//! eps(n_block)) and the block solutions are concatenated. Because each block is a random
//! subsample of the source, it has the source distribution, so each block's weights estimate the
//! same ratio; the price is that each weight is matched using only its block's rows, so the
//! matching error behaves like KMM at n = block size (more variance than the exact solution, no
//! bias from the split itself). Blocks are solved in parallel.
//!
//! Complexity: O(n m d) for kappa (chunked, bounded memory); per block of size s, O(s^2 d) for the
//! kernel matrix and O(s^3) per interior-point iteration (dense factorisation). The selection
//! adds |sigma grid| x |ridge grid| solves of one block and O(min(m, NOISE_ROWS)^2 d) for U. With
//! blocks the total is O(n s^2) time and O(threads * s^2) memory: linear in n, never an n x n
//! matrix.

use super::{
    fit_meta, params, standardise_pair, EstimatorKind, FittedRatio, RatioEstimator, RatioForm,
    ScoreRow, Selection,
};
use crate::data::{validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par::CHUNK_ROWS;
use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettingsBuilder, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
};
use rand::seq::SliceRandom;
use rayon::prelude::*;

/// Seed tag of the block assignment.
const BLOCK_TAG: u64 = 0x6b6d_6d62_6c6b;
/// Seed tag of the target subsample of the noise-level statistic U.
const NOISE_TAG: u64 = 0x6b6d_6d6e_6f69;
/// Most target rows used for U, the U-statistic of the target's squared kernel-mean norm in the
/// selection (a seeded subsample above it; O(NOISE_ROWS^2 d) time).
pub const NOISE_ROWS: usize = 10_000;

/// KMM configuration. Build with [`KernelMeanMatching::new`] and the setters.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct KernelMeanMatching {
    /// Kernel width in standardised units; `None` (default) uses the median pairwise distance.
    pub sigma: Option<f64>,
    /// Upper bound B on every weight (default 1000; finite and > 0).
    pub bound: f64,
    /// Tolerance on the mean weight, |mean(beta) - 1| <= eps; `None` (default) uses
    /// (sqrt(n) - 1) / sqrt(n) for n source rows (per block when blocked).
    pub eps: Option<f64>,
    /// Largest number of source rows solved as one QP (default 500; at least 2). Above it the
    /// source is split into seeded blocks (see the module doc).
    pub block_rows: usize,
    /// Seed of the median-heuristic subsample, the block assignment and the target subsample of
    /// the selection's noise level (default 0).
    pub seed: u64,
    /// Ridge coefficient c: the QP's quadratic term is beta' (K + c sqrt(n) I) beta / 2 for n
    /// source rows per QP (>= 0); `None` (default) chooses it by the discrepancy principle.
    pub ridge: Option<f64>,
    /// Candidate widths as multiples of the median distance, when `sigma` is `None` (default
    /// 1/4, 1/2, 1, 2).
    pub sigma_multiples: Vec<f64>,
    /// Candidate ridge coefficients, when `ridge` is `None` (default 0.01, 0.1, 1).
    pub ridge_grid: Vec<f64>,
}

impl Default for KernelMeanMatching {
    fn default() -> Self {
        Self {
            sigma: None,
            bound: 1000.0,
            eps: None,
            block_rows: 500,
            seed: 0,
            ridge: None,
            sigma_multiples: vec![0.25, 0.5, 1.0, 2.0],
            ridge_grid: vec![0.01, 0.1, 1.0],
        }
    }
}

impl KernelMeanMatching {
    /// Defaults: median-heuristic width, B = 1000, eps = (sqrt(n) - 1)/sqrt(n), blocks of 500.
    pub fn new() -> Self {
        Self::default()
    }
    /// Fixes the kernel width (standardised units, > 0).
    pub fn sigma(mut self, sigma: Option<f64>) -> Self {
        self.sigma = sigma;
        self
    }
    /// Upper bound on each weight (> 0).
    pub fn bound(mut self, bound: f64) -> Self {
        self.bound = bound;
        self
    }
    /// Tolerance on the mean weight (>= 0).
    pub fn eps(mut self, eps: Option<f64>) -> Self {
        self.eps = eps;
        self
    }
    /// Largest block solved as one QP (>= 2).
    pub fn block_rows(mut self, n: usize) -> Self {
        self.block_rows = n;
        self
    }
    /// Seed of every random choice.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Fixes the ridge coefficient (>= 0); `None` chooses it.
    pub fn ridge(mut self, ridge: Option<f64>) -> Self {
        self.ridge = ridge;
        self
    }
    /// Width grid, as multiples of the median distance (each > 0).
    pub fn sigma_multiples(mut self, m: Vec<f64>) -> Self {
        self.sigma_multiples = m;
        self
    }
    /// Ridge grid (each >= 0).
    pub fn ridge_grid(mut self, g: Vec<f64>) -> Self {
        self.ridge_grid = g;
        self
    }

    /// Rejects out-of-range settings with an error naming the parameter.
    pub fn check(&self) -> Result<()> {
        if let Some(s) = self.sigma {
            kernel::check_sigma("sigma", s)?;
        }
        if let Some(r) = self.ridge {
            if !(r.is_finite() && r >= 0.0) {
                return Err(Error::param(
                    "ridge",
                    format!("must be finite and >= 0, got {r}"),
                ));
            }
        }
        if self.sigma.is_none() {
            super::check_grid("sigma_multiples", &self.sigma_multiples, false)?;
        }
        if self.ridge.is_none() {
            super::check_grid("ridge_grid", &self.ridge_grid, true)?;
        }
        if !(self.bound.is_finite() && self.bound > 0.0) {
            return Err(Error::param(
                "bound",
                format!("must be finite and > 0, got {}", self.bound),
            ));
        }
        if let Some(e) = self.eps {
            if !(e.is_finite() && e >= 0.0) {
                return Err(Error::param(
                    "eps",
                    format!("must be finite and >= 0, got {e}"),
                ));
            }
        }
        if self.block_rows < 2 {
            return Err(Error::param(
                "block_rows",
                format!("must be at least 2, got {}", self.block_rows),
            ));
        }
        Ok(())
    }

    /// Solves the QP of every block of source rows `parts` against all target rows `zt` at one
    /// (sigma, ridge), in parallel, and puts the block solutions together in source row order.
    fn solve_blocks(
        &self,
        zs: MatrixView,
        zt: MatrixView,
        parts: &[Vec<usize>],
        sigma: f64,
        ridge: f64,
    ) -> Result<Vec<f64>> {
        let ksum = target_kernel_sums(zs, zt, sigma);
        let solved: Vec<Result<Vec<f64>>> = parts
            .par_iter()
            .map(|idx| {
                let xb = zs.select_rows(idx);
                let scale = idx.len() as f64 / zt.rows() as f64;
                let kappa: Vec<f64> = idx.iter().map(|&i| ksum[i] * scale).collect();
                solve_qp(
                    xb.view(),
                    &kappa,
                    sigma,
                    ridge,
                    self.bound,
                    self.eps_for(idx.len()),
                )
            })
            .collect();
        let mut beta = vec![0.0; zs.rows()];
        for (idx, sol) in parts.iter().zip(solved) {
            for (&i, v) in idx.iter().zip(sol?) {
                beta[i] = v;
            }
        }
        Ok(beta)
    }

    /// The tolerance used for a QP over `n` source rows.
    pub fn eps_for(&self, n: usize) -> f64 {
        self.eps.unwrap_or_else(|| default_eps(n))
    }
}

/// The default tolerance (sqrt(n) - 1) / sqrt(n) (Huang et al. 2007 experiments; from memory).
pub fn default_eps(n: usize) -> f64 {
    let r = (n as f64).sqrt();
    (r - 1.0) / r
}

/// kappa_i = sum_j k(x_i, t_j) for every row of `x` (unscaled), accumulated over target chunks in
/// a fixed order (deterministic for any thread count). Memory O(threads * CHUNK_ROWS^2).
fn target_kernel_sums(x: MatrixView, t: MatrixView, sigma: f64) -> Vec<f64> {
    let mut out = vec![0.0; x.rows()];
    out.par_chunks_mut(CHUNK_ROWS)
        .enumerate()
        .for_each(|(k, o)| {
            let start = k * CHUNK_ROWS;
            let rows = x.slice_rows(start, start + o.len());
            let mut buf = Vec::new();
            let mut tstart = 0;
            while tstart < t.rows() {
                let tend = (tstart + CHUNK_ROWS).min(t.rows());
                let tb = t.slice_rows(tstart, tend);
                let c_sq = kernel::row_sq_norms(tb);
                buf.resize(o.len() * tb.rows(), 0.0);
                kernel::kernel_block_into(rows, tb, &c_sq, sigma, &mut buf);
                for (i, oi) in o.iter_mut().enumerate() {
                    *oi += buf[i * tb.rows()..(i + 1) * tb.rows()].iter().sum::<f64>();
                }
                tstart = tend;
            }
        });
    out
}

/// Solves one KMM QP: rows `x` (s x d, standardised), `kappa` already scaled by s / m, ridge
/// coefficient `ridge` (c sqrt(s) is added to the diagonal of K).
pub(crate) fn solve_qp(
    x: MatrixView,
    kappa: &[f64],
    sigma: f64,
    ridge: f64,
    bound: f64,
    eps: f64,
) -> Result<Vec<f64>> {
    let n = x.rows();
    let mut kmat = kernel::kernel_block(x, x, sigma);
    let lambda = ridge * (n as f64).sqrt();
    for i in 0..n {
        kmat[i * n + i] += lambda;
    }
    // P: upper triangle of K in compressed-column form.
    let mut colptr = Vec::with_capacity(n + 1);
    let mut rowval = Vec::with_capacity(n * (n + 1) / 2);
    let mut nzval = Vec::with_capacity(n * (n + 1) / 2);
    colptr.push(0);
    for j in 0..n {
        for i in 0..=j {
            rowval.push(i);
            nzval.push(kmat[i * n + j]);
        }
        colptr.push(rowval.len());
    }
    drop(kmat);
    let p = CscMatrix::new(n, n, colptr, rowval, nzval);
    let q: Vec<f64> = kappa.iter().map(|v| -v).collect();
    // A beta + s = b, s >= 0: sum beta <= n(1+eps); -sum beta <= -n(1-eps); beta <= B; -beta <= 0.
    let mut colptr = Vec::with_capacity(n + 1);
    let mut rowval = Vec::with_capacity(4 * n);
    let mut nzval = Vec::with_capacity(4 * n);
    colptr.push(0);
    for j in 0..n {
        rowval.extend_from_slice(&[0, 1, 2 + j, 2 + n + j]);
        nzval.extend_from_slice(&[1.0, -1.0, 1.0, -1.0]);
        colptr.push(rowval.len());
    }
    let a = CscMatrix::new(2 * n + 2, n, colptr, rowval, nzval);
    let nf = n as f64;
    let mut b = Vec::with_capacity(2 * n + 2);
    b.push(nf * (1.0 + eps));
    b.push(-nf * (1.0 - eps));
    b.extend(std::iter::repeat_n(bound, n));
    b.resize(2 * n + 2, 0.0);
    let cones = [SupportedConeT::NonnegativeConeT(2 * n + 2)];
    let settings = DefaultSettingsBuilder::default()
        .verbose(false)
        .max_iter(200)
        .build()
        .map_err(|e| Error::Numerical {
            context: "KMM solver settings".into(),
            reason: format!("{e:?}"),
        })?;
    let mut solver =
        DefaultSolver::new(&p, &q, &a, &b, &cones, settings).map_err(|e| Error::Numerical {
            context: "KMM quadratic program".into(),
            reason: format!("{e:?}"),
        })?;
    solver.solve();
    match solver.solution.status {
        SolverStatus::Solved | SolverStatus::AlmostSolved => {}
        other => {
            return Err(Error::Numerical {
                context: "KMM quadratic program".into(),
                reason: format!("clarabel stopped with status {other:?}"),
            })
        }
    }
    Ok(solver
        .solution
        .x
        .iter()
        .map(|v| v.clamp(0.0, bound))
        .collect())
}

/// Splits `0..n` into seeded blocks of nearly equal size, each at most `max` rows.
pub(crate) fn blocks(n: usize, max: usize, seed: u64) -> Vec<Vec<usize>> {
    if n <= max {
        return vec![(0..n).collect()];
    }
    let k = n.div_ceil(max);
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut crate::random::rng(seed ^ BLOCK_TAG));
    let mut out: Vec<Vec<usize>> = (0..k).map(|_| Vec::with_capacity(n / k + 1)).collect();
    for (pos, &i) in order.iter().enumerate() {
        out[pos % k].push(i);
    }
    for blk in &mut out {
        blk.sort_unstable();
    }
    out
}

/// U-statistic of the target's squared kernel-mean norm ||mu_T||^2 = E k(t, t') under the
/// Gaussian kernel of width `sigma`: the mean of k(t_j, t_l) over pairs j != l, on at most
/// `max_rows` seeded target rows ([`NOISE_ROWS`] in the fit). Needs at least 2 rows.
fn target_mean_norm_sq(t: MatrixView, sigma: f64, seed: u64, max_rows: usize) -> f64 {
    let sub;
    let rows = if t.rows() > max_rows {
        use rand::seq::index::sample;
        let mut idx = sample(
            &mut crate::random::rng(seed ^ NOISE_TAG),
            t.rows(),
            max_rows,
        )
        .into_vec();
        idx.sort_unstable();
        sub = t.select_rows(&idx);
        sub.view()
    } else {
        t
    };
    let m = rows.rows() as f64;
    // Row sums include the diagonal k(t, t) = 1 once per row.
    let total: f64 = target_kernel_sums(rows, rows, sigma).iter().sum();
    (total - m) / (m * (m - 1.0))
}

/// One scored candidate of the discrepancy-principle selection.
struct Candidate {
    sigma: f64,
    ridge: f64,
    /// Squared MMD D(beta) between the weighted selection rows and the target.
    discrepancy: f64,
    /// Its noise level under the candidate's own weights, N = (mean(beta^2) - U) / n.
    noise_level: f64,
    beta: Vec<f64>,
}

/// The discrepancy principle's choice (see the module doc): among candidates with D <= N, the
/// largest ridge, then the widest width at that ridge; if there is none, the smallest excess
/// D - N. The flag says whether the choice is within its noise level. `None` when the list is
/// empty.
fn choose_candidate(cands: &[Candidate]) -> Option<(usize, bool)> {
    let within = cands
        .iter()
        .enumerate()
        .filter(|(_, c)| c.discrepancy <= c.noise_level)
        .max_by(|(_, a), (_, b)| {
            a.ridge
                .total_cmp(&b.ridge)
                .then(a.sigma.total_cmp(&b.sigma))
        })
        .map(|(i, _)| (i, true));
    within.or_else(|| {
        cands
            .iter()
            .enumerate()
            .min_by(|(_, a), (_, b)| {
                (a.discrepancy - a.noise_level).total_cmp(&(b.discrepancy - b.noise_level))
            })
            .map(|(i, _)| (i, false))
    })
}

/// The outcome of the (sigma, ridge) selection: the chosen candidate, the table of every
/// candidate's discrepancy, and a warning when no candidate was within its noise level.
struct Chosen {
    best: Candidate,
    table: Vec<ScoreRow>,
    warning: Option<String>,
}

impl KernelMeanMatching {
    /// Chooses (sigma, ridge) among `sigmas` x `ridges` by the discrepancy principle (see the
    /// module doc) on the source rows `rows` (the first block: a seeded random subset of the
    /// source, so it has the source distribution), evaluating every candidate at the
    /// median-heuristic width `median`. Per width: one O(n n_t d) pass for the target kernel sums,
    /// then one QP per ridge (in parallel).
    fn select(
        &self,
        zs: MatrixView,
        zt: MatrixView,
        rows: &[usize],
        median: f64,
        sigmas: &[f64],
        ridges: &[f64],
    ) -> Result<Chosen> {
        let xs = zs.select_rows(rows);
        let n = xs.rows();
        let nf = n as f64;
        let n_t = zt.rows();
        let eval_gram = kernel::kernel_block(xs.view(), xs.view(), median);
        let eval_cross = target_kernel_sums(xs.view(), zt, median);
        let u = target_mean_norm_sq(zt, median, self.seed, NOISE_ROWS);
        let eps = self.eps_for(n);
        let mut table = Vec::new();
        let mut cands = Vec::new();
        for &sg in sigmas {
            // At the evaluation width (1 x median on the default grid) the sums are known.
            let ksum = if sg == median {
                eval_cross.clone()
            } else {
                target_kernel_sums(xs.view(), zt, sg)
            };
            // Same expression as in `solve_blocks`, so that a reused solution is bit-identical.
            let scale = nf / n_t as f64;
            let kappa: Vec<f64> = ksum.iter().map(|v| v * scale).collect();
            let solved: Vec<(f64, Result<Vec<f64>>)> = ridges
                .par_iter()
                .map(|&rg| (rg, solve_qp(xs.view(), &kappa, sg, rg, self.bound, eps)))
                .collect();
            for (rg, sol) in solved {
                let Ok(beta) = sol else {
                    table.push(ScoreRow {
                        params: params([("sigma", sg), ("ridge", rg), ("noise_level", f64::NAN)]),
                        score: f64::INFINITY,
                    });
                    continue;
                };
                let (discrepancy, noise_level) =
                    discrepancy_and_noise(&beta, &eval_gram, &eval_cross, n_t, u);
                table.push(ScoreRow {
                    params: params([("sigma", sg), ("ridge", rg), ("noise_level", noise_level)]),
                    score: discrepancy,
                });
                cands.push(Candidate {
                    sigma: sg,
                    ridge: rg,
                    discrepancy,
                    noise_level,
                    beta,
                });
            }
        }
        let Some((best, within_noise)) = choose_candidate(&cands) else {
            return Err(Error::Numerical {
                context: "KMM selection".into(),
                reason:
                    "no (sigma, ridge) candidate could be solved; give sigma and ridge explicitly"
                        .into(),
            });
        };
        let warning = (!within_noise).then(|| {
            "no (sigma, ridge) candidate matched the target within its noise level; the one with the smallest excess was chosen. Try a smaller ridge or a wider sigma grid, and check the overlap of source and target".to_string()
        });
        Ok(Chosen {
            best: cands.swap_remove(best),
            table,
            warning,
        })
    }
}

/// The squared MMD D(beta) between the selection rows weighted by `beta` and the target, at the
/// evaluation width (`gram` the n x n kernel of the selection rows, `cross` their kernel sums over
/// the `n_t` target rows, `u` the mean squared norm term of the target), and its noise level
/// N = (mean(beta^2) - u) / n. O(n^2).
fn discrepancy_and_noise(
    beta: &[f64],
    gram: &[f64],
    cross: &[f64],
    n_t: usize,
    u: f64,
) -> (f64, f64) {
    let n = beta.len();
    let nf = n as f64;
    let mut quad = 0.0;
    for i in 0..n {
        let row = &gram[i * n..(i + 1) * n];
        quad += beta[i] * row.iter().zip(beta).map(|(a, b)| a * b).sum::<f64>();
    }
    let cross: f64 = beta.iter().zip(cross).map(|(b, s)| b * s).sum();
    let discrepancy = quad / (nf * nf) - 2.0 * cross / (nf * n_t as f64) + u;
    let mean_sq = beta.iter().map(|b| b * b).sum::<f64>() / nf;
    (discrepancy, (mean_sq - u) / nf)
}

impl RatioEstimator for KernelMeanMatching {
    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, 2)?;
        let (st, zs, zt, warnings) = standardise_pair(source, target);
        let n_s = zs.rows();
        let median = kernel::median_distance(&[zs.view(), zt.view()], self.seed);
        let parts = blocks(n_s, self.block_rows, self.seed);
        let sigmas: Vec<f64> = match self.sigma {
            Some(s) => vec![s],
            None => self.sigma_multiples.iter().map(|m| m * median).collect(),
        };
        let ridges: Vec<f64> = match self.ridge {
            Some(r) => vec![r],
            None => self.ridge_grid.clone(),
        };
        let (sigma, ridge, table, reuse, selection_warning) = if sigmas.len() * ridges.len() > 1 {
            let chosen = self.select(zs.view(), zt.view(), &parts[0], median, &sigmas, &ridges)?;
            // The chosen candidate's solution on the selection rows is the fit when they are
            // the whole source.
            let reuse = (parts.len() == 1).then_some(chosen.best.beta);
            (
                chosen.best.sigma,
                chosen.best.ridge,
                chosen.table,
                reuse,
                chosen.warning,
            )
        } else {
            (sigmas[0], ridges[0], Vec::new(), None, None)
        };
        let beta = match reuse {
            Some(b) => b,
            None => self.solve_blocks(zs.view(), zt.view(), &parts, sigma, ridge)?,
        };
        let mut warnings = warnings;
        warnings.extend(selection_warning);
        if beta.iter().all(|v| *v == 0.0) {
            warnings
                .push("every KMM weight is zero; try a larger kernel width or a larger eps".into());
        }
        let eps_used = self.eps_for(parts[0].len());
        let n_max_weight = beta
            .iter()
            .filter(|v| **v >= self.bound * (1.0 - 1e-6))
            .count();
        if n_max_weight > 0 {
            warnings.push(format!(
                "{n_max_weight} source row(s) reached the weight bound B = {}; the target has inputs the source barely covers",
                self.bound
            ));
        }
        Ok(FittedRatio {
            kind: EstimatorKind::KernelMeanMatching,
            standardizer: st,
            form: RatioForm::SourceOnly,
            source_weights: beta,
            selection: Selection {
                criterion: if table.is_empty() {
                    "none: sigma and ridge given".into()
                } else {
                    "discrepancy principle: the largest ridge, then the widest width, whose squared MMD (median-heuristic evaluation width) between the weighted source and the target is within its noise level (mean(beta^2) - U) / n".into()
                },
                chosen: params([
                    ("sigma", sigma),
                    ("ridge", ridge),
                    ("bound", self.bound),
                    ("eps", eps_used),
                    ("block_rows", self.block_rows as f64),
                    ("n_blocks", parts.len() as f64),
                    ("median_distance", median),
                ]),
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

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::{Distribution, Normal};

    fn gauss(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
        let mut r = crate::random::rng(seed);
        let g = Normal::new(mean, sd).unwrap();
        (0..n).map(|_| g.sample(&mut r)).collect()
    }

    #[test]
    fn constraints_hold_and_kkt_conditions_hold() {
        // Source N(1, 0.5^2), target N(2, 0.25^2) (a covariate-shift toy, from memory).
        let (n, m) = (120, 80);
        let s = gauss(n, 1.0, 0.5, 1);
        let t = gauss(m, 2.0, 0.25, 2);
        let est = KernelMeanMatching::new().bound(20.0).ridge(Some(0.1));
        let fit = est
            .fit(
                MatrixView::new(&s, n, 1).unwrap(),
                MatrixView::new(&t, m, 1).unwrap(),
            )
            .unwrap();
        let beta = &fit.source_weights;
        let eps = default_eps(n);
        let sum: f64 = beta.iter().sum();
        assert!((sum - n as f64).abs() <= n as f64 * eps + 1e-6);
        assert!(beta.iter().all(|b| *b >= 0.0 && *b <= 20.0));
        // KKT (convex QP, reference: Boyd & Vandenberghe 2004, section 5.5.3): with the sum
        // constraint inactive, the gradient K beta - kappa is >= 0 where beta = 0, <= 0 where
        // beta = B, and ~0 in between, up to one common multiplier nu for the sum constraint.
        let (st, zs, zt, _) = standardise_pair(
            MatrixView::new(&s, n, 1).unwrap(),
            MatrixView::new(&t, m, 1).unwrap(),
        );
        let _ = st;
        let sigma = fit.selection.chosen["sigma"];
        let mut k = kernel::kernel_block(zs.view(), zs.view(), sigma);
        for i in 0..n {
            k[i * n + i] += 0.1 * (n as f64).sqrt(); // the ridge term
        }
        let kt = target_kernel_sums(zs.view(), zt.view(), sigma);
        let grad: Vec<f64> = (0..n)
            .map(|i| {
                (0..n).map(|j| k[i * n + j] * beta[j]).sum::<f64>() - kt[i] * n as f64 / m as f64
            })
            .collect();
        let free: Vec<f64> = (0..n)
            .filter(|&i| beta[i] > 1e-3 && beta[i] < 20.0 - 1e-3)
            .map(|i| grad[i])
            .collect();
        assert!(!free.is_empty());
        let nu = free.iter().sum::<f64>() / free.len() as f64;
        let scale = kt.iter().map(|v| v.abs()).fold(0.0, f64::max) * n as f64 / m as f64;
        for g in &free {
            assert!((g - nu).abs() < 1e-3 * scale, "free gradient {g} vs {nu}");
        }
        for i in 0..n {
            if beta[i] <= 1e-6 {
                assert!(grad[i] - nu > -1e-3 * scale);
            }
        }
    }

    #[test]
    fn blocks_are_balanced_and_cover_every_row() {
        let b = blocks(2503, 1000, 3);
        assert_eq!(b.len(), 3);
        let mut all: Vec<usize> = b.iter().flatten().copied().collect();
        all.sort_unstable();
        assert_eq!(all, (0..2503).collect::<Vec<_>>());
        assert!(b.iter().all(|x| x.len() == 834 || x.len() == 835));
    }

    #[test]
    fn new_rows_are_a_clear_error_and_bad_parameters_are_named() {
        let s = gauss(30, 0.0, 1.0, 5);
        let t = gauss(30, 0.5, 1.0, 6);
        let fit = KernelMeanMatching::new()
            .fit(
                MatrixView::new(&s, 30, 1).unwrap(),
                MatrixView::new(&t, 30, 1).unwrap(),
            )
            .unwrap();
        match fit.ratio(MatrixView::new(&[0.0], 1, 1).unwrap()) {
            Err(Error::Unsupported(msg)) => assert!(msg.contains("transductive")),
            other => panic!("unexpected {other:?}"),
        }
        for est in [
            KernelMeanMatching::new().bound(0.0),
            KernelMeanMatching::new().eps(Some(-1.0)),
            KernelMeanMatching::new().block_rows(1),
            KernelMeanMatching::new().sigma(Some(f64::NAN)),
        ] {
            assert!(matches!(
                est.fit(
                    MatrixView::new(&s, 30, 1).unwrap(),
                    MatrixView::new(&t, 30, 1).unwrap()
                ),
                Err(Error::InvalidParameter { .. })
            ));
        }
    }

    #[test]
    fn noise_statistic_is_the_off_diagonal_kernel_mean_and_subsamples_reproducibly() {
        // Direct double loop over pairs j != l: the U-statistic of E k(t, t') (Hoeffding 1948).
        let t = gauss(300, 0.0, 1.0, 21);
        let view = MatrixView::new(&t, 300, 1).unwrap();
        let sigma = 0.7;
        let mut direct = 0.0;
        for j in 0..300 {
            for l in 0..300 {
                if j != l {
                    direct += (-(t[j] - t[l]).powi(2) / (2.0 * sigma * sigma)).exp();
                }
            }
        }
        direct /= 300.0 * 299.0;
        let u = target_mean_norm_sq(view, sigma, 0, NOISE_ROWS);
        assert!((u - direct).abs() < 1e-12, "{u} vs {direct}");
        // Analytic value for N(0, 1) rows: E exp(-(t - t')^2 / (2 s^2)) = s / sqrt(s^2 + 2), since
        // t - t' ~ N(0, 2) (Gaussian integral; from the normal moment generating function).
        let exact = sigma / (sigma * sigma + 2.0f64).sqrt();
        assert!((u - exact).abs() < 0.03, "{u} vs analytic {exact}");
        // A 100-row seeded subsample: the same value for the same seed, near the full statistic.
        let a = target_mean_norm_sq(view, sigma, 5, 100);
        let b = target_mean_norm_sq(view, sigma, 5, 100);
        assert_eq!(a, b);
        assert_ne!(a, u);
        assert!((a - u).abs() < 0.05, "{a} vs {u}");
    }

    fn cand(sigma: f64, ridge: f64, discrepancy: f64, noise_level: f64) -> Candidate {
        Candidate {
            sigma,
            ridge,
            discrepancy,
            noise_level,
            beta: Vec::new(),
        }
    }

    #[test]
    fn discrepancy_rule_takes_largest_ridge_then_widest_within_noise_else_smallest_excess() {
        let cands = vec![
            cand(0.5, 0.1, 0.001, 0.01),
            cand(1.0, 0.1, 0.009, 0.01),
            cand(2.0, 0.1, 0.02, 0.01),
            cand(1.0, 1.0, 0.5, 0.01),
            cand(2.0, 0.01, 0.002, 0.01),
        ];
        // Ridge 1 exceeds its noise level; at ridge 0.1 the widest width within it is 1.0 (2.0
        // exceeds it); the wider (2.0, 0.01) is within but has the smaller ridge.
        assert_eq!(choose_candidate(&cands), Some((1, true)));
        let none_within = vec![
            cand(0.5, 0.1, 0.05, 0.01),
            cand(1.0, 0.1, 0.03, 0.01),
            cand(2.0, 0.1, 0.04, 0.0),
        ];
        assert_eq!(choose_candidate(&none_within), Some((1, false)));
        assert_eq!(choose_candidate(&[]), None);
    }

    #[test]
    fn one_block_fit_reuses_the_selected_solution_exactly() {
        // The default fit (selection, no second solve) equals a fit at the chosen setting.
        let (n, m) = (80, 60);
        let s = gauss(n, 1.0, 0.5, 31);
        let t = gauss(m, 2.0, 0.25, 32);
        let (sv, tv) = (
            MatrixView::new(&s, n, 1).unwrap(),
            MatrixView::new(&t, m, 1).unwrap(),
        );
        let chosen = KernelMeanMatching::new().fit(sv, tv).unwrap();
        assert_eq!(chosen.selection.table.len(), 12);
        let fixed = KernelMeanMatching::new()
            .sigma(Some(chosen.selection.chosen["sigma"]))
            .ridge(Some(chosen.selection.chosen["ridge"]))
            .fit(sv, tv)
            .unwrap();
        assert!(fixed.selection.table.is_empty());
        assert_eq!(chosen.source_weights, fixed.source_weights);
    }
}
