//! The held-out scores of the automatic choice ([`SelectionScore`]), its caps and its tail
//! guard's thresholds.

use super::*;

/// How candidates are scored on held-out rows (see the module docs).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum SelectionScore {
    /// J on the weights after each candidate's best cap (default).
    #[default]
    CappedLeastSquares,
    /// Relative Pearson criterion (Yamada et al. 2013, alpha = [`RELATIVE_ALPHA`]) on the weights
    /// after each candidate's best cap.
    RelativePearson,
    /// J on the raw weights, no cap.
    LeastSquares,
}

impl SelectionScore {
    /// Short name: `"capped_least_squares"`, `"relative_pearson"` or `"least_squares"`.
    pub fn name(&self) -> &'static str {
        match self {
            SelectionScore::CappedLeastSquares => "capped_least_squares",
            SelectionScore::RelativePearson => "relative_pearson",
            SelectionScore::LeastSquares => "least_squares",
        }
    }
    /// Parses a short name.
    pub fn from_name(s: &str) -> Result<Self> {
        [
            SelectionScore::CappedLeastSquares,
            SelectionScore::RelativePearson,
            SelectionScore::LeastSquares,
        ]
        .into_iter()
        .find(|v| v.name() == s)
        .ok_or_else(|| {
            Error::param(
                "score",
                format!(
                    "unknown score {s:?}; expected \"capped_least_squares\", \"relative_pearson\" \
                     or \"least_squares\""
                ),
            )
        })
    }
    /// The score of held-out weights (lower is better; -1/2 for w = 1).
    pub fn of(&self, w_source: &[f64], w_target: &[f64]) -> f64 {
        match self {
            SelectionScore::RelativePearson => relative_pearson_criterion(w_source, w_target),
            _ => least_squares_criterion(w_source, w_target),
        }
    }
    pub(super) fn describe(&self) -> &'static str {
        match self {
            SelectionScore::CappedLeastSquares => {
                "held-out least-squares criterion J(g) = 1/2 mean_source(g^2) - mean_target(g) of the \
                 capped weights g = min(s w, c) each candidate hands over, mean over folds (lower is better)"
            }
            SelectionScore::RelativePearson => {
                "held-out relative Pearson criterion (alpha 0.5) of the capped weights each candidate \
                 hands over, mean over folds (lower is better)"
            }
            SelectionScore::LeastSquares => {
                "held-out least-squares criterion J(w) = 1/2 mean_source(w^2) - mean_target(w) of the \
                 raw weights, mean over folds (lower is better)"
            }
        }
    }
}

/// Candidates whose pooled held-out raw source weights have a fitted Pareto tail shape k at or
/// above this are not chosen by default (Vehtari et al. 2024: above 0.7 importance-sampling
/// estimates are unreliable at practical sample sizes).
pub const TAIL_UNRELIABLE_K: f64 = 0.7;

/// Default `tail_k` of the automatic choice: candidates whose pooled held-out raw source weights
/// have a fitted Pareto tail shape k at or above this are not chosen (a tail with no finite mean;
/// Vehtari et al. 2024). See the module doc for why not [`TAIL_UNRELIABLE_K`].
pub const TAIL_EXCLUDE_K: f64 = 1.0;

/// Caps on the mean-1 scale tried for every candidate, besides Ionides' sqrt(n) (caps at or
/// above sqrt(n) are skipped). The grid is a design choice measured in docs/automatic-choice.md.
pub const CAP_LEVELS: [f64; 3] = [10.0, 5.0, 3.0];

/// Mixing proportion of [`SelectionScore::RelativePearson`].
pub const RELATIVE_ALPHA: f64 = 0.5;

/// J(w) = 1/2 mean(w_source^2) - mean(w_target): the held-out least-squares criterion.
pub fn least_squares_criterion(w_source: &[f64], w_target: &[f64]) -> f64 {
    let a = w_source.iter().map(|w| w * w).sum::<f64>() / w_source.len().max(1) as f64;
    let b = w_target.iter().sum::<f64>() / w_target.len().max(1) as f64;
    0.5 * a - b
}

/// The relative Pearson criterion of Yamada et al. (2013) for the relative ratio
/// r = w / (alpha w + 1 - alpha), alpha = [`RELATIVE_ALPHA`]:
/// alpha/2 mean_target(r^2) + (1 - alpha)/2 mean_source(r^2) - mean_target(r). r <= 1/alpha, so
/// its variance stays bounded however heavy the tail of w.
pub fn relative_pearson_criterion(w_source: &[f64], w_target: &[f64]) -> f64 {
    let a = RELATIVE_ALPHA;
    let r = |w: f64| w / (a * w + 1.0 - a);
    let ns = w_source.len().max(1) as f64;
    let nt = w_target.len().max(1) as f64;
    let s2 = w_source.iter().map(|w| r(*w).powi(2)).sum::<f64>() / ns;
    let (t1, t2) = w_target
        .iter()
        .fold((0.0, 0.0), |(a1, a2), w| (a1 + r(*w), a2 + r(*w).powi(2)));
    0.5 * a * t2 / nt + 0.5 * (1.0 - a) * s2 - t1 / nt
}

/// Mean of a non-empty slice (0 for an empty one).
pub(super) fn mean_of(w: &[f64]) -> f64 {
    if w.is_empty() {
        0.0
    } else {
        w.iter().sum::<f64>() / w.len() as f64
    }
}

/// The scale s with mean(min(s w, cap)) = 1 over `w` (see [`crate::weights::stabilize`]).
pub(super) fn cap_scale(w: &[f64], cap: f64) -> Result<f64> {
    let st = stabilize(w, &StabilizeOptions::new().upper(cap))?;
    Ok(st
        .report
        .steps
        .iter()
        .find(|s| s.step == "normalize")
        .and_then(|s| s.value)
        .unwrap_or(1.0))
}

/// The caps tried for a candidate fitted on `n` source rows: Ionides' sqrt(n) first, then
/// [`CAP_LEVELS`] below it. The flag marks the truncation level.
pub(super) fn cap_levels(n: usize) -> Vec<(f64, bool)> {
    let t = (n as f64).sqrt().max(1.0);
    std::iter::once((t, true))
        .chain(CAP_LEVELS.iter().filter(|c| **c < t).map(|c| (*c, false)))
        .collect()
}

pub(super) fn kish_fraction(w: &[f64]) -> f64 {
    let (s, s2) = w.iter().fold((0.0, 0.0), |(a, b), x| (a + x, b + x * x));
    if s2 > 0.0 {
        s * s / (s2 * w.len() as f64)
    } else {
        0.0
    }
}
