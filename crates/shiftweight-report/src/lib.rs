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
//! [`format::num`] (no floating-point noise such as -1.776e-15) and p-values through
//! [`format::p_value`] (no false zeros).
//!
//! This crate computes no statistics of its own beyond binning values for the charts; every
//! number comes from the `shiftweight` core. Cost: the shift test and feature table dominate
//! (see `shiftweight::detect`); the report itself is linear in rows (binning) and candidates.
#![warn(missing_docs)]

mod estimator;
mod features;
pub mod format;
mod full;
mod html;
pub mod label;
mod shift;
pub mod svg;
mod tables;
mod weights;

pub use estimator::{CandidateRow, EstimatorPart};
pub use features::{FeatureFigure, FeatureRow, FeaturesPart};
pub use full::{full_report, WeightSource};
pub(crate) use full::{resolve_weights, weights_into};
pub(crate) use shift::run_test;
pub use shift::{shift_sections, ShiftOptions, ShiftPart, TestKind};
pub use tables::full_report_table;
pub use weights::{
    describe_weights, distinct_caps, weight_sections, ClipRow, DiagnosticRow, WeightsPart,
};

use format::{ess_words, num};
use serde::Serialize;

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
                "The weights {rel}; their effective sample size is {}.",
                ess_words(ess, w.n, "source rows")
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
                    format::ess_rows(ess),
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

#[cfg(test)]
mod tests;
