//! Support overlap: target rows whose ratio says the source barely covers them.

use super::*;

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
    /// Values of the target that the source never has (from typed tables; see
    /// [`OverlapReport::with_support_gaps`]).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub support_gaps: Vec<crate::table::SupportGap>,
    /// Target rows with at least one such value.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub n_outside_support: usize,
}

fn is_zero(n: &usize) -> bool {
    *n == 0
}

impl OverlapReport {
    /// Adds the support gaps of typed tables ([`crate::table::support_gaps`]) and the number of
    /// target rows they touch ([`crate::table::rows_with_gaps`]): one warning per gap, placed
    /// before the standing caution, and `flagged` is also set when the share of those rows
    /// exceeds the tolerance.
    pub fn with_support_gaps(mut self, gaps: Vec<crate::table::SupportGap>, rows: usize) -> Self {
        let at = self.warnings.len().saturating_sub(1);
        for (k, g) in gaps.iter().enumerate() {
            self.warnings.insert(at + k, g.describe(self.n_target));
        }
        if rows as f64 / self.n_target as f64 > self.tolerance {
            self.flagged = true;
        }
        self.support_gaps = gaps;
        self.n_outside_support = rows;
        self
    }

    /// The JSON document (format `shiftweight.overlap-report`).
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(OVERLAP_FORMAT, self)
    }
}

/// The caution every overlap report carries.
pub const SUPPORT_CAUTION: &str = "No weighting fixes missing support: where the target has inputs the source does \
     not cover, weights are extrapolations. Collect source data there, or restrict the claims to the covered region.";

pub(super) fn check_params(limit: f64, tolerance: f64) -> Result<()> {
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

pub(super) fn overlap_report(
    mut r: Vec<f64>,
    limit: f64,
    tolerance: f64,
    source: &str,
) -> OverlapReport {
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
        support_gaps: Vec::new(),
        n_outside_support: 0,
    }
}
