//! [`WeightedLogistic`]: Newton's method with chord steps on internally standardised columns.

use super::{validate_weights, LinearKind, LinearModel};
use crate::data::MatrixView;
use crate::error::{Error, Result};
use crate::par;
use faer::prelude::*;
use faer::{Mat, MatMut, Side};

/// log(1 + u) for u in [0, 1] (the loss term of the logistic pass, u = exp(-|t|)), written without
/// calls or branches so that the pass's row loop vectorises. 1 + u is formed with its rounding
/// error c (exact, as 1 >= u), reduced to m in [sqrt(1/2), sqrt(2)] by halving when above
/// sqrt(2), and log m = 2 atanh(s), s = (m - 1) / (m + 1), |s| <= 0.172, by its series to s^23
/// (truncation below 1e-18 relative); the rounding error adds c / (1 + u). Agrees with
/// `f64::ln_1p` to a few units in the last place.
#[inline(always)]
pub(super) fn log1p_unit(u: f64) -> f64 {
    const LN2: f64 = std::f64::consts::LN_2;
    const SQRT2: f64 = std::f64::consts::SQRT_2;
    let x = 1.0 + u;
    let c = u - (x - 1.0);
    let big = x > SQRT2;
    let m = if big { 0.5 * x } else { x };
    let k = if big { LN2 } else { 0.0 };
    let s = (m - 1.0) / (m + 1.0);
    let s2 = s * s;
    // 1/(2j + 1) for j = 0..=11, in Horner's scheme on s^2.
    let mut q = 1.0 / 23.0;
    for d in [21.0, 19.0, 17.0, 15.0, 13.0, 11.0, 9.0, 7.0, 5.0, 3.0, 1.0] {
        q = q * s2 + 1.0 / d;
    }
    k + 2.0 * s * q + c / x
}

/// Column means and scales (1 for constant columns) used to condition the solvers.
fn column_scaling(x: MatrixView) -> (Vec<f64>, Vec<f64>) {
    let st = crate::data::Standardizer::fit(&[x]);
    (st.mean, st.scale)
}

/// Importance-weighted binary logistic regression. See the module docs for the objective.
#[derive(Debug, Clone, PartialEq)]
pub struct WeightedLogistic {
    /// Penalty strength a >= 0 on the coefficients (default 1.0; sklearn's C = 1/a).
    pub l2: f64,
    /// Most Newton iterations (default 100).
    pub max_iter: usize,
    /// Stop when the largest gradient entry is below `tol` times the total weight (default 1e-10).
    pub tol: f64,
}

impl Default for WeightedLogistic {
    fn default() -> Self {
        Self {
            l2: 1.0,
            max_iter: 100,
            tol: 1e-10,
        }
    }
}

impl WeightedLogistic {
    /// Defaults: l2 = 1, at most 100 Newton steps.
    pub fn new() -> Self {
        Self::default()
    }
    /// Penalty strength (>= 0).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }
    /// Iteration limit (>= 1).
    pub fn max_iter(mut self, n: usize) -> Self {
        self.max_iter = n;
        self
    }

    /// Fits on rows `x`, labels `y` in {0, 1}, optional non-negative weights.
    pub fn fit(
        &self,
        x: MatrixView,
        y: &[f64],
        sample_weight: Option<&[f64]>,
    ) -> Result<LinearModel> {
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::param(
                "l2",
                format!("must be finite and >= 0, got {}", self.l2),
            ));
        }
        if self.max_iter == 0 {
            return Err(Error::param("max_iter", "must be at least 1"));
        }
        // The values of `x` are checked inside the fit (fit_logistic_unchecked), so that on large
        // inputs no pass over them is made just for the check.
        x.validate_shape("X", 1)?;
        check_labels(y, x.rows())?;
        let ones;
        let w = match sample_weight {
            Some(w) => {
                validate_weights(w, x.rows(), "sample_weight")?;
                w
            }
            None => {
                ones = vec![1.0; x.rows()];
                &ones
            }
        };
        let (beta, intercept, n_iter) =
            fit_logistic_unchecked(x, y, w, self.l2, self.max_iter, self.tol)?;
        Ok(LinearModel {
            kind: LinearKind::Logistic,
            coef: beta,
            intercept,
            l2: self.l2,
            n_iter,
            encoding: None,
            warnings: Vec::new(),
        })
    }
}

fn check_labels(y: &[f64], n: usize) -> Result<()> {
    if y.len() != n {
        return Err(Error::LengthMismatch {
            argument: "y".into(),
            expected: n,
            found: y.len(),
        });
    }
    if let Some(i) = y.iter().position(|v| *v != 0.0 && *v != 1.0) {
        return Err(Error::param(
            "y",
            format!("labels must be 0 or 1; row {i} has {}", y[i]),
        ));
    }
    Ok(())
}

/// Rows per sub-block of a chunk in the Newton pass: the block of mapped rows (rows x (d + 1))
/// stays in cache between the linear predictor, the gradient product and the rank-k update.
const NEWTON_BLOCK: usize = 256;

thread_local! {
    /// Per-thread scratch of the Newton pass (rows of [z, 1], then the same scaled by
    /// sqrt(w p (1 - p)); linear predictors; residuals; loss terms): reused across chunks and
    /// passes, so the pass allocates nothing per row or per block.
    #[allow(clippy::type_complexity)]
    static NEWTON_SCRATCH: std::cell::RefCell<(Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>)> =
        const { std::cell::RefCell::new((Vec::new(), Vec::new(), Vec::new(), Vec::new())) };
}

/// The weighted, penalised logistic loss on standardised columns z = (x - mean) / scale with the
/// intercept as last coordinate, and its derivatives.
struct LogisticLoss<'a> {
    x: MatrixView<'a>,
    y: &'a [f64],
    w: &'a [f64],
    mean: Vec<f64>,
    inv_scale: Vec<f64>,
    /// Penalty per standardised coefficient, l2 / scale^2 (the same problem as l2 on raw ones).
    pen: Vec<f64>,
}

/// Objective, gradient and (when asked for) Hessian at one point.
struct Evaluation {
    f: f64,
    grad: Vec<f64>,
    hess: Option<Mat<f64>>,
}

impl<'a> LogisticLoss<'a> {
    /// The loss with penalty `l2` on raw coefficients, in the columns standardised by
    /// (`mean`, `scale`).
    fn new(
        x: MatrixView<'a>,
        y: &'a [f64],
        w: &'a [f64],
        l2: f64,
        mean: &[f64],
        scale: &[f64],
    ) -> Self {
        Self {
            x,
            y,
            w,
            pen: scale.iter().map(|s| l2 / (s * s)).collect(),
            inv_scale: scale.iter().map(|s| 1.0 / s).collect(),
            mean: mean.to_vec(),
        }
    }

    /// Number of rows.
    fn rows(&self) -> usize {
        self.x.rows()
    }

    /// Total weight of the rows.
    fn weight_sum(&self) -> f64 {
        self.w.iter().sum()
    }

    /// One pass over the rows: objective, gradient and Hessian at `th` (length d + 1). Per block
    /// of rows: the rows of [z, 1], the linear predictors as one matrix-vector product, the
    /// gradient as a second, and the Hessian as one symmetric rank-k update of the rows scaled by
    /// sqrt(w p (1 - p)); chunks in parallel through `par::reduce_chunks` (deterministic).
    /// Without `with_hess` the row scaling and the rank-k update are skipped (a gradient pass).
    fn evaluate(&self, th: &[f64], with_hess: bool) -> Evaluation {
        let (x, y, w) = (self.x, self.y, self.w);
        let d = x.cols();
        let p = d + 1;
        let thm = MatRef::from_column_major_slice(th, p, 1);
        let hp = if with_hess { p } else { 0 };
        let (f, grad, mut hess) = par::reduce_chunks(
            self.rows(),
            (0.0f64, Mat::<f64>::zeros(p, 1), Mat::<f64>::zeros(hp, hp)),
            |s, e| {
                let mut f = 0.0;
                let mut g = Mat::<f64>::zeros(p, 1);
                let mut h = Mat::<f64>::zeros(hp, hp);
                NEWTON_SCRATCH.with(|cell| {
                    let mut scratch = cell.borrow_mut();
                    let (zb, eta, resid, term) = &mut *scratch;
                    zb.resize(NEWTON_BLOCK * p, 0.0);
                    eta.resize(NEWTON_BLOCK, 0.0);
                    resid.resize(NEWTON_BLOCK, 0.0);
                    term.resize(NEWTON_BLOCK, 0.0);
                    let mut b0 = s;
                    while b0 < e {
                        let b1 = (b0 + NEWTON_BLOCK).min(e);
                        let m = b1 - b0;
                        for (r, zrow) in zb[..m * p].chunks_exact_mut(p).enumerate() {
                            let xr = x.row(b0 + r);
                            for (((zj, xj), mj), sj) in
                                zrow.iter_mut().zip(xr).zip(&self.mean).zip(&self.inv_scale)
                            {
                                *zj = (xj - mj) * sj;
                            }
                            zrow[d] = 1.0;
                        }
                        let zm = MatRef::from_row_major_slice(&zb[..m * p], m, p);
                        faer::linalg::matmul::matmul(
                            MatMut::from_column_major_slice_mut(&mut eta[..m], m, 1),
                            faer::Accum::Replace,
                            zm,
                            thm,
                            1.0,
                            Par::Seq,
                        );
                        // Branch-free, call-free row loop (vectorised exp and log1p) over the
                        // block; the loss terms are summed afterwards in row order.
                        let (wb, yb) = (&w[b0..b1], &y[b0..b1]);
                        crate::simd::with_wide_simd(|| {
                            for ((((et, rs), tm), wi), yi) in eta[..m]
                                .iter_mut()
                                .zip(&mut resid[..m])
                                .zip(&mut term[..m])
                                .zip(wb)
                                .zip(yb)
                            {
                                let t = *et;
                                // One exponential serves the loss and the probability.
                                let ex = crate::kernel::exp_nonpositive(-t.abs());
                                let inv = 1.0 / (1.0 + ex);
                                let pr = if t >= 0.0 { inv } else { ex * inv };
                                *tm = wi * (t.max(0.0) + log1p_unit(ex) - yi * t);
                                *rs = wi * (pr - yi);
                                if with_hess {
                                    // eta's slot now holds the row's scale sqrt(w p (1 - p)).
                                    *et = (wi * pr * (1.0 - pr)).sqrt();
                                }
                            }
                        });
                        for v in &term[..m] {
                            f += v;
                        }
                        faer::linalg::matmul::matmul(
                            g.as_mut(),
                            faer::Accum::Add,
                            zm.transpose(),
                            MatRef::from_column_major_slice(&resid[..m], m, 1),
                            1.0,
                            Par::Seq,
                        );
                        if with_hess {
                            for (zrow, sw) in zb[..m * p].chunks_exact_mut(p).zip(&eta[..m]) {
                                zrow.iter_mut().for_each(|v| *v *= sw);
                            }
                            // Symmetric rank-m update: lower triangle only (half the flops).
                            let zm = MatRef::from_row_major_slice(&zb[..m * p], m, p);
                            crate::kernel::gram_lower(h.as_mut(), zm, faer::Accum::Add);
                        }
                        b0 = b1;
                    }
                });
                (f, g, h)
            },
            |acc, part| {
                acc.0 += part.0;
                acc.1 += &part.1;
                crate::kernel::add_lower(&mut acc.2, &part.2);
            },
        );
        let mut grad: Vec<f64> = (0..p).map(|j| grad[(j, 0)]).collect();
        let mut pen_sum = 0.0;
        for j in 0..d {
            grad[j] += self.pen[j] * th[j];
            pen_sum += self.pen[j] * th[j] * th[j];
            if with_hess {
                hess[(j, j)] += self.pen[j];
            }
        }
        crate::kernel::mirror_lower(&mut hess);
        Evaluation {
            f: f + 0.5 * pen_sum,
            grad,
            hess: with_hess.then_some(hess),
        }
    }
}

/// Newton's method for the weighted, penalised logistic loss. Returns (coef, intercept, iters) on
/// the raw feature scale. Works on standardised columns z = (x - mean) / scale with per-coordinate
/// penalty l2 / scale^2, which is the same problem.
///
/// One pass over the rows per Newton step gives the objective, gradient and Hessian together
/// ([`LogisticLoss::evaluate`]); the step solves the small (d + 1) x (d + 1) system by Cholesky.
/// The objective at the new point, computed by the next pass, decides whether the step is kept
/// (otherwise it is halved: backtracking). Stops when the largest gradient entry is below `tol`
/// times the total weight, or after a step whose Newton decrement g' H^-1 g is below 1e-14 times
/// the total weight (quadratic convergence makes the following gradient negligible).
///
/// `x` need not have been checked for non-finite values. On many rows it makes no
/// pass of its own for the check or the column scaling: the scaling is taken from the start
/// subsample (any per-column shift and scale gives the same Newton iterates, since Newton's method
/// is invariant under affine changes of variables; the scaling only keeps the Hessian
/// well-conditioned, and the subsample's means and deviations are within sampling error of the
/// full ones), and a non-finite value anywhere makes the first full pass's objective non-finite,
/// at which point [`MatrixView::validate`] names it. Saves three of the roughly seven passes over
/// `x` at 1,000,000 rows.
pub(crate) fn fit_logistic_unchecked(
    x: MatrixView,
    y: &[f64],
    w: &[f64],
    l2: f64,
    max_iter: usize,
    tol: f64,
) -> Result<(Vec<f64>, f64, usize)> {
    fit_logistic_inner(x, y, w, l2, max_iter, tol, None)
}

/// [`fit_logistic_unchecked`] started from a known nearby solution `(coef, intercept)` on the raw
/// scale (for instance the fit on another cross-fitting fold, which differs from this one's by
/// sampling error) instead of from the subsample's solution: Newton's method then needs one or two
/// passes over the rows. The optimum, and so the result to within `tol`, does not depend on the
/// start (the problem is strictly convex for l2 > 0).
pub(crate) fn fit_logistic_warm(
    x: MatrixView,
    y: &[f64],
    w: &[f64],
    l2: f64,
    max_iter: usize,
    tol: f64,
    start: (&[f64], f64),
) -> Result<(Vec<f64>, f64, usize)> {
    fit_logistic_inner(x, y, w, l2, max_iter, tol, Some(start))
}

#[allow(clippy::too_many_arguments)]
fn fit_logistic_inner(
    x: MatrixView,
    y: &[f64],
    w: &[f64],
    l2: f64,
    max_iter: usize,
    tol: f64,
    warm: Option<(&[f64], f64)>,
) -> Result<(Vec<f64>, f64, usize)> {
    let d = x.cols();
    let p = d + 1; // last coordinate is the intercept
    if let Some((coef, b)) = warm {
        if coef.len() != d || !b.is_finite() || coef.iter().any(|c| !c.is_finite()) {
            return Err(Error::InvalidParameter {
                name: "start".into(),
                reason: format!(
                    "a warm start needs {d} finite coefficients and a finite intercept (got {})",
                    coef.len()
                ),
            });
        }
    }
    // On many rows, an evenly spaced subsample (copied once, so that the Newton passes on it read
    // contiguous memory) gives the column scaling and, without a warm start, the start.
    let stride = x.rows() / START_SUBSAMPLE_ROWS;
    let sub_rows: Option<Vec<f64>> = (stride >= 8).then(|| {
        let mut xs = Vec::with_capacity(x.rows().div_ceil(stride) * d);
        for i in (0..x.rows()).step_by(stride) {
            xs.extend_from_slice(x.row(i));
        }
        xs
    });
    let sub = match &sub_rows {
        Some(xs) => {
            let xsv = MatrixView::new(xs, x.rows().div_ceil(stride), d)?;
            if xsv.validate("X", 1).is_err() {
                // The error names the first non-finite value of the whole input.
                x.validate("X", 1)?;
            }
            Some(xsv)
        }
        None => {
            x.validate("X", 1)?;
            None
        }
    };
    let (mean, scale) = column_scaling(sub.unwrap_or(x));
    let theta = match warm {
        Some((coef, b)) => {
            // The raw-scale start on the standardised columns (the inverse of `unscale`).
            let mut theta: Vec<f64> = (0..d).map(|j| coef[j] * scale[j]).collect();
            theta.push(b + (0..d).map(|j| coef[j] * mean[j]).sum::<f64>());
            theta
        }
        None => {
            let wsum: f64 = w.iter().sum();
            let mut theta = vec![0.0; p];
            // Start the intercept at the weighted log-odds.
            let wy: f64 = w.iter().zip(y).map(|(a, b)| a * b).sum();
            let pbar = (wy / wsum).clamp(1e-6, 1.0 - 1e-6);
            theta[d] = (pbar / (1.0 - pbar)).ln();
            // Then, on many rows, move to the solution on the subsample (penalty scaled to its
            // share of the weight): it is within sampling error of the full solution, so the full
            // problem needs about half the Newton passes. Any failure on the subsample just keeps
            // the plain start.
            if let Some(xsv) = sub {
                let ys: Vec<f64> = y.iter().step_by(stride).copied().collect();
                let ws: Vec<f64> = w.iter().step_by(stride).copied().collect();
                let share = ws.iter().sum::<f64>() / wsum;
                if share > 0.0 && share.is_finite() {
                    let loss = LogisticLoss::new(xsv, &ys, &ws, l2 * share, &mean, &scale);
                    if let Ok((t, _, _)) = newton(&loss, theta.clone(), max_iter, tol, false, None)
                    {
                        if t.iter().all(|v| v.is_finite()) {
                            theta = t;
                        }
                    }
                }
            }
            theta
        }
    };
    let check_first = sub.is_some();
    let loss = LogisticLoss::new(x, y, w, l2, &mean, &scale);
    let (theta, it, _) = newton(&loss, theta, max_iter, tol, check_first, None)?;
    Ok(unscale(&theta, &mean, &scale, it))
}

/// Rows of the evenly spaced subsample whose solution starts Newton's method on large inputs.
const START_SUBSAMPLE_ROWS: usize = 50_000;

/// A factorised Hessian kept for chord steps (Newton steps with an earlier Hessian), with the
/// factor its solve is multiplied by (the subsample's Hessian, scaled to the full data).
type Chord = (faer::linalg::solvers::Llt<f64>, f64);

/// A fresh Newton step whose decrement g' H^-1 g is below this times the total weight is close
/// enough to the solution (relative coefficient error about its square root) that the Hessian
/// changes by less than about 0.1% before convergence: the next steps reuse it (chord steps)
/// with passes that skip the Hessian. A chord step contracts the error by about that relative
/// change, so a chord step whose decrement fell less than [`CHORD_CONTRACTION`]-fold makes the
/// next pass compute the Hessian again.
const CHORD_DECREMENT: f64 = 1e-6;
/// Least fall of the decrement from one chord step to the next (a contraction of the error by
/// 10 per step) for the next step to keep the old Hessian.
const CHORD_CONTRACTION: f64 = 100.0;

/// Newton's method with backtracking from `theta` (see [`fit_logistic_unchecked`]); returns the solution,
/// the number of steps and the last factorised Hessian used. With `check_first`, a non-finite
/// objective or gradient at the first pass is reported through [`MatrixView::validate`] when the
/// input holds a non-finite value. `chord` is a Hessian to start with (chord steps, see
/// [`CHORD_DECREMENT`]); a chord step that does not decrease the objective is retaken from the
/// same point with the Hessian there.
fn newton(
    loss: &LogisticLoss,
    mut theta: Vec<f64>,
    max_iter: usize,
    tol: f64,
    mut check_first: bool,
    mut chord: Option<Chord>,
) -> Result<(Vec<f64>, usize, Option<Chord>)> {
    let p = theta.len();
    let wsum = loss.weight_sum();

    // The last accepted point, its objective, the Newton step taken from it and the step length.
    let mut last: Option<(Vec<f64>, f64, Vec<f64>, f64)> = None;
    // Decrement of the last chord step (infinite after a fresh Newton step).
    let mut prev_chord_dec = f64::INFINITY;
    let mut it = 0;
    loop {
        let ev = loss.evaluate(&theta, chord.is_none());
        if check_first {
            check_first = false;
            if !(ev.f.is_finite() && ev.grad.iter().all(|g| g.is_finite())) {
                loss.x.validate("X", 1)?;
            }
        }
        if let Some((base, f_base, step, t)) = last.take() {
            let decreased = ev.f.is_finite() && ev.f <= f_base + 1e-12 * f_base.abs().max(1.0);
            if !decreased {
                if chord.is_some() {
                    // The old Hessian gave a poor step: retake it from `base` with the Hessian
                    // there.
                    chord = None;
                    prev_chord_dec = f64::INFINITY;
                    theta = base;
                    continue;
                }
                let t = 0.5 * t;
                if t < 1e-12 {
                    // No further decrease possible at double precision: this is the optimum.
                    return Ok((base, it, chord));
                }
                theta = (0..p).map(|j| base[j] - t * step[j]).collect();
                last = Some((base, f_base, step, t));
                continue;
            }
            let smax = (0..p).fold(0.0f64, |a, j| a.max((t * step[j]).abs()));
            if smax < 1e-13 * (1.0 + theta.iter().fold(0.0f64, |a, v| a.max(v.abs()))) {
                return Ok((theta, it, chord));
            }
        }
        let grad = ev.grad;
        let gmax = grad.iter().fold(0.0f64, |a, v| a.max(v.abs()));
        if gmax <= tol * wsum.max(1.0) {
            return Ok((theta, it, chord));
        }
        if it == max_iter {
            return Err(Error::Numerical {
                context: "weighted logistic regression".into(),
                reason: format!("no convergence in {max_iter} Newton iterations (largest gradient entry {gmax:.3e}); raise max_iter or l2"),
            });
        }
        let is_chord = chord.is_some();
        let (llt, factor) = match chord.take() {
            Some(c) => c,
            None => {
                let mut h = ev.hess.expect("a pass without a kept Hessian computes one");
                // A tiny ridge on the diagonal keeps separable or collinear problems solvable.
                let jitter = 1e-12 * (1.0 + (0..p).map(|j| h[(j, j)]).fold(0.0, f64::max));
                for j in 0..p {
                    h[(j, j)] += jitter;
                }
                let llt = h.llt(Side::Lower).map_err(|e| Error::Numerical {
                    context: "weighted logistic Newton step".into(),
                    reason: format!(
                        "{e:?}; the classes may be perfectly separable, try a larger l2"
                    ),
                })?;
                (llt, 1.0)
            }
        };
        let sol = llt.solve(Mat::<f64>::from_fn(p, 1, |i, _| grad[i]));
        let step: Vec<f64> = (0..p).map(|j| factor * sol[(j, 0)]).collect();
        let decrement: f64 = step.iter().zip(&grad).map(|(a, b)| a * b).sum();
        it += 1;
        let next: Vec<f64> = (0..p).map(|j| theta[j] - step[j]).collect();
        if decrement.is_finite() && (0.0..=1e-14 * wsum.max(1.0)).contains(&decrement) {
            // Inside the region of quadratic convergence: the full step is the solution to
            // within rounding; no further pass is needed.
            return Ok((next, it, Some((llt, factor))));
        }
        let keep = if is_chord {
            decrement * CHORD_CONTRACTION <= prev_chord_dec
        } else {
            decrement <= CHORD_DECREMENT * wsum.max(1.0)
        };
        prev_chord_dec = if is_chord { decrement } else { f64::INFINITY };
        if keep {
            chord = Some((llt, factor));
        }
        last = Some((theta, ev.f, step, 1.0));
        theta = next;
    }
}

fn unscale(theta: &[f64], mean: &[f64], scale: &[f64], iters: usize) -> (Vec<f64>, f64, usize) {
    let d = mean.len();
    let coef: Vec<f64> = (0..d).map(|j| theta[j] / scale[j]).collect();
    let intercept = theta[d] - (0..d).map(|j| coef[j] * mean[j]).sum::<f64>();
    (coef, intercept, iters)
}
