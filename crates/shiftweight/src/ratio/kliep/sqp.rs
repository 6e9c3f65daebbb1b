//! The KLIEP solver: maximises 1/n_t sum_t log (A alpha)_t subject to h' alpha = 1, alpha >= 0,
//! for the kernel matrix A of the target rows and the mean source kernel vector h.
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
//!   is formed once per iteration by one matrix product and every step slices it. The
//!   active-set steps update one Cholesky factor of the free block instead of refactorising it
//!   (O(k^2) per step instead of O(k^3)).
//! - Started at the centre of the simplex. Near the optimum the full step is accepted and the
//!   convergence is fast (the quadratic model uses the exact Hessian). Should the line search
//!   fail (rounding very near the
//!   optimum), one EM step p_l <- p_l g_l, g = grad f(p), is taken, which never lowers f (Cover
//!   1984, "An algorithm for maximizing expected log investment return", IEEE Trans. Inf. Theory
//!   30; the EM algorithm for mixture weights, Dempster, Laird, Rubin 1977).
//!
//! Stopping rule: at the normalised point p = x / sum_l x_l, by concavity and Jensen's
//! inequality, f* - f(p) <= log(max_l g_l(p)) (Cover 1984), so iteration stops once this
//! certified bound on the distance to the optimum is below `tol` (default 1e-6), or after
//! `max_iter` iterations (default 10,000, a cap that should never bind), or once five iterations
//! in a row lower the objective by no more than rounding. The last is the floor of what the solve
//! can certify, set by the conditioning of the Hessian. A warning reports the bound reached
//! whenever it is above `tol`. The returned alpha_l = p_l / h_l meets the constraint exactly.

use super::factor::Cholesky;
use crate::kernel;
use crate::par;
use crate::simd::{dot_avx2, dot_portable, with_wide_simd};
use faer::{Accum, Mat, MatRef};

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
pub(super) struct ProblemRows<'a> {
    pub(super) a: &'a [f64],
    pub(super) b: usize,
    pub(super) row_fold: Option<&'a [usize]>,
    pub(super) skip: Option<usize>,
}

impl ProblemRows<'_> {
    pub(super) fn n_all(&self) -> usize {
        self.a.len() / self.b.max(1)
    }

    #[inline(always)]
    pub(super) fn uses(&self, t: usize) -> bool {
        match (self.row_fold, self.skip) {
            (Some(rf), Some(s)) => rf[t] != s,
            _ => true,
        }
    }

    pub(super) fn count(&self) -> usize {
        (0..self.n_all()).filter(|&t| self.uses(t)).count()
    }

    /// At u = A alpha: the sum of log u_t, the sums sum_t a_t / u_t, and whether some row has
    /// u_t <= 0 or non-finite (then the point is outside the domain). One pass, O(n b).
    pub(super) fn evaluate(&self, alpha: &[f64]) -> (f64, Vec<f64>, bool) {
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
    pub(super) fn inverse_fit(&self, alpha: &[f64]) -> Vec<f64> {
        use rayon::prelude::*;
        let b = self.b;
        let mut out = vec![0.0; self.n_all()];
        out.par_chunks_mut(crate::par::CHUNK_ROWS)
            .enumerate()
            .for_each(|(c, o)| {
                with_wide_simd(|| {
                    for (k, v) in o.iter_mut().enumerate() {
                        let t = c * crate::par::CHUNK_ROWS + k;
                        if self.uses(t) {
                            *v = 1.0 / dot_portable(&self.a[t * b..(t + 1) * b], alpha);
                        }
                    }
                })
            });
        out
    }

    /// sum_t (a_tF / u_t)(a_tF / u_t)' for the columns F = `cols`, with `inv_u` from
    /// [`Self::inverse_fit`]. Rows are gathered chunk by chunk and each chunk's Gram goes through
    /// faer's triangular product. O(n |F|^2).
    pub(super) fn curvature_block(&self, inv_u: &[f64], cols: &[usize]) -> Mat<f64> {
        let (b, k) = (self.b, cols.len());
        let mut g = par::reduce_chunks(
            self.n_all(),
            Mat::<f64>::zeros(k, k),
            |s, e| {
                let mut buf = Vec::with_capacity((e - s) * k);
                let mut m = 0;
                with_wide_simd(|| {
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
    pub(super) fn curvature_times(&self, inv_u: &[f64], dir: Direction) -> Vec<f64> {
        let b = self.b;
        par::reduce_chunks(
            self.n_all(),
            vec![0.0f64; b],
            |s, e| {
                let mut out = vec![0.0f64; b];
                with_wide_simd(|| {
                    for (t, &inv) in inv_u.iter().enumerate().take(e).skip(s) {
                        if !self.uses(t) {
                            continue;
                        }
                        let row = &self.a[t * b..(t + 1) * b];
                        let along = match dir {
                            Direction::Dense(d) => dot_portable(row, d),
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
pub(super) enum Direction<'a> {
    Dense(&'a [f64]),
    Unit(usize),
}

/// Where the SQP iteration stands: the point x (in p-space, not normalised), the pass at it, and
/// the quantities the stopping rule and the next step need.
pub(super) struct SqpPoint {
    pub(super) x: Vec<f64>,
    pub(super) alpha: Vec<f64>,
    /// Mean log u over the problem's rows, u = A alpha.
    pub(super) mean_log: f64,
    /// m_l = 1/n sum_t M_tl / u_t (active columns; 0 elsewhere): the EM multipliers at x.
    pub(super) m: Vec<f64>,
    /// The relaxed objective phi(x) = -mean log u + sum x.
    pub(super) phi: f64,
}

impl SqpPoint {
    /// The solution at this point: alpha normalised onto the constraint (p = x / sum x), its
    /// objective f(p), the certified gap bound and the iterations taken.
    pub(super) fn solution(&self, gap: f64, iterations: usize) -> KliepSolution {
        let s: f64 = self.x.iter().sum();
        KliepSolution {
            alpha: self.alpha.iter().map(|v| v / s).collect(),
            objective: self.objective(),
            gap,
            iterations,
        }
    }

    /// The KLIEP objective f(p) at the normalised point p = x / sum x.
    pub(super) fn objective(&self) -> f64 {
        self.mean_log - self.x.iter().sum::<f64>().ln()
    }
}

/// One KLIEP problem by sequential quadratic programming (see the module doc).
pub(super) fn solve_kliep_sqp(
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
pub(super) fn sqp_subproblem(
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
    let whole = match mode {
        BlockMode::Auto => 4 * free.len() >= active.len(),
        #[cfg(test)]
        BlockMode::Whole => true,
        #[cfg(test)]
        BlockMode::Grown => false,
    };
    let qp = Subproblem {
        rows,
        h,
        active,
        inv_u,
        nf,
    };
    let mut curv = qp.curvature(free, whole);
    let max_inner = 4 * b + 20;
    let mut just_freed: Option<usize> = None;
    let mut fac: Option<Cholesky> = None;
    for _ in 0..max_inner {
        let k = free.len();
        if k == 0 {
            break;
        }
        let Some(z) = free_minimiser(&curv, free, &c, &mut fac) else {
            break;
        };
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
                match qp.most_negative_multiplier(&curv, free, &y, &c) {
                    Some((l, lam)) if lam < -1e-10 => {
                        qp.free_column(&mut curv, &mut fac, free, l);
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
                fix_column(&mut curv, &mut fac, i, k);
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

/// What stays fixed through one QP subproblem: the problem's rows, its constraint vector `h`, the
/// active columns, 1/u at the SQP point and the row count `nf`.
pub(super) struct Subproblem<'a, 'r> {
    pub(super) rows: &'a ProblemRows<'r>,
    pub(super) h: &'a [f64],
    pub(super) active: &'a [usize],
    pub(super) inv_u: Vec<f64>,
    pub(super) nf: f64,
}

impl Subproblem<'_, '_> {
    /// Scaled curvature block over the columns `f`: entry (i, j) is G_ij / (n h_i h_j) with G the
    /// unscaled block of [`ProblemRows::curvature_block`].
    pub(super) fn block(&self, f: &[usize]) -> Mat<f64> {
        let g = self.rows.curvature_block(&self.inv_u, f);
        Mat::from_fn(f.len(), f.len(), |i, j| {
            g[(i, j)] / (self.nf * self.h[f[i]] * self.h[f[j]])
        })
    }

    /// The curvature source of this subproblem: with a large free set (narrow kernels, where the
    /// QP frees and fixes dozens of columns one by one) the whole block over the active columns,
    /// formed once in O(n |A|^2) by one product, after which every H_FF and every multiplier is a
    /// slice of it; with a small one (wide kernels: 1 to 6 free columns), H_FF alone, grown by one
    /// O(n b) pass per freed column. Either way the factor of H_FF is updated, not refactorised
    /// (see [`Cholesky`]).
    pub(super) fn curvature(&self, free: &[usize], whole: bool) -> FreeCurvature {
        if whole {
            let mut pos = vec![usize::MAX; self.rows.b];
            for (i, &l) in self.active.iter().enumerate() {
                pos[l] = i;
            }
            FreeCurvature::Whole {
                m: self.block(self.active),
                pos,
            }
        } else {
            FreeCurvature::Grown(self.block(free))
        }
    }

    /// The fixed active column with the most negative multiplier (H y + c)_l (all are >= 0 at
    /// the QP's optimum), with that multiplier; None when every active column is free. H y comes
    /// from the whole block when there is one, else from one O(n b) product over the rows.
    pub(super) fn most_negative_multiplier(
        &self,
        curv: &FreeCurvature,
        free: &[usize],
        y: &[f64],
        c: &[f64],
    ) -> Option<(usize, f64)> {
        let (b, h, nf) = (self.rows.b, self.h, self.nf);
        let hy: Vec<f64> = match curv {
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
                let raw = self
                    .rows
                    .curvature_times(&self.inv_u, Direction::Dense(&dir));
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
        self.active
            .iter()
            .filter(|&&l| !in_free[l])
            .map(|&l| (l, hy[l] + c[l]))
            .min_by(|p, q| p.1.total_cmp(&q.1))
    }

    /// Frees column `l`: H_FF grows by one row and column, and the factor by one row (dropped if
    /// the update fails, to be formed afresh).
    pub(super) fn free_column(
        &self,
        curv: &mut FreeCurvature,
        fac: &mut Option<Cholesky>,
        free: &mut Vec<usize>,
        l: usize,
    ) {
        free.push(l);
        if let FreeCurvature::Grown(hff) = curv {
            let col = self.rows.curvature_times(&self.inv_u, Direction::Unit(l));
            *hff = grow_block(hff, free, &col, self.h, self.nf);
        }
        if let Some(f) = fac.as_mut() {
            let last = free.len() - 1;
            let col: Vec<f64> = (0..last).map(|i| curv.entry(free, last, i)).collect();
            if !f.append(&col, curv.entry(free, last, last)) {
                *fac = None;
            }
        }
    }
}

/// Minimiser of the quadratic model on the free set: H_FF z = -c_F (a tiny ridge guards
/// near-singular blocks of wide kernels). The factor `fac` follows the free set by updates; it is
/// formed afresh at the start, after a failed update and if its solution is not finite (ridge
/// 1e-12 max diag H_FF, raised a hundredfold up to eight times). None if no ridge gives a finite
/// solution.
pub(super) fn free_minimiser(
    curv: &FreeCurvature,
    free: &[usize],
    c: &[f64],
    fac: &mut Option<Cholesky>,
) -> Option<Vec<f64>> {
    let k = free.len();
    let rhs: Vec<f64> = free.iter().map(|&l| -c[l]).collect();
    let mut z = fac.as_ref().map(|f| f.solve(&rhs));
    if !z.as_ref().is_some_and(|z| z.iter().all(|v| v.is_finite())) {
        z = None;
        *fac = None;
        let dmax = (0..k)
            .map(|i| curv.entry(free, i, i))
            .fold(0.0f64, f64::max);
        let mut ridge = 1e-12 * dmax.max(f64::MIN_POSITIVE);
        for _ in 0..8 {
            if let Some(f) = Cholesky::factor(k, |i, j| curv.entry(free, i, j), ridge) {
                let sol = f.solve(&rhs);
                if sol.iter().all(|v| v.is_finite()) {
                    z = Some(sol);
                    *fac = Some(f);
                    break;
                }
            }
            ridge *= 100.0;
        }
    }
    z
}

/// Fixes the column at position `i` of a free set that had `k` columns: its row leaves the factor
/// and H_FF.
pub(super) fn fix_column(curv: &mut FreeCurvature, fac: &mut Option<Cholesky>, i: usize, k: usize) {
    if let Some(f) = fac.as_mut() {
        f.remove(i);
    }
    if let FreeCurvature::Grown(hff) = curv {
        let keep: Vec<usize> = (0..k).filter(|&j| j != i).collect();
        *hff = Mat::from_fn(k - 1, k - 1, |p, q| hff[(keep[p], keep[q])]);
    }
}

/// Where the entries of H_FF come from in one QP subproblem (see [`sqp_subproblem`]).
pub(super) enum FreeCurvature {
    /// The whole block `m` over the active columns, formed once; `pos[l]` is column l's index
    /// in it (usize::MAX for inactive columns).
    Whole { m: Mat<f64>, pos: Vec<usize> },
    /// H_FF itself, in the order of the free set, grown and cut with it.
    Grown(Mat<f64>),
}

impl FreeCurvature {
    /// Entry (i, j) of H_FF, for positions i, j in the free set `free`.
    pub(super) fn entry(&self, free: &[usize], i: usize, j: usize) -> f64 {
        match self {
            FreeCurvature::Whole { m, pos } => m[(pos[free[i]], pos[free[j]])],
            FreeCurvature::Grown(hff) => hff[(i, j)],
        }
    }
}

/// Where a QP subproblem takes its curvature blocks from (see [`sqp_subproblem`]).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) enum BlockMode {
    /// The whole block when the starting free set holds at least a quarter of the active
    /// columns, else H_FF grown column by column.
    Auto,
    /// Always the whole block over the active columns (the tests compare both sources).
    #[cfg(test)]
    Whole,
    /// Always H_FF, grown by one pass per freed column.
    #[cfg(test)]
    Grown,
}

/// The block H_FF of the previous free set (all of `free` but its last column) extended by the
/// last column l = `free[k]`, whose unscaled Hessian column is `col` (sum_t a_t a_tl / u_t^2, as
/// [`ProblemRows::curvature_times`] gives it for [`Direction::Unit`] l): entry (i, l) is
/// col_i / (n h_i h_l), as in [`ProblemRows::curvature_block`].
pub(super) fn grow_block(
    hff: &Mat<f64>,
    free: &[usize],
    col: &[f64],
    h: &[f64],
    nf: f64,
) -> Mat<f64> {
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
pub(super) struct LikelihoodPass<'a> {
    pub(super) rows: ProblemRows<'a>,
    pub(super) alpha: &'a [f64],
}

impl LikelihoodPass<'_> {
    /// One chunk of rows `start..end` of the pass (only the problem's rows): the sum
    /// of log u_t, the sum of row_t / u_t, and whether some row has u_t <= 0 or non-finite.
    /// Compiled for AVX2 when the CPU has it (a separate function, so that the whole loop gets
    /// the wider vectors: a closure passed to [`with_wide_simd`] is not always inlined
    /// into its AVX2 version); the arithmetic is the same in both versions, so the results are
    /// bitwise equal.
    pub(super) fn chunk(&self, start: usize, end: usize) -> (f64, Vec<f64>, bool) {
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
        self.chunk_body(start, end, dot_portable)
    }

    #[inline(always)]
    pub(super) fn chunk_body(
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
