//! The Gaussian kernel k(x, c) = exp(-||x - c||^2 / (2 sigma^2)) on standardised features, the
//! median heuristic for its width (Garreau, Jitkrittum, Kanagawa 2017), seeded basis centres, and
//! chunked evaluation of kernel blocks.
//!
//! Squared distances are computed through one matrix product, ||x||^2 + ||c||^2 - 2 x.c, with faer,
//! then exponentiated over contiguous memory. A block of `m` rows against `b` centres costs
//! O(m b d) and holds m x b values; callers never hold a kernel matrix for a whole input.

use crate::data::{Matrix, MatrixView};
use crate::error::{Error, Result};
use crate::random::rng;
use crate::simd::with_wide_simd;
use faer::linalg::matmul::matmul;
use faer::linalg::matmul::triangular::BlockStructure;
use faer::{Accum, Mat, MatMut, MatRef, Par};
use rand::seq::index::sample;

/// Rows of the pooled sample used by the median heuristic (pairs = rows * (rows - 1) / 2).
pub const MEDIAN_SUBSAMPLE: usize = 1000;

/// Squared Euclidean distances between every row of `x` (m x d) and every row of `c` (b x d),
/// written row-major into `out` (m x b). `c_sq` holds the squared norms of the rows of `c`.
pub fn sq_distances_into(x: MatrixView, c: MatrixView, c_sq: &[f64], out: &mut [f64]) {
    let (m, b, d) = (x.rows(), c.rows(), x.cols());
    debug_assert_eq!(out.len(), m * b);
    if m == 0 || b == 0 {
        return;
    }
    {
        let xm = MatRef::from_row_major_slice(x.as_slice(), m, d);
        let cm = MatRef::from_row_major_slice(c.as_slice(), b, d);
        let dst = MatMut::from_row_major_slice_mut(out, m, b);
        matmul(dst, Accum::Replace, xm, cm.transpose(), -2.0, Par::Seq);
    }
    with_wide_simd(|| {
        for (i, orow) in out.chunks_exact_mut(b).enumerate() {
            let x_sq: f64 = x.row(i).iter().map(|v| v * v).sum();
            for (o, cs) in orow.iter_mut().zip(c_sq) {
                *o = (*o + x_sq + cs).max(0.0);
            }
        }
    });
}

/// Squared norms of the rows of `c`.
pub fn row_sq_norms(c: MatrixView) -> Vec<f64> {
    (0..c.rows())
        .map(|i| c.row(i).iter().map(|v| v * v).sum())
        .collect()
}

/// Turns squared distances into Gaussian kernel values in place.
#[inline]
pub fn gaussian_in_place(sq: &mut [f64], sigma: f64) {
    let g = -0.5 / (sigma * sigma);
    with_wide_simd(|| {
        for v in sq.iter_mut() {
            *v = exp_nonpositive(*v * g);
        }
    });
}

/// Writes the Gaussian kernel values of the squared distances `sq` into `out` (same length).
#[inline]
pub fn gaussian_from(sq: &[f64], sigma: f64, out: &mut [f64]) {
    debug_assert_eq!(sq.len(), out.len());
    let g = -0.5 / (sigma * sigma);
    with_wide_simd(|| {
        for (o, v) in out.iter_mut().zip(sq) {
            *o = exp_nonpositive(*v * g);
        }
    });
}

/// exp(x) for x <= 0 (kernel exponents), written without calls or branches so that loops over
/// contiguous slices vectorise. Cody-Waite reduction x = k ln 2 + r with |r| <= ln 2 / 2, then a
/// degree-13 Taylor polynomial for exp(r) (truncation error below 1e-17 relative), scaled by 2^k
/// through the exponent bits. The polynomial is evaluated in Estrin's scheme (pairs, then powers
/// r^2, r^4, r^8), whose dependency chain is 5 operations deep instead of Horner's 26, so that a
/// vectorised loop is limited by throughput rather than latency. Agrees with `f64::exp` to a few units in the last place; arguments
/// below -708 (where exp(x) < 3.3e-308, the smallest normal number) give 0, and NaN stays NaN.
#[inline(always)]
pub fn exp_nonpositive(x: f64) -> f64 {
    const LOG2E: f64 = std::f64::consts::LOG2_E;
    const LN2_HI: f64 = 0.6931471803691238;
    const LN2_LO: f64 = 1.9082149292705877e-10;
    // Taylor coefficients 1/k!.
    const C: [f64; 14] = [
        1.0,
        1.0,
        0.5,
        0.16666666666666666,
        0.041666666666666664,
        0.008333333333333333,
        0.001388888888888889,
        0.0001984126984126984,
        2.48015873015873e-05,
        2.755731922398589e-06,
        2.7557319223985894e-07,
        2.505210838544172e-08,
        2.08767569878681e-09,
        1.6059043836821613e-10,
    ];
    // Adding 1.5 * 2^52 rounds to the nearest integer in the low mantissa bits (no libm call).
    const SHIFTER: f64 = 6_755_399_441_055_744.0;
    let xc = x.clamp(-708.0, 0.0);
    let t = xc * LOG2E + SHIFTER;
    let k = t - SHIFTER;
    let ki = (t.to_bits() as i64).wrapping_sub(SHIFTER.to_bits() as i64);
    let r = (xc - k * LN2_HI) - k * LN2_LO;
    let r2 = r * r;
    let r4 = r2 * r2;
    let r8 = r4 * r4;
    let q0 = C[0] + C[1] * r;
    let q1 = C[2] + C[3] * r;
    let q2 = C[4] + C[5] * r;
    let q3 = C[6] + C[7] * r;
    let q4 = C[8] + C[9] * r;
    let q5 = C[10] + C[11] * r;
    let q6 = C[12] + C[13] * r;
    let s0 = q0 + q1 * r2;
    let s1 = q2 + q3 * r2;
    let s2 = q4 + q5 * r2;
    let p = (s0 + s1 * r4) + (s2 + q6 * r4) * r8;
    let scale = f64::from_bits((ki.wrapping_add(1023) as u64) << 52);
    let y = p * scale;
    if x < -708.0 {
        0.0
    } else if x.is_nan() {
        x
    } else {
        y
    }
}

/// Writes the Gaussian kernel block k(x_i, c_l) (m x b, row-major) into `out`.
pub fn kernel_block_into(x: MatrixView, c: MatrixView, c_sq: &[f64], sigma: f64, out: &mut [f64]) {
    sq_distances_into(x, c, c_sq, out);
    gaussian_in_place(out, sigma);
}

/// Gaussian kernel block as a new row-major buffer (m x b).
pub fn kernel_block(x: MatrixView, c: MatrixView, sigma: f64) -> Vec<f64> {
    let c_sq = row_sq_norms(c);
    let mut out = vec![0.0; x.rows() * c.rows()];
    kernel_block_into(x, c, &c_sq, sigma, &mut out);
    out
}

/// Lower triangle of k' k into `dst` (b x b), for k of m x b: a symmetric rank-m update, half the
/// flops of the full product. The strict upper triangle of `dst` is left untouched.
pub fn gram_lower(dst: MatMut<f64>, k: MatRef<f64>, accum: Accum) {
    faer::linalg::matmul::triangular::matmul(
        dst,
        BlockStructure::TriangularLower,
        accum,
        k.transpose(),
        BlockStructure::Rectangular,
        k,
        BlockStructure::Rectangular,
        1.0,
        Par::Seq,
    );
}

/// Copies the lower triangle of a square matrix onto its upper triangle.
pub fn mirror_lower(g: &mut Mat<f64>) {
    let b = g.nrows();
    for j in 0..b {
        for i in (j + 1)..b {
            g[(j, i)] = g[(i, j)];
        }
    }
}

/// Adds the lower triangle (with the diagonal) of `src` into `dst`, column by column.
pub fn add_lower(dst: &mut Mat<f64>, src: &Mat<f64>) {
    for j in 0..dst.ncols() {
        for i in j..dst.nrows() {
            dst[(i, j)] += src[(i, j)];
        }
    }
}

/// k' k for a row-major n x b buffer `k`, accumulated over fixed row chunks in parallel with
/// `crate::par::reduce_chunks` (bitwise identical for any thread count). O(n b^2 / 2) flops.
pub fn gram_of_rows(k: &[f64], n: usize, b: usize) -> Mat<f64> {
    debug_assert_eq!(k.len(), n * b);
    let mut g = crate::par::reduce_chunks(
        n,
        Mat::<f64>::zeros(b, b),
        |s, e| {
            let mut part = Mat::<f64>::zeros(b, b);
            let km = MatRef::from_row_major_slice(&k[s * b..e * b], e - s, b);
            gram_lower(part.as_mut(), km, Accum::Replace);
            part
        },
        |acc, p| add_lower(acc, &p),
    );
    mirror_lower(&mut g);
    g
}

/// Median of the pairwise Euclidean distances among the rows of `parts` pooled together (already
/// standardised). Above [`MEDIAN_SUBSAMPLE`] rows a seeded subsample is used. O(s^2 d) for s
/// subsampled rows. Returns 1 when every distance is zero (e.g. all rows identical).
pub fn median_distance(parts: &[MatrixView], seed: u64) -> f64 {
    median_distance_of(parts, None, seed)
}

/// As [`median_distance`] for rows that `standardizer` (when given) standardises first: only the
/// subsampled rows are transformed, so no standardised copy of the inputs is needed.
pub fn median_distance_of(
    parts: &[MatrixView],
    standardizer: Option<&crate::data::Standardizer>,
    seed: u64,
) -> f64 {
    let total: usize = parts.iter().map(|p| p.rows()).sum();
    let d = parts.first().map_or(0, |p| p.cols());
    let pick: Vec<usize> = if total > MEDIAN_SUBSAMPLE {
        let mut r = rng(seed ^ 0x6d65_6469_616e);
        let mut v = sample(&mut r, total, MEDIAN_SUBSAMPLE).into_vec();
        v.sort_unstable();
        v
    } else {
        (0..total).collect()
    };
    let mut rows = Vec::with_capacity(pick.len() * d);
    for &g in &pick {
        let mut g = g;
        for p in parts {
            if g < p.rows() {
                match standardizer {
                    Some(st) => {
                        let at = rows.len();
                        rows.resize(at + d, 0.0);
                        st.transform_row(p.row(g), &mut rows[at..]);
                    }
                    None => rows.extend_from_slice(p.row(g)),
                }
                break;
            }
            g -= p.rows();
        }
    }
    let s = pick.len();
    let mut dists = Vec::with_capacity(s * s.saturating_sub(1) / 2);
    for i in 0..s {
        let a = &rows[i * d..(i + 1) * d];
        for j in (i + 1)..s {
            let b = &rows[j * d..(j + 1) * d];
            let sq: f64 = a.iter().zip(b).map(|(u, v)| (u - v) * (u - v)).sum();
            dists.push(sq.sqrt());
        }
    }
    if dists.is_empty() {
        return 1.0;
    }
    let mid = dists.len() / 2;
    let (_, m, _) = dists.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
    let med = *m;
    if med > 0.0 && med.is_finite() {
        med
    } else {
        // Many duplicated rows: fall back to the mean positive distance, then to 1.
        let pos: Vec<f64> = dists.into_iter().filter(|v| *v > 0.0).collect();
        if pos.is_empty() {
            1.0
        } else {
            pos.iter().sum::<f64>() / pos.len() as f64
        }
    }
}

/// Chooses `min(n_basis, target.rows())` distinct target rows as kernel centres (seeded).
pub fn choose_centres(target: MatrixView, n_basis: usize, seed: u64) -> Result<Matrix> {
    if n_basis == 0 {
        return Err(Error::param("n_basis", "must be at least 1"));
    }
    let b = n_basis.min(target.rows());
    let mut r = rng(seed ^ 0x6365_6e74_7265);
    let mut idx = sample(&mut r, target.rows(), b).into_vec();
    idx.sort_unstable();
    Ok(target.select_rows(&idx))
}

/// Validates a kernel width.
pub fn check_sigma(name: &str, sigma: f64) -> Result<()> {
    if !(sigma.is_finite() && sigma > 0.0) {
        return Err(Error::param(
            name,
            format!("kernel width must be finite and > 0, got {sigma}"),
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kernel_block_matches_direct_formula() {
        let x = [0.0, 0.0, 1.0, 2.0, -1.0, 0.5];
        let c = [1.0, 1.0, 0.0, -3.0];
        let xv = MatrixView::new(&x, 3, 2).unwrap();
        let cv = MatrixView::new(&c, 2, 2).unwrap();
        let k = kernel_block(xv, cv, 0.7);
        for i in 0..3 {
            for l in 0..2 {
                let sq: f64 = xv
                    .row(i)
                    .iter()
                    .zip(cv.row(l))
                    .map(|(a, b)| (a - b).powi(2))
                    .sum();
                let want = (-sq / (2.0 * 0.49)).exp();
                assert!((k[i * 2 + l] - want).abs() < 1e-14);
            }
        }
    }

    // Reference: the platform libm through `f64::exp`; the polynomial must agree to a few ulp over
    // the whole range of kernel exponents, and handle the ends (0, underflow, -inf, NaN).
    #[test]
    fn exp_nonpositive_matches_libm() {
        let mut worst = 0.0f64;
        let mut x = 0.0f64;
        while x > -708.0 {
            for v in [x, x - 1e-3, x * 0.999_999_7] {
                let (got, want) = (exp_nonpositive(v), v.exp());
                let ulps = ((got - want) / (want * f64::EPSILON)).abs();
                worst = worst.max(ulps);
            }
            x -= 0.0137;
        }
        assert!(worst <= 4.0, "worst error {worst} ulp");
        assert_eq!(exp_nonpositive(0.0), 1.0);
        assert_eq!(exp_nonpositive(-0.0), 1.0);
        assert_eq!(exp_nonpositive(-800.0), 0.0);
        assert_eq!(exp_nonpositive(f64::NEG_INFINITY), 0.0);
        assert!(exp_nonpositive(f64::NAN).is_nan());
    }

    #[test]
    fn median_distance_hand_example() {
        // Points 0, 1, 3 on a line: distances 1, 2, 3 -> median 2.
        let x = [0.0, 1.0, 3.0];
        let v = MatrixView::new(&x, 3, 1).unwrap();
        assert_eq!(median_distance(&[v], 0), 2.0);
    }
}
