//! Can these weights be trusted? Effective sample size, the Pareto k of the upper tail, weight
//! concentration, the clipping trade-off and a support-overlap check.
//!
//! All functions take importance weights of the source rows (finite, non-negative, not all zero;
//! checked with [`crate::data::validate_weights`]).
//!
//! - **Kish effective sample size** (Kish 1965, *Survey Sampling*):
//!   `ESS = (sum_i w_i)^2 / sum_i w_i^2`. It equals n for equal weights (the largest possible) and 1
//!   when a single weight is non-zero. Scale-free. O(n), summed over fixed row chunks in parallel
//!   (`crate::par::reduce_chunks`), so results do not depend on the thread count.
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
use crate::order::{fewest_reaching, multi_select, quantile_ranks};
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
/// more than half of the target mass (E_source\[w\] = P_target(p_s > 0), see the module doc). Our
/// choice: low enough that a shrunken but sound estimate (regularised uLSIF, RuLSIF) passes, high
/// enough that a source covering less than half of the target is caught.
pub const MEAN_FLOOR: f64 = 0.5;
/// Quantile levels reported by [`diagnose`].
pub const QUANTILE_LEVELS: [f64; 9] = [0.0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1.0];
/// Default clip levels of [`clip_tradeoff`], as quantiles of the weights.
pub const DEFAULT_CLIP_QUANTILES: [f64; 10] =
    [0.5, 0.75, 0.9, 0.95, 0.98, 0.99, 0.995, 0.999, 0.9999, 1.0];

mod clip;
mod ess;
mod overlap;
mod tail;
mod verdict;

pub use clip::*;
pub use ess::*;
pub use overlap::*;
pub use tail::*;
pub use verdict::*;

#[cfg(test)]
mod tests;
