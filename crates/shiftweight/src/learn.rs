//! Importance-weighted linear models (Shimodaira 2000): weighted empirical risk minimisation.
//!
//! - [`WeightedLogistic`] minimises `sum_i w_i logloss_i + (l2/2) |beta|^2` with the intercept
//!   unpenalised: scikit-learn's `LogisticRegression(C = 1/l2)` with `sample_weight`. Binary labels
//!   {0, 1}. Solved by Newton's method with backtracking on internally standardised columns (the
//!   penalty is transformed so the solution is that of the raw problem). Each iteration is O(n p^2)
//!   accumulated over row chunks in parallel, plus O(p^3), except chord steps near the solution
//!   (the last Hessian reused), which are O(n p); memory O(p^2) beyond the input, plus a copy of
//!   the 50,000-row start subsample on inputs of 400,000 rows or more.
//! - [`WeightedRidge`] minimises `sum_i w_i (y_i - x_i beta - b)^2 + l2 |beta|^2`: scikit-learn's
//!   `Ridge(alpha = l2)` with `sample_weight`. One pass, O(n p^2 + p^3).
//!
//! Fitted models are [`LinearModel`] values that serialise to the model file format
//! `shiftweight.linear-model`, so a service can train or load and predict without Python:
//!
//! ```
//! use shiftweight::learn::{LinearModel, WeightedLogistic};
//! use shiftweight::MatrixView;
//! // Six rows, one feature; the importance weights stress the right-hand rows.
//! let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
//! let y = [0.0, 0.0, 1.0, 0.0, 1.0, 1.0];
//! let w = [0.5, 0.5, 1.0, 1.0, 2.0, 2.0];
//! let model = WeightedLogistic::new().l2(1.0).fit(MatrixView::new(&x, 6, 1)?, &y, Some(&w))?;
//! let text = model.to_json()?; // write it to a file; a service reads it back
//! let loaded = LinearModel::from_json(&text)?;
//! let new_rows = MatrixView::new(&[0.5, 4.5], 2, 1)?;
//! let p = loaded.predict_proba(new_rows)?;
//! assert!(p[1] > p[0]);
//! assert_eq!(loaded.predict(new_rows)?, model.predict(new_rows)?);
//! # Ok::<(), shiftweight::Error>(())
//! ```

pub use crate::data::validate_weights;
use crate::data::MatrixView;
use crate::error::{Error, Result};
use crate::model;
use crate::par;
use faer::prelude::*;
use faer::{Mat, MatMut, Side};
use serde::{Deserialize, Serialize};

/// Format tag of linear-model files.
pub const LINEAR_MODEL_FORMAT: &str = "shiftweight.linear-model";

/// Which loss a linear model was fitted with.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum LinearKind {
    /// Binary logistic regression.
    Logistic,
    /// Least squares with a ridge penalty.
    Ridge,
}

/// A fitted (weighted) linear model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LinearModel {
    /// Loss it was fitted with.
    pub kind: LinearKind,
    /// Coefficients on the raw features.
    pub coef: Vec<f64>,
    /// Intercept.
    pub intercept: f64,
    /// Penalty strength used.
    pub l2: f64,
    /// Newton iterations used (0 for ridge).
    pub n_iter: usize,
}

impl LinearModel {
    /// Linear predictor x.beta + b for every row.
    pub fn decision_function(&self, x: MatrixView) -> Result<Vec<f64>> {
        x.expect_cols("X", self.coef.len())?;
        x.validate("X", 0)?;
        Ok((0..x.rows())
            .map(|i| {
                x.row(i)
                    .iter()
                    .zip(&self.coef)
                    .map(|(a, b)| a * b)
                    .sum::<f64>()
                    + self.intercept
            })
            .collect())
    }
    /// Ridge: fitted values. Logistic: predicted class (0 or 1).
    pub fn predict(&self, x: MatrixView) -> Result<Vec<f64>> {
        let eta = self.decision_function(x)?;
        Ok(match self.kind {
            LinearKind::Ridge => eta,
            LinearKind::Logistic => eta
                .into_iter()
                .map(|e| if e > 0.0 { 1.0 } else { 0.0 })
                .collect(),
        })
    }
    /// Logistic: probability of class 1 for every row.
    pub fn predict_proba(&self, x: MatrixView) -> Result<Vec<f64>> {
        if self.kind != LinearKind::Logistic {
            return Err(Error::Unsupported(
                "predict_proba is defined for logistic models only".into(),
            ));
        }
        Ok(self
            .decision_function(x)?
            .into_iter()
            .map(sigmoid)
            .collect())
    }
    /// The model file document.
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(LINEAR_MODEL_FORMAT, self)
    }
    /// Loads a linear model document.
    pub fn from_json(text: &str) -> Result<Self> {
        let m: LinearModel = model::from_json_tagged(LINEAR_MODEL_FORMAT, text)?;
        if m.coef.is_empty() || m.coef.iter().any(|v| !v.is_finite()) || !m.intercept.is_finite() {
            return Err(Error::ModelFile(
                "linear model has no or non-finite coefficients".into(),
            ));
        }
        Ok(m)
    }
}

/// Logistic function, stable for large |t|.
#[inline]
pub fn sigmoid(t: f64) -> f64 {
    if t >= 0.0 {
        1.0 / (1.0 + (-t).exp())
    } else {
        let e = t.exp();
        e / (1.0 + e)
    }
}

/// log(1 + exp(t)), stable for large |t|.
#[inline]
pub fn log1pexp(t: f64) -> f64 {
    if t > 0.0 {
        t + (-t).exp().ln_1p()
    } else {
        t.exp().ln_1p()
    }
}

/// log(1 + u) for u in [0, 1] (the loss term of the logistic pass, u = exp(-|t|)), written without
/// calls or branches so that the pass's row loop vectorises. 1 + u is formed with its rounding
/// error c (exact, as 1 >= u), reduced to m in [sqrt(1/2), sqrt(2)] by halving when above
/// sqrt(2), and log m = 2 atanh(s), s = (m - 1) / (m + 1), |s| <= 0.172, by its series to s^23
/// (truncation below 1e-18 relative); the rounding error adds c / (1 + u). Agrees with
/// `f64::ln_1p` to a few units in the last place.
#[inline(always)]
fn log1p_unit(u: f64) -> f64 {
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

/// Importance-weighted ridge regression. See the module docs for the objective.
#[derive(Debug, Clone, PartialEq)]
pub struct WeightedRidge {
    /// Penalty strength a >= 0 (default 1.0; sklearn's Ridge(alpha = a)).
    pub l2: f64,
}

impl Default for WeightedRidge {
    fn default() -> Self {
        Self { l2: 1.0 }
    }
}

impl WeightedRidge {
    /// Defaults: l2 = 1.
    pub fn new() -> Self {
        Self::default()
    }
    /// Penalty strength (>= 0).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }

    /// Fits on rows `x`, targets `y`, optional non-negative weights.
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
        x.validate("X", 1)?;
        if y.len() != x.rows() {
            return Err(Error::LengthMismatch {
                argument: "y".into(),
                expected: x.rows(),
                found: y.len(),
            });
        }
        if let Some(i) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                argument: "y".into(),
                row: i,
                column: 0,
                value: y[i],
            });
        }
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
        let d = x.cols();
        let wsum: f64 = w.iter().sum();
        let mut xm = vec![0.0; d];
        let mut ym = 0.0;
        for i in 0..x.rows() {
            for (a, v) in xm.iter_mut().zip(x.row(i)) {
                *a += w[i] * v;
            }
            ym += w[i] * y[i];
        }
        xm.iter_mut().for_each(|v| *v /= wsum);
        ym /= wsum;
        let (gram, xty) = par::reduce_chunks(
            x.rows(),
            (vec![0.0; d * d], vec![0.0; d]),
            |s, e| {
                let m = e - s;
                let mut zc = vec![0.0; m * d];
                let mut xty = vec![0.0; d];
                for (r, i) in (s..e).enumerate() {
                    let sw = w[i].sqrt();
                    let yc = y[i] - ym;
                    for j in 0..d {
                        let c = x.row(i)[j] - xm[j];
                        zc[r * d + j] = sw * c;
                        xty[j] += w[i] * c * yc;
                    }
                }
                let zm = MatRef::from_row_major_slice(&zc, m, d);
                let mut h = Mat::<f64>::zeros(d, d);
                faer::linalg::matmul::matmul(
                    h.as_mut(),
                    faer::Accum::Replace,
                    zm.transpose(),
                    zm,
                    1.0,
                    Par::Seq,
                );
                (
                    (0..d * d).map(|k| h[(k / d, k % d)]).collect::<Vec<f64>>(),
                    xty,
                )
            },
            |acc, part| {
                par::add_into(&mut acc.0, &part.0);
                par::add_into(&mut acc.1, &part.1);
            },
        );
        // Squares of values near 1e155 and beyond overflow: that is the input's scale, not a
        // numerical failure of the solver, so it is reported as such.
        if let Some(k) = gram.iter().chain(&xty).position(|v| !v.is_finite()) {
            let j = if k < d * d { k / d } else { k - d * d };
            return Err(Error::param(
                "X",
                format!(
                    "column {j} (or `y`) is so large in magnitude that weighted sums of squares \
                     overflow; rescale it (e.g. to other units) before fitting"
                ),
            ));
        }
        let mut h = Mat::<f64>::from_fn(d, d, |i, j| gram[i * d + j]);
        for j in 0..d {
            h[(j, j)] += self.l2;
        }
        let llt = h.llt(Side::Lower).map_err(|e| Error::Numerical {
            context: "weighted ridge solve".into(),
            reason: format!("{e:?}; the features are collinear, use l2 > 0"),
        })?;
        let sol = llt.solve(Mat::<f64>::from_fn(d, 1, |i, _| xty[i]));
        let coef: Vec<f64> = (0..d).map(|j| sol[(j, 0)]).collect();
        let intercept = ym - coef.iter().zip(&xm).map(|(a, b)| a * b).sum::<f64>();
        Ok(LinearModel {
            kind: LinearKind::Ridge,
            coef,
            intercept,
            l2: self.l2,
            n_iter: 0,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ridge_without_penalty_is_weighted_least_squares_by_hand() {
        // y = 1 + 2x exactly: any weights recover it.
        let x = [0.0, 1.0, 2.0, 3.0];
        let y = [1.0, 3.0, 5.0, 7.0];
        let m = WeightedRidge::new()
            .l2(0.0)
            .fit(
                MatrixView::new(&x, 4, 1).unwrap(),
                &y,
                Some(&[1.0, 2.0, 3.0, 4.0]),
            )
            .unwrap();
        assert!((m.coef[0] - 2.0).abs() < 1e-12 && (m.intercept - 1.0).abs() < 1e-12);
    }

    #[test]
    fn weights_are_checked() {
        assert!(validate_weights(&[1.0, -1.0], 2, "w").is_err());
        assert!(validate_weights(&[0.0, 0.0], 2, "w").is_err());
        assert!(validate_weights(&[1.0], 2, "w").is_err());
        assert!(validate_weights(&[1.0, f64::NAN], 2, "w").is_err());
    }

    #[test]
    fn log1p_unit_matches_std_ln_1p() {
        // Reference: Rust's f64::ln_1p (the platform libm) over [0, 1], including both sides of
        // the sqrt(2) - 1 switch and tiny arguments; a few units in the last place.
        let mut worst = 0.0f64;
        for k in 0..=100_000 {
            let u = k as f64 / 100_000.0;
            for v in [
                u,
                u * 1e-9,
                (std::f64::consts::SQRT_2 - 1.0) * (1.0 + (u - 0.5) * 1e-12),
            ] {
                let (a, b) = (log1p_unit(v), v.ln_1p());
                let rel = if b == 0.0 {
                    a.abs()
                } else {
                    ((a - b) / b).abs()
                };
                worst = worst.max(rel);
            }
        }
        assert!(worst < 4.0 * f64::EPSILON, "worst relative error {worst:e}");
    }

    #[test]
    fn logistic_gradient_vanishes_at_solution() {
        let x: Vec<f64> = (0..40).map(|i| (i as f64 - 20.0) / 7.0).collect();
        // Overlapping classes: more ones on the right, some on both sides.
        let y: Vec<f64> = (0..40)
            .map(|i| {
                if (i * 37) % 11 < 3 + 5 * usize::from(i > 20) {
                    1.0
                } else {
                    0.0
                }
            })
            .collect();
        let w: Vec<f64> = (0..40).map(|i| 0.5 + (i % 3) as f64).collect();
        let m = WeightedLogistic::new()
            .l2(0.3)
            .fit(MatrixView::new(&x, 40, 1).unwrap(), &y, Some(&w))
            .unwrap();
        let (mut g0, mut g1) = (0.3 * m.coef[0], 0.0);
        for i in 0..40 {
            let r = w[i] * (sigmoid(m.coef[0] * x[i] + m.intercept) - y[i]);
            g0 += r * x[i];
            g1 += r;
        }
        assert!(g0.abs() < 1e-8 && g1.abs() < 1e-8, "gradient {g0} {g1}");
    }

    /// Overlapping two-class rows in 3 columns (deterministic), with zero weights on every fifth
    /// row as in a cross-fitting fold.
    fn fold_like_problem(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let mut x = Vec::with_capacity(3 * n);
        let mut y = Vec::with_capacity(n);
        for i in 0..n {
            let a = ((i * 7919) % 1000) as f64 / 250.0 - 2.0;
            let b = ((i * 104_729) % 997) as f64 / 300.0 - 1.5;
            let c = ((i * 31) % 101) as f64 / 50.0 - 1.0;
            x.extend_from_slice(&[a, b, c]);
            let s = 0.8 * a - 0.5 * b + 0.2 * c + 0.3;
            y.push(
                if ((i * 2_654_435_761) % 1000) as f64 / 1000.0 < sigmoid(s) {
                    1.0
                } else {
                    0.0
                },
            );
        }
        let w = (0..n).map(|i| if i % 5 == 2 { 0.0 } else { 1.0 }).collect();
        (x, y, w)
    }

    #[test]
    fn warm_start_reaches_the_same_optimum_as_the_usual_start() {
        // Strict convexity (l2 > 0): the optimum does not depend on the start, so a start near it
        // (as cross-fitting gives) and a start far from it must agree to the tolerance. 420,000
        // rows take the large-input path (start subsample, scaling from the subsample).
        for n in [3_000usize, 420_000] {
            let (x, y, w) = fold_like_problem(n);
            let xv = MatrixView::new(&x, n, 3).unwrap();
            let (c0, b0, _) = fit_logistic_unchecked(xv, &y, &w, 1.0, 100, 1e-10).unwrap();
            for start in [
                (vec![0.0, 0.0, 0.0], 0.0),
                (vec![5.0, -3.0, 1.0], -2.0),
                (c0.iter().map(|c| c * 1.01).collect(), b0 - 0.01),
            ] {
                let (c1, b1, _) =
                    fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&start.0, start.1)).unwrap();
                for (a, b) in c0.iter().zip(&c1).chain([(&b0, &b1)]) {
                    assert!(
                        (a - b).abs() <= 1e-7 * (1.0 + a.abs()),
                        "n = {n}, start {start:?}: {c0:?} {b0} vs {c1:?} {b1}"
                    );
                }
            }
        }
    }

    #[test]
    fn warm_start_of_the_wrong_length_or_not_finite_is_rejected() {
        let (x, y, w) = fold_like_problem(100);
        let xv = MatrixView::new(&x, 100, 3).unwrap();
        for (c, b) in [(vec![0.0, 0.0], 0.0), (vec![0.0, f64::NAN, 0.0], 0.0)] {
            let e = fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&c, b)).unwrap_err();
            assert!(e.to_string().contains("warm start"), "{e}");
        }
    }
}
