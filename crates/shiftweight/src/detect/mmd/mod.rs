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
//!   The p-value is (1 + #{MMD^2_b >= MMD^2}) / (1 + B): exact level under the null.
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
//!   shuffle of the pooled rows (the relabellings are unchanged); the test
//!   `f32_permutation_statistics_match_f64_reference` checks the f32 statistics against f64.
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
use crate::kernel;
use crate::random::rng;
use crate::simd::{masked_pair_sums, masked_pair_sums_has_avx512};
use buffer::*;
use faer::linalg::matmul::triangular::{self, BlockStructure};
use faer::{Accum, Mat, MatRef, Par};
use permutation::*;
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
    /// Rows per block for the block estimator; `None` (default) uses sqrt(N) rounded, clamped to
    /// [50, 250].
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

mod buffer;
mod permutation;
#[cfg(test)]
mod tests;
