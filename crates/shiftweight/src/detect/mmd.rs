//! Kernel two-sample test with the maximum mean discrepancy (Gretton, Borgwardt, Rasch,
//! Schoelkopf, Smola 2012, "A kernel two-sample test", JMLR 13, 723-773).
//!
//! With the Gaussian kernel k(x, y) = exp(-||x - y||^2 / (2 sigma^2)) on features standardised on
//! the pooled rows, sigma the median pairwise distance unless given (median heuristic; Garreau et
//! al. 2017), source rows x_1..x_m and target rows y_1..y_n, the unbiased estimate is
//!
//! MMD^2_u = 1/(m(m-1)) sum_{i != j} k(x_i, x_j) + 1/(n(n-1)) sum_{i != j} k(y_i, y_j)
//!           - 2/(mn) sum_{i, j} k(x_i, y_j)
//!
//! (Gretton et al. 2012, eq. 3). Two routes, chosen by the pooled row count N = m + n:
//! - N <= `max_kernel_rows` (default 5,000): the N x N kernel matrix K is computed once (its
//!   lower triangle only). For a 0/1 indicator p of the rows called "source", s_XX = p'Kp,
//!   s_XY = r'p - s_XX (r = K 1) and s_YY = 1'K1 - s_XX - 2 s_XY give MMD^2_u. K being
//!   symmetric, only its strict lower triangle L enters (p'Kp = 2 p'Lp + sum_i p_i K_ii). The
//!   relabellings run in f32 in batches, in parallel (see "Precision" below), by one of two
//!   routes that compute the same sums:
//!   - masked sums (the default on CPUs with AVX-512F): p'Lp is the sum of L_ij over pairs of
//!     selected rows j < i, so only the rows a relabelling selects are visited, and within them
//!     only the selected columns are added, under the relabelling's bit mask. That is about
//!     N^2 / 8 additions per relabelling. For each row, the relabellings selecting it are taken
//!     12 at a time, so each piece of the row is loaded once for 12 masked adds.
//!   - a dense product (elsewhere): the B indicator columns as one matrix P and L P by faer's
//!     triangular matmul, N^2 / 2 multiply-adds per relabelling, half of them by a 0 indicator.
//!
//!   Measured on the 2-core AMD EPYC (Zen 4) test machine, 2,000 + 2,000 rows, 1,000
//!   relabellings: the permutation part took 0.06 s by masked sums against 0.11 s by the
//!   product. The p-value is (1 + #{MMD^2_b >= MMD^2}) / (1 + B): exact level under the null.
//!   Time O(N^2 d / 2 + N^2 B / 8) (masked) or O(N^2 d / 2 + N^2 B / 2) (product), memory N^2 f32
//!   values (100 MB at N = 5,000) plus O(N * 256) per thread.
//!
//!   Precision. The observed statistic, r and 1'K1 are f64 sums. The relabelled statistics use
//!   f32 for the kernel and the sums along a row (the 0/1 indicators are exact in f32; the masked
//!   route spreads a row's sum over 16 lanes) and f64 for the sums over rows. MMD^2_u is s_XX
//!   times a = 1/(m(m-1)) + 1/(n(n-1)) + 2/(mn) (about (1/m + 1/n)^2) plus f64 terms in r'p and 1'K1, so an error e in s_XX moves the statistic by
//!   a e. To keep e small the f32 matrix is the doubly centred K~ = HKH (H = I - 11'/N), using
//!   p'Kp = p'K~p + 2 (m/N) r'p - (m/N)^2 1'K1 (exact algebra, since 1'p = m): the rows of K~ sum
//!   to zero, so the partial sums of a row of K~ P grow like a random walk (about
//!   rms(K~) sqrt(k) after k terms) instead of like k. With unit roundoff u = 2^-24 and rounding
//!   errors modelled as independent and mean-zero (the probabilistic model of Higham & Mary 2019,
//!   "A new approach to probabilistic rounding error analysis", SIAM J. Sci. Comput. 41(5);
//!   cited from memory), the accumulation error of p'K~p has a standard deviation of about
//!   u rms(K~) m^1.5 / 2, and the f32 storage of K and K~ adds only of order u m, so the statistic
//!   errs by about 2 u rms(K~) m^-0.5 (m = n). The permutation spread of MMD^2_u shrinks like
//!   1/m, so the error is of order u sqrt(m) = 6e-8 sqrt(m) times the spread, i.e. a few 1e-6 of
//!   it for m up to 2,500. A p-value changes only if a relabelled statistic lies within that error
//!   of the observed one: for B = 1,000 about B x 2 x 1e-6 x (density <= about 0.5 / sd), a
//!   chance near 1e-3 of a change of 1 / (1 + B), far below the p-value's own Monte Carlo error.
//!   The random-walk picture needs the rows in random order: the matrix is built on a seeded
//!   shuffle of the pooled rows (the relabellings are unchanged). Without it, inputs sorted on a
//!   feature gave errors near 1e-5 of the spread. Measured (test
//!   `f32_permutation_statistics_match_f64_reference`, 900 + 1,100 rows in 3 features, no shift):
//!   largest error of 200 relabelled statistics 6.8e-10 (rows in random order) and 6.0e-10 (rows
//!   sorted on a feature) against sds 5.2e-4 and 4.9e-4, i.e. 1.3e-6 and 1.2e-6 of the spread;
//!   the modelled error a u (rms(K~) m^1.5 / 2 + m) was 1.0e-9. p-values equal the f64 ones.
//!   Exact ties (discrete data) stay ties: the p-value counts relabelled statistics within
//!   1e-12 relative plus 10 modelled errors of the observed one (conservative).
//! - N > `max_kernel_rows`: the block estimator (Zaremba, Gretton, Blaschko 2013, "B-test: a
//!   non-parametric, low variance kernel two-sample test", NIPS 26): source and target rows are
//!   shuffled (seeded) and dealt into L disjoint blocks of about `block_size` rows (default
//!   sqrt(N), between 50 and 250) keeping the sample proportions; the statistic is the mean of the
//!   L block estimates MMD^2_u. Its p-value comes from relabelling: in every block the pooled
//!   rows are split at random (independently across blocks, each block keeping its numbers of
//!   source and target rows) and the mean of the block statistics recomputed, B times;
//!   p = (1 + #{mean_b >= mean}) / (1 + B). Under the null the rows of a block are exchangeable
//!   given the (random, data-independent) block assignment, so the relabelled means have the
//!   same distribution as the observed one and the level is exact for any number of blocks
//!   (the stratified permutation test; Lehmann & Romano 2005, "Testing Statistical Hypotheses",
//!   section 15.2). Each block's kernel matrix is computed once and its B relabellings cost one
//!   product with a block_size x B indicator matrix, as above.
//!
//!   Why not the normal reference of the B-test paper: a block estimate of MMD^2_u is a degenerate
//!   U-statistic under the null, a weighted sum of centred chi-square variables (Gretton et al.
//!   2012, theorem 12), so it is skewed to the right, and with few blocks its mean and its spread
//!   grow together (measured over 300 null replicates of 16 blocks of 25 + 25 rows in 2
//!   features: skewness of a block estimate 1.8, correlation of the mean and the sd of the 16
//!   block estimates 0.69). The studentised mean mean / (sd / sqrt(L)) is then skewed to the left
//!   and Student's t overstates its upper tail: with 16 blocks of 50 rows the t-test rejected 4
//!   (and in a second run 5) of 300 null replicates at alpha = 0.05, below the binomial 99%
//!   interval 6 to 25. The normal limit only
//!   holds as L grows; relabelling within blocks needs no limit.
//!
//!   Time O(N * block_size * (d + B)), memory O(block_size^2 + block_size * 256) per thread plus
//!   O(L * B) for the relabelled statistics.

use super::{pooled_standardized, PValueMethod, ShiftDetails, ShiftTestResult};
use crate::data::{validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::kernel::{self, rng};
use faer::linalg::matmul::triangular::{self, BlockStructure};
use faer::{Accum, Mat, MatRef, Par};
use rand::seq::SliceRandom;
use rand::RngCore;
use rayon::prelude::*;

const TAG_MEDIAN: u64 = 0x6d6d_645f_6d65_6469;
const TAG_PERM: u64 = 0x6d6d_645f_7065_726d;
const TAG_BLOCK: u64 = 0x6d6d_645f_626c_6f63;
const TAG_BLOCK_PERM: u64 = 0x6d6d_645f_6270_6572;
const TAG_ORDER: u64 = 0x6d6d_645f_6f72_6472;
/// Tie tolerance of the p-value in units of the modelled f32 error of a relabelled statistic.
const TIE_ERRORS: f64 = 10.0;
/// Most permutation columns multiplied with the kernel matrix at a time (wider batches amortise
/// faer's packing of the kernel matrix; 256 was the fastest of 64, 128 and 256 at N = 4,000).
/// The masked route uses the same batches (128 and 512 were not faster there).
const PERM_BATCH_MAX: usize = 256;
/// Fewest batches (when there are at least 32 permutations each), so that a few cores share the
/// products. Batch widths depend only on the number of permutations, never on the thread count.
const PERM_BATCHES_MIN: usize = 4;
/// Rows per chunk when the kernel matrix is built (fixed, never derived from the thread count;
/// 64 rows keep the f64 scratch of a chunk at N = 4,000 to 2 MB, near the cache).
const KERNEL_CHUNK: usize = 64;

/// Configuration of the MMD two-sample test. See the module docs.
#[derive(Debug, Clone, PartialEq)]
pub struct MmdShiftTest {
    /// Kernel width in standardised units; `None` (default) uses the median heuristic.
    pub sigma: Option<f64>,
    /// Label permutations (>= 1; default 200).
    pub permutations: usize,
    /// Largest pooled row count for the full kernel matrix (default 5,000, i.e. 100 MB of f32).
    pub max_kernel_rows: usize,
    /// Rows per block for the block estimator; `None` (default) uses sqrt(N) within [50, 1000].
    pub block_size: Option<usize>,
    /// Seed of the median subsample, the permutations and the blocks (default 0).
    pub seed: u64,
}

impl Default for MmdShiftTest {
    fn default() -> Self {
        Self {
            sigma: None,
            permutations: 200,
            max_kernel_rows: 5_000,
            block_size: None,
            seed: 0,
        }
    }
}

impl MmdShiftTest {
    /// Defaults: median-heuristic width, 200 permutations, full kernel up to 5,000 pooled rows.
    pub fn new() -> Self {
        Self::default()
    }
    /// Fixed kernel width (> 0) in standardised units.
    pub fn sigma(mut self, sigma: Option<f64>) -> Self {
        self.sigma = sigma;
        self
    }
    /// Number of label permutations (>= 1).
    pub fn permutations(mut self, b: usize) -> Self {
        self.permutations = b;
        self
    }
    /// Pooled-row threshold between the full kernel matrix and the block estimator.
    pub fn max_kernel_rows(mut self, n: usize) -> Self {
        self.max_kernel_rows = n;
        self
    }
    /// Rows per block for the block estimator (>= 4).
    pub fn block_size(mut self, b: Option<usize>) -> Self {
        self.block_size = b;
        self
    }
    /// Seed of every random step.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Runs the test of `source` against `target` (same columns, at least 2 rows each).
    pub fn run(&self, source: MatrixView, target: MatrixView) -> Result<ShiftTestResult> {
        if let Some(s) = self.sigma {
            kernel::check_sigma("sigma", s)?;
        }
        if self.permutations == 0 {
            return Err(Error::param("permutations", "must be at least 1"));
        }
        if let Some(b) = self.block_size {
            if b < 4 {
                return Err(Error::param(
                    "block_size",
                    format!("must be at least 4, got {b}"),
                ));
            }
        }
        validate_pair(&source, &target, 2)?;
        let (ns, nt) = (source.rows(), target.rows());
        let n = ns + nt;
        let (z, _) = pooled_standardized(source, target);
        let zv = z.view();
        let (sigma, from_median) = match self.sigma {
            Some(s) => (s, false),
            None => (kernel::median_distance(&[zv], self.seed ^ TAG_MEDIAN), true),
        };
        if n <= self.max_kernel_rows {
            self.quadratic(zv, ns, nt, sigma, from_median, source.cols())
        } else {
            self.blocks(zv, ns, nt, sigma, from_median, source.cols())
        }
    }

    fn quadratic(
        &self,
        z: MatrixView,
        ns: usize,
        nt: usize,
        sigma: f64,
        from_median: bool,
        d: usize,
    ) -> Result<ShiftTestResult> {
        let n = ns + nt;
        let kc = centred_kernel(z, sigma, ns, self.seed ^ TAG_ORDER);
        let mut gen = rng(self.seed ^ TAG_PERM);
        let seeds: Vec<u64> = (0..self.permutations).map(|_| gen.next_u64()).collect();
        let (observed, perm_stats, err) = permutation_statistics(&kc, ns, &seeds);
        let p_value = permutation_p_value(observed, &perm_stats, err);
        Ok(ShiftTestResult {
            method: "mmd".into(),
            statistic: observed,
            p_value,
            p_value_method: PValueMethod::Permutation,
            permutations: self.permutations,
            n_source: ns,
            n_target: nt,
            n_features: d,
            seed: self.seed,
            details: ShiftDetails::Mmd {
                mmd2: observed,
                sigma,
                sigma_from_median: from_median,
                estimator: "quadratic".into(),
                blocks: 0,
                block_size: 0,
            },
            notes: vec![format!(
                "unbiased MMD^2 over all pairs of the {n} pooled rows; p-value from {} label permutations",
                self.permutations
            )],
        })
    }

    fn blocks(
        &self,
        z: MatrixView,
        ns: usize,
        nt: usize,
        sigma: f64,
        from_median: bool,
        d: usize,
    ) -> Result<ShiftTestResult> {
        let n = ns + nt;
        let size = self
            .block_size
            .unwrap_or_else(|| ((n as f64).sqrt().round() as usize).clamp(50, 250));
        // Each block needs two rows of each sample.
        let most_blocks = (ns / 2).min(nt / 2);
        let n_blocks = (n / size).min(most_blocks);
        if n_blocks < 2 {
            return Err(Error::TooFewRows {
                argument: "source and target (block estimator)".into(),
                found: ns.min(nt),
                required: 4,
            });
        }
        let mut gen = rng(self.seed ^ TAG_BLOCK);
        let mut si: Vec<usize> = (0..ns).collect();
        let mut ti: Vec<usize> = (ns..n).collect();
        si.shuffle(&mut gen);
        ti.shuffle(&mut gen);
        let part = |v: &[usize], b: usize| -> Vec<usize> {
            let len = v.len();
            v[b * len / n_blocks..(b + 1) * len / n_blocks].to_vec()
        };
        // One seed per block; block b draws its own `permutations` relabellings from it.
        let mut pgen = rng(self.seed ^ TAG_BLOCK_PERM);
        let block_seeds: Vec<u64> = (0..n_blocks).map(|_| pgen.next_u64()).collect();
        let per_block: Vec<(f64, Vec<f64>, f64)> = (0..n_blocks)
            .into_par_iter()
            .map(|b| {
                let xs = part(&si, b);
                let ys = part(&ti, b);
                let mut rows = xs.clone();
                rows.extend_from_slice(&ys);
                let sub = z.select_rows(&rows);
                let kc = centred_kernel(sub.view(), sigma, xs.len(), block_seeds[b] ^ TAG_ORDER);
                let mut g = rng(block_seeds[b]);
                let seeds: Vec<u64> = (0..self.permutations).map(|_| g.next_u64()).collect();
                permutation_statistics(&kc, xs.len(), &seeds)
            })
            .collect();
        let l = n_blocks as f64;
        // Sums in block order: identical for any thread count.
        let mean = per_block.iter().map(|(o, _, _)| o).sum::<f64>() / l;
        let perm_means: Vec<f64> = (0..self.permutations)
            .map(|r| per_block.iter().map(|(_, p, _)| p[r]).sum::<f64>() / l)
            .collect();
        // The error of a mean is at most the mean of the errors.
        let err = per_block.iter().map(|(_, _, e)| e).sum::<f64>() / l;
        let p_value = permutation_p_value(mean, &perm_means, err);
        Ok(ShiftTestResult {
            method: "mmd".into(),
            statistic: mean,
            p_value,
            p_value_method: PValueMethod::BlockPermutation,
            permutations: self.permutations,
            n_source: ns,
            n_target: nt,
            n_features: d,
            seed: self.seed,
            details: ShiftDetails::Mmd {
                mmd2: mean,
                sigma,
                sigma_from_median: from_median,
                estimator: "block".into(),
                blocks: n_blocks,
                block_size: n / n_blocks,
            },
            notes: vec![format!(
                "{n} pooled rows exceed max_kernel_rows = {}: mean of {n_blocks} block estimates of MMD^2 \
                 (about {} rows each); p-value from {} relabellings of the rows within every block",
                self.max_kernel_rows,
                n / n_blocks,
                self.permutations
            )],
        })
    }
}

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
fn permutation_statistics(kc: &CentredKernel, ns: usize, seeds: &[u64]) -> (f64, Vec<f64>, f64) {
    permutation_statistics_by(kc, ns, seeds, PermRoute::Auto)
}

/// How the relabelled quadratic forms p'L~p are computed; both give the same sums up to f32
/// rounding (test `both_permutation_routes_agree_with_the_f64_reference`).
#[derive(Debug, Clone, Copy, PartialEq)]
enum PermRoute {
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
    fn resolve(self) -> PermRoute {
        match self {
            PermRoute::Auto if masked_sums_fast() => PermRoute::Masked,
            PermRoute::Auto => PermRoute::Product,
            other => other,
        }
    }
}

fn permutation_statistics_by(
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
fn masked_statistics(
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
fn relabelled_positions<'a>(
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

/// Whether [`masked_pair_sums`] has its vector version on this CPU (AVX-512F).
fn masked_sums_fast() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx512f")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Relabellings processed together for one row of L~: each 16-value piece of the row is loaded
/// once and added under this many masks. Measured on the AMD EPYC (Zen 4) test machine, one
/// thread, a 4,096-value row: 0.30 / 0.29 / 0.37 ns per masked add for groups of 8 / 12 / 16
/// (at 16 the mask pointers no longer fit in registers).
#[cfg(target_arch = "x86_64")]
const MASK_GROUP: usize = 12;

/// For relabellings c = 0..b given as bit masks over the N matrix positions (`bits`, `words` =
/// ceil(N / 16) u16 words per relabelling, bit i % 16 of word i / 16 set when position i is
/// selected, then one all-zero mask), the sums over selected pairs of the strict lower triangle,
/// sum_{i selected} sum_{j < i selected} L~_ij, one per relabelling.
///
/// Only rows a relabelling selects contribute, and within them only selected columns, so a
/// relabelling needs about N^2 / 8 additions instead of the N^2 / 2 multiply-adds of a column of
/// L~ P. For each row i, the relabellings that select it are taken in groups of [`MASK_GROUP`];
/// each 16-value piece of the row is loaded once and added into each group member's f32
/// accumulator under that member's 16 mask bits (AVX-512 masked adds). A row's 16 lanes are then
/// summed in f32 (like the f32 dot product that gives an entry of L~ P) and added to the
/// relabelling's f64 total, rows in ascending order. Zero padding masks fill the last group.
/// Time O(N^2 b / 8 + N b); the row and the group's masks stay in the L1 cache.
fn masked_pair_sums(lower: &[f32], n: usize, bits: &[u16], words: usize, b: usize) -> Vec<f64> {
    assert_eq!(lower.len(), n * n);
    assert_eq!(bits.len(), (b + 1) * words);
    assert!(words * 16 >= n);
    #[cfg(target_arch = "x86_64")]
    if masked_sums_fast() {
        // SAFETY: AVX-512F was just detected; the slice lengths were checked above.
        return unsafe { masked_pair_sums_avx512(lower, n, bits, words, b) };
    }
    masked_pair_sums_portable(lower, n, bits, words, b)
}

/// [`masked_pair_sums`] in plain Rust, with the same f32 additions in the same order as the
/// AVX-512 version (16 lanes, pieces in ascending order, the same reduction tree
/// [`reduce_lanes`]), so both give bitwise equal sums. Used where AVX-512F is missing (the product
/// route is the default there) and as the check of the vector code.
fn masked_pair_sums_portable(
    lower: &[f32],
    n: usize,
    bits: &[u16],
    words: usize,
    b: usize,
) -> Vec<f64> {
    let mut out = vec![0.0f64; b];
    for i in 1..n {
        let row = &lower[i * n..i * n + i];
        for (c, o) in out.iter_mut().enumerate() {
            let mask = &bits[c * words..(c + 1) * words];
            if (mask[i / 16] >> (i % 16)) & 1 == 0 {
                continue;
            }
            let mut lanes = [0.0f32; 16];
            for (k, word) in mask.iter().enumerate().take(i.div_ceil(16)) {
                for (l, lane) in lanes.iter_mut().enumerate() {
                    let j = 16 * k + l;
                    if (word >> l) & 1 == 1 {
                        *lane += if j < i { row[j] } else { 0.0 };
                    }
                }
            }
            *o += f64::from(reduce_lanes(&lanes));
        }
    }
    out
}

/// The sum of 16 f32 lanes by a fixed tree: t_m = (l_m + l_{8+m}) + (l_{4+m} + l_{12+m}) for
/// m = 0..4, then (t_0 + t_2) + (t_1 + t_3). The AVX-512 code reduces its accumulators in this
/// order.
fn reduce_lanes(l: &[f32; 16]) -> f32 {
    let t: [f32; 4] = std::array::from_fn(|m| (l[m] + l[8 + m]) + (l[4 + m] + l[12 + m]));
    (t[0] + t[2]) + (t[1] + t[3])
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
unsafe fn masked_pair_sums_avx512(
    lower: &[f32],
    n: usize,
    bits: &[u16],
    words: usize,
    b: usize,
) -> Vec<f64> {
    let mut out = vec![0.0f64; b];
    let mut sel: Vec<usize> = vec![b; b + MASK_GROUP];
    for i in 1..n {
        let (wk, shift) = (i / 16, i % 16);
        // The relabellings selecting row i, without branches (the bits are random).
        let mut real = 0;
        for c in 0..b {
            sel[real] = c;
            real += usize::from((bits[c * words + wk] >> shift) & 1);
        }
        if real == 0 {
            continue;
        }
        // Pad to whole groups with the all-zero mask b; its sums are dropped.
        let len = real.div_ceil(MASK_GROUP) * MASK_GROUP;
        sel[real..len].fill(b);
        let sel = &sel[..len];
        // SAFETY: i < n, so row i starts inside `lower` (length n * n).
        let row = unsafe { lower.as_ptr().add(i * n) };
        for group in sel.chunks_exact(MASK_GROUP) {
            // SAFETY: every index in `sel` is <= b and `bits` holds (b + 1) * words words.
            let masks: [*const u16; MASK_GROUP] =
                std::array::from_fn(|m| unsafe { bits.as_ptr().add(group[m] * words) });
            // SAFETY: the row has i <= n - 1 values after `row`; every mask has `words` >
            // i / 16 words.
            let sums = unsafe { masked_group_sums(row, i, &masks) };
            for (&c, sum) in group.iter().zip(sums) {
                // Index b is the padding mask.
                if c < b {
                    out[c] += f64::from(sum);
                }
            }
        }
    }
    out
}

/// Sums of the first `len` values at `row` under each of the masks (bit l of word k selects value
/// 16 k + l), each in 16 f32 lanes reduced at the end.
///
/// # Safety
/// AVX-512F must be available; `row` must be valid for `len` reads and every mask for
/// `len.div_ceil(16)` reads.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
#[inline]
unsafe fn masked_group_sums(
    row: *const f32,
    len: usize,
    masks: &[*const u16; MASK_GROUP],
) -> [f32; MASK_GROUP] {
    use std::arch::x86_64::*;
    let (full, tail) = (len / 16, len % 16);
    let mut acc = [_mm512_setzero_ps(); MASK_GROUP];
    for k in 0..full {
        // SAFETY: 16 k + 16 <= len values are valid at `row` (caller's contract).
        let piece = unsafe { _mm512_loadu_ps(row.add(16 * k)) };
        for (a, m) in acc.iter_mut().zip(masks) {
            // SAFETY: k < len.div_ceil(16), the words valid at every mask (caller's contract).
            *a = _mm512_mask_add_ps(*a, unsafe { *m.add(k) }, *a, piece);
        }
    }
    if tail > 0 {
        // SAFETY: the masked load reads only the `tail` values at 16 full .. len, which are
        // valid; masked-off lanes are not accessed.
        let piece = unsafe { _mm512_maskz_loadu_ps((1u16 << tail) - 1, row.add(16 * full)) };
        for (a, m) in acc.iter_mut().zip(masks) {
            // SAFETY: full = len.div_ceil(16) - 1 here, a valid word of every mask.
            *a = _mm512_mask_add_ps(*a, unsafe { *m.add(full) }, *a, piece);
        }
    }
    acc.map(|a| {
        // The tree of reduce_lanes: quarters q_k = lanes 4k..4k+4, (q0 + q2) + (q1 + q3), then
        // lanes (0 + 2) and (1 + 3), then their sum.
        let q = |k| match k {
            0 => _mm512_extractf32x4_ps::<0>(a),
            1 => _mm512_extractf32x4_ps::<1>(a),
            2 => _mm512_extractf32x4_ps::<2>(a),
            _ => _mm512_extractf32x4_ps::<3>(a),
        };
        let t = _mm_add_ps(_mm_add_ps(q(0), q(2)), _mm_add_ps(q(1), q(3)));
        let u = _mm_add_ps(t, _mm_movehl_ps(t, t));
        _mm_cvtss_f32(u) + _mm_cvtss_f32(_mm_shuffle_ps::<1>(u, u))
    })
}

/// Columns per batch of the permutation products for `b` permutations: at most
/// [`PERM_BATCH_MAX`], and at least [`PERM_BATCHES_MIN`] batches of 32 or more columns when `b`
/// allows, all of equal width but the last.
fn perm_batch_width(b: usize) -> usize {
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
fn permutation_p_value(observed: f64, permuted: &[f64], err: f64) -> f64 {
    let tol = 1e-12 * observed.abs().max(1e-12) + TIE_ERRORS * err;
    let exceed = permuted.iter().filter(|v| **v >= observed - tol).count();
    (1 + exceed) as f64 / (1 + permuted.len()) as f64
}

/// MMD^2_u from the kernel sums over source-source (s_xx, diagonal included), source-target
/// (s_xy) pairs and the total 1'K1, with unit diagonal (Gaussian kernel).
fn mmd2_from_sums(s_xx: f64, s_xy: f64, total: f64, m: usize, n: usize) -> f64 {
    let s_yy = total - s_xx - 2.0 * s_xy;
    let (mf, nf) = (m as f64, n as f64);
    (s_xx - mf) / (mf * (mf - 1.0)) + (s_yy - nf) / (nf * (nf - 1.0)) - 2.0 * s_xy / (mf * nf)
}

/// The Gaussian kernel matrix K of the pooled rows (unit diagonal) in the form the permutation
/// products use: the doubly centred K~ = HKH (H = I - 11'/N) as its strict lower triangle in f32
/// plus its diagonal in f64, and in f64 the row sums r = K 1, the total 1'K1 and the kernel sum
/// over the first `ns` rows.
struct CentredKernel {
    n: usize,
    /// Position in the matrix of each pooled row (a seeded shuffle; see [`centred_kernel`]).
    pos: Vec<usize>,
    /// 1.0 at the positions of the first `ns` pooled rows (the observed source rows), else 0.0.
    src: Vec<f64>,
    /// Root mean square of the off-diagonal entries of K~.
    rms: f64,
    /// Row-major N x N; entry (i, j), j < i, holds K~_ij rounded to f32; the rest is zero.
    lower: ZeroedBuffer,
    /// K~_ii = 1 - 2 c_i with c_i = r_i / N - 1'K1 / (2 N^2).
    diag: Vec<f64>,
    r: Vec<f64>,
    total: f64,
    /// 1'K1 over the first `ns` rows (diagonal included).
    s_xx_first: f64,
}

/// Builds [`CentredKernel`] for the rows of `z`, the first `ns` of them the source rows, placed in
/// a seeded random order (`order_seed`): the f32 sums along a row of K~ P then run over a random
/// subset of rows whatever the input order, which keeps their partial sums random walks (with
/// inputs sorted on a feature they would drift, and the f32 error was measured 10 times larger).
/// Only the
/// strict lower triangle of K is evaluated (with the shared vectorised kernel helper, in f64), in
/// fixed chunks of [`KERNEL_CHUNK`] rows, in parallel; partial sums are combined in chunk order, so
/// the result is bitwise identical for any thread count. O(N^2 d / 2) time; N^2 f32 values plus
/// a KERNEL_CHUNK x N f64 scratch per thread.
fn centred_kernel(z: MatrixView, sigma: f64, ns: usize, order_seed: u64) -> CentredKernel {
    let n = z.rows();
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut rng(order_seed));
    let mut pos = vec![0; n];
    for (k, &i) in order.iter().enumerate() {
        pos[i] = k;
    }
    let src: Vec<f64> = order.iter().map(|&i| f64::from(u8::from(i < ns))).collect();
    let shuffled = z.select_rows(&order);
    let z = shuffled.view();
    let z_sq = kernel::row_sq_norms(z);
    let mut lower_buf = ZeroedBuffer::new(n * n);
    let lower: &mut [f32] = lower_buf.as_mut_slice();
    // Per chunk of rows s..e: the strictly lower row sums, the column sums over columns 0..e.
    let parts: Vec<(Vec<f64>, Vec<f64>, f64)> = lower
        .par_chunks_mut(KERNEL_CHUNK * n)
        .enumerate()
        .map_init(Vec::new, |buf: &mut Vec<f64>, (c, out)| {
            let s = c * KERNEL_CHUNK;
            let e = (s + KERNEL_CHUNK).min(n);
            buf.resize((e - s) * e, 0.0);
            kernel::kernel_block_into(
                z.slice_rows(s, e),
                z.slice_rows(0, e),
                &z_sq[..e],
                sigma,
                buf,
            );
            let mut rows = Vec::with_capacity(e - s);
            let mut cols = vec![0.0; e];
            let mut xx = 0.0;
            kernel::with_wide_simd(|| {
                for i in s..e {
                    let k_row = &buf[(i - s) * e..(i - s) * e + i];
                    rows.push(sum_f64(k_row));
                    if src[i] == 1.0 {
                        xx += k_row.iter().zip(&src).map(|(k, w)| k * w).sum::<f64>();
                    }
                    for (cj, v) in cols.iter_mut().zip(k_row) {
                        *cj += v;
                    }
                    for (o, v) in out[(i - s) * n..(i - s) * n + i].iter_mut().zip(k_row) {
                        *o = *v as f32;
                    }
                }
            });
            (rows, cols, xx)
        })
        .collect();
    let mut r = vec![1.0; n];
    let mut lower_xx = 0.0;
    for (c, (rows, cols, xx)) in parts.iter().enumerate() {
        let s = c * KERNEL_CHUNK;
        for (k, v) in rows.iter().enumerate() {
            r[s + k] += v;
        }
        lower_xx += xx;
        for (rj, v) in r.iter_mut().zip(cols) {
            *rj += v;
        }
    }
    let total = sum_f64(&r);
    let nf = n as f64;
    let shift = total / (2.0 * nf * nf);
    let cen: Vec<f64> = r.iter().map(|ri| ri / nf - shift).collect();
    let sq_parts: Vec<f64> = lower
        .par_chunks_mut(KERNEL_CHUNK * n)
        .enumerate()
        .map(|(c, out)| {
            kernel::with_wide_simd(|| {
                let mut sq = 0.0;
                for (k, row) in out.chunks_exact_mut(n).enumerate() {
                    let i = c * KERNEL_CHUNK + k;
                    let ci = cen[i];
                    for (o, cj) in row[..i].iter_mut().zip(&cen) {
                        *o = (f64::from(*o) - ci - cj) as f32;
                    }
                    sq += row[..i].iter().map(|v| f64::from(*v).powi(2)).sum::<f64>();
                }
                sq
            })
        })
        .collect();
    let pairs = (nf * (nf - 1.0) / 2.0).max(1.0);
    let rms = (sq_parts.iter().sum::<f64>() / pairs).sqrt();
    CentredKernel {
        n,
        pos,
        src,
        rms,
        lower: lower_buf,
        diag: cen.iter().map(|c| 1.0 - 2.0 * c).collect(),
        r,
        total,
        s_xx_first: ns as f64 + 2.0 * lower_xx,
    }
}

/// Sum with four interleaved accumulators (a fixed order, so deterministic; vectorises).
fn sum_f64(v: &[f64]) -> f64 {
    let mut acc = [0.0; 4];
    let mut quads = v.chunks_exact(4);
    for q in &mut quads {
        for l in 0..4 {
            acc[l] += q[l];
        }
    }
    let tail: f64 = quads.remainder().iter().sum();
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// A zero-filled f32 buffer for the N x N kernel matrix. On Linux it is an anonymous mapping
/// aligned to 2 MiB and marked for transparent huge pages (`madvise(MADV_HUGEPAGE)`): the first
/// writes to the 32 MB lower triangle at N = 4,000 then take 16 page faults instead of about 8,000,
/// which was measured 9 ms faster of a 39 ms kernel build. Pages stay zero until written, as with
/// `vec![0.0; len]`. Elsewhere, or if the mapping fails, it is a plain `Vec`.
struct ZeroedBuffer {
    inner: ZeroedInner,
}

enum ZeroedInner {
    Heap(Vec<f32>),
    #[cfg(target_os = "linux")]
    Mapped {
        /// Start of the aligned, `len`-element region inside the mapping.
        data: std::ptr::NonNull<f32>,
        len: usize,
        /// The whole mapping, for `munmap`.
        base: *mut libc::c_void,
        bytes: usize,
    },
}

// SAFETY: the mapping is owned exclusively by this value (like a Vec's allocation); shared access
// only hands out `&[f32]` and mutable access needs `&mut self`.
unsafe impl Send for ZeroedBuffer {}
// SAFETY: as above; `&ZeroedBuffer` only gives read access.
unsafe impl Sync for ZeroedBuffer {}

impl ZeroedBuffer {
    fn new(len: usize) -> Self {
        #[cfg(target_os = "linux")]
        {
            const HUGE: usize = 2 << 20;
            if let Some(bytes) = len
                .checked_mul(std::mem::size_of::<f32>())
                .and_then(|b| b.checked_add(HUGE))
            {
                // SAFETY: an anonymous private mapping with no address hint has no preconditions;
                // the result is checked against MAP_FAILED before use.
                let base = unsafe {
                    libc::mmap(
                        std::ptr::null_mut(),
                        bytes,
                        libc::PROT_READ | libc::PROT_WRITE,
                        libc::MAP_PRIVATE | libc::MAP_ANONYMOUS,
                        -1,
                        0,
                    )
                };
                if base != libc::MAP_FAILED && len > 0 {
                    let offset = (HUGE - base as usize % HUGE) % HUGE;
                    // SAFETY: offset < HUGE and offset + 4 len <= bytes, so the region lies inside
                    // the mapping; the mapping is page-aligned, hence the region is f32-aligned.
                    let data = unsafe { base.cast::<u8>().add(offset) }.cast::<f32>();
                    // SAFETY: the range is inside the mapping just created; MADV_HUGEPAGE is only a
                    // hint, and its failure leaves ordinary pages, so the result is not checked.
                    unsafe {
                        libc::madvise(
                            data.cast(),
                            len * std::mem::size_of::<f32>(),
                            libc::MADV_HUGEPAGE,
                        )
                    };
                    if let Some(data) = std::ptr::NonNull::new(data) {
                        return Self {
                            inner: ZeroedInner::Mapped {
                                data,
                                len,
                                base,
                                bytes,
                            },
                        };
                    }
                }
                if base != libc::MAP_FAILED {
                    // SAFETY: `base` and `bytes` are the mapping just created, not used after.
                    unsafe { libc::munmap(base, bytes) };
                }
            }
        }
        Self {
            inner: ZeroedInner::Heap(vec![0.0; len]),
        }
    }

    fn as_slice(&self) -> &[f32] {
        match &self.inner {
            ZeroedInner::Heap(v) => v,
            #[cfg(target_os = "linux")]
            // SAFETY: `data` points to `len` f32 inside a live read-write mapping owned by self;
            // anonymous pages read as zero until written, and zero bits are 0.0f32.
            ZeroedInner::Mapped { data, len, .. } => unsafe {
                std::slice::from_raw_parts(data.as_ptr(), *len)
            },
        }
    }

    fn as_mut_slice(&mut self) -> &mut [f32] {
        match &mut self.inner {
            ZeroedInner::Heap(v) => v,
            #[cfg(target_os = "linux")]
            // SAFETY: as in `as_slice`, and `&mut self` makes this the only live reference.
            ZeroedInner::Mapped { data, len, .. } => unsafe {
                std::slice::from_raw_parts_mut(data.as_ptr(), *len)
            },
        }
    }
}

impl Drop for ZeroedBuffer {
    fn drop(&mut self) {
        #[cfg(target_os = "linux")]
        if let ZeroedInner::Mapped { base, bytes, .. } = self.inner {
            // SAFETY: `base` and `bytes` describe the mapping created in `new`, unmapped once.
            unsafe { libc::munmap(base, bytes) };
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::{Distribution, StandardNormal};

    fn gaussian(n: usize, d: usize, shift: f64, seed: u64) -> Vec<f64> {
        let mut r = rng(seed);
        (0..n * d)
            .map(|_| StandardNormal.sample(&mut r))
            .map(|v: f64| v + shift)
            .collect()
    }

    #[test]
    fn permutation_statistic_matches_direct_double_sum() {
        // The indicator-product form must equal the definition (Gretton et al. 2012, eq. 3)
        // evaluated pair by pair.
        let s = gaussian(7, 2, 0.0, 3);
        let t = gaussian(5, 2, 0.5, 4);
        let (sv, tv) = (
            MatrixView::new(&s, 7, 2).unwrap(),
            MatrixView::new(&t, 5, 2).unwrap(),
        );
        let r = MmdShiftTest::new()
            .sigma(Some(0.8))
            .permutations(9)
            .run(sv, tv)
            .unwrap();
        let (z, _) = pooled_standardized(sv, tv);
        let k = |a: usize, b: usize| {
            let sq: f64 = z
                .row(a)
                .iter()
                .zip(z.row(b))
                .map(|(u, v)| (u - v) * (u - v))
                .sum();
            (-sq / (2.0 * 0.64)).exp()
        };
        let (mut xx, mut yy, mut xy) = (0.0, 0.0, 0.0);
        for i in 0..12 {
            for j in 0..12 {
                match (i < 7, j < 7) {
                    (true, true) if i != j => xx += k(i, j),
                    (false, false) if i != j => yy += k(i, j),
                    (true, false) => xy += k(i, j),
                    _ => {}
                }
            }
        }
        let direct = xx / 42.0 + yy / 20.0 - 2.0 * xy / 35.0;
        assert!(
            (r.statistic - direct).abs() < 1e-12,
            "{} vs {direct}",
            r.statistic
        );
    }

    #[test]
    fn zeroed_buffer_reads_zero_and_keeps_writes() {
        for len in [0usize, 1, 1000, 3 << 20] {
            let mut buf = ZeroedBuffer::new(len);
            assert_eq!(buf.as_slice().len(), len);
            assert!(buf.as_slice().iter().all(|v| *v == 0.0));
            for (i, v) in buf.as_mut_slice().iter_mut().enumerate().step_by(997) {
                *v = i as f32;
            }
            for (i, v) in buf.as_slice().iter().enumerate() {
                assert_eq!(*v, if i % 997 == 0 { i as f32 } else { 0.0 });
            }
        }
    }

    /// Float64 reference for the relabelled statistics: the full kernel matrix in f64 and, for the
    /// same seeded shuffles, MMD^2_u from its definition (Gretton et al. 2012, eq. 3) as sums over
    /// the selected pairs.
    fn reference_f64(z: MatrixView, ns: usize, sigma: f64, seeds: &[u64]) -> Vec<f64> {
        let n = z.rows();
        let k = kernel::kernel_block(z, z, sigma);
        let (mf, nf) = (ns as f64, (n - ns) as f64);
        seeds
            .iter()
            .map(|&s| {
                let mut idx: Vec<usize> = (0..n).collect();
                idx.shuffle(&mut rng(s));
                let mut src = vec![false; n];
                for &i in &idx[..ns] {
                    src[i] = true;
                }
                let (mut xx, mut yy, mut xy) = (0.0, 0.0, 0.0);
                for i in 0..n {
                    for j in 0..n {
                        let v = k[i * n + j];
                        match (src[i], src[j]) {
                            (true, true) if i != j => xx += v,
                            (false, false) if i != j => yy += v,
                            (true, false) => xy += v,
                            _ => {}
                        }
                    }
                }
                xx / (mf * (mf - 1.0)) + yy / (nf * (nf - 1.0)) - 2.0 * xy / (mf * nf)
            })
            .collect()
    }

    /// Rows sorted on their first feature (row-major, `d` columns).
    fn sorted_rows(v: &[f64], d: usize) -> Vec<f64> {
        let mut rows: Vec<&[f64]> = v.chunks(d).collect();
        rows.sort_by(|a, b| a[0].total_cmp(&b[0]));
        rows.concat()
    }

    #[test]
    fn f32_permutation_statistics_match_f64_reference() {
        // No shift: the observed statistic sits inside the permutation distribution, where
        // rounding could move a relabelled statistic across it. Random and sorted row orders.
        for sorted in [false, true] {
            f32_against_f64(sorted);
        }
    }

    fn f32_against_f64(sorted: bool) {
        let (ns, nt, d, b) = (900, 1100, 3, 200);
        let mut s = gaussian(ns, d, 0.0, 11);
        let mut t = gaussian(nt, d, 0.0, 12);
        if sorted {
            s = sorted_rows(&s, d);
            t = sorted_rows(&t, d);
        }
        let (sv, tv) = (
            MatrixView::new(&s, ns, d).unwrap(),
            MatrixView::new(&t, nt, d).unwrap(),
        );
        let test = MmdShiftTest::new().permutations(b).seed(5);
        let res = test.run(sv, tv).unwrap();
        let (z, _) = pooled_standardized(sv, tv);
        let sigma = kernel::median_distance(&[z.view()], 5 ^ TAG_MEDIAN);
        let mut gen = rng(5 ^ TAG_PERM);
        let seeds: Vec<u64> = (0..b).map(|_| gen.next_u64()).collect();
        let (observed, ours, err) = permutation_statistics(
            &centred_kernel(z.view(), sigma, ns, 5 ^ TAG_ORDER),
            ns,
            &seeds,
        );
        let reference = reference_f64(z.view(), ns, sigma, &seeds);
        let mean = reference.iter().sum::<f64>() / b as f64;
        let sd =
            (reference.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (b - 1) as f64).sqrt();
        let worst = ours
            .iter()
            .zip(&reference)
            .map(|(a, r)| (a - r).abs())
            .fold(0.0, f64::max);
        // Tolerance: the module docs' error model predicts about 1e-6 of the spread at this size;
        // at 1e-4 of it a p-value from 1,000 permutations would change with a probability near
        // 0.1 (B x 2 x error x density 0.5 / sd), so above it "cannot change a p-value in
        // practice" would be false.
        assert!(
            worst <= 1e-4 * sd,
            "largest f32 error {worst:e} against a permutation sd of {sd:e}"
        );
        assert_eq!(observed, res.statistic);
        assert_eq!(res.p_value, permutation_p_value(observed, &reference, err));
        // The modelled error (module docs) is of the order of the measured one.
        assert!(worst <= TIE_ERRORS * err, "error {worst:e}, model {err:e}");
        // The case the check is about: a p-value inside (0, 1), i.e. relabelled statistics on both
        // sides of the observed one.
        assert!(
            res.p_value > 0.05 && res.p_value < 0.95,
            "p = {}",
            res.p_value
        );
    }

    #[test]
    fn both_permutation_routes_agree_with_the_f64_reference() {
        // The masked route (AVX-512 masked sums over the selected rows) and the product route
        // (faer's triangular matmul) against the f64 sums of Gretton et al. (2012), eq. 3, at
        // sizes that exercise partial 16-value pieces, padded groups of relabellings, one and
        // several batches, and unequal samples.
        for (ns, nt, d, b, seed) in [
            (3, 2, 1, 5, 1u64),
            (17, 20, 2, 40, 2),
            (250, 161, 3, 300, 3),
            (700, 500, 4, 70, 4),
        ] {
            let s = gaussian(ns, d, 0.0, seed);
            let t = gaussian(nt, d, 0.1, seed + 100);
            let (sv, tv) = (
                MatrixView::new(&s, ns, d).unwrap(),
                MatrixView::new(&t, nt, d).unwrap(),
            );
            let (z, _) = pooled_standardized(sv, tv);
            let sigma = kernel::median_distance(&[z.view()], seed);
            let kc = centred_kernel(z.view(), sigma, ns, seed ^ TAG_ORDER);
            let seeds: Vec<u64> = (0..b as u64).map(|k| k * 7919 + seed).collect();
            let reference = reference_f64(z.view(), ns, sigma, &seeds);
            let mean = reference.iter().sum::<f64>() / b as f64;
            let sd =
                (reference.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (b - 1) as f64).sqrt();
            for route in [PermRoute::Product, PermRoute::Masked] {
                let (_, ours, err) = permutation_statistics_by(&kc, ns, &seeds, route);
                assert_eq!(ours.len(), b);
                let worst = ours
                    .iter()
                    .zip(&reference)
                    .map(|(a, r)| (a - r).abs())
                    .fold(0.0, f64::max);
                // As in f32_against_f64: the modelled error, and 1e-4 of the permutation spread.
                assert!(
                    worst <= TIE_ERRORS * err && worst <= 1e-4 * sd,
                    "{route:?} at {ns}+{nt}: error {worst:e}, model {err:e}, sd {sd:e}"
                );
            }
        }
    }

    #[cfg(target_arch = "x86_64")]
    #[test]
    fn masked_sums_vector_and_portable_versions_are_bitwise_equal() {
        // The AVX-512 code must do the portable code's f32 additions in the same order: equal
        // bits, not a tolerance. Sizes with partial pieces, empty and padded groups.
        if !masked_sums_fast() {
            eprintln!("no AVX-512F on this CPU: only the portable version runs here");
            return;
        }
        for (n, b, seed) in [
            (2usize, 1usize, 1u64),
            (31, 13, 2),
            (300, 40, 3),
            (1000, 25, 4),
        ] {
            let mut r = rng(seed);
            let mut lower = vec![0.0f32; n * n];
            for i in 0..n {
                for j in 0..i {
                    lower[i * n + j] = (r.next_u32() as f32 / u32::MAX as f32) - 0.5;
                }
            }
            let words = n.div_ceil(16);
            let mut bits = vec![0u16; (b + 1) * words];
            for c in 0..b {
                for i in 0..n {
                    if !r.next_u32().is_multiple_of(3) {
                        bits[c * words + i / 16] |= 1 << (i % 16);
                    }
                }
            }
            // SAFETY: AVX-512F was detected above; the lengths match masked_pair_sums's checks.
            let fast = unsafe { masked_pair_sums_avx512(&lower, n, &bits, words, b) };
            let plain = masked_pair_sums_portable(&lower, n, &bits, words, b);
            assert_eq!(
                fast.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                plain.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
                "n = {n}, b = {b}"
            );
        }
    }

    #[test]
    fn relabelled_statistics_do_not_depend_on_the_thread_count() {
        // Each relabelling's sums run over its rows in a fixed order whatever the batch or
        // thread, so 1, 2 and 3 threads give the same bits (both routes).
        let (ns, nt, d, b) = (300, 260, 3, 150);
        let s = gaussian(ns, d, 0.0, 21);
        let t = gaussian(nt, d, 0.2, 22);
        let (sv, tv) = (
            MatrixView::new(&s, ns, d).unwrap(),
            MatrixView::new(&t, nt, d).unwrap(),
        );
        let (z, _) = pooled_standardized(sv, tv);
        let kc = centred_kernel(z.view(), 1.3, ns, 7);
        let seeds: Vec<u64> = (0..b as u64).map(|k| 31 * k + 5).collect();
        for route in [PermRoute::Product, PermRoute::Masked] {
            let runs: Vec<Vec<u64>> = [1, 2, 3]
                .iter()
                .map(|&threads| {
                    let pool = rayon::ThreadPoolBuilder::new()
                        .num_threads(threads)
                        .build()
                        .unwrap();
                    let (_, stats, _) =
                        pool.install(|| permutation_statistics_by(&kc, ns, &seeds, route));
                    stats.iter().map(|v| v.to_bits()).collect()
                })
                .collect();
            assert_eq!(runs[0], runs[1], "{route:?}");
            assert_eq!(runs[0], runs[2], "{route:?}");
        }
    }

    #[test]
    fn exact_ties_count_as_ties() {
        // One binary feature: a relabelling's statistic depends only on how many 1s the rows
        // called "source" hold, so relabellings with the observed count tie with the observed
        // statistic exactly. The p-value must count them (its definition, module docs); the
        // others are compared with the f64 reference (sums from Gretton et al. 2012, eq. 3).
        let (ns, nt, b) = (600, 640, 200);
        let bit = |i: usize, seed: usize| f64::from(u8::from((i * 7 + seed) % 5 < 2));
        let s: Vec<f64> = (0..ns).map(|i| bit(i, 0)).collect();
        let t: Vec<f64> = (0..nt).map(|i| bit(i, 1)).collect();
        let (sv, tv) = (
            MatrixView::new(&s, ns, 1).unwrap(),
            MatrixView::new(&t, nt, 1).unwrap(),
        );
        let res = MmdShiftTest::new()
            .sigma(Some(1.0))
            .permutations(b)
            .seed(2)
            .run(sv, tv)
            .unwrap();
        let pooled: Vec<f64> = s.iter().chain(&t).copied().collect();
        let ones = |rows: &[usize]| rows.iter().filter(|&&i| pooled[i] == 1.0).count();
        let observed_ones = ones(&(0..ns).collect::<Vec<_>>());
        let (z, _) = pooled_standardized(sv, tv);
        let mut gen = rng(2 ^ TAG_PERM);
        let seeds: Vec<u64> = (0..b).map(|_| gen.next_u64()).collect();
        let reference = reference_f64(z.view(), ns, 1.0, &seeds);
        let (mut ties, mut above) = (0, 0);
        for (&seed, v) in seeds.iter().zip(&reference) {
            let mut idx: Vec<usize> = (0..ns + nt).collect();
            idx.shuffle(&mut rng(seed));
            if ones(&idx[..ns]) == observed_ones {
                ties += 1;
            } else if *v > res.statistic {
                above += 1;
            }
        }
        assert!(ties > 0, "the case must have exact ties");
        assert_eq!(res.p_value, (1 + ties + above) as f64 / (1 + b) as f64);
    }

    #[test]
    fn block_route_detects_shift() {
        let s = gaussian(600, 2, 0.0, 5);
        let t = gaussian(600, 2, 0.5, 6);
        let (sv, tv) = (
            MatrixView::new(&s, 600, 2).unwrap(),
            MatrixView::new(&t, 600, 2).unwrap(),
        );
        let r = MmdShiftTest::new()
            .max_kernel_rows(100)
            .run(sv, tv)
            .unwrap();
        assert_eq!(r.p_value_method, PValueMethod::BlockPermutation);
        // A 0.5-sd shift in both features at 600 rows a side: no relabelling reaches the observed
        // mean, so p is the smallest attainable value 1 / (1 + 200).
        assert_eq!(r.p_value, 1.0 / 201.0);
    }
}
