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
//! solved by the multiplicative (EM) update p_l <- p_l g_l, where g = grad f(p), started at the
//! centre of the simplex, accelerated by squared extrapolation (SQUAREM, Varadhan & Roland 2008,
//! Scand. J. Statist. 35): after two EM steps the iterate jumps along the quadratic through them,
//! and the jump is kept only if it stays non-negative and does not lower the objective (the
//! constraint holds automatically: it is linear and every EM iterate satisfies it). Each step keeps the constraint exactly (sum_l p_l g_l = 1), never
//! decreases f, and converges to the maximum from any interior start (Cover 1984, "An algorithm
//! for maximizing expected log investment return", IEEE Trans. Inf. Theory 30; it is the EM
//! algorithm for mixture weights, Dempster, Laird, Rubin 1977). Stopping rule: by concavity and
//! Jensen's inequality, f* - f(p) <= log(max_l g_l) (Cover 1984), so iteration stops once this
//! certified bound on the distance to the optimum is below `tol` (default 1e-6), or after
//! `max_iter` steps (default 10,000; a warning then reports the bound reached).
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
//! Complexity: O((n_s + n_t) b d) per width for kernel values, O(n_t b) per ascent step, and
//! (folds + 1) fits per width. The `folds` fits of a width run in lockstep and share one sweep of
//! the kernel matrix per step (each row is read once and serves every fold it trains), so the
//! memory traffic of a CV step is that of one fit. Memory O((n_s + n_t) b) for the kernel values
//! of one width.

use super::{
    fit_meta, mean_and_std_error, params, standardise_pair, EstimatorKind, FittedRatio,
    RatioEstimator, RatioForm, ScoreRow, Selection,
};
use crate::data::{kfold_assignment, validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par;

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
    /// Most ascent steps per fit (default 10,000, at least 1).
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
    /// Most ascent steps per fit (>= 1).
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
    /// Ascent steps taken.
    pub iterations: usize,
}

/// Maximises 1/n sum_t log (A alpha)_t subject to h' alpha = 1, alpha >= 0, where `a` is the
/// row-major n x b target kernel matrix and `h` the mean source kernel vector (see the module doc
/// for the method and its stopping rule), for several such problems at once.
///
/// The problems share the kernel matrix `a` (row-major, n x b) and are solved in lockstep,
/// with one pass over `a` per round serving every unfinished problem. Problem k is
/// `(h_k, skip_k)`: its rows are those whose label in `row_fold` differs from `skip_k` (every row
/// when `skip_k` or `row_fold` is `None`), its columns those with h_kl > 0 (the others keep
/// alpha_l = 0, which is the same problem as dropping them). Each problem follows exactly the
/// iteration of a solve on its own (same iterates up to the order of floating-point sums); only
/// the reads of `a` are shared, so a round costs one sweep of memory instead of one per problem.
/// An entry is `None` when some row of that problem has no kernel mass at all (every
/// k(x_t, c_l) underflows to 0), so that its objective is -infinity for every alpha.
pub(crate) fn solve_kliep_batch(
    a: &[f64],
    b: usize,
    row_fold: Option<&[usize]>,
    problems: &[(Vec<f64>, Option<usize>)],
    tol: f64,
    max_iter: usize,
) -> Vec<Option<KliepSolution>> {
    let n = a.len() / b.max(1);
    let in_problem = |t: usize, skip: Option<usize>| match (row_fold, skip) {
        (Some(rf), Some(s)) => rf[t] != s,
        _ => true,
    };
    let mut states: Vec<Squarem> = problems
        .iter()
        .map(|(h, skip)| {
            let rows = (0..n).filter(|&t| in_problem(t, *skip)).count();
            Squarem::new(h, rows)
        })
        .collect();
    loop {
        let live: Vec<usize> = (0..states.len())
            .filter(|&k| states[k].result.is_none())
            .collect();
        if live.is_empty() {
            break;
        }
        let points: Vec<&[f64]> = live.iter().map(|&k| states[k].point.as_slice()).collect();
        let skips: Vec<Option<usize>> = live.iter().map(|&k| problems[k].1).collect();
        let m = live.len();
        let pass = LockstepPass {
            a,
            b,
            row_fold,
            points: &points,
            skips: &skips,
        };
        // Per live problem: sum of log u_t, sum of row_t / u_t, and "some row has u_t <= 0".
        let (obj, grad, dead) = par::reduce_chunks(
            n,
            (vec![0.0f64; m], vec![0.0f64; m * b], vec![false; m]),
            |start, end| pass.chunk(start, end),
            |acc, p| {
                par::add_into(&mut acc.0, &p.0);
                par::add_into(&mut acc.1, &p.1);
                for (x, y) in acc.2.iter_mut().zip(&p.2) {
                    *x |= *y;
                }
            },
        );
        for (j, &k) in live.iter().enumerate() {
            let out = if dead[j] {
                None
            } else {
                Some(states[k].finish_pass(obj[j], &grad[j * b..(j + 1) * b], &problems[k].0))
            };
            states[k].receive(out, tol, max_iter);
        }
    }
    states.into_iter().map(|s| s.result.flatten()).collect()
}

/// What one lockstep KLIEP pass reads: the kernel rows `a` (b values each), the fold of each
/// row (when problems leave folds out), and per live problem its point and the fold it skips.
struct LockstepPass<'a> {
    a: &'a [f64],
    b: usize,
    row_fold: Option<&'a [usize]>,
    points: &'a [&'a [f64]],
    skips: &'a [Option<usize>],
}

impl LockstepPass<'_> {
    /// One chunk of rows `start..end` of the pass: per live problem k (at `points[k]`, leaving out
    /// the rows of fold `skips[k]`), the sum of log u_t, the sum of row_t / u_t, and whether some
    /// row has u_t <= 0 or non-finite. Compiled for AVX2 when the CPU has it (a separate function,
    /// so that the whole loop gets the wider vectors: a closure passed to
    /// [`kernel::with_wide_simd`] is not always inlined into its AVX2 version); the arithmetic is
    /// the same in both versions, so the results are bitwise equal.
    fn chunk(&self, start: usize, end: usize) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
        #[cfg(target_arch = "x86_64")]
        {
            #[target_feature(enable = "avx2")]
            unsafe fn wide(
                pass: &LockstepPass,
                start: usize,
                end: usize,
            ) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
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
    ) -> (Vec<f64>, Vec<f64>, Vec<bool>) {
        let (b, m) = (self.b, self.points.len());
        let mut o = vec![0.0f64; m];
        let mut g = vec![0.0f64; m * b];
        let mut dd = vec![false; m];
        for t in start..end {
            let row = &self.a[t * b..(t + 1) * b];
            for k in 0..m {
                if let (Some(rf), Some(s)) = (self.row_fold, self.skips[k]) {
                    if rf[t] == s {
                        continue;
                    }
                }
                let u = dot(row, self.points[k]);
                if u <= 0.0 || !u.is_finite() {
                    dd[k] = true;
                    continue;
                }
                o[k] += u.ln();
                let inv = 1.0 / u;
                for (gl, x) in g[k * b..(k + 1) * b].iter_mut().zip(row) {
                    *gl += x * inv;
                }
            }
        }
        (o, g, dd)
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

/// Where a [`Squarem`] is in its cycle, i.e. which point the next pass evaluates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Stage {
    /// The starting point.
    Start,
    /// The first EM step a1 from the current point.
    First,
    /// The extrapolated point (or a2 when the extrapolation was not usable).
    Extrapolated,
    /// The second EM step a2, after the extrapolation lowered the objective.
    Second,
}

/// The EM iteration with squared extrapolation (SQUAREM, Varadhan & Roland 2008) for one KLIEP
/// problem, written as a state machine driven by passes over the rows: `point` is where the next
/// pass must be evaluated, `receive` takes its outcome (objective, EM multipliers, gap bound, or
/// `None` when some row had no kernel mass there) and moves on.
struct Squarem {
    active: Vec<bool>,
    rows: f64,
    alpha: Vec<f64>,
    f0: f64,
    m0: Vec<f64>,
    gap0: f64,
    f1: f64,
    a2: Vec<f64>,
    point: Vec<f64>,
    stage: Stage,
    iterations: usize,
    /// `Some` once finished: the solution, or `None` when no row set or column set is usable.
    result: Option<Option<KliepSolution>>,
}

impl Squarem {
    /// Starts at the centre of the simplex in p = h * alpha.
    fn new(h: &[f64], rows: usize) -> Self {
        let active: Vec<bool> = h.iter().map(|v| *v > 0.0 && v.is_finite()).collect();
        let n_active = active.iter().filter(|x| **x).count();
        let alpha: Vec<f64> = (0..h.len())
            .map(|l| {
                if active[l] {
                    1.0 / (n_active as f64 * h[l])
                } else {
                    0.0
                }
            })
            .collect();
        Self {
            active,
            rows: rows as f64,
            point: alpha.clone(),
            alpha,
            f0: f64::NEG_INFINITY,
            m0: Vec::new(),
            gap0: f64::INFINITY,
            f1: f64::NEG_INFINITY,
            a2: Vec::new(),
            stage: Stage::Start,
            iterations: 0,
            result: if n_active == 0 || rows == 0 || h.is_empty() {
                Some(None)
            } else {
                None
            },
        }
    }

    /// Objective, EM multipliers g_l (the gradient in p; sum_l p_l g_l = 1) and the certified
    /// gap bound log(max_l g_l) from the row sums of one pass.
    fn finish_pass(&self, obj: f64, grad: &[f64], h: &[f64]) -> (f64, Vec<f64>, f64) {
        let mut gmax = 0.0f64;
        let mut mult = vec![0.0; grad.len()];
        for l in 0..grad.len() {
            if self.active[l] {
                mult[l] = grad[l] / self.rows / h[l];
                gmax = gmax.max(mult[l]);
            }
        }
        (obj / self.rows, mult, gmax.ln().max(0.0))
    }

    fn step(al: &[f64], mult: &[f64]) -> Vec<f64> {
        al.iter().zip(mult).map(|(x, m)| x * m).collect()
    }

    /// At the current point (objective, multipliers and gap known): stop, or take the first EM
    /// step of the next cycle.
    fn settle(&mut self, tol: f64, max_iter: usize) {
        if self.gap0 <= tol || self.iterations >= max_iter {
            self.result = Some(Some(KliepSolution {
                alpha: std::mem::take(&mut self.alpha),
                objective: self.f0,
                gap: self.gap0,
                iterations: self.iterations,
            }));
            return;
        }
        self.point = Self::step(&self.alpha, &self.m0);
        self.iterations += 1;
        self.stage = Stage::First;
    }

    fn receive(&mut self, out: Option<(f64, Vec<f64>, f64)>, tol: f64, max_iter: usize) {
        match self.stage {
            Stage::Start | Stage::Second => {
                let Some((f, m, g)) = out else {
                    self.result = Some(None);
                    return;
                };
                if self.stage == Stage::Second {
                    self.alpha = std::mem::take(&mut self.a2);
                }
                (self.f0, self.m0, self.gap0) = (f, m, g);
                self.settle(tol, max_iter);
            }
            Stage::First => {
                let Some((f1, m1, gap1)) = out else {
                    self.result = Some(None);
                    return;
                };
                let a1 = std::mem::take(&mut self.point);
                if gap1 <= tol || self.iterations >= max_iter {
                    (self.alpha, self.f0, self.m0, self.gap0) = (a1, f1, m1, gap1);
                    self.settle(tol, max_iter);
                    return;
                }
                // Second EM step, then a squared extrapolation along the two (SQUAREM, Varadhan
                // & Roland 2008, Scand. J. Statist. 35), kept only if it stays feasible and
                // does not lower f (checked when its pass comes back).
                let a2 = Self::step(&a1, &m1);
                self.iterations += 1;
                let r: Vec<f64> = a1.iter().zip(&self.alpha).map(|(x, y)| x - y).collect();
                let v: Vec<f64> = a2
                    .iter()
                    .zip(&a1)
                    .zip(&r)
                    .map(|((x2, x1), rr)| x2 - x1 - rr)
                    .collect();
                let (nr, nv) = (
                    r.iter().map(|x| x * x).sum::<f64>().sqrt(),
                    v.iter().map(|x| x * x).sum::<f64>().sqrt(),
                );
                let mut next = a2.clone();
                if nv > 0.0 && nr.is_finite() && nv.is_finite() {
                    let s = (-nr / nv).min(-1.0);
                    let ext: Vec<f64> = self
                        .alpha
                        .iter()
                        .zip(&r)
                        .zip(&v)
                        .map(|((x0, rr), vv)| x0 - 2.0 * s * rr + s * s * vv)
                        .collect();
                    if s < -1.0 && ext.iter().all(|x| *x >= 0.0 && x.is_finite()) {
                        next = ext;
                    }
                }
                self.f1 = f1;
                self.a2 = a2;
                self.point = next;
                self.stage = Stage::Extrapolated;
            }
            Stage::Extrapolated => match out {
                Some((fe, me, ge)) if fe >= self.f1 => {
                    self.alpha = std::mem::take(&mut self.point);
                    self.a2 = Vec::new();
                    (self.f0, self.m0, self.gap0) = (fe, me, ge);
                    self.settle(tol, max_iter);
                }
                _ => {
                    // The extrapolation lowered the objective (or left the domain): plain EM.
                    self.point = self.a2.clone();
                    self.stage = Stage::Second;
                }
            },
        }
    }
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
/// The `k` fold fits are solved together ([`solve_kliep_batch`]): one sweep of the kernel matrix
/// per round serves every fold still running.
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
                "KLIEP stopped after max_iter = {} steps with objective gap bound {:.3e} > tol = {:.1e}; raise max_iter for a tighter fit",
                self.max_iter, sol.gap, self.tol
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
    use rand_distr::{Distribution, Normal};

    fn gauss(n: usize, mean: f64, sd: f64, seed: u64) -> Vec<f64> {
        let mut r = kernel::rng(seed);
        let g = Normal::new(mean, sd).unwrap();
        (0..n).map(|_| g.sample(&mut r)).collect()
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
    fn lockstep_batch_equals_solving_each_fold_alone_on_its_own_rows() {
        // Three held-out-fold problems solved together must give what each gives alone on a
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
