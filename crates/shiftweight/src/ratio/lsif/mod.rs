//! Least-squares importance fitting: uLSIF (Kanamori, Hido, Sugiyama 2009, JMLR 10) and its
//! relative variant RuLSIF (Yamada et al. 2013, Neural Computation 25).
//!
//! Model: r(x) = sum_l theta_l k(x, c_l) with Gaussian kernels at `b` centres drawn from the target.
//! Objective (alpha in [0, 1); alpha = 0 is uLSIF):
//!
//! ```text
//! minimise 1/2 theta' H theta - h' theta + lambda/2 |theta|^2
//! H = (1 - alpha)/n_s sum_source k k' + alpha/n_t sum_target k k',   h = 1/n_t sum_target k
//! theta = max(0, (H + lambda I)^-1 h)          (negative coefficients rounded up to zero)
//! ```
//!
//! With alpha > 0 the model estimates the relative ratio p_t / (alpha p_t + (1 - alpha) p_s),
//! which is bounded by 1/alpha and therefore far more stable under weak overlap.
//!
//! Hyperparameters not given are chosen by exact closed-form leave-one-out cross-validation: the
//! i-th source row and the i-th target row are held out together (Kanamori et al. 2009, section
//! 3.4) and the held-out squared-loss criterion
//! `(1 - alpha)/2 r(x_s)^2 + alpha/2 r(x_t)^2 - r(x_t)` is averaged. The held-out solutions come
//! from a rank-1 (uLSIF) or rank-2 (RuLSIF) Woodbury update of one eigendecomposition of H per
//! kernel width, so every lambda of the grid costs O(m b^2) for m held-out pairs, and the score
//! equals brute-force refits exactly. Above `max_cv_rows` pairs, a seeded subset of pairs is held
//! out (each still removed from the full statistics), which keeps the criterion unbiased.
//!
//! Complexity: O((n_s + n_t) b d) for distances, O(n_sigma (n_s + 1(alpha > 0) n_t) b^2) for the
//! statistics H (accumulated over row chunks; no n x b matrix is ever held), O(n_sigma (b^3 +
//! n_lambda m b^2)) for the cross-validation, O(n b d) to score n rows. Memory O(n_sigma b^2 + m b).

use super::{
    fit_meta, fit_standardizer, params, EstimatorKind, FittedRatio, RatioEstimator, RatioForm,
    ScoreRow, Selection,
};
use crate::data::{validate_pair, MatrixView, Standardizer};
use crate::error::{Error, Result};
use crate::kernel;
use crate::par;
use faer::linalg::matmul::matmul;
use faer::prelude::*;
use faer::{Accum, Mat, Side};
use rand::seq::index::sample;
use rayon::prelude::*;
use std::collections::BTreeMap;

/// uLSIF / RuLSIF configuration. Build with [`LeastSquaresRatio::new`] and the setters.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LeastSquaresRatio {
    /// Kernel width in standardised units; `None` (default) chooses it by LOOCV over
    /// `sigma_multiples` x the median pairwise distance.
    pub sigma: Option<f64>,
    /// Ridge strength lambda > 0; `None` (default) chooses it by LOOCV over `lambda_grid`.
    pub lam: Option<f64>,
    /// Number of kernel centres drawn from the target (default 200, at least 1; capped at n_t).
    pub n_basis: usize,
    /// Relative-ratio mixing alpha in [0, 1) (default 0 = uLSIF).
    pub alpha: f64,
    /// Seed for centres, the median-heuristic subsample and the held-out pairs (default 0).
    pub seed: u64,
    /// Candidate widths as multiples of the median distance (default 1/4, 1/2, 1, 2, 4).
    pub sigma_multiples: Vec<f64>,
    /// Candidate ridge strengths (default 1e-3, 1e-2, 1e-1, 1, 10).
    pub lambda_grid: Vec<f64>,
    /// Most held-out pairs used by LOOCV (default 10,000; at least 2).
    pub max_cv_rows: usize,
}

impl LeastSquaresRatio {
    /// The mixing weight alpha used when RuLSIF is asked for without one (the command line's
    /// `--estimator rulsif`, and the RuLSIF candidate of [`super::AutoRatio`]): the relative
    /// ratio is then bounded by 1 / alpha = 10.
    pub const RULSIF_ALPHA: f64 = 0.1;
}

impl Default for LeastSquaresRatio {
    fn default() -> Self {
        Self {
            sigma: None,
            lam: None,
            n_basis: 200,
            alpha: 0.0,
            seed: 0,
            sigma_multiples: vec![0.25, 0.5, 1.0, 2.0, 4.0],
            lambda_grid: vec![1e-3, 1e-2, 1e-1, 1.0, 10.0],
            max_cv_rows: 10_000,
        }
    }
}

impl LeastSquaresRatio {
    /// Defaults: data-chosen width and ridge, 200 centres, alpha = 0 (uLSIF), seed 0.
    pub fn new() -> Self {
        Self::default()
    }
    /// Fixes the kernel width (standardised units, > 0).
    pub fn sigma(mut self, sigma: Option<f64>) -> Self {
        self.sigma = sigma;
        self
    }
    /// Fixes the ridge strength (> 0).
    pub fn lam(mut self, lam: Option<f64>) -> Self {
        self.lam = lam;
        self
    }
    /// Number of centres (>= 1).
    pub fn n_basis(mut self, n: usize) -> Self {
        self.n_basis = n;
        self
    }
    /// Relative-ratio alpha in [0, 1).
    pub fn alpha(mut self, alpha: f64) -> Self {
        self.alpha = alpha;
        self
    }
    /// Seed of every random choice.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }
    /// Width grid, as multiples of the median distance (each > 0).
    pub fn sigma_multiples(mut self, m: Vec<f64>) -> Self {
        self.sigma_multiples = m;
        self
    }
    /// Ridge grid (each > 0).
    pub fn lambda_grid(mut self, g: Vec<f64>) -> Self {
        self.lambda_grid = g;
        self
    }
    /// Most held-out pairs in LOOCV (>= 2).
    pub fn max_cv_rows(mut self, m: usize) -> Self {
        self.max_cv_rows = m;
        self
    }

    /// Rejects out-of-range settings with an error naming the parameter.
    pub fn check(&self) -> Result<()> {
        if let Some(s) = self.sigma {
            kernel::check_sigma("sigma", s)?;
        }
        if let Some(l) = self.lam {
            if !(l.is_finite() && l > 0.0) {
                return Err(Error::param(
                    "lam",
                    format!("must be finite and > 0, got {l}"),
                ));
            }
        }
        if self.n_basis == 0 {
            return Err(Error::param("n_basis", "must be at least 1"));
        }
        if !(self.alpha >= 0.0 && self.alpha < 1.0) {
            return Err(Error::param(
                "alpha",
                format!("must be in [0, 1), got {}", self.alpha),
            ));
        }
        super::check_grid("sigma_multiples", &self.sigma_multiples, false)?;
        super::check_grid("lambda_grid", &self.lambda_grid, false)?;
        if self.max_cv_rows < 2 {
            return Err(Error::param("max_cv_rows", "must be at least 2"));
        }
        Ok(())
    }
}

/// Kernel statistics of one sample for several widths: sum of k k' (optional) and sum of k.
pub(crate) struct KernelSums {
    pub gram: Vec<Option<Mat<f64>>>,
    pub sum: Vec<Vec<f64>>,
}

/// Accumulates, for every width, sum_i k(x_i) k(x_i)' (when `gram`) and sum_i k(x_i) over the rows
/// of `z`, chunk by chunk through [`crate::par::reduce_chunks`] (bitwise reproducible for any
/// thread count). Memory: O(BATCH_CHUNKS * n_sigma * b^2); no n x b matrix is held.
///
/// Squared distances are computed once per chunk (one product) and shared by every width. The
/// Gram update is a symmetric rank-k update: only the lower triangle is formed (half the flops of
/// a full product) and folded; the upper triangle is mirrored once at the end.
pub(crate) fn kernel_sums(
    z: MatrixView,
    centres: MatrixView,
    sigmas: &[f64],
    gram: bool,
) -> KernelSums {
    kernel_sums_of(z, None, centres, sigmas, gram)
}

/// As [`kernel_sums`] on the rows of `x` after `standardizer` (when given), which standardises
/// each row chunk into a chunk-sized buffer: no standardised copy of the whole input is made.
pub(crate) fn kernel_sums_of(
    x: MatrixView,
    standardizer: Option<&Standardizer>,
    centres: MatrixView,
    sigmas: &[f64],
    gram: bool,
) -> KernelSums {
    let b = centres.rows();
    let d = x.cols();
    let c_sq = kernel::row_sq_norms(centres);
    let init = KernelSums {
        gram: sigmas
            .iter()
            .map(|_| gram.then(|| Mat::<f64>::zeros(b, b)))
            .collect(),
        sum: sigmas.iter().map(|_| vec![0.0; b]).collect(),
    };
    let mut sums = par::reduce_chunks(
        x.rows(),
        init,
        |start, end| {
            let m = end - start;
            let standardised;
            let rows = match standardizer {
                Some(st) => {
                    let mut buf = vec![0.0; m * d];
                    for (i, out) in buf.chunks_exact_mut(d).enumerate() {
                        st.transform_row(x.row(start + i), out);
                    }
                    standardised = buf;
                    MatrixView::new(&standardised, m, d).expect("chunk shape")
                }
                None => x.slice_rows(start, end),
            };
            let mut dist = vec![0.0; m * b];
            kernel::sq_distances_into(rows, centres, &c_sq, &mut dist);
            let mut kb = vec![0.0; m * b];
            let mut part = KernelSums {
                gram: Vec::with_capacity(sigmas.len()),
                sum: Vec::with_capacity(sigmas.len()),
            };
            for &s in sigmas {
                kernel::gaussian_from(&dist, s, &mut kb);
                let mut sum = vec![0.0; b];
                for row in kb.chunks_exact(b) {
                    par::add_into(&mut sum, row);
                }
                part.sum.push(sum);
                part.gram.push(gram.then(|| {
                    let km = MatRef::from_row_major_slice(&kb, m, b);
                    let mut g = Mat::<f64>::zeros(b, b);
                    kernel::gram_lower(g.as_mut(), km, Accum::Replace);
                    g
                }));
            }
            part
        },
        |acc, p| {
            for (s, ps) in acc.sum.iter_mut().zip(&p.sum) {
                par::add_into(s, ps);
            }
            for (g, pg) in acc.gram.iter_mut().zip(p.gram) {
                if let (Some(g), Some(pg)) = (g.as_mut(), pg) {
                    kernel::add_lower(g, &pg);
                }
            }
        },
    );
    for g in sums.gram.iter_mut().flatten() {
        kernel::mirror_lower(g);
    }
    sums
}

/// Held-out pairs per parallel block of the LOOCV (a constant, so results do not depend on the
/// thread count).
const LOO_BLOCK: usize = 256;

/// Held-out LOO scores of every lambda for one width `sigma`. `ds`, `dt`: squared distances of the
/// held-out source and target rows to the centres, row-major m x b (shared by every width); each
/// block turns its rows into kernel values in a block-sized buffer, so no m x b kernel matrix is
/// allocated per width. `base` = (1-alpha)/(n_s-1) S_s + alpha/(n_t-1) S_t.
///
/// The held-out pairs are processed in fixed blocks of [`LOO_BLOCK`] in parallel; each block
/// returns its partial sum of the criterion for every lambda, folded in block order (bitwise
/// reproducible for any thread count).
#[allow(clippy::too_many_arguments)]
fn loo_scores(
    base: &Mat<f64>,
    sum_t: &[f64],
    ds: &[f64],
    dt: &[f64],
    sigma: f64,
    m: usize,
    n_s: usize,
    n_t: usize,
    alpha: f64,
    lambdas: &[f64],
) -> Result<Vec<f64>> {
    let b = sum_t.len();
    let eig = base
        .self_adjoint_eigen(Side::Lower)
        .map_err(|e| Error::Numerical {
            context: "uLSIF eigendecomposition".into(),
            reason: format!("{e:?}"),
        })?;
    let u = eig.U();
    let s: Vec<f64> = (0..b).map(|j| eig.S()[j].max(0.0)).collect();
    let st = ColRef::from_slice(sum_t);
    let gt: Col<f64> = u.transpose() * st;
    let a = 1.0 - alpha;
    let p = a / (n_s as f64 - 1.0);
    let q = alpha / (n_t as f64 - 1.0);
    let nt1 = n_t as f64 - 1.0;
    let n_l = lambdas.len();
    let dinv: Vec<Vec<f64>> = lambdas
        .iter()
        .map(|lam| s.iter().map(|sj| 1.0 / (sj + lam)).collect())
        .collect();
    // (partial criterion sum, any singular held-out system) for every lambda.
    let init = (vec![0.0; n_l], vec![false; n_l]);
    let (totals, bad) = par::reduce_chunks_sized(
        m,
        LOO_BLOCK,
        init,
        |start, end| {
            let mb = end - start;
            let mut ksb = vec![0.0; mb * b];
            let mut ktb = vec![0.0; mb * b];
            kernel::gaussian_from(&ds[start * b..end * b], sigma, &mut ksb);
            kernel::gaussian_from(&dt[start * b..end * b], sigma, &mut ktb);
            let (ksb, ktb) = (&ksb[..], &ktb[..]);
            let ksm = MatRef::from_row_major_slice(ksb, mb, b).transpose(); // b x mb
            let ktm = MatRef::from_row_major_slice(ktb, mb, b).transpose();
            let mut g = Mat::<f64>::zeros(b, mb);
            let mut f = Mat::<f64>::zeros(b, mb);
            matmul(
                g.as_mut(),
                Accum::Replace,
                u.transpose(),
                ksm,
                1.0,
                Par::Seq,
            );
            matmul(
                f.as_mut(),
                Accum::Replace,
                u.transpose(),
                ktm,
                1.0,
                Par::Seq,
            );
            // (gt - f_i) / (n_t - 1) for every held-out pair: the part of the held-out right-hand
            // side in eigen-coordinates that does not depend on lambda.
            let mut e = Mat::<f64>::zeros(b, mb);
            for i in 0..mb {
                let fi = col(&f, i);
                let ei = col_mut(&mut e, i);
                for j in 0..b {
                    ei[j] = (gt[j] - fi[j]) / nt1;
                }
            }
            let mut tot = vec![0.0; n_l];
            let mut bad = vec![false; n_l];
            let mut tt = Mat::<f64>::zeros(b, mb);
            let mut theta = Mat::<f64>::zeros(b, mb);
            for (li, dinv) in dinv.iter().enumerate() {
                // theta~ in eigen-coordinates for every held-out pair (columns).
                if held_out_coefficients(&g, &f, &e, &mut tt, dinv, alpha, p, q) {
                    bad[li] = true;
                    continue;
                }
                matmul(
                    theta.as_mut(),
                    Accum::Replace,
                    u,
                    tt.as_ref(),
                    1.0,
                    Par::Seq,
                );
                let total = held_out_total(&theta, ksb, ktb, a, alpha);
                tot[li] = total;
            }
            (tot, bad)
        },
        |acc, part| {
            par::add_into(&mut acc.0, &part.0);
            for (x, y) in acc.1.iter_mut().zip(part.1) {
                *x |= y;
            }
        },
    );
    Ok(totals
        .iter()
        .zip(&bad)
        .map(|(t, bad)| if *bad { f64::INFINITY } else { t / m as f64 })
        .collect())
}

/// The held-out coefficients in eigen-coordinates of every pair of a block (columns of `tt`) for
/// one lambda (`dinv` = 1 / (eigenvalue + lambda)): the 1 x 1 (uLSIF) or 2 x 2 (RuLSIF) Woodbury
/// system of each pair, then tt_i = D (e_i + z0 g_i + z1 f_i). Returns true when some pair's
/// system is singular. Compiled for AVX2 when the CPU has it (the body is too large for
/// [`crate::simd::with_wide_simd`]'s closure to be inlined into its wide version; the arithmetic is the
/// same in both, so results are bitwise equal).
#[allow(clippy::too_many_arguments)]
fn held_out_coefficients(
    g: &Mat<f64>,
    f: &Mat<f64>,
    e: &Mat<f64>,
    tt: &mut Mat<f64>,
    dinv: &[f64],
    alpha: f64,
    p: f64,
    q: f64,
) -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        #[target_feature(enable = "avx2")]
        #[allow(clippy::too_many_arguments)]
        unsafe fn wide(
            g: &Mat<f64>,
            f: &Mat<f64>,
            e: &Mat<f64>,
            tt: &mut Mat<f64>,
            dinv: &[f64],
            alpha: f64,
            p: f64,
            q: f64,
        ) -> bool {
            held_out_coefficients_body(g, f, e, tt, dinv, alpha, p, q)
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU was just checked to support AVX2, the only feature enabled.
            return unsafe { wide(g, f, e, tt, dinv, alpha, p, q) };
        }
    }
    held_out_coefficients_body(g, f, e, tt, dinv, alpha, p, q)
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn held_out_coefficients_body(
    g: &Mat<f64>,
    f: &Mat<f64>,
    e: &Mat<f64>,
    tt: &mut Mat<f64>,
    dinv: &[f64],
    alpha: f64,
    p: f64,
    q: f64,
) -> bool {
    if alpha == 0.0 {
        // uLSIF: only the source row is removed from H, a 1 x 1 system; the target terms (f) do
        // not enter (same values as the general branch below with z1 = 0).
        for i in 0..g.ncols() {
            let (gi, ei) = (col(g, i), col(e, i));
            let [uu, uy] = weighted_dots_source(gi, ei, dinv);
            let den = 1.0 / p - uu;
            if den.abs() < 1e-12 * (1.0 / p) {
                return true;
            }
            let z0 = uy / den;
            let ti = col_mut(tt, i);
            for (((t, dj), ej), gj) in ti.iter_mut().zip(dinv).zip(ei).zip(gi) {
                *t = dj * ej + dj * gj * z0;
            }
        }
        return false;
    }
    for i in 0..g.ncols() {
        let (gi, fi, ei) = (col(g, i), col(f, i), col(e, i));
        let [uu, uv, vv, uy, vy] = weighted_dots(gi, fi, ei, dinv);
        let (z0, z1) = if alpha == 0.0 {
            let den = 1.0 / p - uu;
            if den.abs() < 1e-12 * (1.0 / p) {
                return true;
            }
            (uy / den, 0.0)
        } else {
            let (m00, m01, m11) = (1.0 / p - uu, -uv, 1.0 / q - vv);
            let det = m00 * m11 - m01 * m01;
            if det.abs() < 1e-12 * (m00.abs() * m11.abs()).max(1e-300) {
                return true;
            }
            ((m11 * uy - m01 * vy) / det, (m00 * vy - m01 * uy) / det)
        };
        let ti = col_mut(tt, i);
        for ((((t, dj), ej), gj), fj) in ti.iter_mut().zip(dinv).zip(ei).zip(gi).zip(fi) {
            *t = dj * ej + dj * gj * z0 + dj * fj * z1;
        }
    }
    false
}

/// Sum over the pairs of a block of the held-out criterion
/// (1 - alpha)/2 r(x_s)^2 + alpha/2 r(x_t)^2 - r(x_t), with the coefficients `theta` (columns)
/// clipped at zero; `ksb`, `ktb` the pairs' kernel rows (row-major). AVX2 when the CPU has it, as
/// [`held_out_coefficients`].
fn held_out_total(theta: &Mat<f64>, ksb: &[f64], ktb: &[f64], a: f64, alpha: f64) -> f64 {
    #[cfg(target_arch = "x86_64")]
    {
        #[target_feature(enable = "avx2")]
        unsafe fn wide(theta: &Mat<f64>, ksb: &[f64], ktb: &[f64], a: f64, alpha: f64) -> f64 {
            held_out_total_body(theta, ksb, ktb, a, alpha)
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU was just checked to support AVX2, the only feature enabled.
            return unsafe { wide(theta, ksb, ktb, a, alpha) };
        }
    }
    held_out_total_body(theta, ksb, ktb, a, alpha)
}

#[inline(always)]
fn held_out_total_body(theta: &Mat<f64>, ksb: &[f64], ktb: &[f64], a: f64, alpha: f64) -> f64 {
    let b = theta.nrows();
    let mut total = 0.0;
    for i in 0..theta.ncols() {
        let th = col(theta, i);
        let (ksi, kti) = (&ksb[i * b..(i + 1) * b], &ktb[i * b..(i + 1) * b]);
        let (rs, rt) = clipped_dots(th, ksi, kti);
        total += a * rs * rs / 2.0 + alpha * rt * rt / 2.0 - rt;
    }
    total
}

/// Column `i` of a column-major matrix as a slice.
#[inline(always)]
fn col(m: &Mat<f64>, i: usize) -> &[f64] {
    m.col(i)
        .try_as_col_major()
        .expect("column-major")
        .as_slice()
}

/// Column `i` of a column-major matrix as a mutable slice.
#[inline(always)]
fn col_mut(m: &mut Mat<f64>, i: usize) -> &mut [f64] {
    m.col_mut(i)
        .try_as_col_major_mut()
        .expect("column-major")
        .as_slice_mut()
}

/// Lanes of the vectorised sums below (each lane sums every fourth term; the lanes are added at
/// the end, in a fixed order, so results do not depend on the machine).
const LANES: usize = 4;

/// (sum g d g, sum g d f, sum f d f, sum g d e, sum f d e) over j, with d_j e_j standing for the
/// held-out right-hand side: the 2 x 2 (or 1 x 1) Woodbury system of one held-out pair. Summed in
/// [`LANES`] independent lanes so the loop vectorises.
#[inline(always)]
fn weighted_dots(g: &[f64], f: &[f64], e: &[f64], d: &[f64]) -> [f64; 5] {
    let mut acc = [[0.0f64; LANES]; 5];
    let n = g.len() / LANES * LANES;
    let (g4, f4, e4, d4) = (
        g[..n].chunks_exact(LANES),
        f[..n].chunks_exact(LANES),
        e[..n].chunks_exact(LANES),
        d[..n].chunks_exact(LANES),
    );
    for (((gc, fc), ec), dc) in g4.zip(f4).zip(e4).zip(d4) {
        for l in 0..LANES {
            let (uj, vj, dj) = (gc[l], fc[l], dc[l]);
            let yj = dj * ec[l];
            acc[0][l] += uj * dj * uj;
            acc[1][l] += uj * dj * vj;
            acc[2][l] += vj * dj * vj;
            acc[3][l] += uj * yj;
            acc[4][l] += vj * yj;
        }
    }
    let mut out = [0.0; 5];
    for (o, a) in out.iter_mut().zip(&acc) {
        *o = (a[0] + a[1]) + (a[2] + a[3]);
    }
    for j in n..g.len() {
        let (uj, vj, dj) = (g[j], f[j], d[j]);
        let yj = dj * e[j];
        out[0] += uj * dj * uj;
        out[1] += uj * dj * vj;
        out[2] += vj * dj * vj;
        out[3] += uj * yj;
        out[4] += vj * yj;
    }
    out
}

/// The (sum g d g, sum g d e) part of [`weighted_dots`] (uLSIF), summed in the same lanes and
/// order.
#[inline(always)]
fn weighted_dots_source(g: &[f64], e: &[f64], d: &[f64]) -> [f64; 2] {
    let mut acc = [[0.0f64; LANES]; 2];
    let n = g.len() / LANES * LANES;
    for ((gc, ec), dc) in g[..n]
        .chunks_exact(LANES)
        .zip(e[..n].chunks_exact(LANES))
        .zip(d[..n].chunks_exact(LANES))
    {
        for l in 0..LANES {
            let (uj, dj) = (gc[l], dc[l]);
            let yj = dj * ec[l];
            acc[0][l] += uj * dj * uj;
            acc[1][l] += uj * yj;
        }
    }
    let mut out = [0.0; 2];
    for (o, a) in out.iter_mut().zip(&acc) {
        *o = (a[0] + a[1]) + (a[2] + a[3]);
    }
    for j in n..g.len() {
        let (uj, dj) = (g[j], d[j]);
        let yj = dj * e[j];
        out[0] += uj * dj * uj;
        out[1] += uj * yj;
    }
    out
}

/// (ks . max(theta, 0), kt . max(theta, 0)): the held-out ratio at the source and target row,
/// summed in [`LANES`] lanes.
#[inline(always)]
fn clipped_dots(th: &[f64], ks: &[f64], kt: &[f64]) -> (f64, f64) {
    let (mut rs, mut rt) = ([0.0f64; LANES], [0.0f64; LANES]);
    let n = th.len() / LANES * LANES;
    for ((tc, sc), cc) in th[..n]
        .chunks_exact(LANES)
        .zip(ks[..n].chunks_exact(LANES))
        .zip(kt[..n].chunks_exact(LANES))
    {
        for l in 0..LANES {
            let t = tc[l].max(0.0);
            rs[l] += sc[l] * t;
            rt[l] += cc[l] * t;
        }
    }
    let (mut s, mut t) = (
        (rs[0] + rs[1]) + (rs[2] + rs[3]),
        (rt[0] + rt[1]) + (rt[2] + rt[3]),
    );
    for j in n..th.len() {
        let c = th[j].max(0.0);
        s += ks[j] * c;
        t += kt[j] * c;
    }
    (s, t)
}

/// Solves (H + lambda I) theta = h and rounds negative coefficients up to zero.
pub(crate) fn solve_theta(h_mat: &Mat<f64>, h: &[f64], lam: f64) -> Result<Vec<f64>> {
    let b = h.len();
    let mut a = h_mat.clone();
    for j in 0..b {
        a[(j, j)] += lam;
    }
    let llt = a.llt(Side::Lower).map_err(|e| Error::Numerical {
        context: "uLSIF solve".into(),
        reason: format!("{e:?}"),
    })?;
    let rhs = Mat::<f64>::from_fn(b, 1, |i, _| h[i]);
    let sol = llt.solve(rhs);
    Ok((0..b).map(|i| sol[(i, 0)].max(0.0)).collect())
}

impl RatioEstimator for LeastSquaresRatio {
    /// Holds the kernel width and the ridge fixed when either was searched.
    fn with_chosen(&self, chosen: &BTreeMap<String, f64>) -> Option<super::BoxedEstimator> {
        if self.sigma.is_some() && self.lam.is_some() {
            return None;
        }
        let mut e = self.clone();
        e.sigma = Some(*chosen.get("sigma")?);
        e.lam = Some(*chosen.get("lam")?);
        Some(Box::new(e))
    }

    fn fit(&self, source: MatrixView, target: MatrixView) -> Result<FittedRatio> {
        self.check()?;
        validate_pair(&source, &target, 2)?;
        // The source is standardised chunk by chunk where it is used, never copied whole (it is
        // usually the large sample); the target is copied standardised.
        let (st, warnings) = fit_standardizer(source, target);
        let zt = st.transform(&target);
        let (n_s, n_t) = (source.rows(), zt.rows());
        let centres = kernel::choose_centres(zt.view(), self.n_basis, self.seed)?;
        let b = centres.rows();
        let median = kernel::median_distance_of(&[source, target], Some(&st), self.seed);
        let sigmas: Vec<f64> = match self.sigma {
            Some(s) => vec![s],
            None => self.sigma_multiples.iter().map(|m| m * median).collect(),
        };
        let lambdas: Vec<f64> = match self.lam {
            Some(l) => vec![l],
            None => self.lambda_grid.clone(),
        };
        let alpha = self.alpha;
        let ss = kernel_sums_of(source, Some(&st), centres.view(), &sigmas, true);
        let stt = kernel_sums(zt.view(), centres.view(), &sigmas, alpha > 0.0);

        let mut table = Vec::new();
        let (mut best_s, mut best_l) = (0usize, 0usize);
        if sigmas.len() * lambdas.len() > 1 {
            let m = n_s.min(n_t).min(self.max_cv_rows);
            let mut r = crate::random::rng(self.seed ^ 0x006c_6f6f_6376);
            let mut is = sample(&mut r, n_s, m).into_vec();
            let mut it = sample(&mut r, n_t, m).into_vec();
            is.sort_unstable();
            it.sort_unstable();
            let cvs = st.transform(&source.select_rows(&is).view());
            let cvt = zt.view().select_rows(&it);
            let mut best = f64::INFINITY;
            // Squared distances of the held-out rows, shared by every width.
            let c_sq = kernel::row_sq_norms(centres.view());
            let mut ds = vec![0.0; m * b];
            let mut dt = vec![0.0; m * b];
            kernel::sq_distances_into(cvs.view(), centres.view(), &c_sq, &mut ds);
            kernel::sq_distances_into(cvt.view(), centres.view(), &c_sq, &mut dt);
            // Widths are independent: scored in parallel, collected in grid order.
            let per_width: Vec<Result<Vec<f64>>> = sigmas
                .par_iter()
                .enumerate()
                .map(|(si, &sigma)| {
                    let mut base = ss.gram[si].as_ref().expect("gram").clone()
                        * Scale((1.0 - alpha) / (n_s as f64 - 1.0));
                    if alpha > 0.0 {
                        base += stt.gram[si].as_ref().expect("gram").clone()
                            * Scale(alpha / (n_t as f64 - 1.0));
                    }
                    loo_scores(
                        &base,
                        &stt.sum[si],
                        &ds,
                        &dt,
                        sigma,
                        m,
                        n_s,
                        n_t,
                        alpha,
                        &lambdas,
                    )
                })
                .collect();
            for (si, scores) in per_width.into_iter().enumerate() {
                let sigma = sigmas[si];
                for (li, &sc) in scores?.iter().enumerate() {
                    table.push(ScoreRow {
                        params: params([("sigma", sigma), ("lam", lambdas[li])]),
                        score: sc,
                    });
                    if sc < best {
                        best = sc;
                        best_s = si;
                        best_l = li;
                    }
                }
            }
            if !best.is_finite() {
                return Err(Error::Numerical {
                    context: "uLSIF cross-validation".into(),
                    reason: "no candidate (sigma, lambda) gave a finite held-out score".into(),
                });
            }
        }
        let (sigma, lam) = (sigmas[best_s], lambdas[best_l]);
        let mut h_mat =
            ss.gram[best_s].as_ref().expect("gram").clone() * Scale((1.0 - alpha) / n_s as f64);
        if alpha > 0.0 {
            h_mat += stt.gram[best_s].as_ref().expect("gram").clone() * Scale(alpha / n_t as f64);
        }
        let h: Vec<f64> = stt.sum[best_s].iter().map(|v| v / n_t as f64).collect();
        let coef = solve_theta(&h_mat, &h, lam)?;
        let mut warnings = warnings;
        if coef.iter().all(|c| *c == 0.0) {
            warnings.push("every coefficient was rounded to zero: the fitted ratio is 0 everywhere; try a larger kernel width".into());
        }
        let mut fitted = FittedRatio {
            kind: EstimatorKind::LeastSquares,
            standardizer: st,
            form: RatioForm::KernelExpansion {
                sigma,
                centres,
                coef,
            },
            source_weights: Vec::new(),
            selection: Selection {
                criterion: "closed-form leave-one-out squared loss (Kanamori et al. 2009)".into(),
                chosen: params([
                    ("sigma", sigma),
                    ("lam", lam),
                    ("alpha", alpha),
                    ("n_basis", b as f64),
                    ("median_distance", median),
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

#[cfg(test)]
mod tests;
