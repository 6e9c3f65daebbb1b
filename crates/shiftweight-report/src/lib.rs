//! The report of shiftweight: one JSON document for machines and one self-contained HTML page for
//! people, shared by the command line and the Python package so both write the same report.
//!
//! Both are rendered from the same [`Report`] value, so they always agree. The page is laid out
//! around a reviewer's questions, in this order ([`SECTIONS`]):
//!
//! 1. *At a glance*: the verdict, the chosen weighting and its reliability in one paragraph of
//!    plain words ([`Report::summary`]), the inputs and any extra facts.
//! 2. *Is there a shift?*: the two-sample test with its statistic named (the AUC with its 95%
//!    interval, or MMD^2 with its kernel width), how the p-value was obtained and, for permutation
//!    p-values, their resolution 1/(B+1).
//! 3. *Which features moved, and how*: source and target distributions side by side for the
//!    [`FEATURE_FIGURES`] most shifted features, and a table with the test, statistic, p, adjusted
//!    p, direction and effect size of every feature.
//! 4. *How the weights were estimated*: the estimator in plain words, every candidate by name with
//!    score and standard error, ESS and Pareto k where recorded, the chosen one marked, excluded
//!    ones with the reason (and off the chart, so they do not squeeze its scale).
//! 5. *The weights and their health*: their distribution and the diagnostics with thresholds and
//!    verdict.
//! 6. *Capping large weights: what it costs*: the clipping trade-off, distinct caps only.
//! 7. Optional sections added by callers ([`Report::extra_sections`]), e.g. label shift.
//! 8. *Before you rely on these weights*: the cautions.
//!
//! A section whose data this run did not produce says so plainly. The page is rendered from a
//! template ([`TEMPLATE`], through minijinja) with inline SVG charts from [`svg`]; it fetches
//! nothing (no scripts, no external styles, fonts or images), prints cleanly (print styles keep
//! figures and table rows whole), and never carries meaning by colour alone. Numbers print through
//! [`svg::num`] (no floating-point noise such as -1.776e-15) and p-values through
//! [`svg::p_value`] (no false zeros).
//!
//! This crate computes no statistics of its own beyond binning values for the charts; every
//! number comes from the `shiftweight` core. Cost: the shift test and feature table dominate
//! (see `shiftweight::detect`); the report itself is linear in rows (binning) and candidates.
#![warn(missing_docs)]

pub mod label;
pub mod svg;

use serde::Serialize;
use shiftweight::detect::{FeatureKind, FeatureShiftTable, PValueMethod, ShiftDetails};
use shiftweight::diagnostics::{clip_tradeoff, diagnose, mean_check, Verdict};
use shiftweight::ratio::{AutoRatio, EstimatorKind, RatioEstimator, RatioForm};
use shiftweight::{
    ClassifierShiftTest, FeatureShift, FittedRatio, MatrixView, MmdShiftTest, ShiftTestResult,
};
use std::collections::BTreeMap;
use svg::{num, p_value};

/// Format tag of the JSON report.
pub const REPORT_FORMAT: &str = "shiftweight.report";
/// Version of the JSON report layout.
pub const REPORT_VERSION: u32 = 2;

/// The fixed sections of the HTML report, in order: (element id, heading). Optional sections
/// ([`Report::extra_sections`]) come before the cautions.
pub const SECTIONS: [(&str, &str); 7] = [
    ("summary", "At a glance"),
    ("shift", "Is there a shift?"),
    ("features", "Which features moved, and how"),
    ("estimator", "How the weights were estimated"),
    ("weights", "The weights and their health"),
    ("clipping", "Capping large weights: what it costs"),
    ("cautions", "Before you rely on these weights"),
];

/// How many of the most shifted features get a source-vs-target distribution figure (all of
/// them when there are fewer).
pub const FEATURE_FIGURES: usize = 4;

/// Bins of the numeric source-vs-target histograms.
pub const FEATURE_BINS: usize = 24;

/// Below this share of the source rows the summary calls the effective sample size low and says
/// what it costs: the variance of a weighted mean is about n / ESS times the unweighted one
/// (Kish 1965, design effect of weighting 1 + cv^2 = n / ESS); the half is common practice.
pub const LOW_ESS_FRACTION: f64 = 0.5;

/// A feature with at most this many distinct values is drawn as level frequencies.
pub const MAX_LEVELS: usize = 12;

/// The template of the HTML page.
pub const TEMPLATE: &str = include_str!("../templates/report.html");

/// The cautions printed in every report.
pub const CAUTIONS: [&str; 4] = [
    "Weighting corrects covariate shift only: the mix of inputs may change, but the relation between inputs and outcome must be the same in both populations. It does not correct label shift or concept shift.",
    "It needs support overlap: where the source has no rows like the target's, no weight can make up for them, and a few rows receive very large weights.",
    "Validate on labelled target data before relying on weighted results; the estimates here are only as good as that check.",
    "When the weights feed decisions about people (credit, health, hiring and the like), the regulations and review processes of that domain come first.",
];

/// A section that may not have data in this run.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "status", content = "data", rename_all = "snake_case")]
pub enum Part<T> {
    /// The section's data.
    Available(T),
    /// Why there is none.
    NotAvailable {
        /// Plain-language reason.
        reason: String,
    },
}

impl<T> Part<T> {
    /// A missing section with its reason.
    pub fn missing(reason: impl Into<String>) -> Self {
        Part::NotAvailable {
            reason: reason.into(),
        }
    }
    /// The data, when available.
    pub fn get(&self) -> Option<&T> {
        match self {
            Part::Available(v) => Some(v),
            Part::NotAvailable { .. } => None,
        }
    }
}

/// Facts about one input.
#[derive(Debug, Clone, Serialize)]
pub struct InputFacts {
    /// Role: `source`, `target`, or `input`.
    pub role: String,
    /// Path as given, or a description of in-memory data.
    pub path: String,
    /// Rows used.
    pub rows: usize,
    /// Rows dropped for missing or non-numeric values.
    pub rows_dropped: usize,
}

impl InputFacts {
    /// Facts of one input table read from `path`.
    pub fn of(role: &str, path: &std::path::Path, rows: usize, rows_dropped: usize) -> Self {
        InputFacts {
            role: role.into(),
            path: path.display().to_string(),
            rows,
            rows_dropped,
        }
    }
}

/// Shift-test result, with its statistic named and its p-value explained.
#[derive(Debug, Clone, Serialize)]
pub struct ShiftPart {
    /// Test method (`classifier` or `mmd`).
    pub method: String,
    /// The test in plain words.
    pub test: String,
    /// Name of the statistic (`AUC` or `MMD^2`).
    pub statistic_name: String,
    /// Test statistic.
    pub statistic: f64,
    /// 95% confidence interval of the statistic (the AUC's, by DeLong's standard error).
    pub interval: Option<(f64, f64)>,
    /// Gaussian kernel width in standardised units (MMD).
    pub kernel_width: Option<f64>,
    /// p-value.
    pub p_value: f64,
    /// How the p-value was obtained, in plain words.
    pub p_method: String,
    /// Permutations used (0 when the p-value is not a permutation p-value).
    pub permutations: usize,
    /// Smallest p-value the permutations can give, 1/(B+1) (permutation p-values only).
    pub p_floor: Option<f64>,
    /// Significance level used for the verdict.
    pub level: f64,
    /// True when p_value <= level (a valid p-value is at most the level with probability at most
    /// the level under no shift, so the test keeps its size; Lehmann & Romano 2005, 3.3).
    pub significant: bool,
    /// Notes of the test (e.g. why an approximation was used).
    pub notes: Vec<String>,
}

impl ShiftPart {
    /// The report section of a shift test at significance level `level`.
    pub fn from_test(r: &ShiftTestResult, level: f64) -> Self {
        let (test, statistic_name, interval, kernel_width) = match &r.details {
            ShiftDetails::Classifier {
                auc_ci_low,
                auc_ci_high,
                classifier,
                ..
            } => (
                format!("classifier two-sample test ({classifier}), statistic the out-of-fold AUC of telling target rows from source rows (0.5: indistinguishable, 1: fully separable)"),
                "AUC".to_string(),
                Some((*auc_ci_low, *auc_ci_high)),
                None,
            ),
            ShiftDetails::Mmd {
                sigma, estimator, ..
            } => (
                format!("kernel two-sample test, {estimator} estimate of the squared maximum mean discrepancy with a Gaussian kernel (0: same distribution)"),
                "MMD^2".to_string(),
                None,
                Some(*sigma),
            ),
        };
        let (p_method, p_floor) = match r.p_value_method {
            PValueMethod::Permutation => (
                format!("permutation test with {} relabellings of the rows, each refitted: p = (1 + number at least as extreme) / ({} + 1)", r.permutations, r.permutations),
                Some(1.0 / (r.permutations as f64 + 1.0)),
            ),
            PValueMethod::BlockPermutation => (
                format!("{} relabellings of the rows within each block of the block estimator: p = (1 + number at least as extreme) / ({} + 1)", r.permutations, r.permutations),
                Some(1.0 / (r.permutations as f64 + 1.0)),
            ),
            PValueMethod::HeldOutNormal => (
                "classifier fitted on one half of the rows, AUC of the other half referred to the normal approximation of the Mann-Whitney U statistic (used above 5,000 pooled rows)".to_string(),
                None,
            ),
        };
        ShiftPart {
            method: r.method.clone(),
            test,
            statistic_name,
            statistic: r.statistic,
            interval,
            kernel_width,
            p_value: r.p_value,
            p_method,
            permutations: r.permutations,
            p_floor,
            level,
            significant: r.p_value <= level,
            notes: r.notes.clone(),
        }
    }

    /// The p-value as printed: `p <= 1/(B+1)` at the permutation floor, else its value.
    pub fn p_text(&self) -> String {
        match self.p_floor {
            Some(f) if self.p_value <= f * (1.0 + 1e-9) => format!(
                "p <= {} (the smallest p-value {} permutations can give)",
                p_value(f),
                self.permutations
            ),
            _ => format!("p = {}", p_value(self.p_value)),
        }
    }
}

/// One candidate of the estimator's selection.
#[derive(Debug, Clone, Serialize)]
pub struct CandidateRow {
    /// Candidate name (an estimator's, or its hyperparameters for a grid search).
    pub name: String,
    /// What the candidate is, in plain words, when the name is an estimator's identifier.
    pub words: Option<String>,
    /// Selection score (lower is better; infinite when it failed).
    pub score: f64,
    /// Standard error of the score, when recorded.
    pub std_error: Option<f64>,
    /// Effective sample size of its weights, when recorded.
    pub effective_sample_size: Option<f64>,
    /// Pareto k of its held-out weights, when recorded.
    pub pareto_k: Option<f64>,
    /// The chosen candidate.
    pub chosen: bool,
    /// Why it may not be chosen (excluded or failed), when so.
    pub excluded: Option<String>,
}

/// The estimator, what it chose and the scores that chose it.
#[derive(Debug, Clone, Serialize)]
pub struct EstimatorPart {
    /// Method name.
    pub method: String,
    /// The chosen weighting in plain words.
    pub description: String,
    /// Selection criterion (lower is better).
    pub criterion: String,
    /// Chosen hyperparameters.
    pub chosen: BTreeMap<String, f64>,
    /// Every candidate with its score, in the order tried.
    pub candidates: Vec<CandidateRow>,
    /// Warnings raised during the fit.
    pub warnings: Vec<String>,
}

/// Plain-word name of a candidate of the automatic choice.
fn candidate_words(name: &str) -> String {
    match name {
        "uniform" => "uniform weights (no correction)".into(),
        "ulsif" => "uLSIF (least-squares fit of Gaussian kernels)".into(),
        "classifier_linear" => "logistic classifier on the features".into(),
        "classifier_quadratic" => "logistic classifier on quadratic features".into(),
        "classifier_fourier" => "logistic classifier on random Fourier features".into(),
        "kliep" => "KLIEP (maximum-likelihood fit of Gaussian kernels)".into(),
        n if n.starts_with("rulsif_alpha_") => format!(
            "RuLSIF, relative ratio with alpha = {}",
            &n["rulsif_alpha_".len()..]
        ),
        n => n.to_string(),
    }
}

impl EstimatorPart {
    /// The report section of a fitted model.
    pub fn from_model(model: &FittedRatio) -> Self {
        let sel = &model.selection;
        let c = &sel.chosen;
        let get = |k: &str| c.get(k).copied();
        // Inside the automatic choice every candidate chose its own hyperparameters.
        let searched =
            |k: &str| sel.candidate.is_some() || sel.table.iter().any(|r| r.params.contains_key(k));
        let how = |k: &str| {
            if searched(k) {
                "chosen by cross-validation"
            } else {
                "given"
            }
        };
        let alpha = get("alpha").unwrap_or(0.0);
        let (method, base) = match (&model.kind, &model.form) {
            (EstimatorKind::LeastSquares, _) => {
                let name = if alpha > 0.0 {
                    format!("RuLSIF (alpha = {})", num(alpha))
                } else {
                    "uLSIF".to_string()
                };
                let d = format!(
                    "{name}, a least-squares fit of Gaussian kernels, width {} and penalty {} {}",
                    get("sigma").map_or("n/a".into(), num),
                    get("lam").map_or("n/a".into(), num),
                    if searched("sigma") {
                        "chosen by leave-one-out cross-validation"
                    } else {
                        "given"
                    }
                );
                (name, d)
            }
            (EstimatorKind::Classifier, RatioForm::LogLinear { map, .. }) => {
                let feats = match map.name() {
                    "linear" => "the features",
                    "quadratic" => "quadratic features",
                    _ => "random Fourier features",
                };
                // The Fourier candidate of the automatic choice keeps its fixed penalty
                // (`shiftweight::ratio::auto::default_candidates`).
                let how_l2 = if sel.candidate.is_some() && map.name() == "fourier" {
                    "fixed"
                } else {
                    how("l2")
                };
                (
                    format!("classifier ({} features)", map.name()),
                    format!(
                        "logistic classifier on {feats}, penalty {} {how_l2}",
                        get("l2").map_or("n/a".into(), num),
                    ),
                )
            }
            (EstimatorKind::Kliep, _) => (
                "KLIEP".into(),
                format!(
                    "KLIEP, a maximum-likelihood fit of Gaussian kernels, width {} {}",
                    get("sigma").map_or("n/a".into(), num),
                    if searched("sigma") {
                        "chosen by likelihood cross-validation"
                    } else {
                        "given"
                    }
                ),
            ),
            (EstimatorKind::KernelMeanMatching, _) => (
                "KMM".into(),
                format!(
                    "kernel mean matching, width {} and ridge {}",
                    get("sigma").map_or("n/a".into(), num),
                    get("ridge").map_or("n/a".into(), num)
                ),
            ),
            (EstimatorKind::Uniform, _) => {
                ("uniform".into(), "uniform weights (no correction)".into())
            }
            (other, _) => (other.name().into(), other.name().into()),
        };
        let description = match &sel.candidate {
            // The base already says what was chosen: do not repeat it in brackets.
            Some(name) if base.starts_with(&candidate_words(name)) => format!(
                "{base}; chosen among {} candidates by the held-out least-squares score",
                sel.labels.len()
            ),
            Some(name) => format!(
                "{base}; chosen among {} candidates ({}) by the held-out least-squares score",
                sel.labels.len(),
                candidate_words(name)
            ),
            None => base,
        };
        let named = sel.labels.len() == sel.table.len() && !sel.labels.is_empty();
        let keys: Vec<String> = sel
            .table
            .first()
            .map(|r| r.params.keys().cloned().collect())
            .unwrap_or_default();
        let facts = ["std_error", "pareto_k", "excluded", "ess", "noise_level"];
        let candidates = sel
            .table
            .iter()
            .enumerate()
            .map(|(i, r)| {
                let p = |k: &str| r.params.get(k).copied().filter(|v| v.is_finite());
                let (name, chosen) = if named {
                    (
                        sel.labels[i].clone(),
                        sel.candidate.as_deref() == Some(&sel.labels[i]),
                    )
                } else {
                    let hyper: Vec<String> = keys
                        .iter()
                        .filter(|k| !facts.contains(&k.as_str()))
                        .map(|k| {
                            format!(
                                "{k} = {}",
                                r.params.get(k).map_or("n/a".into(), |v| num(*v))
                            )
                        })
                        .collect();
                    let chosen = keys
                        .iter()
                        .filter(|k| !facts.contains(&k.as_str()))
                        .all(|k| r.params.get(k) == c.get(k));
                    (hyper.join(", "), chosen)
                };
                let excluded = if !r.score.is_finite() {
                    Some("could not be scored (see the warnings)".to_string())
                } else if r.params.get("excluded").is_some_and(|v| *v > 0.0) {
                    let quoted = format!("candidate {name:?} was not chosen");
                    Some(
                        model
                            .warnings
                            .iter()
                            .find(|w| w.starts_with(&quoted))
                            .and_then(|w| w.split_once(": ").map(|(_, why)| why.to_string()))
                            .unwrap_or_else(|| "excluded by the selection rule".into()),
                    )
                } else {
                    None
                };
                let words = Some(candidate_words(&name)).filter(|w| *w != name);
                CandidateRow {
                    name,
                    words,
                    score: r.score,
                    std_error: p("std_error"),
                    effective_sample_size: p("ess"),
                    pareto_k: p("pareto_k"),
                    chosen,
                    excluded,
                }
            })
            .collect();
        EstimatorPart {
            method,
            description,
            criterion: sel.criterion.clone(),
            chosen: sel.chosen.clone(),
            candidates,
            warnings: model.warnings.clone(),
        }
    }
}

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
        format!(
            "{} of {} rows ({}%)",
            num(d.ess.round()),
            d.n,
            num((100.0 * d.ess_fraction).round())
        ),
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

/// Per-feature shift.
#[derive(Debug, Clone, Serialize)]
pub struct FeatureRow {
    /// Feature name.
    pub feature: String,
    /// `numeric` or `categorical`.
    pub kind: String,
    /// The test in words (`Kolmogorov-Smirnov` or `chi-square`).
    pub test: String,
    /// Its statistic (KS distance D, or chi-square).
    pub statistic: f64,
    /// Unadjusted p-value.
    pub p_value: f64,
    /// Benjamini-Hochberg adjusted p-value.
    pub p_adjusted: f64,
    /// Direction of the move in words.
    pub direction: String,
    /// Standardised mean difference (target - source) / pooled sd.
    pub smd: Option<f64>,
    /// Wasserstein-1 distance / pooled sd.
    pub wasserstein_sd: Option<f64>,
    /// Drop of the classifier's AUC when the feature is permuted.
    pub auc_drop: f64,
}

/// Source and target distributions of one feature.
#[derive(Debug, Clone, Serialize)]
pub struct FeatureFigure {
    /// Feature name.
    pub feature: String,
    /// Numeric: shares per bin over [lo, hi]; categorical: shares per level.
    pub kind: String,
    /// Lower end of the bins (numeric).
    pub lo: f64,
    /// Upper end of the bins (numeric).
    pub hi: f64,
    /// Level names (categorical).
    pub levels: Vec<String>,
    /// Source shares.
    pub source: Vec<f64>,
    /// Target shares.
    pub target: Vec<f64>,
}

impl FeatureFigure {
    /// The figure of a numeric column: shares per level when `as_levels` or when it has at
    /// most [`MAX_LEVELS`] distinct values, else shares per bin of [`FEATURE_BINS`] shared bins.
    /// Missing values (NaN) are left out. O(n log n) in the rows.
    pub fn from_numbers(feature: &str, source: &[f64], target: &[f64], as_levels: bool) -> Self {
        let s: Vec<f64> = source.iter().copied().filter(|x| !x.is_nan()).collect();
        let g: Vec<f64> = target.iter().copied().filter(|x| !x.is_nan()).collect();
        let mut levels: Vec<f64> = s.iter().chain(&g).copied().collect();
        levels.sort_by(f64::total_cmp);
        levels.dedup();
        if as_levels || levels.len() <= MAX_LEVELS {
            let share = |v: &[f64]| -> Vec<f64> {
                levels
                    .iter()
                    .map(|l| v.iter().filter(|x| *x == l).count() as f64 / v.len().max(1) as f64)
                    .collect()
            };
            FeatureFigure {
                feature: feature.into(),
                kind: "categorical".into(),
                lo: f64::NAN,
                hi: f64::NAN,
                levels: levels.iter().map(|l| num(*l)).collect(),
                source: share(&s),
                target: share(&g),
            }
        } else {
            let (lo, hi, hs, ht) = svg::shared_bins(&s, &g, FEATURE_BINS).unwrap_or((
                f64::NAN,
                f64::NAN,
                Vec::new(),
                Vec::new(),
            ));
            FeatureFigure {
                feature: feature.into(),
                kind: "numeric".into(),
                lo,
                hi,
                levels: Vec::new(),
                source: hs,
                target: ht,
            }
        }
    }

    /// The figure of a text column: the share of each level among the present values of each
    /// side (`None` is a missing value, left out), levels in order of first appearance.
    pub fn from_levels(feature: &str, source: &[Option<&str>], target: &[Option<&str>]) -> Self {
        let mut levels: Vec<&str> = Vec::new();
        for l in source.iter().chain(target).flatten() {
            if !levels.contains(l) {
                levels.push(l);
            }
        }
        let share = |v: &[Option<&str>]| -> Vec<f64> {
            let present = v.iter().flatten().count().max(1) as f64;
            levels
                .iter()
                .map(|l| v.iter().filter(|x| **x == Some(*l)).count() as f64 / present)
                .collect()
        };
        FeatureFigure {
            feature: feature.into(),
            kind: "categorical".into(),
            lo: f64::NAN,
            hi: f64::NAN,
            levels: levels.iter().map(|l| l.to_string()).collect(),
            source: share(source),
            target: share(target),
        }
    }
}

/// The per-feature section.
#[derive(Debug, Clone, Serialize)]
pub struct FeaturesPart {
    /// One row per feature, most shifted first.
    pub rows: Vec<FeatureRow>,
    /// Distributions of the most shifted features ([`FEATURE_FIGURES`] at most), same order.
    pub figures: Vec<FeatureFigure>,
}

fn column(m: &MatrixView, j: usize) -> Vec<f64> {
    (0..m.rows()).map(|i| m.row(i)[j]).collect()
}

/// One row of the feature table in words: type, test and the direction of the move.
fn feature_row(r: &shiftweight::detect::FeatureShiftRow) -> FeatureRow {
    let pct = |x: Option<f64>| x.map_or("n/a".to_string(), |v| format!("{:.1}%", 100.0 * v));
    let direction = match r.kind {
        FeatureKind::MissingRate => format!(
            "missing in {} of the source, {} of the target",
            pct(r.missing_source),
            pct(r.missing_target)
        ),
        FeatureKind::Categorical => match &r.top_level {
            Some(level) => format!(
                "largest change in level {level:?}: {} of the source, {} of the target",
                pct(r.top_level_source),
                pct(r.top_level_target)
            ),
            // Numbers used as levels: their mean says which way the levels moved.
            None => match r.smd {
                Some(s) if s.abs() < 0.05 => "about the same mean level".to_string(),
                Some(s) if s > 0.0 => "higher levels in the target".to_string(),
                Some(_) => "lower levels in the target".to_string(),
                None => "see the level shares".to_string(),
            },
        },
        FeatureKind::Continuous => match r.smd {
            Some(s) if s.abs() < 0.05 => "about the same centre".to_string(),
            Some(s) if s > 0.0 => "higher in the target".to_string(),
            Some(_) => "lower in the target".to_string(),
            None => "constant in both".to_string(),
        },
    };
    FeatureRow {
        feature: r.feature.clone(),
        kind: match r.kind {
            FeatureKind::Categorical => "categorical",
            FeatureKind::Continuous => "numeric",
            FeatureKind::MissingRate => "missing values",
        }
        .into(),
        test: match r.kind {
            FeatureKind::MissingRate => "two-proportion z-test".into(),
            _ if r.test == "ks" => "Kolmogorov-Smirnov".into(),
            _ => "chi-square".into(),
        },
        statistic: r.statistic,
        p_value: r.p_value,
        p_adjusted: r.p_adjusted,
        direction,
        smd: r.smd,
        wasserstein_sd: r.wasserstein_sd,
        auc_drop: r.auc_drop,
    }
}

impl FeaturesPart {
    /// The section from a feature-shift table of typed columns (text levels, gaps), with the
    /// figures the caller draws from its columns ([`FeatureFigure::from_numbers`],
    /// [`FeatureFigure::from_levels`]): `figure` is asked for the most shifted rows that are not
    /// missing-value rows, [`FEATURE_FIGURES`] at most.
    pub fn from_typed_table(
        t: &FeatureShiftTable,
        figure: impl Fn(&shiftweight::detect::FeatureShiftRow) -> Option<FeatureFigure>,
    ) -> Self {
        FeaturesPart {
            rows: t.rows.iter().map(feature_row).collect(),
            figures: t
                .rows
                .iter()
                .filter(|r| r.kind != FeatureKind::MissingRate)
                .filter_map(figure)
                .take(FEATURE_FIGURES)
                .collect(),
        }
    }

    /// The section from a feature-shift table and the rows it was computed on.
    pub fn from_table(t: &FeatureShiftTable, source: &MatrixView, target: &MatrixView) -> Self {
        let rows = t.rows.iter().map(feature_row).collect();
        let figures = t
            .rows
            .iter()
            .take(FEATURE_FIGURES)
            .map(|r| {
                let (s, g) = (column(source, r.index), column(target, r.index));
                FeatureFigure::from_numbers(&r.feature, &s, &g, r.kind == FeatureKind::Categorical)
            })
            .collect();
        FeaturesPart { rows, figures }
    }
}

/// A two-column table of extra facts (e.g. the demo's weighted vs unweighted comparison).
#[derive(Debug, Clone, Serialize)]
pub struct FactTable {
    /// Table caption.
    pub caption: String,
    /// (label, value) rows.
    pub rows: Vec<(String, String)>,
}

/// An optional section added by a caller (e.g. label shift), shown before the cautions.
#[derive(Debug, Clone, Serialize)]
pub struct ExtraSection {
    /// Element id (letters, digits, `_` and `-`).
    pub id: String,
    /// Heading.
    pub title: String,
    /// Paragraphs of plain text.
    pub paragraphs: Vec<String>,
    /// Tables.
    pub tables: Vec<FactTable>,
}

/// Everything a report shows.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    /// Always [`REPORT_FORMAT`].
    pub format: &'static str,
    /// Always [`REPORT_VERSION`].
    pub version: u32,
    /// Version of shiftweight that wrote it.
    pub library_version: &'static str,
    /// What produced it (`weigh`, `detect`, `demo`, `report`).
    pub command: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Inputs.
    pub inputs: Vec<InputFacts>,
    /// Feature names used.
    pub features_used: Vec<String>,
    /// The summary paragraph (filled by [`Report::to_json`] and [`Report::to_html`]).
    pub summary: String,
    /// Extra summary tables.
    pub extra: Vec<FactTable>,
    /// Shift detection.
    pub shift: Part<ShiftPart>,
    /// Feature shift, most shifted first.
    pub features: Part<FeaturesPart>,
    /// Estimator and selection.
    pub estimator: Part<EstimatorPart>,
    /// Weights and diagnostics.
    pub weights: Part<WeightsPart>,
    /// Clipping trade-off.
    pub clipping: Part<Vec<ClipRow>>,
    /// Optional sections (e.g. label shift), shown before the cautions.
    pub extra_sections: Vec<ExtraSection>,
    /// The label-shift section ([`label`]), when a class mix was estimated; shown before the
    /// other optional sections.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub label_shift: Option<label::LabelShiftPart>,
    /// Cautions.
    pub cautions: Vec<String>,
}

/// Which two-sample test the report runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TestKind {
    /// Classifier two-sample test (out-of-fold AUC).
    Classifier,
    /// Kernel two-sample test (MMD^2).
    Mmd,
}

/// Options of the shift test of a report.
#[derive(Debug, Clone, Copy)]
pub struct ShiftOptions {
    /// The test.
    pub test: TestKind,
    /// Permutations of its p-value.
    pub permutations: usize,
    /// Significance level of the verdict, in (0, 1).
    pub level: f64,
}

impl Default for ShiftOptions {
    fn default() -> Self {
        ShiftOptions {
            test: TestKind::Classifier,
            permutations: 200,
            level: 0.05,
        }
    }
}

/// Runs the two-sample test of `opts` on `source` and `target` (the level is checked here).
fn run_test(
    source: MatrixView,
    target: MatrixView,
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<ShiftTestResult> {
    if !(opts.level > 0.0 && opts.level < 1.0) {
        return Err(shiftweight::Error::param(
            "level",
            format!("must be in (0, 1), got {}", opts.level),
        ));
    }
    match opts.test {
        TestKind::Classifier => ClassifierShiftTest::new()
            .permutations(opts.permutations)
            .seed(seed)
            .run(source, target),
        TestKind::Mmd => MmdShiftTest::new()
            .permutations(opts.permutations)
            .seed(seed)
            .run(source, target),
    }
}

/// Runs the shift test and the per-feature table on `source` and `target` and returns their
/// sections (a failed feature table becomes a missing section; a failed test is an error).
pub fn shift_sections(
    source: MatrixView,
    target: MatrixView,
    names: &[String],
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<(ShiftPart, Part<FeaturesPart>)> {
    let result = run_test(source, target, opts, seed)?;
    let features = match FeatureShift::new()
        .seed(seed)
        .run(source, target, Some(names))
    {
        Ok(t) => Part::Available(FeaturesPart::from_table(&t, &source, &target)),
        Err(e) => Part::missing(format!("per-feature shift failed: {e}")),
    };
    Ok((ShiftPart::from_test(&result, opts.level), features))
}

/// What the weights of a full report come from.
pub enum WeightSource<'a> {
    /// Fit the automatic choice ([`AutoRatio`] with the report's seed).
    Automatic,
    /// A fitted model: its weights of the source rows.
    Model(&'a FittedRatio),
    /// Weights given by the caller, one per source row.
    Given(&'a [f64]),
}

/// The full report of a source/target pair: shift test, feature table, the weights (fitted
/// automatically, from a model, or given) with their diagnostics and clipping trade-off. The
/// command line's `report` and the Python package's `write_report` both call this, so the same
/// inputs and seed give the same report.
pub fn full_report(
    command: &str,
    source: MatrixView,
    target: MatrixView,
    names: &[String],
    weights: WeightSource<'_>,
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<Report> {
    let mut report = Report::new(command, seed);
    report.features_used = names.to_vec();
    let (shift, features) = shift_sections(source, target, names, opts, seed)?;
    report.shift = Part::Available(shift);
    report.features = features;
    let mut fitted = None;
    let (model, w) = resolve_weights(
        weights,
        source.rows(),
        &mut fitted,
        || AutoRatio::new().seed(seed).fit(source, target),
        |m| m.ratio(source),
    )?;
    weights_into(&mut report, model, &w);
    Ok(report)
}

/// The model a report describes (None for given weights) and the source weights it shows.
/// `fit` runs for [`WeightSource::Automatic`], its model kept in `fitted`; `score` runs when a
/// model's stored weights are not of these `n_source` rows; given weights need one per row.
pub(crate) fn resolve_weights<'a>(
    weights: WeightSource<'a>,
    n_source: usize,
    fitted: &'a mut Option<FittedRatio>,
    fit: impl FnOnce() -> shiftweight::Result<FittedRatio>,
    score: impl FnOnce(&FittedRatio) -> shiftweight::Result<Vec<f64>>,
) -> shiftweight::Result<(Option<&'a FittedRatio>, Vec<f64>)> {
    let model: &'a FittedRatio = match weights {
        WeightSource::Given(w) => {
            if w.len() != n_source {
                return Err(shiftweight::Error::LengthMismatch {
                    argument: "weights".into(),
                    expected: n_source,
                    found: w.len(),
                });
            }
            return Ok((None, w.to_vec()));
        }
        WeightSource::Model(m) => m,
        WeightSource::Automatic => fitted.insert(fit()?),
    };
    let w = if model.source_weights.len() == n_source {
        model.source_weights.clone()
    } else {
        score(model)?
    };
    Ok((Some(model), w))
}

/// Fills the estimator, weights and clipping sections from the model (if any) and the weights.
fn weights_into(report: &mut Report, model: Option<&FittedRatio>, w: &[f64]) {
    report.estimator = match model {
        Some(m) => Part::Available(EstimatorPart::from_model(m)),
        None => Part::missing("the weights were given, not estimated here"),
    };
    let (wp, clip) = weight_sections(w, w, "none (as estimated or given)");
    report.weights = Part::Available(wp);
    report.clipping = clip;
}

impl Report {
    /// An empty report for `command`; every section starts as not available.
    pub fn new(command: &str, seed: u64) -> Self {
        let none = || format!("not computed by `{command}`");
        Report {
            format: REPORT_FORMAT,
            version: REPORT_VERSION,
            library_version: env!("CARGO_PKG_VERSION"),
            command: command.to_string(),
            seed,
            inputs: Vec::new(),
            features_used: Vec::new(),
            summary: String::new(),
            extra: Vec::new(),
            shift: Part::missing(none()),
            features: Part::missing(none()),
            estimator: Part::missing(none()),
            weights: Part::missing(none()),
            clipping: Part::missing(none()),
            extra_sections: Vec::new(),
            label_shift: None,
            cautions: CAUTIONS.iter().map(|s| s.to_string()).collect(),
        }
    }

    /// The verdict, the chosen weighting and its reliability in one paragraph of plain words.
    pub fn summary(&self) -> String {
        let mut out = Vec::new();
        match self.shift.get() {
            Some(s) => {
                let stat = match s.interval {
                    Some((lo, hi)) => format!(
                        "{} {} (95% interval {} to {})",
                        s.statistic_name,
                        num(s.statistic),
                        num(lo),
                        num(hi)
                    ),
                    None => format!("{} {}", s.statistic_name, num(s.statistic)),
                };
                out.push(if s.significant {
                    format!(
                        "Shift found: source and target inputs differ ({stat}, {}, at or below the level {}).",
                        s.p_text(),
                        num(s.level)
                    )
                } else {
                    format!(
                        "No shift found: the test could not tell source from target inputs apart ({stat}, {}, level {}).",
                        s.p_text(),
                        num(s.level)
                    )
                });
            }
            None => out.push("The shift test was not run.".into()),
        }
        if let Some(f) = self.features.get() {
            let level = self.shift.get().map_or(0.05, |s| s.level);
            let moved: Vec<&str> = f
                .rows
                .iter()
                .filter(|r| r.p_adjusted <= level)
                .take(3)
                .map(|r| r.feature.as_str())
                .collect();
            if !moved.is_empty() {
                out.push(format!(
                    "Features that moved most (adjusted p at or below the level): {}.",
                    moved.join(", ")
                ));
            }
        }
        if let Some(e) = self.estimator.get() {
            out.push(format!("Weighting: {}.", e.description));
        }
        if let Some(w) = self.weights.get() {
            let rel = match w.verdict.as_deref() {
                Some("good") => "have good tail diagnostics",
                Some("usable") => "are usable with care (a heavy tail: estimates converge slowly)",
                Some("unreliable") => "are unreliable (see the diagnostics before using them)",
                _ => "are not diagnosed",
            };
            let ess = w.effective_sample_size;
            let fraction = ess / w.n.max(1) as f64;
            out.push(format!(
                "The weights {rel}; their effective sample size is {} of {} source rows ({}%).",
                num(ess.round()),
                w.n,
                num((100.0 * fraction).round())
            ));
            if !w.uncovered.is_empty() {
                out.push(format!(
                    "Some target rows have values the source never has ({}); no weighting of \
                     the source rows covers them.",
                    w.uncovered.join("; ")
                ));
            }
            if fraction < LOW_ESS_FRACTION && ess > 0.0 {
                out.push(format!(
                    "That is low: a weighted estimate rests on about {} rows, and its variance is \
                     roughly {} times that of an unweighted one on the same rows.",
                    num(ess.round()),
                    num((1.0 / fraction * 10.0).round() / 10.0)
                ));
            }
        }
        if let Some(l) = &self.label_shift {
            out.push(l.summary());
        }
        out.join(" ")
    }

    /// The JSON document.
    pub fn to_json(&self) -> String {
        let mut r = self.clone();
        r.summary = self.summary();
        // Serialising plain data with string keys cannot fail; non-finite numbers become null.
        serde_json::to_string_pretty(&r).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }

    /// The self-contained HTML page.
    pub fn to_html(&self) -> String {
        html::render(self)
    }
}

mod html;
mod tables;
pub use tables::full_report_table;

#[cfg(test)]
mod tests;
