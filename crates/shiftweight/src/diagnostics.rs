//! Can these weights be trusted? Effective sample size, the Pareto k of the upper tail, weight
//! concentration, the clipping trade-off and a support-overlap check.
//!
//! All functions take importance weights of the source rows (finite, non-negative, not all zero;
//! checked with [`crate::data::validate_weights`]).
//!
//! - **Kish effective sample size** (Kish 1965, *Survey Sampling*):
//!   `ESS = (sum_i w_i)^2 / sum_i w_i^2`. It equals n for equal weights (the largest possible) and 1
//!   when a single weight is non-zero. Scale-free. O(n), summed over fixed row chunks in parallel
//!   ([`crate::par::reduce_chunks`]), so results do not depend on the thread count.
//! - **Pareto k** ([`pareto_k`]): the shape k of a generalised Pareto distribution (GPD)
//!   `F(x) = 1 - (1 + k x / sigma)^(-1/k)` fitted to the exceedances of the M largest weights over
//!   the next largest one, with the estimator of Zhang & Stephens (2009, *Technometrics* 51(3)) and
//!   the tail size and weakly informative prior of Vehtari, Simpson, Gelman, Yao & Gabry (2024,
//!   *Pareto smoothed importance sampling*, JMLR 25(72)). The importance-sampling estimate has
//!   finite variance only when k < 1/2; Vehtari et al. call k < 0.5 good, 0.5 <= k <= 0.7 usable
//!   (slower convergence), and anything above `min(0.7, 1 - 1 / log10(S))` unreliable, where S is
//!   the number of weights. Cost: O(n) selection of the tail, O(M log M) to sort it and
//!   O(M (30 + sqrt(M))) for the fit.
//! - **Concentration**: share of the total weight held by the top 1% of rows, the fewest rows that
//!   carry half of the total weight, quantiles, zero weights. All by selection (no full sort): the
//!   order statistics needed are found by one recursive multi-select, O(n log q) for q ranks.
//! - **Clipping trade-off** ([`clip_tradeoff`], [`clip_for_ess`]): clipping the largest weights
//!   raises the ESS (less variance) and moves weight away from the rows the target needs most (more
//!   bias). One O(n log n) sort, then O(log n) per clip level.
//! - **Support overlap** ([`check_overlap`]): the share of target rows where the source density is
//!   below 1/limit of the target density. No weighting fixes missing support.
//! - **Mean weight** ([`mean_check`], part of [`diagnose`]): the true ratio integrates to one under
//!   the source, and more precisely `E_source[w] = integral over {p_s > 0} of p_t = P_target(p_s > 0)`,
//!   the share of the target mass that the source covers (Sugiyama, Suzuki & Kanamori 2012,
//!   *Density Ratio Estimation in Machine Learning*, Cambridge University Press: the ratio
//!   integrates to one under the source). Weights whose mean is far below 1 therefore come from a
//!   target that lies largely where the source has no rows, or from an estimate that does not
//!   normalise; the tail checks above cannot see either when the weights are uniformly small. The
//!   check is one-sided and statistical: the mean is flagged when its one-sided upper bound
//!   `mean + z s / sqrt(n)` (s the sample standard deviation, z = [`MEAN_Z`] the standard normal
//!   0.999 quantile, central limit theorem) lies below [`MEAN_FLOOR`] = 1/2. So sampling noise alone
//!   flags a correct estimator with probability below 0.1% (asymptotically, for weights of finite
//!   variance),
//!   and a correct but regularised estimator whose mean is somewhat below 1 is not flagged however
//!   large the sample: only a shortfall of more than half of the target mass is. A mean above 1
//!   is not flagged: missing support can only lower the mean, and heavy-tailed weights, which
//!   the Pareto k judges, give sample means far above their expectation now and then.
//!   Weights rescaled to mean 1 (e.g. by [`crate::weights::stabilize`]) never trip it.
//!   RuLSIF's relative ratio `r_a = p_t / (a p_t + (1 - a) p_s)` has `E_mix[r_a] = 1` under the
//!   mixture, not under the source; its source mean is `(1 - a E_t[r_a]) / (1 - a) <= 1` (Jensen,
//!   since r_a is concave in w), close to 1 under good overlap and near 0 only when `E_t[r_a]`
//!   approaches its bound 1/a, i.e. when most target rows lie where `p_s << p_t`. The same check
//!   therefore applies to RuLSIF's source weights with the same meaning: a source mean below 1/2
//!   needs `E_t[r_a] > (1 + a) / (2a)`, the value of r_a at `w = (1 + a) / a` (11 for a = 0.1), so
//!   a typical target row has a ratio above 11: poor overlap. RuLSIF's own normalisation (under
//!   the mixture) holds even on disjoint supports, so its fit cannot be the one to flag this.
//!
//! Tail-size and prior details marked *from memory* below were recalled from Vehtari et al. (2024)
//! and should be checked against the paper; the code states the formula used.

use crate::data::validate_weights;
use crate::error::{Error, Result};
use crate::model;
use crate::par;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Format tag of serialised diagnoses.
pub const DIAGNOSIS_FORMAT: &str = "shiftweight.weight-diagnosis";
/// Format tag of serialised overlap reports.
pub const OVERLAP_FORMAT: &str = "shiftweight.overlap-report";
/// Format tag of serialised clipping trade-off tables.
pub const CLIP_TRADEOFF_FORMAT: &str = "shiftweight.clip-tradeoff";

/// Pareto k below this is good (Vehtari et al. 2024).
pub const K_GOOD: f64 = 0.5;
/// Pareto k above this is unreliable whatever the sample size (Vehtari et al. 2024).
pub const K_UNRELIABLE: f64 = 0.7;
/// Fewest tail rows the GPD is fitted to; shorter tails are left alone (our choice).
pub const MIN_TAIL: usize = 5;
/// The standard normal 0.999 quantile: the one-sided level of the bound on the mean weight in
/// [`mean_check`] (reference: statrs `Normal::inverse_cdf(0.999)`; the level is our choice).
pub const MEAN_Z: f64 = 3.090_232_306_167_813;
/// The mean weight is flagged when its one-sided upper bound is below this: the weights then miss
/// more than half of the target mass (E_source[w] = P_target(p_s > 0), see the module doc). Our
/// choice: low enough that a shrunken but sound estimate (regularised uLSIF, RuLSIF) passes, high
/// enough that a source covering less than half of the target is caught.
pub const MEAN_FLOOR: f64 = 0.5;
/// Quantile levels reported by [`diagnose`].
pub const QUANTILE_LEVELS: [f64; 9] = [0.0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1.0];
/// Default clip levels of [`clip_tradeoff`], as quantiles of the weights.
pub const DEFAULT_CLIP_QUANTILES: [f64; 10] =
    [0.5, 0.75, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999, 0.9999, 1.0];

// ---------------------------------------------------------------------------------------------
// Effective sample size
// ---------------------------------------------------------------------------------------------

/// Sum, maximum and number of zeros of the weights (one parallel pass).
fn sum_max_zeros(w: &[f64]) -> (f64, f64, usize) {
    par::reduce_chunks(
        w.len(),
        (0.0, 0.0, 0usize),
        |a, b| {
            let s = &w[a..b];
            let mut sum = 0.0;
            let mut max: f64 = 0.0;
            let mut zeros = 0;
            for &v in s {
                sum += v;
                max = max.max(v);
                zeros += usize::from(v == 0.0);
            }
            (sum, max, zeros)
        },
        |acc, p| {
            acc.0 += p.0;
            acc.1 = acc.1.max(p.1);
            acc.2 += p.2;
        },
    )
}

/// Kish ESS of already-validated weights with known maximum (squares scaled by the maximum so
/// they cannot overflow).
fn kish(w: &[f64], max: f64) -> f64 {
    if max <= 0.0 {
        return 0.0;
    }
    let inv = 1.0 / max;
    let (s1, s2) = par::reduce_chunks(
        w.len(),
        (0.0, 0.0),
        |a, b| {
            let mut s1 = 0.0;
            let mut s2 = 0.0;
            for &v in &w[a..b] {
                let x = v * inv;
                s1 += x;
                s2 += x * x;
            }
            (s1, s2)
        },
        |acc, p| {
            acc.0 += p.0;
            acc.1 += p.1;
        },
    );
    s1 * s1 / s2
}

/// Standard error of the mean weight, `s / sqrt(n)` with s the sample standard deviation (n - 1
/// denominator), in two passes on `w / max` so that squares cannot overflow. None below two weights.
fn mean_std_error(w: &[f64], mean: f64, max: f64) -> Option<f64> {
    let n = w.len();
    if n < 2 || max <= 0.0 {
        return None;
    }
    // A subnormal maximum has no finite reciprocal; its squares underflow to 0 either way.
    let scale = if (1.0 / max).is_finite() { max } else { 1.0 };
    let inv = 1.0 / scale;
    let m = mean * inv;
    let ss = par::reduce_chunks(
        n,
        0.0,
        |a, b| {
            w[a..b]
                .iter()
                .map(|v| {
                    let d = v * inv - m;
                    d * d
                })
                .sum::<f64>()
        },
        |acc, p| *acc += p,
    );
    Some(scale * (ss / (n - 1) as f64).sqrt() / (n as f64).sqrt())
}

/// Is the mean weight consistent with 1? See the module doc ("Mean weight").
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct MeanCheck {
    /// Mean of the weights as given (not rescaled).
    pub mean: f64,
    /// Standard error of the mean, s / sqrt(n) (None below two weights).
    pub std_error: Option<f64>,
    /// One-sided upper bound `mean + MEAN_Z * std_error` (None below two weights).
    pub upper_bound: Option<f64>,
    /// True when the upper bound is below [`MEAN_FLOOR`].
    pub too_low: bool,
}

fn mean_check_known(w: &[f64], total: f64, max: f64) -> MeanCheck {
    let mean = total / w.len() as f64;
    let std_error = mean_std_error(w, mean, max);
    let upper_bound = std_error.map(|se| mean + MEAN_Z * se);
    MeanCheck {
        mean,
        std_error,
        upper_bound,
        too_low: upper_bound.is_some_and(|u| u < MEAN_FLOOR),
    }
}

/// Checks that the mean of raw importance weights is consistent with 1 (module doc, "Mean
/// weight"): flagged when `mean + 3.09 s / sqrt(n) < 1/2`. O(n), two parallel passes.
pub fn mean_check(w: &[f64]) -> Result<MeanCheck> {
    validate_weights(w, w.len(), "weights")?;
    let (total, max, _) = sum_max_zeros(w);
    Ok(mean_check_known(w, total, max))
}

/// The warning for a mean weight far below 1.
pub fn mean_warning(c: &MeanCheck) -> Option<String> {
    let u = c.upper_bound?;
    c.too_low.then(|| {
        format!(
            "The mean weight is {:.3} (99.9% upper bound {:.3}), far below 1: importance weights of the \
             source rows must average 1, and their average is the share of the target that the source \
             covers. Most of the target lies where the source has few or no rows (no weighting fixes \
             missing support), or the ratio estimate does not normalise. If the weights were rescaled \
             on purpose (e.g. to sum to 1), rescale them to mean 1 before diagnosing.",
            c.mean, u
        )
    })
}

/// Kish (1965) effective sample size `(sum w)^2 / sum w^2`. O(n).
pub fn effective_sample_size(w: &[f64]) -> Result<f64> {
    validate_weights(w, w.len(), "weights")?;
    let (_, max, _) = sum_max_zeros(w);
    Ok(kish(w, max))
}

/// Kish effective sample size as a fraction of the number of weights, in (0, 1].
pub fn ess_fraction(w: &[f64]) -> Result<f64> {
    Ok(effective_sample_size(w)? / w.len() as f64)
}

// ---------------------------------------------------------------------------------------------
// Generalised Pareto fit of the upper tail
// ---------------------------------------------------------------------------------------------

/// Number of largest weights the tail fit uses for S weights: `ceil(min(0.2 S, 3 sqrt(S)))`
/// (Vehtari et al. 2024, for independent draws; the formula is from memory).
pub fn tail_size(s: usize) -> usize {
    let s = s as f64;
    (0.2 * s).min(3.0 * s.sqrt()).ceil() as usize
}

/// Sample-size-dependent bound on k above which the estimate is unreliable:
/// `min(0.7, 1 - 1 / log10(S))` (Vehtari et al. 2024). Below 10 weights it is 0.
pub fn k_threshold(s: usize) -> f64 {
    let l = (s as f64).log10();
    if l <= 1.0 {
        return 0.0;
    }
    K_UNRELIABLE.min(1.0 - 1.0 / l)
}

/// A fitted generalised Pareto distribution for the exceedances of the tail.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct GpdFit {
    pub k: f64,
    pub sigma: f64,
}

impl GpdFit {
    /// Quantile function of the GPD at probability p in [0, 1).
    pub(crate) fn quantile(&self, p: f64) -> f64 {
        let l = (-p).ln_1p(); // log(1 - p) <= 0
        if self.k.abs() < 1e-12 {
            -self.sigma * l
        } else {
            self.sigma * (-self.k * l).exp_m1() / self.k
        }
    }
}

/// Zhang & Stephens (2009) estimate of the GPD for exceedances `x` (sorted ascending, >= 0, not
/// all zero), with the weakly informative prior of Vehtari et al. (2024) on k.
///
/// Objective: the posterior mean of theta = -k / sigma over a grid of m = 30 + floor(sqrt(M))
/// values `theta_j = 1/x_max + (1 - sqrt(m / (j - 1/2))) / (3 x*)` (x* the first quartile), each
/// weighted by its profile likelihood `M (log(-theta/k(theta)) - k(theta) - 1)` with
/// `k(theta) = mean log(1 - theta x)`. Then k = k(theta_hat), sigma = -k / theta_hat. The prior
/// shrinks k towards 0.5 as if 10 more observations had k = 0.5: k <- (M k + 5) / (M + 10)
/// (grid constants and prior weight from memory). Returns None if the fit is not finite.
pub(crate) fn fit_gpd(x: &[f64]) -> Option<GpdFit> {
    let n = x.len();
    if n < MIN_TAIL {
        return None;
    }
    let xmax = x[n - 1];
    if !(xmax > 0.0) {
        return None;
    }
    // The estimator is scale-equivariant: fit on x / xmax, rescale sigma at the end.
    let inv = 1.0 / xmax;
    let xs: Vec<f64> = x.iter().map(|v| v * inv).collect();
    let q1 = xs[((n as f64 / 4.0 + 0.5).floor() as usize).clamp(1, n) - 1];
    // A zero first quartile (many ties at the threshold) would make the grid infinite; use the
    // smallest positive exceedance instead (our guard).
    let xstar = if q1 > 0.0 {
        q1
    } else {
        xs.iter().copied().find(|v| *v > 0.0)?
    };
    let m = 30 + (n as f64).sqrt().floor() as usize;
    let prior = 3.0;
    let kof = |theta: f64| xs.iter().map(|v| (-theta * v).ln_1p()).sum::<f64>() / n as f64;
    let thetas: Vec<f64> = (1..=m)
        .map(|j| 1.0 + (1.0 - (m as f64 / (j as f64 - 0.5)).sqrt()) / (prior * xstar))
        .collect();
    let loglik: Vec<f64> = thetas
        .par_iter()
        .map(|&t| {
            let k = kof(t);
            let l = n as f64 * ((-t / k).ln() - k - 1.0);
            if l.is_finite() {
                l
            } else {
                f64::NEG_INFINITY
            }
        })
        .collect();
    let lmax = loglik.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lmax.is_finite() {
        return None;
    }
    // Normalised posterior weights exp(l_j - lmax) / sum (computed stably).
    let wts: Vec<f64> = loglik.iter().map(|l| (l - lmax).exp()).collect();
    let wsum: f64 = wts.iter().sum();
    let theta: f64 = thetas.iter().zip(&wts).map(|(t, w)| t * w).sum::<f64>() / wsum;
    let k = kof(theta);
    let sigma = -k / theta * xmax;
    let k = (n as f64 * k + 10.0 * 0.5) / (n as f64 + 10.0);
    (k.is_finite() && sigma.is_finite() && sigma > 0.0).then_some(GpdFit { k, sigma })
}

/// The Pareto fit of the upper tail of a set of weights.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TailFit {
    /// Estimated shape k; None when it cannot be estimated (see `note`).
    pub k: Option<f64>,
    /// Estimated GPD scale of the exceedances (same units as the weights).
    pub sigma: Option<f64>,
    /// Number of largest weights used (M).
    pub tail_size: usize,
    /// The weight the tail is measured from (the largest weight outside the tail).
    pub tail_start: f64,
    /// Unreliable above this k for this many weights: min(0.7, 1 - 1/log10 S).
    pub k_threshold: f64,
    /// True when the largest weights are all equal (a bounded tail: no heavy-tail problem).
    pub bounded: bool,
    /// Why k is missing, if it is.
    pub note: Option<String>,
}

/// Fits the tail of `sorted_top`: the M+1 largest weights sorted ascending (first = tail start).
fn tail_fit_from_sorted(sorted_top: &[f64], s: usize) -> TailFit {
    let m = sorted_top.len().saturating_sub(1);
    let u = sorted_top.first().copied().unwrap_or(0.0);
    let mut fit = TailFit {
        k: None,
        sigma: None,
        tail_size: m,
        tail_start: u,
        k_threshold: k_threshold(s),
        bounded: false,
        note: None,
    };
    if m < MIN_TAIL {
        fit.note = Some(format!(
            "too few weights ({s}) to fit the tail: the tail would hold {m} rows, at least {MIN_TAIL} are needed"
        ));
        return fit;
    }
    let x: Vec<f64> = sorted_top[1..].iter().map(|v| v - u).collect();
    if x[m - 1] <= 0.0 {
        fit.bounded = true;
        fit.note =
            Some("the largest weights are all equal: the tail is bounded (no heavy tail)".into());
        return fit;
    }
    match fit_gpd(&x) {
        Some(g) => {
            fit.k = Some(g.k);
            fit.sigma = Some(g.sigma);
        }
        None => fit.note = Some("the generalised Pareto fit did not give a finite estimate".into()),
    }
    fit
}

/// Tail size and the rank (0-based, ascending) of the tail start, if there is room for a tail.
fn tail_ranks(s: usize) -> (usize, Option<usize>) {
    let m = tail_size(s).min(s.saturating_sub(1));
    (m, (s > m).then(|| s - m - 1))
}

/// Pareto k of the upper tail (Zhang & Stephens 2009; tail size and prior of Vehtari et al. 2024).
/// O(n) selection plus O(M log M).
pub fn pareto_k(w: &[f64]) -> Result<TailFit> {
    validate_weights(w, w.len(), "weights")?;
    let s = w.len();
    let (m, start) = tail_ranks(s);
    let mut a = w.to_vec();
    let Some(r) = start else {
        return Ok(tail_fit_from_sorted(&[], s));
    };
    a.select_nth_unstable_by(r, f64::total_cmp);
    let top = &mut a[r..];
    top.sort_unstable_by(f64::total_cmp);
    debug_assert_eq!(top.len(), m + 1);
    Ok(tail_fit_from_sorted(top, s))
}

// ---------------------------------------------------------------------------------------------
// Order statistics by selection
// ---------------------------------------------------------------------------------------------

/// Partially orders `a` so that `a[r]` holds the r-th smallest value for every rank in `ranks`
/// (sorted ascending, relative to `offset`), with smaller values to its left and larger to its
/// right. Large halves are processed in parallel.
fn multi_select(a: &mut [f64], ranks: &[usize], offset: usize) {
    if ranks.is_empty() || a.is_empty() {
        return;
    }
    let mid = ranks.len() / 2;
    let r = ranks[mid] - offset;
    let (left, _, right) = a.select_nth_unstable_by(r, f64::total_cmp);
    let (lr, rr) = (&ranks[..mid], &ranks[mid + 1..]);
    if left.len() + right.len() > 1 << 16 {
        rayon::join(
            || multi_select(left, lr, offset),
            || multi_select(right, rr, offset + r + 1),
        );
    } else {
        multi_select(left, lr, offset);
        multi_select(right, rr, offset + r + 1);
    }
}

/// Positions of the linear-interpolation quantile (numpy's default `linear` method).
fn quantile_ranks(n: usize, level: f64) -> (usize, usize, f64) {
    let h = (n - 1) as f64 * level;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    (lo, hi, h - lo as f64)
}

/// The smallest number of the largest values of `b` whose sum reaches `need` (expected O(len)).
/// Returns None when all of `b` does not reach it.
fn fewest_reaching(b: &mut [f64], mut need: f64) -> Option<usize> {
    let mut count = 0;
    let mut b = b;
    loop {
        if need <= 0.0 {
            return Some(count);
        }
        if b.len() <= 32 {
            b.sort_unstable_by(|x, y| y.total_cmp(x));
            for v in b.iter() {
                need -= v;
                count += 1;
                if need <= 0.0 {
                    return Some(count);
                }
            }
            return None;
        }
        let mid = b.len() / 2;
        let (lower, pivot, upper) = b.select_nth_unstable_by(mid, f64::total_cmp);
        let pivot = *pivot;
        let su: f64 = upper.iter().sum();
        if su >= need {
            b = upper;
        } else {
            need -= su + pivot;
            count += upper.len() + 1;
            b = lower;
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Diagnosis
// ---------------------------------------------------------------------------------------------

/// Verdict on the Pareto k (Vehtari et al. 2024).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// k < 0.5: the weighted estimate has finite variance and converges at the usual rate.
    Good,
    /// 0.5 <= k <= threshold: usable, but estimates converge slowly and can be noisy.
    Usable,
    /// k above min(0.7, 1 - 1/log10 n), the tail could not be checked, or (in [`diagnose`]) the
    /// mean weight is far below 1 (see [`mean_check`]).
    Unreliable,
}

impl Verdict {
    /// `good`, `usable` or `unreliable`.
    pub fn as_str(&self) -> &'static str {
        match self {
            Verdict::Good => "good",
            Verdict::Usable => "usable",
            Verdict::Unreliable => "unreliable",
        }
    }

    /// The verdict for a tail fit: unreliable above the sample-size threshold (or above 0.7),
    /// usable from 0.5, good below. A bounded tail (all largest weights equal) is good; a tail that
    /// could not be fitted is unreliable.
    pub fn from_tail(t: &TailFit) -> Verdict {
        match t.k {
            Some(k) if k > t.k_threshold || k > K_UNRELIABLE => Verdict::Unreliable,
            Some(k) if k >= K_GOOD => Verdict::Usable,
            Some(_) => Verdict::Good,
            None if t.bounded => Verdict::Good,
            None => Verdict::Unreliable,
        }
    }
}

/// Effective sample size within one group of rows (e.g. one class label).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupEss {
    /// Group name.
    pub group: String,
    /// Rows in the group.
    pub n: usize,
    /// Kish ESS of the group's weights.
    pub ess: f64,
    /// ESS / n within the group.
    pub ess_fraction: f64,
    /// Share of the total weight the group holds.
    pub weight_share: f64,
    /// Share of the rows the group holds.
    pub row_share: f64,
}

/// Row groups for per-group diagnostics: a group code per row and the name of every code.
#[derive(Debug, Clone, Copy)]
pub struct Groups<'a> {
    /// Group code of every row, in 0..names.len().
    pub codes: &'a [usize],
    /// Name of each group code.
    pub names: &'a [String],
}

/// Everything [`diagnose`] finds about a set of weights. Serialisable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Diagnosis {
    /// Number of weights.
    pub n: usize,
    /// Mean weight, as given (not rescaled).
    pub mean: f64,
    /// Standard error of the mean weight (None below two weights); see [`mean_check`].
    #[serde(default)]
    pub mean_std_error: Option<f64>,
    /// One-sided 99.9% upper bound on the mean weight (None below two weights).
    #[serde(default)]
    pub mean_upper_bound: Option<f64>,
    /// True when that bound is below [`MEAN_FLOOR`]: the weights miss much of the target mass or
    /// do not normalise. Makes the verdict `unreliable`.
    #[serde(default)]
    pub mean_too_low: bool,
    /// Kish effective sample size.
    pub ess: f64,
    /// ESS / n.
    pub ess_fraction: f64,
    /// Pareto k of the upper tail (None when it cannot be estimated; see `tail.note`).
    pub pareto_k: Option<f64>,
    /// `good`, `usable` or `unreliable` (from the Pareto k, and unreliable when `mean_too_low`).
    pub verdict: Verdict,
    /// Details of the tail fit (tail size, threshold, sample-size-dependent bound).
    pub tail: TailFit,
    /// Share of the total weight held by the largest 1% of rows (at least one row).
    pub top1_share: f64,
    /// Number of rows in that top 1%.
    pub top1_rows: usize,
    /// Fewest rows that together carry half of the total weight.
    pub rows_for_half: usize,
    /// Largest weight divided by the mean weight.
    pub max_over_mean: f64,
    /// (level, value) quantiles of the weights (linear interpolation, as numpy's default).
    pub quantiles: Vec<(f64, f64)>,
    /// Rows with weight exactly zero.
    pub n_zero: usize,
    /// Plain-language warnings, most important first.
    pub warnings: Vec<String>,
    /// Per-group effective sample sizes (empty unless groups were given).
    pub groups: Vec<GroupEss>,
}

impl Diagnosis {
    /// The JSON document (format `shiftweight.weight-diagnosis`).
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(DIAGNOSIS_FORMAT, self)
    }
    /// Reads a document written by [`Diagnosis::to_json`].
    pub fn from_json(text: &str) -> Result<Self> {
        model::from_json_tagged(DIAGNOSIS_FORMAT, text)
    }
}

fn pct(x: f64) -> String {
    let p = 100.0 * x;
    if p >= 10.0 {
        format!("{p:.0}%")
    } else if p >= 1.0 {
        format!("{p:.1}%")
    } else {
        format!("{p:.2}%")
    }
}

fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// Diagnoses a set of importance weights: ESS, Pareto k and verdict, concentration, quantiles,
/// zero weights, warnings, and optionally the ESS within each group of rows.
///
/// O(n) passes plus a multi-select of a copy of the weights (O(n log q) for the q order
/// statistics needed) and O(M log M) for the tail; memory one copy of the weights.
pub fn diagnose(w: &[f64], groups: Option<Groups>) -> Result<Diagnosis> {
    let n = w.len();
    validate_weights(w, n, "weights")?;
    if let Some(g) = groups {
        if g.codes.len() != n {
            return Err(Error::LengthMismatch {
                argument: "groups".into(),
                expected: n,
                found: g.codes.len(),
            });
        }
        if let Some(i) = g.codes.iter().position(|c| *c >= g.names.len()) {
            return Err(Error::param(
                "groups",
                format!(
                    "row {i} has group code {} but only {} group names were given",
                    g.codes[i],
                    g.names.len()
                ),
            ));
        }
    }
    let (total, max, n_zero) = sum_max_zeros(w);
    let ess = kish(w, max);
    let mc = mean_check_known(w, total, max);
    let mean = mc.mean;

    // Order statistics needed: quantiles, the top-1% boundary, the tail start.
    let top1_rows = ((n as f64) * 0.01).ceil().max(1.0) as usize;
    let (_, tail_start) = tail_ranks(n);
    let mut ranks: Vec<usize> = Vec::with_capacity(2 * QUANTILE_LEVELS.len() + 2);
    for &l in &QUANTILE_LEVELS {
        let (lo, hi, _) = quantile_ranks(n, l);
        ranks.push(lo);
        ranks.push(hi);
    }
    ranks.push(n - top1_rows);
    if let Some(r) = tail_start {
        ranks.push(r);
    }
    ranks.sort_unstable();
    ranks.dedup();
    let mut a = w.to_vec();
    multi_select(&mut a, &ranks, 0);

    let quantiles = QUANTILE_LEVELS
        .iter()
        .map(|&l| {
            let (lo, hi, f) = quantile_ranks(n, l);
            (l, a[lo] + f * (a[hi] - a[lo]))
        })
        .collect();
    let top1_share = a[n - top1_rows..].iter().sum::<f64>() / total;

    // Fewest rows carrying half the weight: walk the blocks between selected ranks from the top.
    let rows_for_half = {
        let mut bounds = vec![n];
        for &r in ranks.iter().rev() {
            bounds.push(r + 1);
            bounds.push(r);
        }
        bounds.push(0);
        bounds.dedup();
        let need = 0.5 * total;
        let mut acc = 0.0;
        let mut count = 0;
        let mut found = None;
        for pair in bounds.windows(2) {
            let (hi, lo) = (pair[0], pair[1]);
            if hi <= lo {
                continue;
            }
            let block_sum: f64 = a[lo..hi].iter().sum();
            if acc + block_sum >= need {
                found = fewest_reaching(&mut a[lo..hi], need - acc).map(|k| count + k);
                break;
            }
            acc += block_sum;
            count += hi - lo;
        }
        // Rounding can leave the last block a hair short: then every row is needed.
        found.unwrap_or(n)
    };

    // The tail: after the multi-select, a[r..] holds the M+1 largest values; sort them.
    let tail = match tail_start {
        Some(r) => {
            a[r..].sort_unstable_by(f64::total_cmp);
            tail_fit_from_sorted(&a[r..], n)
        }
        None => tail_fit_from_sorted(&[], n),
    };
    drop(a);
    let verdict = if mc.too_low {
        Verdict::Unreliable
    } else {
        Verdict::from_tail(&tail)
    };

    let group_rows = match groups {
        Some(g) => group_ess(w, g, total),
        None => Vec::new(),
    };

    let mut d = Diagnosis {
        n,
        mean,
        mean_std_error: mc.std_error,
        mean_upper_bound: mc.upper_bound,
        mean_too_low: mc.too_low,
        ess,
        ess_fraction: ess / n as f64,
        pareto_k: tail.k,
        verdict,
        tail,
        top1_share,
        top1_rows,
        rows_for_half,
        max_over_mean: max / mean,
        quantiles,
        n_zero,
        warnings: Vec::new(),
        groups: group_rows,
    };
    d.warnings = warnings_for(&d);
    Ok(d)
}

fn group_ess(w: &[f64], g: Groups, total: f64) -> Vec<GroupEss> {
    let k = g.names.len();
    // Per-group max first (for overflow-safe squares), then scaled sums.
    let mut max = vec![0.0f64; k];
    let mut count = vec![0usize; k];
    for (v, &c) in w.iter().zip(g.codes) {
        max[c] = max[c].max(*v);
        count[c] += 1;
    }
    let mut s1 = vec![0.0; k];
    let mut s2 = vec![0.0; k];
    for (v, &c) in w.iter().zip(g.codes) {
        if max[c] > 0.0 {
            let x = v / max[c];
            s1[c] += x;
            s2[c] += x * x;
        }
    }
    (0..k)
        .map(|c| {
            let ess = if s2[c] > 0.0 {
                s1[c] * s1[c] / s2[c]
            } else {
                0.0
            };
            GroupEss {
                group: g.names[c].clone(),
                n: count[c],
                ess,
                ess_fraction: if count[c] > 0 {
                    ess / count[c] as f64
                } else {
                    0.0
                },
                weight_share: s1[c] * max[c] / total,
                row_share: count[c] as f64 / w.len() as f64,
            }
        })
        .collect()
}

/// Plain-language warnings. Thresholds for concentration and ESS are this library's rules of thumb
/// (stated in the README); the k thresholds are those of Vehtari et al. (2024).
fn warnings_for(d: &Diagnosis) -> Vec<String> {
    let mut out = Vec::new();
    let mc = MeanCheck {
        mean: d.mean,
        std_error: d.mean_std_error,
        upper_bound: d.mean_upper_bound,
        too_low: d.mean_too_low,
    };
    out.extend(mean_warning(&mc));
    let tail_verdict = Verdict::from_tail(&d.tail);
    match (tail_verdict, d.pareto_k) {
        (Verdict::Unreliable, Some(k)) => out.push(format!(
            "Pareto k = {k:.2} is above {:.2} (the limit for {} weights): the largest weights dominate and \
             weighted estimates are unreliable. Check support overlap, then consider smoothing or truncating \
             the weights or a smoother ratio model.",
            d.tail.k_threshold.min(K_UNRELIABLE),
            d.n
        )),
        (Verdict::Unreliable, None) => out.push(format!(
            "The tail of the weights could not be checked ({}); treat them as unverified.",
            d.tail.note.as_deref().unwrap_or("no fit")
        )),
        (Verdict::Usable, Some(k)) => out.push(format!(
            "Pareto k = {k:.2} is between 0.5 and {:.2}: weighted estimates are usable but converge slowly and \
             can be noisy.",
            d.tail.k_threshold.min(K_UNRELIABLE)
        )),
        _ => {}
    }
    if d.rows_for_half * 20 < d.n {
        out.push(format!(
            "{} ({}) carry half of the total weight.",
            plural(d.rows_for_half, "row", "rows"),
            pct(d.rows_for_half as f64 / d.n as f64)
        ));
    }
    if d.ess_fraction < 0.1 {
        out.push(format!(
            "The effective sample size is {:.1} of {} rows ({}): a weighted fit rests on about that many rows.",
            d.ess,
            d.n,
            pct(d.ess_fraction)
        ));
    }
    if d.n_zero > 0 {
        out.push(format!(
            "{} ({}) have weight zero and drop out of any weighted fit.",
            plural(d.n_zero, "row", "rows"),
            pct(d.n_zero as f64 / d.n as f64)
        ));
    }
    for g in &d.groups {
        if g.n == 0 {
            continue;
        }
        if g.weight_share < 0.2 * g.row_share || g.ess < 10.0_f64.min(g.n as f64) {
            out.push(format!(
                "Group '{}' holds {} of the rows but {} of the weight (ESS {:.1}): a weighted model may \
                 largely ignore it.",
                g.group,
                pct(g.row_share),
                pct(g.weight_share),
                g.ess
            ));
        }
    }
    out
}

// ---------------------------------------------------------------------------------------------
// Clipping trade-off
// ---------------------------------------------------------------------------------------------

/// Weights sorted ascending with prefix sums of w and w^2 (all divided by the mean weight).
struct SortedWeights {
    v: Vec<f64>,
    s1: Vec<f64>,
    s2: Vec<f64>,
}

impl SortedWeights {
    fn new(w: &[f64]) -> Self {
        let (total, _, _) = sum_max_zeros(w);
        let mean = total / w.len() as f64;
        let mut v: Vec<f64> = w.par_iter().map(|x| x / mean).collect();
        v.par_sort_unstable_by(f64::total_cmp);
        let mut s1 = Vec::with_capacity(v.len() + 1);
        let mut s2 = Vec::with_capacity(v.len() + 1);
        let (mut a, mut b) = (0.0, 0.0);
        s1.push(0.0);
        s2.push(0.0);
        for x in &v {
            a += x;
            b += x * x;
            s1.push(a);
            s2.push(b);
        }
        Self { v, s1, s2 }
    }
    fn n(&self) -> usize {
        self.v.len()
    }
    fn quantile(&self, level: f64) -> f64 {
        let (lo, hi, f) = quantile_ranks(self.n(), level);
        self.v[lo] + f * (self.v[hi] - self.v[lo])
    }
    /// (mean, ess, rows clipped) of min(w / mean, t).
    fn clipped(&self, t: f64) -> (f64, f64, usize) {
        let n = self.n();
        let k = self.v.partition_point(|x| *x <= t);
        let c = (n - k) as f64;
        let sum = self.s1[k] + t * c;
        let sq = self.s2[k] + t * t * c;
        (
            sum / n as f64,
            if sq > 0.0 { sum * sum / sq } else { 0.0 },
            n - k,
        )
    }
    fn row(&self, quantile: Option<f64>, t: f64) -> ClipLevel {
        let (m, ess, clipped) = self.clipped(t);
        ClipLevel {
            quantile,
            upper: t / m,
            rows_clipped: clipped,
            ess,
            ess_fraction: ess / self.n() as f64,
            mean_shift: 1.0 - m,
        }
    }
}

/// One clip level of the trade-off table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClipLevel {
    /// The clip point as a quantile of the weights (None for a level found by [`clip_for_ess`]).
    pub quantile: Option<f64>,
    /// The upper bound of the clipped weights after normalisation to mean 1: passing it as
    /// `upper` to [`crate::weights::stabilize`] (with normalisation) gives exactly these weights.
    pub upper: f64,
    /// Rows whose weight is lowered.
    pub rows_clipped: usize,
    /// Kish ESS of the clipped weights.
    pub ess: f64,
    /// ESS / n.
    pub ess_fraction: f64,
    /// Bias proxy: share of the total weight taken from the clipped rows, i.e. 1 minus the mean of
    /// the clipped weights when the unclipped ones have mean 1 (0 = no clipping).
    pub mean_shift: f64,
}

/// The clipping trade-off: one row per clip level.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClipTradeoff {
    /// Number of weights.
    pub n: usize,
    /// One row per clip level, from most to least clipping.
    pub levels: Vec<ClipLevel>,
}

impl ClipTradeoff {
    /// The JSON document (format `shiftweight.clip-tradeoff`).
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(CLIP_TRADEOFF_FORMAT, self)
    }
}

/// For each clip point, given as a quantile of the weights (default [`DEFAULT_CLIP_QUANTILES`]),
/// the ESS and mean shift of `min(w, clip point)` rescaled to mean 1. O(n log n) for one sort,
/// then O(log n) per level.
pub fn clip_tradeoff(w: &[f64], quantiles: Option<&[f64]>) -> Result<ClipTradeoff> {
    validate_weights(w, w.len(), "weights")?;
    let qs = quantiles.unwrap_or(&DEFAULT_CLIP_QUANTILES);
    if qs.is_empty() {
        return Err(Error::param("quantiles", "give at least one clip level"));
    }
    if let Some(q) = qs.iter().find(|q| !(**q > 0.0 && **q <= 1.0)) {
        return Err(Error::param(
            "quantiles",
            format!("clip levels are quantiles in (0, 1]; got {q}"),
        ));
    }
    let mut qs = qs.to_vec();
    qs.sort_unstable_by(f64::total_cmp);
    qs.dedup();
    let sw = SortedWeights::new(w);
    let levels = qs
        .iter()
        .map(|&q| sw.row(Some(q), sw.quantile(q).max(f64::MIN_POSITIVE)))
        .collect();
    Ok(ClipTradeoff { n: w.len(), levels })
}

/// The least clipping from above whose ESS fraction reaches `target`: the largest clip point t
/// with `ESS(min(w, t)) / n >= target` (the ESS of clipped weights never decreases as t falls).
/// Returns the unclipped weights' row when they already reach it; an error when no clipping from
/// above can (zero weights cap the reachable fraction at the share of non-zero rows).
/// O(n log n) for one sort, then a bisection of O(log n) steps.
pub fn clip_for_ess(w: &[f64], target: f64) -> Result<ClipLevel> {
    validate_weights(w, w.len(), "weights")?;
    if !(target > 0.0 && target <= 1.0) {
        return Err(Error::param(
            "ess_fraction",
            format!("must be in (0, 1], got {target}"),
        ));
    }
    let sw = SortedWeights::new(w);
    let n = sw.n();
    let vmax = sw.v[n - 1];
    let full = sw.row(Some(1.0), vmax);
    if full.ess_fraction >= target {
        return Ok(full);
    }
    let n_pos = n - sw.v.partition_point(|x| *x <= 0.0);
    let min_pos = sw.v[n - n_pos];
    let best = n_pos as f64 / n as f64;
    // Relative slack for rounding in the prefix sums.
    if target > best * (1.0 + 1e-12) {
        return Err(Error::param(
            "ess_fraction",
            format!(
                "{target} cannot be reached by clipping from above: {} of {n} weights are zero, so the ESS \
                 fraction is at most {best:.6}",
                n - n_pos
            ),
        ));
    }
    // Bisection on t in [min_pos, vmax]: ess_fraction(min_pos) = best >= target > ess_fraction(vmax).
    let (mut lo, mut hi) = (min_pos, vmax);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if sw.clipped(mid).1 / n as f64 >= target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Ok(sw.row(None, lo))
}

// ---------------------------------------------------------------------------------------------
// Support overlap
// ---------------------------------------------------------------------------------------------

/// Default ratio above which a target row counts as barely covered: the source density there is
/// below 1/20 of the target density (our choice; the equivalent of a classifier probability of
/// 0.95 for equal sample sizes).
pub const DEFAULT_OVERLAP_LIMIT: f64 = 20.0;
/// Default share of barely covered target rows above which the check raises its flag (our choice).
pub const DEFAULT_OVERLAP_TOLERANCE: f64 = 0.01;

/// Result of the support-overlap check.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct OverlapReport {
    /// Target rows checked.
    pub n_target: usize,
    /// Ratio p_target / p_source above which a row counts as barely covered.
    pub limit: f64,
    /// Share of barely covered rows above which `flagged` is set.
    pub tolerance: f64,
    /// Target rows whose ratio exceeds `limit`.
    pub n_poorly_covered: usize,
    /// Their share of the target rows.
    pub share_poorly_covered: f64,
    /// Largest ratio among the target rows.
    pub max_ratio: f64,
    /// Median ratio among the target rows.
    pub median_ratio: f64,
    /// True when the share exceeds the tolerance.
    pub flagged: bool,
    /// Where the ratios came from: `ratios` or `probabilities`.
    pub source: String,
    /// Plain-language findings and the standing caution.
    pub warnings: Vec<String>,
}

impl OverlapReport {
    /// The JSON document (format `shiftweight.overlap-report`).
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(OVERLAP_FORMAT, self)
    }
}

/// The caution every overlap report carries.
pub const SUPPORT_CAUTION: &str = "No weighting fixes missing support: where the target has inputs the source does \
     not cover, weights are extrapolations. Collect source data there, or restrict the claims to the covered region.";

fn check_params(limit: f64, tolerance: f64) -> Result<()> {
    if !(limit.is_finite() && limit > 1.0) {
        return Err(Error::param(
            "limit",
            format!("must be a finite ratio above 1, got {limit}"),
        ));
    }
    if !(0.0..1.0).contains(&tolerance) {
        return Err(Error::param(
            "tolerance",
            format!("must be in [0, 1), got {tolerance}"),
        ));
    }
    Ok(())
}

/// Support-overlap check from the ratio w(x) = p_target(x) / p_source(x) at the **target** rows:
/// a target row is barely covered when its ratio exceeds `limit`, i.e. the source density there is
/// below 1/limit of the target density. O(n).
pub fn check_overlap(target_ratios: &[f64], limit: f64, tolerance: f64) -> Result<OverlapReport> {
    check_params(limit, tolerance)?;
    if target_ratios.is_empty() {
        return Err(Error::TooFewRows {
            argument: "target_ratios".into(),
            found: 0,
            required: 1,
        });
    }
    validate_weights(target_ratios, target_ratios.len(), "target_ratios")?;
    Ok(overlap_report(
        target_ratios.to_vec(),
        limit,
        tolerance,
        "ratios",
    ))
}

/// Support-overlap check from classifier probabilities p(target | x) at the target rows (for
/// example out-of-fold probabilities of a source-vs-target classifier). The ratio is
/// `p / (1 - p) * n_source / n_target` (class-prior correction, Bickel et al. 2009); a probability
/// of 1 means an infinite ratio and counts as not covered.
pub fn check_overlap_probabilities(
    p_target: &[f64],
    n_source: usize,
    n_target: usize,
    limit: f64,
    tolerance: f64,
) -> Result<OverlapReport> {
    check_params(limit, tolerance)?;
    if p_target.is_empty() {
        return Err(Error::TooFewRows {
            argument: "probabilities".into(),
            found: 0,
            required: 1,
        });
    }
    if n_source == 0 || n_target == 0 {
        return Err(Error::param(
            "n_source",
            "n_source and n_target must both be positive",
        ));
    }
    if let Some(i) = p_target.iter().position(|p| !(0.0..=1.0).contains(p)) {
        return Err(Error::param(
            "probabilities",
            format!(
                "entry {i} is {} (probabilities must be in [0, 1])",
                p_target[i]
            ),
        ));
    }
    let prior = n_source as f64 / n_target as f64;
    let ratios = p_target
        .iter()
        .map(|&p| {
            if p >= 1.0 {
                f64::INFINITY
            } else {
                p / (1.0 - p) * prior
            }
        })
        .collect();
    Ok(overlap_report(ratios, limit, tolerance, "probabilities"))
}

fn overlap_report(mut r: Vec<f64>, limit: f64, tolerance: f64, source: &str) -> OverlapReport {
    let n = r.len();
    let poor = r.iter().filter(|v| **v > limit).count();
    let max_ratio = r.iter().copied().fold(0.0, f64::max);
    let (lo, hi, f) = quantile_ranks(n, 0.5);
    multi_select(&mut r, &[lo, hi], 0);
    let median = if f > 0.0 {
        r[lo] + f * (r[hi] - r[lo])
    } else {
        r[lo]
    };
    let share = poor as f64 / n as f64;
    let flagged = share > tolerance;
    let mut warnings = Vec::new();
    if flagged {
        warnings.push(format!(
            "{} of {n} target rows ({}) lie where the source density is below 1/{limit} of the target density: \
             the source barely covers them.",
            poor,
            pct(share)
        ));
    }
    if max_ratio.is_infinite() {
        warnings.push("Some target rows have classifier probability 1: the source does not cover them at all.".into());
    }
    warnings.push(SUPPORT_CAUTION.into());
    OverlapReport {
        n_target: n,
        limit,
        tolerance,
        n_poorly_covered: poor,
        share_poorly_covered: share,
        // JSON has no infinity: report the largest finite ratio and say so in the warnings.
        max_ratio: if max_ratio.is_finite() {
            max_ratio
        } else {
            r.iter()
                .copied()
                .filter(|v| v.is_finite())
                .fold(0.0, f64::max)
        },
        median_ratio: if median.is_finite() { median } else { f64::MAX },
        flagged,
        source: source.into(),
        warnings,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::rng;
    use rand::Rng;
    use rand_distr::{Distribution, LogNormal};

    const TAG: u64 = 0x6469_6167;

    /// Draws from a GPD(shape xi, scale 1) by inversion: x = ((1 - U)^(-xi) - 1) / xi.
    fn gpd_draws(xi: f64, n: usize, seed: u64) -> Vec<f64> {
        let mut r = rng(seed ^ TAG);
        (0..n)
            .map(|_| ((1.0 - r.random::<f64>()).powf(-xi) - 1.0) / xi)
            .collect()
    }

    #[test]
    fn ess_equal_single_and_by_hand() {
        // Equal weights give n, the largest possible (common practice).
        assert!((effective_sample_size(&[2.5; 40]).unwrap() - 40.0).abs() < 1e-12);
        // A single non-zero weight gives 1 (Kish 1965 formula).
        let mut w = vec![0.0; 10];
        w[3] = 7.0;
        assert!((effective_sample_size(&w).unwrap() - 1.0).abs() < 1e-15);
        // By hand: (1+2+3+4)^2 / (1+4+9+16) = 100/30 (Kish 1965 formula).
        assert!(
            (effective_sample_size(&[1.0, 2.0, 3.0, 4.0]).unwrap() - 100.0 / 30.0).abs() < 1e-14
        );
        assert!((ess_fraction(&[1.0, 2.0, 3.0, 4.0]).unwrap() - 100.0 / 120.0).abs() < 1e-14);
        // Huge weights do not overflow the squares.
        assert!((effective_sample_size(&[1e300, 1e300]).unwrap() - 2.0).abs() < 1e-12);
    }

    #[test]
    fn bad_weights_are_named() {
        match effective_sample_size(&[1.0, -1.0]) {
            Err(Error::InvalidWeights { argument, reason }) => {
                assert_eq!(argument, "weights");
                assert!(reason.contains("entry 1"));
            }
            other => panic!("unexpected {other:?}"),
        }
        assert!(matches!(
            diagnose(&[0.0, 0.0], None),
            Err(Error::InvalidWeights { .. })
        ));
        assert!(matches!(
            pareto_k(&[1.0, f64::NAN]),
            Err(Error::InvalidWeights { .. })
        ));
        let names = vec!["a".to_string()];
        let r = diagnose(
            &[1.0, 2.0],
            Some(Groups {
                codes: &[0, 1],
                names: &names,
            }),
        );
        assert!(matches!(r, Err(Error::InvalidParameter { ref name, .. }) if name == "groups"));
        let r = diagnose(
            &[1.0, 2.0],
            Some(Groups {
                codes: &[0],
                names: &names,
            }),
        );
        assert!(matches!(r, Err(Error::LengthMismatch { .. })));
    }

    #[test]
    fn tail_rules_match_the_published_formulas() {
        // M = ceil(min(0.2 S, 3 sqrt S)) and the bound min(0.7, 1 - 1/log10 S)
        // (Vehtari et al. 2024; from memory).
        assert_eq!(tail_size(10_000), 300);
        assert_eq!(tail_size(100), 20);
        assert_eq!(tail_size(25), 5);
        assert!((k_threshold(100) - 0.5).abs() < 1e-15);
        assert!((k_threshold(10_000) - 0.7).abs() < 1e-15);
        assert!((k_threshold(1000) - (1.0 - 1.0 / 3.0)).abs() < 1e-15);
    }

    #[test]
    fn pareto_k_recovers_known_shapes() {
        // Analytic: the exceedances of a GPD over any threshold are GPD with the same shape, so k
        // estimates xi. Tolerance: 3 asymptotic standard errors (1 + xi) / sqrt(M) of the shape
        // estimate (Smith 1985; from memory), M = 300 at n = 10,000.
        for (xi, seed) in [(0.2, 1), (0.5, 2), (0.8, 3), (1.0, 4)] {
            let w = gpd_draws(xi, 10_000, seed);
            let fit = pareto_k(&w).unwrap();
            assert_eq!(fit.tail_size, 300);
            let k = fit.k.unwrap();
            let tol = 3.0 * (1.0 + xi) / 300f64.sqrt();
            assert!((k - xi).abs() < tol, "xi {xi}: k {k}, tolerance {tol}");
        }
    }

    #[test]
    fn light_tails_are_good_heavy_tails_unreliable() {
        // Lognormal with sigma 0.25 has all moments: its tail shape is 0 (from memory), so k < 0.5.
        let mut r = rng(5 ^ TAG);
        let d = LogNormal::new(0.0, 0.25).unwrap();
        let w: Vec<f64> = (0..5000).map(|_| d.sample(&mut r)).collect();
        let diag = diagnose(&w, None).unwrap();
        assert!(diag.pareto_k.unwrap() < 0.5);
        assert_eq!(diag.verdict, Verdict::Good);
        // GPD with xi = 1.5: infinite mean, must be unreliable.
        let diag = diagnose(&gpd_draws(1.5, 5000, 6), None).unwrap();
        assert_eq!(diag.verdict, Verdict::Unreliable);
        assert!(!diag.warnings.is_empty());
    }

    #[test]
    fn equal_weights_are_good_and_tiny_samples_unchecked() {
        let d = diagnose(&[1.0; 1000], None).unwrap();
        assert_eq!(d.verdict, Verdict::Good);
        assert!(d.tail.bounded);
        assert_eq!(d.rows_for_half, 500);
        assert!(d.warnings.is_empty(), "{:?}", d.warnings);
        let d = diagnose(&[1.0, 2.0, 3.0], None).unwrap();
        assert_eq!(d.verdict, Verdict::Unreliable);
        assert!(d.pareto_k.is_none());
    }

    #[test]
    fn concentration_and_quantiles_match_a_full_sort() {
        let mut r = rng(7 ^ TAG);
        let d = LogNormal::new(0.0, 1.5).unwrap();
        for n in [1usize, 2, 7, 100, 1001, 70_000] {
            let mut w: Vec<f64> = (0..n).map(|_| d.sample(&mut r)).collect();
            if n > 10 {
                w[3] = 0.0;
            }
            let diag = diagnose(&w, None).unwrap();
            let mut s = w.clone();
            s.sort_by(f64::total_cmp);
            let total: f64 = s.iter().sum();
            // Quantiles: numpy's default linear interpolation on the sorted values.
            for &(l, q) in &diag.quantiles {
                let h = (n - 1) as f64 * l;
                let lo = h.floor() as usize;
                let hi = (lo + 1).min(n - 1);
                let want = s[lo] + (h - lo as f64) * (s[hi] - s[lo]);
                assert!(
                    (q - want).abs() <= 1e-12 * want.abs().max(1.0),
                    "n {n} level {l}"
                );
            }
            let t = diag.top1_rows;
            let top: f64 = s[n - t..].iter().sum();
            assert!((diag.top1_share - top / total).abs() < 1e-12);
            let mut acc = 0.0;
            let mut k = 0;
            for v in s.iter().rev() {
                acc += v;
                k += 1;
                if acc >= 0.5 * total {
                    break;
                }
            }
            assert!(
                diag.rows_for_half.abs_diff(k) <= 1,
                "n {n}: {} vs {k}",
                diag.rows_for_half
            );
            assert_eq!(diag.n_zero, usize::from(n > 10));
            assert!((diag.ess - effective_sample_size(&w).unwrap()).abs() < 1e-9 * diag.ess);
        }
    }

    #[test]
    fn group_ess_finds_a_starved_group() {
        let w: Vec<f64> = (0..200)
            .map(|i| if i < 100 { 1.0 } else { 0.001 })
            .collect();
        let codes: Vec<usize> = (0..200).map(|i| usize::from(i >= 100)).collect();
        let names = vec!["kept".to_string(), "starved".to_string()];
        let d = diagnose(
            &w,
            Some(Groups {
                codes: &codes,
                names: &names,
            }),
        )
        .unwrap();
        assert_eq!(d.groups.len(), 2);
        // Within each group the weights are equal: ESS = group size (common practice).
        assert!((d.groups[0].ess - 100.0).abs() < 1e-9);
        assert!((d.groups[1].ess - 100.0).abs() < 1e-9);
        assert!((d.groups[1].weight_share - 0.1 / 100.1).abs() < 1e-12);
        assert!(d.warnings.iter().any(|m| m.contains("'starved'")));
    }

    #[test]
    fn clip_tradeoff_is_consistent() {
        let w = gpd_draws(0.7, 3000, 8);
        let t = clip_tradeoff(&w, None).unwrap();
        let last = t.levels.last().unwrap();
        assert_eq!(last.quantile, Some(1.0));
        assert_eq!(last.rows_clipped, 0);
        assert!(last.mean_shift.abs() < 1e-12);
        assert!((last.ess - effective_sample_size(&w).unwrap()).abs() < 1e-6 * last.ess);
        // More clipping never lowers the ESS (d log ESS / dt <= 0; common practice that clipping
        // trades bias for variance).
        for p in t.levels.windows(2) {
            assert!(p[0].ess_fraction >= p[1].ess_fraction - 1e-12);
            assert!(p[0].mean_shift >= p[1].mean_shift - 1e-12);
            assert!(p[0].upper <= p[1].upper + 1e-12);
        }
        let pick = clip_for_ess(&w, 0.8).unwrap();
        assert!(pick.ess_fraction >= 0.8 - 1e-12 && pick.ess_fraction < 0.8 + 1e-6);
        // The picked bound, given to stabilize, gives the same weights' ESS.
        let s = crate::weights::stabilize(
            &w,
            &crate::weights::StabilizeOptions::new().upper(pick.upper),
        )
        .unwrap();
        assert!((ess_fraction(&s.weights).unwrap() - pick.ess_fraction).abs() < 1e-9);
        assert!(matches!(
            clip_for_ess(&w, 1.5),
            Err(Error::InvalidParameter { .. })
        ));
        let mut z = w.clone();
        z[0] = 0.0;
        assert!(clip_for_ess(&z, 1.0).is_err());
        assert!(clip_tradeoff(&w, Some(&[0.0])).is_err());
    }

    #[test]
    fn overlap_from_ratios_and_probabilities() {
        let r = check_overlap(&[1.0, 2.0, 50.0, 100.0], 20.0, 0.01).unwrap();
        assert_eq!(r.n_poorly_covered, 2);
        assert!(r.flagged);
        assert_eq!(r.max_ratio, 100.0);
        assert!((r.median_ratio - 26.0).abs() < 1e-12);
        assert!(r
            .warnings
            .iter()
            .any(|w| w.contains("No weighting fixes missing support")));
        // p = 0.96 with equal sizes: odds 24 > 20 (Bickel et al. 2009 prior correction).
        let r = check_overlap_probabilities(&[0.5, 0.96, 1.0], 100, 100, 20.0, 0.5).unwrap();
        assert_eq!(r.n_poorly_covered, 2);
        assert!(r.flagged);
        assert!(r.max_ratio.is_finite());
        // The prior factor n_source / n_target: p = 0.96 with 10x fewer source rows gives 2.4.
        let r = check_overlap_probabilities(&[0.96], 10, 100, 20.0, 0.01).unwrap();
        assert_eq!(r.n_poorly_covered, 0);
        assert!(check_overlap_probabilities(&[1.2], 1, 1, 20.0, 0.01).is_err());
        assert!(check_overlap(&[1.0], 0.5, 0.01).is_err());
    }

    #[test]
    fn mean_check_matches_statrs_and_the_coverage_identity() {
        use statrs::distribution::{ContinuousCDF, Normal};
        use statrs::statistics::Statistics;
        // reference: statrs Normal::inverse_cdf (the one-sided 99.9% level)
        let z = Normal::standard().inverse_cdf(0.999);
        assert!((MEAN_Z - z).abs() < 1e-9, "{z}");
        // Standard error against statrs' sample standard deviation (n - 1 denominator).
        let mut r = rng(10 ^ TAG);
        let d = LogNormal::new(-0.5, 1.0).unwrap();
        let w: Vec<f64> = (0..777).map(|_| d.sample(&mut r)).collect();
        let c = mean_check(&w).unwrap();
        let sd = (&w).std_dev(); // reference: statrs Statistics::std_dev
        let se = sd / (w.len() as f64).sqrt();
        assert!((c.std_error.unwrap() - se).abs() < 1e-12 * se);
        assert!((c.mean - (&w).mean()).abs() < 1e-12);
        assert!((c.upper_bound.unwrap() - (c.mean + z * se)).abs() < 1e-9);
        // The same at a scale where squares overflow.
        let big: Vec<f64> = w.iter().map(|v| v * 1e300).collect();
        let cb = mean_check(&big).unwrap();
        assert!((cb.std_error.unwrap() / 1e300 - se).abs() < 1e-9 * se);
        assert!(!cb.too_low);
        // Analytic: a target that is a fraction q of the source distribution plus mass where the
        // source has none has ratio exactly q on the source support, and E_source[w] = q
        // (Sugiyama, Suzuki & Kanamori 2012: the ratio integrates to the covered target mass).
        // Uniformly small weights have a bounded tail, so only the mean can flag them.
        let d = diagnose(&[0.3; 400], None).unwrap();
        assert!(d.tail.bounded);
        assert!(d.mean_too_low);
        assert_eq!(d.verdict, Verdict::Unreliable);
        assert!(d.warnings[0].contains("far below 1"), "{:?}", d.warnings);
        // Coverage 0.6 is above the floor 1/2: not flagged.
        let d = diagnose(&[0.6; 400], None).unwrap();
        assert!(!d.mean_too_low);
        assert_eq!(d.verdict, Verdict::Good);
        assert!(d.warnings.is_empty(), "{:?}", d.warnings);
        // One weight: no standard error, nothing flagged by the mean.
        let c = mean_check(&[0.01]).unwrap();
        assert!(c.std_error.is_none() && !c.too_low);
    }

    #[test]
    fn correct_weights_and_stabilised_weights_are_not_flagged_by_the_mean() {
        // Analytic Gaussian pairs: source N(0, 1), target N(mu, 1), w(x) = exp(mu x - mu^2 / 2)
        // (ratio of two normal densities), E_source[w] = 1. Small samples, several seeds.
        for (mu, n) in [(0.3, 50), (0.5, 200), (1.0, 2000)] {
            for seed in 0..5u64 {
                let mut r = rng(seed ^ TAG ^ 0x6d65_616e);
                let w: Vec<f64> = (0..n)
                    .map(|_| {
                        let x: f64 = rand_distr::StandardNormal.sample(&mut r);
                        (mu * x - mu * mu / 2.0).exp()
                    })
                    .collect();
                assert!(
                    !mean_check(&w).unwrap().too_low,
                    "mu {mu} n {n} seed {seed}"
                );
            }
        }
        // Weights rescaled to mean 1 never trip it, whatever their raw scale.
        let raw: Vec<f64> = (1..=300).map(|i| 1e-6 * i as f64).collect();
        assert!(mean_check(&raw).unwrap().too_low);
        let opts = crate::weights::StabilizeOptions::new().upper_quantile(0.9);
        let st = crate::weights::stabilize(&raw, &opts).unwrap();
        let d = diagnose(&st.weights, None).unwrap();
        assert!(!d.mean_too_low && (d.mean - 1.0).abs() < 1e-12);
    }

    #[test]
    fn diagnosis_json_round_trip() {
        let d = diagnose(&gpd_draws(0.3, 500, 9), None).unwrap();
        let text = d.to_json().unwrap();
        assert!(text.contains("\"verdict\":\"good\"") || text.contains("\"verdict\":\"usable\""));
        assert_eq!(Diagnosis::from_json(&text).unwrap(), d);
        assert!(Diagnosis::from_json("{\"format\":\"other\",\"version\":1,\"model\":{}}").is_err());
    }
}
