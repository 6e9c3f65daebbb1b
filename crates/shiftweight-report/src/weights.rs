//! The "weights and their health" and "capping large weights" sections: descriptive statistics
//! of the weights, the core's diagnostics with their thresholds, and the clipping trade-off with
//! one row per distinct cap. O(n log n) in the weights (the quantiles sort them once).

use crate::format::{ess_words, num};
use crate::Part;
use serde::Serialize;
use shiftweight::diagnostics::{clip_tradeoff, diagnose, mean_check, Verdict};

/// One diagnostic of the weights, with the threshold it is judged by.
#[derive(Debug, Clone, Serialize)]
pub struct DiagnosticRow {
    /// What is measured.
    pub name: String,
    /// Its value, formatted.
    pub value: String,
    /// The threshold or rule, in words (empty when the number is for information only).
    pub threshold: String,
    /// `ok`, `warn`, `bad` or `info`.
    pub status: String,
}

/// Descriptive statistics of the weights and their diagnostics.
#[derive(Debug, Clone, Serialize)]
pub struct WeightsPart {
    /// Number of weights.
    pub n: usize,
    /// Mean (close to 1 when the ratio is well estimated).
    pub mean: f64,
    /// Smallest weight.
    pub min: f64,
    /// Quantiles (probability, value).
    pub quantiles: Vec<(f64, f64)>,
    /// Largest weight.
    pub max: f64,
    /// Kish effective sample size (sum w)^2 / sum w^2.
    pub effective_sample_size: f64,
    /// `good`, `usable` or `unreliable`, when the diagnosis ran.
    pub verdict: Option<String>,
    /// Pareto k of the upper tail, when estimable.
    pub pareto_k: Option<f64>,
    /// The diagnostics with their thresholds.
    pub diagnostics: Vec<DiagnosticRow>,
    /// Warnings of the diagnosis, most important first.
    pub warnings: Vec<String>,
    /// Values of the target the source never has, in short words (`column = "level": k of n
    /// target rows`); no weighting of source rows covers those rows. Empty for plain matrices.
    pub uncovered: Vec<String>,
    /// Stabilisation applied, in plain words (`none` when raw).
    pub stabilisation: String,
    /// The weights themselves (for the histogram; not written to JSON).
    #[serde(skip)]
    pub values: Vec<f64>,
}

/// One row of the clipping trade-off.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ClipRow {
    /// Cap applied to the weights.
    pub cap: f64,
    /// Share of rows whose weight is capped.
    pub share_capped: f64,
    /// Effective sample size after capping.
    pub effective_sample_size: f64,
    /// Share of the total weight removed by the cap: 1 minus the mean of the capped weights when
    /// the uncapped ones have mean 1 (0 without capping); a proxy for the bias capping adds.
    pub shift_of_mean: Option<f64>,
}

/// Descriptive statistics of weights (linear-interpolation quantiles as numpy's default, Kish
/// effective sample size); [`weight_sections`] adds the diagnostics.
pub fn describe_weights(w: &[f64], stabilisation: &str) -> WeightsPart {
    let n = w.len();
    let mut sorted = w.to_vec();
    sorted.sort_by(f64::total_cmp);
    let q = |p: f64| -> f64 {
        if sorted.is_empty() {
            return f64::NAN;
        }
        let h = p * (n - 1) as f64;
        let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
        sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
    };
    let sum: f64 = w.iter().sum();
    let sq: f64 = w.iter().map(|v| v * v).sum();
    WeightsPart {
        n,
        mean: if n > 0 { sum / n as f64 } else { f64::NAN },
        min: sorted.first().copied().unwrap_or(f64::NAN),
        quantiles: [0.01, 0.25, 0.5, 0.75, 0.99]
            .iter()
            .map(|&p| (p, q(p)))
            .collect(),
        max: sorted.last().copied().unwrap_or(f64::NAN),
        effective_sample_size: if sq > 0.0 { sum * sum / sq } else { 0.0 },
        verdict: None,
        pareto_k: None,
        diagnostics: Vec::new(),
        warnings: Vec::new(),
        uncovered: Vec::new(),
        stabilisation: stabilisation.to_string(),
        values: w.to_vec(),
    }
}

/// Clipping trade-off rows with one row per distinct cap as printed (the default quantile levels
/// coincide on weights with many ties; the first row of each cap is kept).
pub fn distinct_caps(rows: Vec<ClipRow>) -> Vec<ClipRow> {
    let mut out: Vec<ClipRow> = Vec::with_capacity(rows.len());
    for r in rows {
        let dup = out.iter().any(|o| num(o.cap) == num(r.cap));
        if !dup {
            out.push(r);
        }
    }
    out
}

/// The weights section and the clipping trade-off of `weights` (as used), with the raw estimates
/// `raw` for the mean check (stabilised weights have mean 1 by construction).
pub fn weight_sections(
    raw: &[f64],
    weights: &[f64],
    stabilisation: &str,
) -> (WeightsPart, Part<Vec<ClipRow>>) {
    let mut part = describe_weights(weights, stabilisation);
    let d = match diagnose(weights, None) {
        Ok(d) => d,
        Err(e) => return (part, Part::missing(format!("diagnostics failed: {e}"))),
    };
    let mc = mean_check(raw).ok();
    let mut verdict = d.verdict;
    let mut warnings = d.warnings.clone();
    if let Some(m) = &mc {
        if m.too_low && !d.mean_too_low {
            verdict = Verdict::Unreliable;
            warnings.splice(0..0, shiftweight::diagnostics::mean_warning(m));
        }
    }
    part.effective_sample_size = d.ess;
    part.verdict = Some(verdict.as_str().into());
    part.pareto_k = d.pareto_k;
    part.warnings = warnings;
    let row = |name: &str, value: String, threshold: String, status: &str| DiagnosticRow {
        name: name.into(),
        value,
        threshold,
        status: status.into(),
    };
    let k_bad = d
        .tail
        .k_threshold
        .min(shiftweight::diagnostics::K_UNRELIABLE);
    let k_status = match d.pareto_k {
        Some(k) if k > k_bad => "bad",
        Some(k) if k >= shiftweight::diagnostics::K_GOOD => "warn",
        Some(_) => "ok",
        None if d.tail.bounded => "ok",
        None => "bad",
    };
    let dm = &mut part.diagnostics;
    dm.push(row(
        "verdict",
        verdict.as_str().into(),
        "good: Pareto k < 0.5; usable: up to the bound below; unreliable above it, or when the mean check fails".into(),
        match verdict {
            Verdict::Good => "ok",
            Verdict::Usable => "warn",
            Verdict::Unreliable => "bad",
        },
    ));
    dm.push(row(
        "Pareto k of the largest weights",
        d.pareto_k
            .map_or("not estimable".into(), |k| format!("{k:.3}")),
        format!(
            "below 0.5 good; above {} unreliable (min(0.7, 1 - 1/log10 n), Vehtari et al. 2024)",
            num(k_bad)
        ),
        k_status,
    ));
    if let Some(m) = &mc {
        dm.push(row(
            "mean of the raw weights",
            format!(
                "{}{}",
                num(m.mean),
                m.upper_bound.map_or(String::new(), |u| format!(
                    " (99.9% upper bound {})",
                    num(u)
                ))
            ),
            format!(
                "about 1; flagged when the 99.9% upper bound is below {}",
                num(shiftweight::diagnostics::MEAN_FLOOR)
            ),
            if m.too_low { "bad" } else { "ok" },
        ));
    }
    dm.push(row(
        "effective sample size (Kish)",
        ess_words(d.ess, d.n, "rows"),
        "the weighted estimate is about as precise as an unweighted one on this many rows".into(),
        "info",
    ));
    dm.push(row(
        "share of weight in the largest 1% of rows",
        format!("{}%", num(100.0 * d.top1_share)),
        String::new(),
        "info",
    ));
    dm.push(row(
        "rows carrying half the weight",
        d.rows_for_half.to_string(),
        String::new(),
        "info",
    ));
    dm.push(row(
        "zero weights",
        d.n_zero.to_string(),
        String::new(),
        "info",
    ));
    let clipping = match clip_tradeoff(weights, None) {
        Ok(t) => Part::Available(distinct_caps(
            t.levels
                .iter()
                .map(|l| ClipRow {
                    cap: l.upper,
                    share_capped: l.rows_clipped as f64 / t.n.max(1) as f64,
                    effective_sample_size: l.ess,
                    shift_of_mean: Some(l.mean_shift),
                })
                .collect(),
        )),
        Err(e) => Part::missing(e.to_string()),
    };
    (part, clipping)
}
