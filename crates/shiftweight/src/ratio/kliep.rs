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
//! Solver. With h_l = 1/n_s sum_s k(x_s, c_l) > 0, the substitution p_l = h_l alpha_l maps the
//! feasible set onto the probability simplex and the objective onto f(p) = 1/n_t sum_t log (M p)_t
//! with M_tl = k(x_t, c_l) / h_l: the log-optimal-portfolio / mixture-proportion problem. It is
//! solved by sequential quadratic programming as proposed for this problem by Kim, Carbonetto,
//! Stephens & Anitescu (2020, "A fast algorithm for maximum likelihood estimation of mixture
//! proportions using sequential quadratic programming", J. Comput. Graph. Statist. 29):
//! - the simplex is relaxed to the orthant, minimise phi(x) = -f(x) + sum_l x_l over x >= 0; its
//!   minimiser lies on the simplex (at a minimiser, sum_l x_l d phi / d x_l = 0, and
//!   sum_l x_l d f / d x_l = 1 for any x, so sum_l x_l = 1);
//! - each iteration minimises the quadratic model of phi at x (exact gradient and Hessian) over
//!   x >= 0 with a primal active-set method (Nocedal & Wright 2006, algorithm 16.3) started from
//!   the previous iteration's free set, and backtracks along the step until the Armijo condition
//!   holds. With few free columns (wide kernels) only the Hessian block of the free columns is
//!   formed, grown by one pass over the rows per freed column, and the multipliers of the fixed
//!   columns come from one Hessian-vector product over the rows. With many (narrow kernels, where
//!   the QP frees and fixes dozens of columns one at a time) the Hessian over all active columns
//!   is formed once per iteration by one matrix product and every step slices it: on 3,000 +
//!   3,000 x 6 rows (the demo data) at 1/8 of the median width, one fit took 0.77 s with the
//!   free block rebuilt per freed column and 0.14 s this way; the 5-fold CV over seven widths
//!   went from 2.3 s to 0.8 s. The active-set steps update one Cholesky factor of the free block
//!   instead of refactorising it (O(k^2) per step instead of O(k^3)): 0.09 s and 0.63 s.
//! - Started at the centre of the simplex. Near the optimum the full step is accepted and the
//!   convergence is fast: on 10-D Gaussian data with 200 centres, 1 to 23 iterations per fit at
//!   the seven default widths (5,000 and 20,000 rows), where the EM update accelerated by squared
//!   extrapolation needed 20 to over 10,000 passes (measured with `benches/compare.py`, which
//!   runs that EM as its numpy reference). Should the line search fail (rounding very near the
//!   optimum), one EM step p_l <- p_l g_l, g = grad f(p), is taken, which never lowers f (Cover
//!   1984, "An algorithm for maximizing expected log investment return", IEEE Trans. Inf. Theory
//!   30; the EM algorithm for mixture weights, Dempster, Laird, Rubin 1977).
//!
//! Stopping rule: at the normalised point p = x / sum_l x_l, by concavity and Jensen's
//! inequality, f* - f(p) <= log(max_l g_l(p)) (Cover 1984), so iteration stops once this
//! certified bound on the distance to the optimum is below `tol` (default 1e-6), or after
//! `max_iter` iterations (default 10,000, a cap that should never bind), or once five iterations
//! in a row lower the objective by no more than rounding. The last is the floor of what the solve
//! can certify, set by the conditioning of the Hessian (measured 1.5e-9 to 5e-9 on two cases
//! asked for tol = 1e-12; far below the default tol). A warning reports the bound reached
//! whenever it is above `tol`. The returned alpha_l = p_l / h_l meets the constraint exactly.
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
//!   can favour narrow widths whose weights are large on unseen source rows; on real-data cases
//!   the source-and-target variant was measured far more accurate, hence the default.
//!
//! Choice among the widths: the one-standard-error rule (Breiman, Friedman, Olshen, Stone 1984,
//! section 3.4.3; Hastie, Tibshirani, Friedman 2009, section 7.10). The score of a width is the
//! mean over folds and its standard error is the fold-to-fold sd / sqrt(folds); the widest width
//! whose mean is within `se_margin` (default 1) standard errors of the best mean is chosen. Why:
//! the held-out log-likelihood is biased towards narrow widths. A narrow kernel puts large
//! coefficients on centres with little source mass near them, so the ratio has spikes where the
//! source is sparse; the held-out normaliser log mean_s r(x_s) usually misses those spikes (the
//! log of a mean of heavy-tailed values is biased low, Jensen's inequality), and the spikes
//! dominate the squared error under the source. Measured on the 1-D Gaussian pair of the tests
//! (n = 1,000 per side): the best-mean width (median/8) had NMSE 2,598, the width chosen by the rule (median/2) 0.12;
//! at n = 100 both rules still pick median/8 (too few rows to tell the widths apart).
//! `se_margin = 0` restores the plain best-mean choice.
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
    fit_meta, mean_and_std_error, params, standardise_pair, EstimatorKind, FittedRatio,
    RatioEstimator, RatioForm, ScoreRow, Selection,
};
use crate::data::{kfold_assignment, validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par;
use faer::{Accum, Mat, MatRef};

const TARGET_FOLD_TAG: u64 = 0x6b6c_6965_7074;
const SOURCE_FOLD_TAG: u64 = 0x6b6c_6965_7073;

/// Which rows likelihood cross-validation holds out.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
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
#[derive(Debug, Clone, PartialEq)]
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

/// The outcome of one KLIEP fit.
#[derive(Debug, Clone)]
pub(crate) struct KliepSolution {
    /// Coefficients alpha (one per column of the kernel matrix).
    pub alpha: Vec<f64>,
    /// Final objective 1/n_t sum_t log r(x_t).
    pub objective: f64,
    /// Certified bound on f* - f at the returned point.
    pub gap: f64,
    /// Solver iterations taken.
    pub iterations: usize,
}

/// Maximises 1/n sum_t log (A alpha)_t subject to h' alpha = 1, alpha >= 0, where `a` is the
/// row-major n x b target kernel matrix and `h` the mean source kernel vector (see the module doc
/// for the method and its stopping rule), for several such problems on the same rows.
///
/// Problem k is `(h_k, skip_k)`: its rows are those whose label in `row_fold` differs from
/// `skip_k` (every row when `skip_k` or `row_fold` is `None`), its columns those with h_kl > 0
/// (the others keep alpha_l = 0, which is the same problem as dropping them). The problems are
/// solved one after the other, each pass over the rows in parallel; the result of each equals a
/// solve on a matrix holding only its rows. An entry is `None` when some row of that problem has
/// no kernel mass at all (every k(x_t, c_l) underflows to 0), so that its objective is -infinity
/// for every alpha.
pub(crate) fn solve_kliep_batch(
    a: &[f64],
    b: usize,
    row_fold: Option<&[usize]>,
    problems: &[(Vec<f64>, Option<usize>)],
    tol: f64,
    max_iter: usize,
) -> Vec<Option<KliepSolution>> {
    problems
        .iter()
        .map(|(h, skip)| {
            let rows = ProblemRows {
                a,
                b,
                row_fold,
                skip: *skip,
            };
            solve_kliep_sqp(rows, h, tol, max_iter)
        })
        .collect()
}

/// The kernel rows one KLIEP problem uses: every row of `a` (b values each), or those whose label
/// in `row_fold` is not `skip`.
#[derive(Clone, Copy)]
struct ProblemRows<'a> {
    a: &'a [f64],
    b: usize,
    row_fold: Option<&'a [usize]>,
    skip: Option<usize>,
}

impl ProblemRows<'_> {
    fn n_all(&self) -> usize {
        self.a.len() / self.b.max(1)
    }

    #[inline(always)]
    fn uses(&self, t: usize) -> bool {
        match (self.row_fold, self.skip) {
            (Some(rf), Some(s)) => rf[t] != s,
            _ => true,
        }
    }

    fn count(&self) -> usize {
        (0..self.n_all()).filter(|&t| self.uses(t)).count()
    }

    /// At u = A alpha: the sum of log u_t, the sums sum_t a_t / u_t, and whether some row has
    /// u_t <= 0 or non-finite (then the point is outside the domain). One pass, O(n b).
    fn evaluate(&self, alpha: &[f64]) -> (f64, Vec<f64>, bool) {
        let pass = LikelihoodPass { rows: *self, alpha };
        par::reduce_chunks(
            self.n_all(),
            (0.0f64, vec![0.0f64; self.b], false),
            |s, e| pass.chunk(s, e),
            |acc, p| {
                acc.0 += p.0;
                par::add_into(&mut acc.1, &p.1);
                acc.2 |= p.2;
            },
        )
    }

    /// 1 / u_t at u = A alpha for every row (0 for rows the problem does not use). One pass,
    /// O(n b); the curvature products of one SQP subproblem share it.
    fn inverse_fit(&self, alpha: &[f64]) -> Vec<f64> {
        use rayon::prelude::*;
        let b = self.b;
        let mut out = vec![0.0; self.n_all()];
        out.par_chunks_mut(kernel::CHUNK_ROWS)
            .enumerate()
            .for_each(|(c, o)| {
                kernel::with_wide_simd(|| {
                    for (k, v) in o.iter_mut().enumerate() {
                        let t = c * kernel::CHUNK_ROWS + k;
                        if self.uses(t) {
                            *v = 1.0 / dot(&self.a[t * b..(t + 1) * b], alpha);
                        }
                    }
                })
            });
        out
    }

    /// sum_t (a_tF / u_t)(a_tF / u_t)' for the columns F = `cols`, with `inv_u` from
    /// [`Self::inverse_fit`]. Rows are gathered chunk by chunk and each chunk's Gram goes through
    /// faer's triangular product. O(n |F|^2).
    fn curvature_block(&self, inv_u: &[f64], cols: &[usize]) -> Mat<f64> {
        let (b, k) = (self.b, cols.len());
        let mut g = par::reduce_chunks(
            self.n_all(),
            Mat::<f64>::zeros(k, k),
            |s, e| {
                let mut buf = Vec::with_capacity((e - s) * k);
                let mut m = 0;
                kernel::with_wide_simd(|| {
                    for (t, &inv) in inv_u.iter().enumerate().take(e).skip(s) {
                        if !self.uses(t) {
                            continue;
                        }
                        let row = &self.a[t * b..(t + 1) * b];
                        buf.extend(cols.iter().map(|&l| row[l] * inv));
                        m += 1;
                    }
                });
                let mut part = Mat::<f64>::zeros(k, k);
                if m > 0 {
                    let km = MatRef::from_row_major_slice(&buf, m, k);
                    kernel::gram_lower(part.as_mut(), km, Accum::Replace);
                }
                part
            },
            |acc, p| kernel::add_lower(acc, &p),
        );
        kernel::mirror_lower(&mut g);
        g
    }

    /// sum_t a_t (a_t . dir) / u_t^2, with `inv_u` from [`Self::inverse_fit`]: the curvature
    /// matrix times a direction without forming it; for [`Direction::Unit`] l, column l of it.
    /// One pass, O(n b).
    fn curvature_times(&self, inv_u: &[f64], dir: Direction) -> Vec<f64> {
        let b = self.b;
        par::reduce_chunks(
            self.n_all(),
            vec![0.0f64; b],
            |s, e| {
                let mut out = vec![0.0f64; b];
                kernel::with_wide_simd(|| {
                    for (t, &inv) in inv_u.iter().enumerate().take(e).skip(s) {
                        if !self.uses(t) {
                            continue;
                        }
                        let row = &self.a[t * b..(t + 1) * b];
                        let along = match dir {
                            Direction::Dense(d) => dot(row, d),
                            Direction::Unit(l) => row[l],
                        };
                        let c = along * inv * inv;
                        for (o, x) in out.iter_mut().zip(row) {
                            *o += x * c;
                        }
                    }
                });
                out
            },
            |acc, p| par::add_into(acc, &p),
        )
    }
}

/// A direction for [`ProblemRows::curvature_times`]: any vector, or the unit vector e_l.
#[derive(Clone, Copy)]
enum Direction<'a> {
    Dense(&'a [f64]),
    Unit(usize),
}

/// Where the SQP iteration stands: the point x (in p-space, not normalised), the pass at it, and
/// the quantities the stopping rule and the next step need.
struct SqpPoint {
    x: Vec<f64>,
    alpha: Vec<f64>,
    /// Mean log u over the problem's rows, u = A alpha.
    mean_log: f64,
    /// m_l = 1/n sum_t M_tl / u_t (active columns; 0 elsewhere): the EM multipliers at x.
    m: Vec<f64>,
    /// The relaxed objective phi(x) = -mean log u + sum x.
    phi: f64,
}

impl SqpPoint {
    /// The solution at this point: alpha normalised onto the constraint (p = x / sum x), its
    /// objective f(p), the certified gap bound and the iterations taken.
    fn solution(&self, gap: f64, iterations: usize) -> KliepSolution {
        let s: f64 = self.x.iter().sum();
        KliepSolution {
            alpha: self.alpha.iter().map(|v| v / s).collect(),
            objective: self.objective(),
            gap,
            iterations,
        }
    }

    /// The KLIEP objective f(p) at the normalised point p = x / sum x.
    fn objective(&self) -> f64 {
        self.mean_log - self.x.iter().sum::<f64>().ln()
    }
}

/// One KLIEP problem by sequential quadratic programming (see the module doc).
fn solve_kliep_sqp(
    rows: ProblemRows,
    h: &[f64],
    tol: f64,
    max_iter: usize,
) -> Option<KliepSolution> {
    let b = rows.b;
    let active: Vec<usize> = (0..b).filter(|&l| h[l] > 0.0 && h[l].is_finite()).collect();
    let n = rows.count();
    if active.is_empty() || n == 0 || h.len() != b {
        return None;
    }
    let nf = n as f64;
    let at = |x: Vec<f64>| -> Option<SqpPoint> {
        let mut alpha = vec![0.0; b];
        for &l in &active {
            alpha[l] = x[l] / h[l];
        }
        let (sum_log, sums, dead) = rows.evaluate(&alpha);
        if dead || !sum_log.is_finite() {
            return None;
        }
        let mut m = vec![0.0; b];
        for &l in &active {
            m[l] = sums[l] / nf / h[l];
        }
        let mean_log = sum_log / nf;
        let phi = -mean_log + x.iter().sum::<f64>();
        Some(SqpPoint {
            x,
            alpha,
            mean_log,
            m,
            phi,
        })
    };
    let mut x0 = vec![0.0; b];
    for &l in &active {
        x0[l] = 1.0 / active.len() as f64;
    }
    let mut cur = at(x0)?;
    // The QP's free set carried from one iteration to the next (all active columns at first).
    let mut free: Vec<usize> = active.clone();
    let mut iterations = 0;
    let mut failed_before = false;
    let (mut last_phi, mut flat_steps) = (f64::INFINITY, 0usize);
    loop {
        let s: f64 = cur.x.iter().sum();
        let mmax = active.iter().map(|&l| cur.m[l]).fold(0.0f64, f64::max);
        let gap = (s * mmax).ln().max(0.0);
        // Stall guard: SQP's attainable accuracy is limited by the conditioning of the Hessian
        // block (measured: gap bounds stuck at 1.5e-9 and 5e-9 with tol = 1e-12, every step still
        // passing the line search by a rounding-level decrease of the objective). Five iterations
        // in a row that lower phi by no more than rounding (1e-14 relative) end the solve.
        if last_phi - cur.phi <= 1e-14 * (1.0 + cur.phi.abs()) {
            flat_steps += 1;
        } else {
            flat_steps = 0;
        }
        last_phi = cur.phi;
        if gap <= tol || iterations >= max_iter || flat_steps >= 5 {
            return Some(cur.solution(gap, iterations));
        }
        iterations += 1;
        let y = sqp_subproblem(&rows, h, &active, &cur, &mut free, nf, BlockMode::Auto);
        // Backtracking (Armijo) line search along d = y - x; x + beta d stays >= 0 for beta in
        // [0, 1] since both ends do.
        let d: Vec<f64> = y.iter().zip(&cur.x).map(|(a, c)| a - c).collect();
        let slope: f64 = active.iter().map(|&l| (1.0 - cur.m[l]) * d[l]).sum();
        let mut next = None;
        if slope < 0.0 && slope.is_finite() {
            let mut beta = 1.0;
            for _ in 0..40 {
                let xt: Vec<f64> = cur
                    .x
                    .iter()
                    .zip(&d)
                    .map(|(c, dd)| (c + beta * dd).max(0.0))
                    .collect();
                if let Some(p) = at(xt) {
                    if p.phi <= cur.phi + 1e-4 * beta * slope {
                        next = Some(p);
                        break;
                    }
                }
                beta *= 0.5;
            }
        }
        cur = match next {
            Some(p) => {
                failed_before = false;
                p
            }
            None => {
                // No descent along the QP direction (rounding near the optimum, or a badly
                // conditioned subproblem): one EM step x_l <- x_l m_l, which never lowers the
                // objective (Cover 1984). Two such failures in a row mean no further progress at
                // floating-point precision (measured: a 1-D case with tol = 1e-12 stalled at a
                // gap bound of 5e-9): stop there rather than creep on by EM steps.
                let xt: Vec<f64> = cur.x.iter().zip(&cur.m).map(|(x, m)| x * m).collect();
                free = active.clone();
                let stalled = std::mem::replace(&mut failed_before, true);
                match at(xt) {
                    Some(p) if !stalled && p.objective() >= cur.objective() => p,
                    _ => {
                        return Some(cur.solution(gap, iterations));
                    }
                }
            }
        };
    }
}

/// The SQP subproblem at x: minimise q(y) = 1/2 y'Hy + c'y over y >= 0 (active columns), with H
/// the Hessian of phi at x and c = grad phi(x) - H x = 1 - 2 m (since H x = m). Primal
/// active-set method (Nocedal & Wright 2006, algorithm 16.3) started at x restricted to the free
/// set `free` of the previous subproblem; `free` is updated to this one's. With `mode` Auto: when
/// the free set is small, only the block H_FF is formed (O(n |F|^2)), each freed column adds one
/// pass (O(n b)) and the multipliers of the fixed columns come from one product H y without
/// forming H (O(n b)); when it holds a quarter or more of the active columns, the whole block
/// over them is formed once (O(n |A|^2), one matrix product) and every later step slices it
/// (O(|A| |F|) per multiplier check).
fn sqp_subproblem(
    rows: &ProblemRows,
    h: &[f64],
    active: &[usize],
    cur: &SqpPoint,
    free: &mut Vec<usize>,
    nf: f64,
    mode: BlockMode,
) -> Vec<f64> {
    let b = rows.b;
    let c: Vec<f64> = cur.m.iter().map(|m| 1.0 - 2.0 * m).collect();
    let mut y = vec![0.0; b];
    let inv_u = rows.inverse_fit(&cur.alpha);
    free.retain(|&l| cur.x[l] > 0.0);
    if free.is_empty() {
        free.extend(active.iter().copied().filter(|&l| cur.x[l] > 0.0));
    }
    for &l in free.iter() {
        y[l] = cur.x[l];
    }
    // The curvature source of this subproblem: with a large free set (narrow kernels, where the
    // QP frees and fixes dozens of columns one by one) the whole block over the active columns,
    // formed once in O(n |A|^2) by one product, after which every H_FF and every multiplier is a
    // slice of it; with a small one (wide kernels: 1 to 6 free columns), H_FF alone, grown by one
    // O(n b) pass per freed column. Measured on 3,000 + 3,000 x 6 rows at 1/8 of the median
    // width (21 iterations, 103 columns freed in one subproblem): 0.77 s with H_FF rebuilt per
    // freed column, 0.24 s grown by passes, 0.14 s with the whole block, 0.09 s once the
    // factor was updated instead of refactorised (see [`Cholesky`]).
    let block = |f: &[usize]| -> Mat<f64> {
        let g = rows.curvature_block(&inv_u, f);
        Mat::from_fn(f.len(), f.len(), |i, j| {
            g[(i, j)] / (nf * h[f[i]] * h[f[j]])
        })
    };
    let whole = match mode {
        BlockMode::Auto => 4 * free.len() >= active.len(),
        BlockMode::Whole => true,
        BlockMode::Grown => false,
    };
    let mut curv = if whole {
        let mut pos = vec![usize::MAX; b];
        for (i, &l) in active.iter().enumerate() {
            pos[l] = i;
        }
        FreeCurvature::Whole {
            m: block(active),
            pos,
        }
    } else {
        FreeCurvature::Grown(block(free))
    };
    let max_inner = 4 * b + 20;
    let mut just_freed: Option<usize> = None;
    let mut fac: Option<Cholesky> = None;
    for _ in 0..max_inner {
        let k = free.len();
        if k == 0 {
            break;
        }
        // Minimiser of q on the free set: H_FF z = -c_F (a tiny ridge guards near-singular
        // blocks of wide kernels). The factor follows the free set by updates; it is formed
        // afresh at the start, after a failed update and if its solution is not finite.
        let rhs: Vec<f64> = free.iter().map(|&l| -c[l]).collect();
        let mut z = fac.as_ref().map(|f| f.solve(&rhs));
        if !z.as_ref().is_some_and(|z| z.iter().all(|v| v.is_finite())) {
            z = None;
            fac = None;
            let dmax = (0..k)
                .map(|i| curv.entry(free, i, i))
                .fold(0.0f64, f64::max);
            let mut ridge = 1e-12 * dmax.max(f64::MIN_POSITIVE);
            for _ in 0..8 {
                if let Some(f) = Cholesky::factor(k, |i, j| curv.entry(free, i, j), ridge) {
                    let sol = f.solve(&rhs);
                    if sol.iter().all(|v| v.is_finite()) {
                        z = Some(sol);
                        fac = Some(f);
                        break;
                    }
                }
                ridge *= 100.0;
            }
        }
        let Some(z) = z else { break };
        let blocking = (0..k)
            .filter(|&i| z[i] < 0.0)
            .map(|i| {
                let yi = y[free[i]];
                (i, yi / (yi - z[i]))
            })
            .min_by(|p, q| p.1.total_cmp(&q.1));
        match blocking {
            None => {
                for i in 0..k {
                    y[free[i]] = z[i];
                }
                // Multipliers of the fixed columns: (H y + c)_l >= 0 at the QP's optimum.
                let hy: Vec<f64> = match &curv {
                    FreeCurvature::Whole { m, pos } => (0..b)
                        .map(|l| {
                            if pos[l] == usize::MAX {
                                return 0.0;
                            }
                            free.iter().map(|&j| m[(pos[l], pos[j])] * y[j]).sum()
                        })
                        .collect(),
                    FreeCurvature::Grown(_) => {
                        let dir: Vec<f64> = (0..b)
                            .map(|l| if h[l] > 0.0 { y[l] / h[l] } else { 0.0 })
                            .collect();
                        let raw = rows.curvature_times(&inv_u, Direction::Dense(&dir));
                        (0..b)
                            .map(|l| {
                                if h[l] > 0.0 {
                                    raw[l] / (nf * h[l])
                                } else {
                                    0.0
                                }
                            })
                            .collect()
                    }
                };
                let in_free = {
                    let mut v = vec![false; b];
                    for &l in free.iter() {
                        v[l] = true;
                    }
                    v
                };
                let worst = active
                    .iter()
                    .filter(|&&l| !in_free[l])
                    .map(|&l| (l, hy[l] + c[l]))
                    .min_by(|p, q| p.1.total_cmp(&q.1));
                match worst {
                    Some((l, lam)) if lam < -1e-10 => {
                        // H_FF grows by one row and column.
                        free.push(l);
                        if let FreeCurvature::Grown(hff) = &mut curv {
                            let col = rows.curvature_times(&inv_u, Direction::Unit(l));
                            *hff = grow_block(hff, free, &col, h, nf);
                        }
                        if let Some(f) = fac.as_mut() {
                            let last = free.len() - 1;
                            let col: Vec<f64> =
                                (0..last).map(|i| curv.entry(free, last, i)).collect();
                            if !f.append(&col, curv.entry(free, last, last)) {
                                fac = None;
                            }
                        }
                        just_freed = Some(l);
                    }
                    _ => break,
                }
            }
            Some((i, tau)) => {
                // In exact arithmetic a column freed for its negative multiplier moves up on
                // the next step (Nocedal & Wright 2006, theorem 16.5); if rounding in a nearly
                // singular block makes it block at once, freeing it again would cycle: stop.
                if just_freed == Some(free[i]) && tau <= 0.0 {
                    y[free[i]] = 0.0;
                    free.remove(i);
                    break;
                }
                just_freed = None;
                let tau = tau.clamp(0.0, 1.0);
                for j in 0..k {
                    let l = free[j];
                    y[l] += tau * (z[j] - y[l]);
                }
                y[free[i]] = 0.0;
                free.remove(i);
                if let Some(f) = fac.as_mut() {
                    f.remove(i);
                }
                if let FreeCurvature::Grown(hff) = &mut curv {
                    let keep: Vec<usize> = (0..k).filter(|&j| j != i).collect();
                    *hff = Mat::from_fn(k - 1, k - 1, |p, q| hff[(keep[p], keep[q])]);
                }
            }
        }
    }
    for v in y.iter_mut() {
        if *v < 0.0 {
            *v = 0.0;
        }
    }
    y
}

/// Where the entries of H_FF come from in one QP subproblem (see [`sqp_subproblem`]).
enum FreeCurvature {
    /// The whole block `m` over the active columns, formed once; `pos[l]` is column l's index
    /// in it (usize::MAX for inactive columns).
    Whole { m: Mat<f64>, pos: Vec<usize> },
    /// H_FF itself, in the order of the free set, grown and cut with it.
    Grown(Mat<f64>),
}

impl FreeCurvature {
    /// Entry (i, j) of H_FF, for positions i, j in the free set `free`.
    fn entry(&self, free: &[usize], i: usize, j: usize) -> f64 {
        match self {
            FreeCurvature::Whole { m, pos } => m[(pos[free[i]], pos[free[j]])],
            FreeCurvature::Grown(hff) => hff[(i, j)],
        }
    }
}

/// The Cholesky factor L (lower triangular, row-major) of A + ridge I for the free block of the
/// active-set method, kept in step with the free set: freeing a column appends a row to L
/// (one forward substitution, O(k^2)), fixing one deletes its row and restores the triangle with
/// Givens rotations (O(k^2); Golub & Van Loan 2013, section 6.5.4), so each step of the method
/// costs O(k^2) instead of a fresh O(k^3) factorisation (measured: 6,650 factorisations of
/// blocks up to 200 x 200 in one 1-D fit of 300 + 300 rows). Single-threaded: the blocks are at
/// most b x b.
struct Cholesky {
    /// Rows of L; row i holds its first i + 1 entries.
    rows: Vec<Vec<f64>>,
    ridge: f64,
}

impl Cholesky {
    /// Factorises A + ridge I for the k x k matrix with entries `a(i, j)` (only i >= j is read);
    /// None at a pivot that is not positive.
    fn factor(k: usize, a: impl Fn(usize, usize) -> f64, ridge: f64) -> Option<Self> {
        let mut f = Cholesky {
            rows: Vec::with_capacity(k),
            ridge,
        };
        for i in 0..k {
            let col: Vec<f64> = (0..i).map(|j| a(i, j)).collect();
            if !f.append(&col, a(i, i)) {
                return None;
            }
        }
        Some(f)
    }

    /// Appends a last row and column with off-diagonal entries `col` (against the current
    /// rows, in order) and diagonal `diag`; false (factor unchanged) if the new pivot is not
    /// positive.
    fn append(&mut self, col: &[f64], diag: f64) -> bool {
        debug_assert_eq!(col.len(), self.rows.len());
        let mut w = self.forward(col);
        let d2 = diag + self.ridge - w.iter().map(|v| v * v).sum::<f64>();
        if !(d2 > 0.0 && d2.is_finite()) {
            return false;
        }
        w.push(d2.sqrt());
        self.rows.push(w);
        true
    }

    /// Deletes row and column `i` of A.
    fn remove(&mut self, i: usize) {
        self.rows.remove(i);
        // Rows i.. now have one entry past the diagonal (column p + 1 for row p); rotate
        // columns (p, p + 1) to zero it, top to bottom.
        for p in i..self.rows.len() {
            let (a, b) = (self.rows[p][p], self.rows[p][p + 1]);
            let r = a.hypot(b);
            let (c, s) = if r > 0.0 { (a / r, b / r) } else { (1.0, 0.0) };
            for row in self.rows[p..].iter_mut() {
                let (x, y) = (row[p], row[p + 1]);
                row[p] = c * x + s * y;
                row[p + 1] = -s * x + c * y;
            }
            self.rows[p][p] = r;
            self.rows[p].truncate(p + 1);
        }
    }

    /// Solves L v = rhs by forward substitution. O(k^2).
    fn forward(&self, rhs: &[f64]) -> Vec<f64> {
        let mut v = Vec::with_capacity(self.rows.len() + 1);
        for (i, row) in self.rows.iter().enumerate() {
            let s: f64 = row[..i].iter().zip(&v).map(|(l, v)| l * v).sum();
            v.push((rhs[i] - s) / row[i]);
        }
        v
    }

    /// Solves (A + ridge I) z = rhs: L v = rhs, then L' z = v. O(k^2).
    fn solve(&self, rhs: &[f64]) -> Vec<f64> {
        let k = self.rows.len();
        let mut v = self.forward(rhs);
        for i in (0..k).rev() {
            let vi = v[i] / self.rows[i][i];
            v[i] = vi;
            for (j, l) in self.rows[i][..i].iter().enumerate() {
                v[j] -= l * vi;
            }
        }
        v
    }
}

/// Where a QP subproblem takes its curvature blocks from (see [`sqp_subproblem`]).
#[derive(Clone, Copy, Debug, PartialEq)]
enum BlockMode {
    /// The whole block when the starting free set holds at least a quarter of the active
    /// columns, else H_FF grown column by column.
    Auto,
    /// Always the whole block over the active columns (the tests compare both sources).
    #[cfg_attr(not(test), allow(dead_code))]
    Whole,
    /// Always H_FF, grown by one pass per freed column.
    #[cfg_attr(not(test), allow(dead_code))]
    Grown,
}

/// The block H_FF of the previous free set (all of `free` but its last column) extended by the
/// last column l = `free[k]`, whose unscaled Hessian column is `col` (sum_t a_t a_tl / u_t^2, as
/// [`ProblemRows::curvature_times`] gives it for [`Direction::Unit`] l): entry (i, l) is
/// col_i / (n h_i h_l), as in [`ProblemRows::curvature_block`].
fn grow_block(hff: &Mat<f64>, free: &[usize], col: &[f64], h: &[f64], nf: f64) -> Mat<f64> {
    let k = free.len() - 1;
    let l = free[k];
    let edge = |i: usize| col[free[i]] / (nf * h[free[i]] * h[l]);
    Mat::from_fn(k + 1, k + 1, |i, j| match (i == k, j == k) {
        (false, false) => hff[(i, j)],
        (true, false) => edge(j),
        (false, true) => edge(i),
        (true, true) => edge(k),
    })
}

/// What one KLIEP pass reads: the problem's kernel rows and the point `alpha`.
struct LikelihoodPass<'a> {
    rows: ProblemRows<'a>,
    alpha: &'a [f64],
}

impl LikelihoodPass<'_> {
    /// One chunk of rows `start..end` of the pass (only the problem's rows): the sum
    /// of log u_t, the sum of row_t / u_t, and whether some row has u_t <= 0 or non-finite.
    /// Compiled for AVX2 when the CPU has it (a separate function, so that the whole loop gets
    /// the wider vectors: a closure passed to [`kernel::with_wide_simd`] is not always inlined
    /// into its AVX2 version); the arithmetic is the same in both versions, so the results are
    /// bitwise equal.
    fn chunk(&self, start: usize, end: usize) -> (f64, Vec<f64>, bool) {
        #[cfg(target_arch = "x86_64")]
        {
            #[target_feature(enable = "avx2")]
            unsafe fn wide(
                pass: &LikelihoodPass,
                start: usize,
                end: usize,
            ) -> (f64, Vec<f64>, bool) {
                // SAFETY (of the calls to dot_avx2): this function only runs on CPUs with AVX2.
                pass.chunk_body(start, end, |x, y| unsafe { dot_avx2(x, y) })
            }
            if std::arch::is_x86_feature_detected!("avx2") {
                // SAFETY: the CPU was just checked to support AVX2, the only feature enabled.
                return unsafe { wide(self, start, end) };
            }
        }
        self.chunk_body(start, end, dot)
    }

    #[inline(always)]
    fn chunk_body(
        &self,
        start: usize,
        end: usize,
        dot: impl Fn(&[f64], &[f64]) -> f64,
    ) -> (f64, Vec<f64>, bool) {
        let (a, b) = (self.rows.a, self.rows.b);
        let mut o = 0.0f64;
        let mut g = vec![0.0f64; b];
        let mut dead = false;
        for t in start..end {
            if !self.rows.uses(t) {
                continue;
            }
            let row = &a[t * b..(t + 1) * b];
            let u = dot(row, self.alpha);
            if u <= 0.0 || !u.is_finite() {
                dead = true;
                continue;
            }
            o += u.ln();
            let inv = 1.0 / u;
            for (gl, x) in g.iter_mut().zip(row) {
                *gl += x * inv;
            }
        }
        (o, g, dead)
    }
}

/// Dot product with sixteen independent partial sums in four groups of four, so that the loop
/// becomes four independent chains of 4-lane vector operations (a single running sum is a chain
/// of dependent additions that the compiler may not reorder; eight sums in one array were
/// vectorised as 2-lane operations with shuffles). Fixed summation order.
#[inline(always)]
fn dot(x: &[f64], y: &[f64]) -> f64 {
    let mut acc = [[0.0f64; 4]; 4];
    let (xc, yc) = (x.chunks_exact(16), y.chunks_exact(16));
    let (xr, yr) = (xc.remainder(), yc.remainder());
    for (p, q) in xc.zip(yc) {
        for (j, a) in acc.iter_mut().enumerate() {
            for (i, v) in a.iter_mut().enumerate() {
                *v += p[4 * j + i] * q[4 * j + i];
            }
        }
    }
    let mut lanes = [0.0f64; 4];
    for (i, l) in lanes.iter_mut().enumerate() {
        *l = (acc[0][i] + acc[1][i]) + (acc[2][i] + acc[3][i]);
    }
    let mut s = (lanes[0] + lanes[2]) + (lanes[1] + lanes[3]);
    for (p, q) in xr.iter().zip(yr) {
        s += p * q;
    }
    s
}

/// [`dot`] with 4-lane AVX2 vectors: register j holds the partial sums acc[j][0..4], added and
/// combined in the same order, so the result is bitwise equal to [`dot`]'s.
///
/// # Safety
/// The CPU must support AVX2.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn dot_avx2(x: &[f64], y: &[f64]) -> f64 {
    use std::arch::x86_64::{
        _mm256_add_pd, _mm256_loadu_pd, _mm256_mul_pd, _mm256_setzero_pd, _mm256_storeu_pd,
    };
    let n = x.len().min(y.len());
    let n16 = n / 16 * 16;
    let (px, py) = (x.as_ptr(), y.as_ptr());
    let mut acc = [_mm256_setzero_pd(); 4];
    let mut k = 0;
    while k < n16 {
        for (j, a) in acc.iter_mut().enumerate() {
            // SAFETY: k + 4 j + 4 <= n16 <= the length of both slices.
            let (u, v) = unsafe {
                (
                    _mm256_loadu_pd(px.add(k + 4 * j)),
                    _mm256_loadu_pd(py.add(k + 4 * j)),
                )
            };
            *a = _mm256_add_pd(*a, _mm256_mul_pd(u, v));
        }
        k += 16;
    }
    let l = _mm256_add_pd(_mm256_add_pd(acc[0], acc[1]), _mm256_add_pd(acc[2], acc[3]));
    let mut lanes = [0.0f64; 4];
    // SAFETY: `lanes` holds four f64.
    unsafe { _mm256_storeu_pd(lanes.as_mut_ptr(), l) };
    let mut s = (lanes[0] + lanes[2]) + (lanes[1] + lanes[3]);
    for (p, q) in x[n16..n].iter().zip(&y[n16..n]) {
        s += p * q;
    }
    s
}

/// Row-major kernel matrix of `x` against `centres` (n x b), computed chunk by chunk in parallel.
fn kernel_matrix(x: MatrixView, centres: MatrixView, sigma: f64) -> Vec<f64> {
    use rayon::prelude::*;
    let b = centres.rows();
    let c_sq = kernel::row_sq_norms(centres);
    let mut out = vec![0.0; x.rows() * b];
    out.par_chunks_mut(kernel::CHUNK_ROWS * b.max(1))
        .enumerate()
        .for_each(|(k, o)| {
            let start = k * kernel::CHUNK_ROWS;
            let m = o.len() / b.max(1);
            kernel::kernel_block_into(x.slice_rows(start, start + m), centres, &c_sq, sigma, o);
        });
    out
}

/// r at every row of a kernel matrix with `b` columns whose label in `fold` is `f`.
fn evaluate_fold(a: &[f64], b: usize, fold: &[usize], f: usize, alpha: &[f64]) -> Vec<f64> {
    kernel::with_wide_simd(|| {
        a.chunks_exact(b)
            .zip(fold)
            .filter(|(_, &g)| g == f)
            .map(|(row, _)| dot(row, alpha))
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
    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, self.folds.max(2))?;
        let (st, zs, zt, warnings) = standardise_pair(source, target);
        let (n_s, n_t) = (zs.rows(), zt.rows());
        // Centres: seeded target rows, remembering which rows they are (for the CV).
        let b = self.n_basis.min(n_t);
        let centre_rows = {
            use rand::seq::index::sample;
            let mut r = kernel::rng(self.seed ^ 0x6365_6e74_7265);
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
                let st = per_fold.map(|v| mean_and_std_error(&v));
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
        };
        fitted.source_weights = fitted.ratio(source)?;
        Ok(fitted)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use faer::prelude::*;
    use rand_distr::{Distribution, Normal};

    fn gauss(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
        let mut r = kernel::rng(seed);
        let g = Normal::new(mean, sd).unwrap();
        (0..n).map(|_| g.sample(&mut r)).collect()
    }

    /// A 1-D KLIEP problem: n rows from N(mean, sd^2), the first b of them as centres, the
    /// n x b kernel matrix at width `sigma`, and the constraint vector h_l = `h(l)`.
    fn one_d_problem(
        n: usize,
        b: usize,
        (mean, sd): (f64, f64),
        sigma: f64,
        seed: u64,
        h: impl Fn(usize) -> f64,
    ) -> (Vec<f64>, Vec<f64>) {
        let t = gauss(n, mean, sd, seed);
        let tv = MatrixView::new(&t, n, 1).unwrap();
        let cv = MatrixView::new(&t[..b], b, 1).unwrap();
        (kernel_matrix(tv, cv, sigma), (0..b).map(h).collect())
    }

    fn normal_pdf(x: f64, m: f64, s: f64) -> f64 {
        (-(x - m) * (x - m) / (2.0 * s * s)).exp() / (s * (2.0 * std::f64::consts::PI).sqrt())
    }

    #[test]
    fn avx2_dot_is_bitwise_equal_to_the_portable_dot() {
        // Same partial sums in the same order (see `dot_avx2`): equal bits for every length,
        // including remainders after the 16-wide blocks; and both near an f64 reference sum.
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            for n in [0usize, 1, 7, 15, 16, 17, 33, 200, 203] {
                let x = gauss(n, 0.0, 1.0, 40 + n as u64);
                let y = gauss(n, 1.0, 2.0, 80 + n as u64);
                // SAFETY: AVX2 was just detected.
                let wide = unsafe { dot_avx2(&x, &y) };
                let plain = dot(&x, &y);
                assert_eq!(wide.to_bits(), plain.to_bits(), "n = {n}");
                let naive: f64 = x.iter().zip(&y).map(|(a, b)| a * b).sum();
                let scale: f64 = x.iter().zip(&y).map(|(a, b)| (a * b).abs()).sum();
                assert!((plain - naive).abs() <= 1e-14 * scale.max(1.0), "n = {n}");
            }
        }
    }

    #[test]
    fn batch_equals_solving_each_fold_alone_on_its_own_rows() {
        // Three held-out-fold problems solved as a batch must give what each gives alone on a
        // matrix holding only its training rows (the claim of `solve_kliep_batch`).
        let (n, b) = (120, 12);
        let t = gauss(n, 2.0, 0.25, 5);
        let centres: Vec<f64> = t[..b].to_vec();
        let tv = MatrixView::new(&t, n, 1).unwrap();
        let cv = MatrixView::new(&centres, b, 1).unwrap();
        let a = kernel_matrix(tv, cv, 0.3);
        let fold: Vec<usize> = (0..n).map(|i| i % 3).collect();
        let h: Vec<Vec<f64>> = (0..3)
            .map(|f| (0..b).map(|l| 0.02 + 0.01 * ((l + f) % 5) as f64).collect())
            .collect();
        let problems: Vec<(Vec<f64>, Option<usize>)> =
            (0..3).map(|f| (h[f].clone(), Some(f))).collect();
        let together = solve_kliep_batch(&a, b, Some(&fold), &problems, 1e-10, 10_000);
        for f in 0..3 {
            let own: Vec<f64> = (0..n)
                .filter(|t| fold[*t] != f)
                .flat_map(|t| a[t * b..(t + 1) * b].to_vec())
                .collect();
            let alone = solve_kliep_batch(&own, b, None, &[(h[f].clone(), None)], 1e-10, 10_000);
            let (x, y) = (together[f].as_ref().unwrap(), alone[0].as_ref().unwrap());
            assert_eq!(x.iterations, y.iterations, "fold {f}");
            assert!((x.objective - y.objective).abs() < 1e-10, "fold {f}");
            for (p, q) in x.alpha.iter().zip(&y.alpha) {
                assert!(
                    (p - q).abs() <= 1e-8 * q.abs().max(1.0),
                    "fold {f}: {p} vs {q}"
                );
            }
        }
    }

    #[test]
    fn sqp_reaches_the_optimum_of_the_plain_em_iteration() {
        // Reference: the multiplicative EM update for mixture proportions, p_l <- p_l g_l
        // (Cover 1984, IEEE Trans. Inf. Theory 30; Dempster, Laird, Rubin 1977), written out
        // here independently of the solver and run for many steps; both must reach the same
        // maximum, and the solver's certified gap must hold against it.
        for (sigma, seed) in [(0.15, 3u64), (0.5, 4), (1.0, 5)] {
            let (n, b) = (200, 15);
            let (a, h) = one_d_problem(n, b, (2.0, 0.5), sigma, seed, |l| {
                0.05 + 0.02 * (l % 7) as f64
            });
            let sol = solve_kliep_batch(&a, b, None, &[(h.clone(), None)], 1e-9, 10_000)
                .pop()
                .flatten()
                .unwrap();
            let f = |p: &[f64]| -> f64 {
                (0..n)
                    .map(|t| (0..b).map(|l| a[t * b + l] / h[l] * p[l]).sum::<f64>().ln())
                    .sum::<f64>()
                    / n as f64
            };
            // EM until its own certified gap (Cover 1984) is below 1e-10.
            let mut p = vec![1.0 / b as f64; b];
            let mut em_gap = f64::INFINITY;
            for _ in 0..400_000 {
                let u: Vec<f64> = (0..n)
                    .map(|t| (0..b).map(|l| a[t * b + l] / h[l] * p[l]).sum::<f64>())
                    .collect();
                let g: Vec<f64> = (0..b)
                    .map(|l| (0..n).map(|t| a[t * b + l] / h[l] / u[t]).sum::<f64>() / n as f64)
                    .collect();
                em_gap = g.iter().cloned().fold(0.0f64, f64::max).ln().max(0.0);
                if em_gap <= 1e-10 {
                    break;
                }
                for l in 0..b {
                    p[l] *= g[l];
                }
            }
            assert!(
                em_gap <= 1e-10,
                "sigma {sigma}: the reference EM did not converge"
            );
            let p_sqp: Vec<f64> = sol.alpha.iter().zip(&h).map(|(x, hh)| x * hh).collect();
            let total: f64 = p_sqp.iter().sum();
            assert!(
                (total - 1.0).abs() < 1e-12,
                "sigma {sigma}: h'alpha = {total}"
            );
            assert!(p_sqp.iter().all(|v| *v >= 0.0));
            let (f_sqp, f_em) = (f(&p_sqp), f(&p));
            assert!((f_sqp - sol.objective).abs() < 1e-12);
            assert!(sol.gap <= 1e-9, "sigma {sigma}: gap {}", sol.gap);
            // Both are within their gap bounds of the same maximum.
            assert!(
                (f_sqp - f_em).abs() <= 1e-9,
                "sigma {sigma}: sqp {f_sqp} em {f_em}"
            );
        }
    }

    #[test]
    fn updated_cholesky_factor_matches_a_fresh_faer_factorisation() {
        // Reference: faer's own Cholesky factorisation (Mat::llt) of the same submatrix, formed
        // afresh after every update; and L L' = A entry by entry.
        let n = 30;
        let g = gauss(n * (n + 5), 0.0, 1.0, 21);
        let gm = MatRef::from_row_major_slice(&g, n, n + 5);
        let a = gm * gm.transpose();
        let ridge = 1e-9;
        let mut idx: Vec<usize> = (0..20).collect();
        let mut f = Cholesky::factor(idx.len(), |i, j| a[(idx[i], idx[j])], ridge).unwrap();
        // Fix and free columns in a pattern like the active-set method's.
        let steps: [(bool, usize); 8] = [
            (false, 3),
            (true, 25),
            (false, 0),
            (false, 17),
            (true, 21),
            (true, 29),
            (false, 5),
            (true, 3),
        ];
        for (add, which) in steps {
            if add {
                let col: Vec<f64> = idx.iter().map(|&j| a[(which, j)]).collect();
                assert!(f.append(&col, a[(which, which)]));
                idx.push(which);
            } else {
                f.remove(which);
                idx.remove(which);
            }
            let k = idx.len();
            let sub = Mat::from_fn(k, k, |i, j| {
                a[(idx[i], idx[j])] + if i == j { ridge } else { 0.0 }
            });
            for i in 0..k {
                for j in 0..=i {
                    let llt: f64 = (0..=j).map(|p| f.rows[i][p] * f.rows[j][p]).sum();
                    assert!(
                        (llt - sub[(i, j)]).abs() <= 1e-10 * (1.0 + sub[(i, i)]),
                        "({i}, {j})"
                    );
                }
            }
            let rhs: Vec<f64> = (0..k).map(|i| (i as f64 * 0.7).sin()).collect();
            let z = f.solve(&rhs);
            let reference =
                sub.llt(faer::Side::Lower)
                    .unwrap()
                    .solve(Mat::from_fn(k, 1, |i, _| rhs[i]));
            for i in 0..k {
                assert!((z[i] - reference[(i, 0)]).abs() <= 1e-8 * (1.0 + reference[(i, 0)].abs()));
            }
        }
        // A copy of a column, with its diagonal lowered, would make the block indefinite: it is
        // refused and the factor is left as it was.
        let dup: Vec<f64> = idx.iter().map(|&j| a[(idx[0], j)]).collect();
        let mut g = Cholesky {
            rows: f.rows.clone(),
            ridge: 0.0,
        };
        assert!(!g.append(&dup, a[(idx[0], idx[0])] - 1e-6));
        assert_eq!(g.rows, f.rows);
    }

    #[test]
    fn both_curvature_sources_solve_the_qp_subproblem_to_its_kkt_conditions() {
        // The bound-constrained QP min 1/2 y'Hy + c'y, y >= 0, is solved when y >= 0,
        // (Hy + c)_l = 0 where y_l > 0 and (Hy + c)_l >= 0 where y_l = 0 (the KKT conditions;
        // Nocedal & Wright 2006, section 16.5). H and c are written out here densely from their
        // definitions, independently of the solver's blocks and passes. Narrow widths make the
        // active-set method free and fix many columns, which exercises both curvature sources.
        for (sigma, seed) in [(0.08, 11u64), (0.15, 12), (0.6, 13)] {
            let (n, b) = (300, 40);
            let (a, h) = one_d_problem(n, b, (0.0, 1.0), sigma, seed, |l| {
                0.05 + 0.03 * (l % 5) as f64
            });
            let rows = ProblemRows {
                a: &a,
                b,
                row_fold: None,
                skip: None,
            };
            let nf = n as f64;
            // A point away from the optimum: uneven positive x.
            let x: Vec<f64> = (0..b)
                .map(|l| (1.0 + (l % 3) as f64) / (2.0 * b as f64))
                .collect();
            let alpha: Vec<f64> = x.iter().zip(&h).map(|(x, h)| x / h).collect();
            let u: Vec<f64> = (0..n)
                .map(|r| (0..b).map(|l| a[r * b + l] * alpha[l]).sum())
                .collect();
            let m: Vec<f64> = (0..b)
                .map(|l| (0..n).map(|r| a[r * b + l] / h[l] / u[r]).sum::<f64>() / nf)
                .collect();
            let mean_log = u.iter().map(|v| v.ln()).sum::<f64>() / nf;
            let cur = SqpPoint {
                phi: -mean_log + x.iter().sum::<f64>(),
                x,
                alpha,
                mean_log,
                m: m.clone(),
            };
            let hess = |i: usize, j: usize| -> f64 {
                (0..n)
                    .map(|r| a[r * b + i] * a[r * b + j] / (u[r] * u[r]))
                    .sum::<f64>()
                    / (nf * h[i] * h[j])
            };
            let active: Vec<usize> = (0..b).collect();
            let mut solutions = Vec::new();
            for mode in [BlockMode::Whole, BlockMode::Grown] {
                let mut free = active.clone();
                let y = sqp_subproblem(&rows, &h, &active, &cur, &mut free, nf, mode);
                let scale = 1.0 + y.iter().cloned().fold(0.0f64, f64::max);
                assert!(y.iter().all(|v| *v >= 0.0), "{mode:?} sigma {sigma}");
                for l in 0..b {
                    let g = (0..b).map(|j| hess(l, j) * y[j]).sum::<f64>() + 1.0 - 2.0 * m[l];
                    if y[l] > 0.0 {
                        assert!(
                            g.abs() <= 1e-7 * scale,
                            "{mode:?} sigma {sigma}: column {l} free with gradient {g}"
                        );
                    } else {
                        assert!(
                            g >= -1e-7 * scale,
                            "{mode:?} sigma {sigma}: column {l} fixed with multiplier {g}"
                        );
                    }
                }
                solutions.push(y);
            }
            for (l, (whole, grown)) in solutions[0].iter().zip(&solutions[1]).enumerate() {
                assert!(
                    (whole - grown).abs() <= 1e-8 * (1.0 + whole),
                    "sigma {sigma}: the two sources disagree at column {l}"
                );
            }
        }
    }

    #[test]
    fn constraint_holds_and_perturbations_do_not_improve() {
        let n = 150;
        let s = gauss(n, 1.0, 0.5, 1);
        let t = gauss(n, 2.0, 0.25, 2);
        let sv = MatrixView::new(&s, n, 1).unwrap();
        let tv = MatrixView::new(&t, n, 1).unwrap();
        let fit = KLRatio::new().n_basis(40).fit(sv, tv).unwrap();
        // Normalisation constraint: mean source weight = 1 on the fitted rows.
        let mean: f64 = fit.source_weights.iter().sum::<f64>() / n as f64;
        assert!((mean - 1.0).abs() < 1e-9, "mean source weight {mean}");
        // Optimality: no feasible perturbation (move mass between two centres, keeping the
        // constraint) increases the objective. Reference: KKT conditions of a concave program
        // (Boyd & Vandenberghe 2004, section 5.5.3).
        let RatioForm::KernelExpansion {
            sigma,
            centres,
            coef,
        } = &fit.form
        else {
            panic!()
        };
        let (_, zs, zt, _) = standardise_pair(sv, tv);
        let b = centres.rows();
        let kt = kernel_matrix(zt.view(), centres.view(), *sigma);
        let ks = kernel_matrix(zs.view(), centres.view(), *sigma);
        let h: Vec<f64> = (0..b)
            .map(|l| (0..n).map(|i| ks[i * b + l]).sum::<f64>() / n as f64)
            .collect();
        let obj = |a: &[f64]| -> f64 {
            (0..n)
                .map(|t| (0..b).map(|l| kt[t * b + l] * a[l]).sum::<f64>().ln())
                .sum::<f64>()
                / n as f64
        };
        let f0 = obj(coef);
        for (i, j) in [(0, 1), (3, 7), (10, 20), (b - 1, 0)] {
            for step in [1e-3, -1e-3] {
                let mut a = coef.clone();
                // keep h'a fixed: a_i += step / h_i, a_j -= step / h_j.
                a[i] += step / h[i];
                a[j] -= step / h[j];
                if a[i] < 0.0 || a[j] < 0.0 {
                    continue;
                }
                assert!(
                    obj(&a) <= f0 + 1e-6,
                    "perturbation ({i},{j},{step}) improved the objective"
                );
            }
        }
    }

    #[test]
    fn gaussian_pair_error_is_small_and_falls_with_n() {
        // Analytic ratio of N(2, 0.25^2) over N(1, 0.5^2) (a covariate-shift toy, from memory).
        let mut nmse = Vec::new();
        for &n in &[100usize, 800] {
            let s = gauss(n, 1.0, 0.5, 10 + n as u64);
            let t = gauss(n, 2.0, 0.25, 20 + n as u64);
            let fit = KLRatio::new()
                .n_basis(100)
                .fit(
                    MatrixView::new(&s, n, 1).unwrap(),
                    MatrixView::new(&t, n, 1).unwrap(),
                )
                .unwrap();
            let test = gauss(2000, 1.0, 0.5, 99);
            let w = fit.ratio(MatrixView::new(&test, 2000, 1).unwrap()).unwrap();
            let truth: Vec<f64> = test
                .iter()
                .map(|x| normal_pdf(*x, 2.0, 0.25) / normal_pdf(*x, 1.0, 0.5))
                .collect();
            let (sw, st): (f64, f64) = (w.iter().sum(), truth.iter().sum());
            let e: f64 = w
                .iter()
                .zip(&truth)
                .map(|(a, b)| (a / sw - b / st).powi(2))
                .sum();
            nmse.push(e * 2000.0);
        }
        // Baseline: uniform weights (no correction) against the same analytic truth.
        let test = gauss(2000, 1.0, 0.5, 99);
        let truth: Vec<f64> = test
            .iter()
            .map(|x| normal_pdf(*x, 2.0, 0.25) / normal_pdf(*x, 1.0, 0.5))
            .collect();
        let st: f64 = truth.iter().sum();
        let uniform: f64 = truth
            .iter()
            .map(|b| (1.0 / 2000.0 - b / st).powi(2))
            .sum::<f64>()
            * 2000.0;
        assert!(nmse[1] < nmse[0], "NMSE did not fall with n: {nmse:?}");
        assert!(
            nmse[1] < 0.1 * uniform,
            "NMSE {nmse:?} not well below uniform weights' {uniform}"
        );
    }

    #[test]
    fn both_cv_variants_run_and_bad_parameters_are_named() {
        let s = gauss(60, 0.0, 1.0, 5);
        let t = gauss(60, 0.5, 1.0, 6);
        let (sv, tv) = (
            MatrixView::new(&s, 60, 1).unwrap(),
            MatrixView::new(&t, 60, 1).unwrap(),
        );
        for cv in [KliepCv::SourceAndTarget, KliepCv::TargetOnly] {
            let fit = KLRatio::new().n_basis(20).cv(cv).fit(sv, tv).unwrap();
            assert_eq!(fit.selection.table.len(), 7);
        }
        for est in [
            KLRatio::new().folds(1),
            KLRatio::new().n_basis(0),
            KLRatio::new().tol(0.0),
            KLRatio::new().sigma_multiples(vec![]),
        ] {
            assert!(matches!(
                est.fit(sv, tv),
                Err(Error::InvalidParameter { .. })
            ));
        }
        assert!(KliepCv::from_name("nope").is_err());
    }
}
