//! Effective sample size (Kish 1965) and the check of the mean weight.

use super::*;

/// Sum, maximum and number of zeros of the weights (one parallel pass).
pub(super) fn sum_max_zeros(w: &[f64]) -> (f64, f64, usize) {
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
pub(super) fn kish(w: &[f64], max: f64) -> f64 {
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
pub(super) fn mean_std_error(w: &[f64], mean: f64, max: f64) -> Option<f64> {
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

pub(super) fn mean_check_known(w: &[f64], total: f64, max: f64) -> MeanCheck {
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

/// An effective sample size as printed everywhere (reports, messages, the command line): rounded
/// to whole rows, half away from zero. One rule, so the same weights never show as 207.5 in one
/// place and 208 in another.
pub fn ess_rows(ess: f64) -> String {
    if ess.is_finite() {
        format!("{}", ess.round())
    } else {
        "n/a".into()
    }
}

/// An effective sample size in words with its share of the `n` rows: `173 of 3000 source rows
/// (5.8%)` for `rows = "source rows"`. The count follows [`ess_rows`]; the share has two
/// significant digits below 10% and none above (never a false 0%).
pub fn ess_words(ess: f64, n: usize, rows: &str) -> String {
    let share = if n > 0 { ess / n as f64 } else { f64::NAN };
    let share = if share.is_finite() {
        super::verdict::pct(share)
    } else {
        "n/a".into()
    };
    format!("{} of {n} {rows} ({share})", ess_rows(ess))
}

/// Kish effective sample size as a fraction of the number of weights, in (0, 1].
pub fn ess_fraction(w: &[f64]) -> Result<f64> {
    Ok(effective_sample_size(w)? / w.len() as f64)
}
