//! The Gaussian kernel k(x, c) = exp(-||x - c||^2 / (2 sigma^2)) on standardised features, the
//! median heuristic for its width (Garreau, Jitkrittum, Kanagawa 2017), seeded basis centres, and
//! chunked evaluation of kernel blocks.
//!
//! Squared distances are computed through one matrix product, ||x||^2 + ||c||^2 - 2 x.c, with faer,
//! then exponentiated over contiguous memory. A block of `m` rows against `b` centres costs
//! O(m b d) and holds m x b values; callers never hold a kernel matrix for a whole input.

use crate::data::{Matrix, MatrixView};
use crate::error::{Error, Result};
use faer::linalg::matmul::matmul;
use faer::{Accum, MatMut, MatRef, Par};
use rand::seq::index::sample;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// Rows per block in chunked kernel evaluation. Fixed (not derived from the thread count) so that
/// results are bitwise identical whatever the number of threads.
pub const CHUNK_ROWS: usize = 2048;

/// Rows of the pooled sample used by the median heuristic (pairs = rows * (rows - 1) / 2).
pub const MEDIAN_SUBSAMPLE: usize = 1000;

/// The portable, seeded random generator used for every random choice in the crate.
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

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
    for i in 0..m {
        let xi = x.row(i);
        let x_sq: f64 = xi.iter().map(|v| v * v).sum();
        for (o, cs) in out[i * b..(i + 1) * b].iter_mut().zip(c_sq) {
            *o = (*o + x_sq + cs).max(0.0);
        }
    }
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
    for v in sq.iter_mut() {
        *v = (*v * g).exp();
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

/// Median of the pairwise Euclidean distances among the rows of `parts` pooled together (already
/// standardised). Above [`MEDIAN_SUBSAMPLE`] rows a seeded subsample is used. O(s^2 d) for s
/// subsampled rows. Returns 1 when every distance is zero (e.g. all rows identical).
pub fn median_distance(parts: &[MatrixView], seed: u64) -> f64 {
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
                rows.extend_from_slice(p.row(g));
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
        return Err(Error::param(name, format!("kernel width must be finite and > 0, got {sigma}")));
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
                let sq: f64 = xv.row(i).iter().zip(cv.row(l)).map(|(a, b)| (a - b).powi(2)).sum();
                let want = (-sq / (2.0 * 0.49)).exp();
                assert!((k[i * 2 + l] - want).abs() < 1e-14);
            }
        }
    }

    #[test]
    fn median_distance_hand_example() {
        // Points 0, 1, 3 on a line: distances 1, 2, 3 -> median 2.
        let x = [0.0, 1.0, 3.0];
        let v = MatrixView::new(&x, 3, 1).unwrap();
        assert_eq!(median_distance(&[v], 0), 2.0);
    }
}
