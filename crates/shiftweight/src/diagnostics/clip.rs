//! The clipping trade-off: what clipping the largest weights at each level does to the mean
//! and the effective sample size.

use super::*;

/// Weights sorted ascending with prefix sums of w and w^2 (all divided by the mean weight).
pub(super) struct SortedWeights {
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
        crate::order::quantile_of_sorted(&self.v, level)
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
