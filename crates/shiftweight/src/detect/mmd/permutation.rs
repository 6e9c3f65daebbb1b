//! The relabelled statistics of the kernel-matrix route: by masked sums over the selected rows
//! or by one triangular product per batch of relabellings, and the permutation p-value.

use super::*;

/// The MMD^2_u of the first `ns` rows of `kc` against the others, and its value under one random
/// relabelling per seed (the same number of rows called "source"). For the 0/1 indicator p of the
/// source rows, s_XX = p'Kp = p'K~p + 2 (m/N) r'p - (m/N)^2 1'K1 with K~ = HKH (see
/// [`CentredKernel`]), and p'K~p = 2 p'L~p + sum_i p_i K~_ii for the strict lower triangle L~.
/// Every relabelling needs p'L~p: by masked sums over its selected rows ([`masked_statistics`])
/// or as one column of the f32 product L~ P (faer's triangular matmul), over batches of at most
/// [`PERM_BATCH_MAX`] relabellings, in parallel ([`PermRoute`]); the sums over rows are f64. The
/// observed statistic comes from f64 sums only. Returned in seed order. See the module docs
/// ("Precision") for the error against an f64 computation.
///
/// Also returns the modelled f32 error of one relabelled statistic (module docs, "Precision"):
/// a u (rms(K~) m^1.5 / 2 + m) with m the larger sample, u = 2^-24.
pub(super) fn permutation_statistics(
    kc: &CentredKernel,
    ns: usize,
    seeds: &[u64],
) -> (f64, Vec<f64>, f64) {
    permutation_statistics_by(kc, ns, seeds, PermRoute::Auto)
}

/// How the relabelled quadratic forms p'L~p are computed; both give the same sums up to f32
/// rounding (test `both_permutation_routes_agree_with_the_f64_reference`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) enum PermRoute {
    /// [`PermRoute::Masked`] when the CPU has AVX-512F, else [`PermRoute::Product`].
    Auto,
    /// The dense f32 product L~ P with faer's triangular matmul: N^2 / 2 multiply-adds per
    /// relabelling, half of them by a 0 indicator.
    Product,
    /// Masked sums over the selected rows only ([`masked_pair_sums`]): N^2 / 8 additions per
    /// relabelling on average; vectorised with AVX-512F, else plain loops.
    Masked,
}

impl PermRoute {
    pub(super) fn resolve(self) -> PermRoute {
        match self {
            PermRoute::Auto if masked_pair_sums_has_avx512() => PermRoute::Masked,
            PermRoute::Auto => PermRoute::Product,
            other => other,
        }
    }
}

pub(super) fn permutation_statistics_by(
    kc: &CentredKernel,
    ns: usize,
    seeds: &[u64],
    route: PermRoute,
) -> (f64, Vec<f64>, f64) {
    let n = kc.n;
    let nt = n - ns;
    let total = kc.total;
    let frac = ns as f64 / n as f64;
    let stat = |s_xx: f64, rp: f64| mmd2_from_sums(s_xx, rp - s_xx, total, ns, nt);
    let rp_obs: f64 = kc.r.iter().zip(&kc.src).map(|(r, w)| r * w).sum();
    let observed = stat(kc.s_xx_first, rp_obs);
    let (mf, nf) = (ns as f64, nt as f64);
    let a = 1.0 / (mf * (mf - 1.0)) + 1.0 / (nf * (nf - 1.0)) + 2.0 / (mf * nf);
    let big = mf.max(nf);
    let err = a * f64::from(f32::EPSILON) / 2.0 * (kc.rms * big.powf(1.5) / 2.0 + big);
    if route.resolve() == PermRoute::Masked {
        return (observed, masked_statistics(kc, ns, seeds, stat), err);
    }
    let lower = MatRef::from_row_major_slice(kc.lower.as_slice(), n, n);
    let perm_stats: Vec<f64> = seeds
        .par_chunks(perm_batch_width(seeds.len()))
        .flat_map_iter(|batch| {
            let b = batch.len();
            let mut p = Mat::<f32>::zeros(n, b);
            let mut idx = Vec::with_capacity(n);
            for (c, &s) in batch.iter().enumerate() {
                for pos in relabelled_positions(kc, ns, s, &mut idx) {
                    p[(pos, c)] = 1.0;
                }
            }
            let mut y = Mat::<f32>::zeros(n, b);
            triangular::matmul(
                y.as_mut(),
                BlockStructure::Rectangular,
                Accum::Replace,
                lower,
                BlockStructure::StrictTriangularLower,
                p.as_ref(),
                BlockStructure::Rectangular,
                1.0f32,
                Par::Seq,
            );
            (0..b)
                .map(|c| {
                    // Weights 0 or 1: a product with them and an added 0 are exact, so this
                    // branch-free loop gives the sums over the selected rows bit for bit.
                    let pc = p
                        .col(c)
                        .try_as_col_major()
                        .expect("Mat columns are contiguous");
                    let yc = y
                        .col(c)
                        .try_as_col_major()
                        .expect("Mat columns are contiguous");
                    let (mut q, mut rp) = (0.0, 0.0);
                    for (((w, yi), di), ri) in pc
                        .as_slice()
                        .iter()
                        .zip(yc.as_slice())
                        .zip(&kc.diag)
                        .zip(&kc.r)
                    {
                        let w = f64::from(*w);
                        q += w * (2.0 * f64::from(*yi) + di);
                        rp += w * ri;
                    }
                    let s_xx = q + 2.0 * frac * rp - frac * frac * total;
                    stat(s_xx, rp)
                })
                .collect::<Vec<f64>>()
        })
        .collect();
    (observed, perm_stats, err)
}

/// The relabelled statistics of [`permutation_statistics`] by the masked route: each relabelling
/// is a bit mask over the matrix positions, and for each batch of relabellings (in parallel, as
/// on the product route) [`masked_pair_sums`] gives sum_{i < j selected} K~_ij; the diagonal and
/// r'p terms are f64 sums over the selected positions. Every relabelling's sums run over its rows
/// in ascending order whatever the batch, so results do not depend on the thread count.
pub(super) fn masked_statistics(
    kc: &CentredKernel,
    ns: usize,
    seeds: &[u64],
    stat: impl Fn(f64, f64) -> f64 + Sync,
) -> Vec<f64> {
    let n = kc.n;
    let frac = ns as f64 / n as f64;
    let words = n.div_ceil(16);
    seeds
        .par_chunks(perm_batch_width(seeds.len()))
        .flat_map_iter(|batch| {
            let b = batch.len();
            // One extra all-zero mask pads the last group of a row (see masked_pair_sums).
            let mut bits = vec![0u16; (b + 1) * words];
            // Per relabelling, the f64 sums of K~_ii and r_i over its selected positions.
            let mut diag_r = vec![(0.0, 0.0); b];
            let mut idx = Vec::with_capacity(n);
            for (c, &s) in batch.iter().enumerate() {
                let mask = &mut bits[c * words..(c + 1) * words];
                let (mut dp, mut rp) = (0.0, 0.0);
                for p in relabelled_positions(kc, ns, s, &mut idx) {
                    mask[p / 16] |= 1 << (p % 16);
                    dp += kc.diag[p];
                    rp += kc.r[p];
                }
                diag_r[c] = (dp, rp);
            }
            let pairs = masked_pair_sums(kc.lower.as_slice(), n, &bits, words, b);
            pairs
                .iter()
                .zip(diag_r)
                .map(|(pair, (dp, rp))| {
                    let s_xx = 2.0 * pair + dp + 2.0 * frac * rp - frac * frac * kc.total;
                    stat(s_xx, rp)
                })
                .collect::<Vec<f64>>()
        })
        .collect()
}

/// The matrix positions of the `ns` pooled rows that the relabelling with seed `seed` calls
/// "source" (a seeded shuffle of the pooled rows; `idx` is scratch).
pub(super) fn relabelled_positions<'a>(
    kc: &'a CentredKernel,
    ns: usize,
    seed: u64,
    idx: &'a mut Vec<usize>,
) -> impl Iterator<Item = usize> + 'a {
    idx.clear();
    idx.extend(0..kc.n);
    idx.shuffle(&mut rng(seed));
    idx[..ns].iter().map(|&i| kc.pos[i])
}

/// Columns per batch of the permutation products for `b` permutations: at most
/// [`PERM_BATCH_MAX`], and at least [`PERM_BATCHES_MIN`] batches of 32 or more columns when `b`
/// allows, all of equal width but the last.
pub(super) fn perm_batch_width(b: usize) -> usize {
    let batches = b
        .div_ceil(PERM_BATCH_MAX)
        .max(b.div_ceil(32).min(PERM_BATCHES_MIN))
        .max(1);
    b.div_ceil(batches).max(1)
}

/// (1 + #{permuted >= observed}) / (1 + permutations), with a tolerance so that relabellings
/// equal to the observed one up to rounding count as ties (discrete data has exact ties): 1e-12
/// relative plus [`TIE_ERRORS`] times `err`, the modelled f32 error of a relabelled statistic.
/// Counting a near-tie only raises p (conservative); at about 1e-5 of the permutation spread
/// (N = 4,000) it adds a count with a chance near B x 1e-5 x 0.5.
pub(super) fn permutation_p_value(observed: f64, permuted: &[f64], err: f64) -> f64 {
    let tol = 1e-12 * observed.abs().max(1e-12) + TIE_ERRORS * err;
    let exceed = permuted.iter().filter(|v| **v >= observed - tol).count();
    (1 + exceed) as f64 / (1 + permuted.len()) as f64
}

/// MMD^2_u from the kernel sums over source-source (s_xx, diagonal included), source-target
/// (s_xy) pairs and the total 1'K1, with unit diagonal (Gaussian kernel).
pub(super) fn mmd2_from_sums(s_xx: f64, s_xy: f64, total: f64, m: usize, n: usize) -> f64 {
    let s_yy = total - s_xx - 2.0 * s_xy;
    let (mf, nf) = (m as f64, n as f64);
    (s_xx - mf) / (mf * (mf - 1.0)) + (s_yy - nf) / (nf * (nf - 1.0)) - 2.0 * s_xy / (mf * nf)
}
