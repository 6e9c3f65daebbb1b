//! Reports: one JSON document for machines and one self-contained HTML file for people.
//!
//! Both are rendered from the same [`Report`] value, so they always agree. The HTML file has a
//! fixed set of sections ([`SECTIONS`]), inline SVG charts from [`crate::svg`], every number also
//! in a table, and the cautions; it fetches nothing (no scripts, no external styles, fonts or
//! images). A section whose data this run did not produce says so plainly.

use crate::svg::{self, esc, num, Series};
use serde::Serialize;
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Format tag of the JSON report.
pub const REPORT_FORMAT: &str = "shiftweight.report";
/// Version of the JSON report layout.
pub const REPORT_VERSION: u32 = 1;

/// The sections of the HTML report, in order: (element id, heading).
pub const SECTIONS: [(&str, &str); 7] = [
    ("summary", "At a glance"),
    ("shift", "Is there a shift?"),
    ("estimator", "How the weights were estimated"),
    ("weights", "The weights and their health"),
    ("clipping", "Capping large weights: what it costs"),
    ("features", "Which features moved"),
    ("cautions", "Before you rely on these weights"),
];

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
}

/// Facts about one input file.
#[derive(Debug, Clone, Serialize)]
pub struct InputFacts {
    /// Role: `source`, `target`, or `input`.
    pub role: String,
    /// Path as given.
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

/// Shift-test result (from the detection module).
#[derive(Debug, Clone, Serialize)]
pub struct ShiftPart {
    /// Test method (`classifier` or `mmd`).
    pub method: String,
    /// Test statistic.
    pub statistic: f64,
    /// p-value.
    pub p_value: f64,
    /// Significance level used for the verdict.
    pub level: f64,
    /// True when p_value < level.
    pub significant: bool,
}

/// The estimator, what it chose and the scores that chose it.
#[derive(Debug, Clone, Serialize)]
pub struct EstimatorPart {
    /// Method name.
    pub method: String,
    /// Selection criterion (lower is better).
    pub criterion: String,
    /// Chosen hyperparameters.
    pub chosen: BTreeMap<String, f64>,
    /// Every candidate with its score.
    pub candidates: Vec<shiftweight::ratio::ScoreRow>,
    /// Warnings raised during the fit.
    pub warnings: Vec<String>,
}

/// Descriptive statistics of the weights and any diagnostics.
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
    /// Further diagnostics (e.g. Pareto k, verdict) as name -> text, when available.
    pub diagnostics: BTreeMap<String, String>,
    /// Stabilisation applied, in plain words (`none` when raw).
    pub stabilisation: String,
    /// The weights themselves (for the histogram; not written to JSON).
    #[serde(skip)]
    pub values: Vec<f64>,
}

/// One row of the clipping trade-off.
#[derive(Debug, Clone, Serialize)]
pub struct ClipRow {
    /// Cap applied to the weights.
    pub cap: f64,
    /// Share of rows whose weight is capped.
    pub share_capped: f64,
    /// Effective sample size after capping.
    pub effective_sample_size: f64,
    /// Any bias indicator reported by the trade-off (e.g. change in weighted mean), if known.
    pub shift_of_mean: Option<f64>,
}

/// Per-feature shift.
#[derive(Debug, Clone, Serialize)]
pub struct FeatureRow {
    /// Feature name.
    pub feature: String,
    /// Shift score (larger is more shifted).
    pub score: f64,
    /// p-value, when the score comes with one.
    pub p_value: Option<f64>,
}

/// A two-column table of extra facts (e.g. the demo's weighted vs unweighted comparison).
#[derive(Debug, Clone, Serialize)]
pub struct FactTable {
    /// Table caption.
    pub caption: String,
    /// (label, value) rows.
    pub rows: Vec<(String, String)>,
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
    /// The command that produced it (`weigh`, `detect`, `demo`).
    pub command: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Input files.
    pub inputs: Vec<InputFacts>,
    /// Feature names used.
    pub features_used: Vec<String>,
    /// Extra summary tables.
    pub extra: Vec<FactTable>,
    /// Shift detection.
    pub shift: Part<ShiftPart>,
    /// Estimator and selection.
    pub estimator: Part<EstimatorPart>,
    /// Weights and diagnostics.
    pub weights: Part<WeightsPart>,
    /// Clipping trade-off.
    pub clipping: Part<Vec<ClipRow>>,
    /// Feature shift, most shifted first.
    pub features: Part<Vec<FeatureRow>>,
    /// Cautions.
    pub cautions: Vec<String>,
}

impl Report {
    /// An empty report for `command`; every section starts as not available.
    pub fn new(command: &str, seed: u64) -> Self {
        let none = || format!("not computed by `shiftweight {command}`");
        Report {
            format: REPORT_FORMAT,
            version: REPORT_VERSION,
            library_version: env!("CARGO_PKG_VERSION"),
            command: command.to_string(),
            seed,
            inputs: Vec::new(),
            features_used: Vec::new(),
            extra: Vec::new(),
            shift: Part::missing(none()),
            estimator: Part::missing(none()),
            weights: Part::missing(none()),
            clipping: Part::missing(none()),
            features: Part::missing(none()),
            cautions: CAUTIONS.iter().map(|s| s.to_string()).collect(),
        }
    }

    /// The JSON document.
    pub fn to_json(&self) -> String {
        // Serialising plain data with string keys cannot fail; non-finite numbers become null.
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }

    /// The self-contained HTML page.
    pub fn to_html(&self) -> String {
        let mut h = String::with_capacity(64 * 1024);
        let _ = write!(
            h,
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"/>\
             <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\
             <title>shiftweight {cmd} report</title><style>{STYLE}</style></head><body>\
             <header><h1>shiftweight: {cmd} report</h1><p class=\"meta\">shiftweight {v} &#183; seed {seed}</p></header><nav><ol>",
            cmd = esc(&self.command),
            v = esc(self.library_version),
            seed = self.seed
        );
        for (id, title) in SECTIONS {
            let _ = write!(h, "<li><a href=\"#{id}\">{}</a></li>", esc(title));
        }
        h.push_str("</ol></nav><main>");
        for (id, title) in SECTIONS {
            let _ = write!(h, "<section id=\"{id}\"><h2>{}</h2>", esc(title));
            match id {
                "summary" => self.summary_html(&mut h),
                "shift" => part_html(&mut h, &self.shift, shift_html),
                "estimator" => part_html(&mut h, &self.estimator, estimator_html),
                "weights" => part_html(&mut h, &self.weights, weights_html),
                "clipping" => part_html(&mut h, &self.clipping, |h, v: &Vec<ClipRow>| {
                    clipping_html(h, v)
                }),
                "features" => part_html(&mut h, &self.features, |h, v: &Vec<FeatureRow>| {
                    features_html(h, v)
                }),
                _ => {
                    h.push_str("<ul class=\"cautions\">");
                    for c in &self.cautions {
                        let _ = write!(h, "<li>{}</li>", esc(c));
                    }
                    h.push_str("</ul>");
                }
            }
            h.push_str("</section>");
        }
        h.push_str("</main><footer>Written by shiftweight. This file is self-contained: it loads nothing from elsewhere.</footer></body></html>\n");
        h
    }

    fn summary_html(&self, h: &mut String) {
        let mut points = Vec::new();
        match &self.shift {
            Part::Available(s) => points.push(format!(
                "Shift test ({}): p = {}, {} at level {}.",
                s.method,
                num(s.p_value),
                if s.significant {
                    "a significant shift"
                } else {
                    "no significant shift"
                },
                num(s.level)
            )),
            Part::NotAvailable { .. } => points.push("Shift test: not run (see below).".into()),
        }
        if let Part::Available(e) = &self.estimator {
            points.push(format!("Estimator: {}.", e.method));
        }
        if let Part::Available(w) = &self.weights {
            points.push(format!(
                "{} weights, mean {}, largest {}; effective sample size {} of {} ({}%).",
                w.n,
                num(w.mean),
                num(w.max),
                num(w.effective_sample_size.round()),
                w.n,
                num((100.0 * w.effective_sample_size / w.n.max(1) as f64).round())
            ));
        }
        h.push_str("<ul class=\"glance\">");
        for p in points {
            let _ = write!(h, "<li>{}</li>", esc(&p));
        }
        h.push_str("</ul>");
        if !self.inputs.is_empty() {
            h.push_str("<table><caption>Input files</caption><thead><tr><th>role</th><th>file</th><th>rows used</th><th>rows dropped</th></tr></thead><tbody>");
            for i in &self.inputs {
                let _ = write!(
                    h,
                    "<tr><td>{}</td><td><code>{}</code></td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
                    esc(&i.role),
                    esc(&i.path),
                    i.rows,
                    i.rows_dropped
                );
            }
            h.push_str("</tbody></table>");
        }
        if !self.features_used.is_empty() {
            let _ = write!(
                h,
                "<p>Features used: {}.</p>",
                esc(&self.features_used.join(", "))
            );
        }
        for t in &self.extra {
            fact_table(h, t);
        }
    }
}

fn fact_table(h: &mut String, t: &FactTable) {
    let _ = write!(h, "<table><caption>{}</caption><tbody>", esc(&t.caption));
    for (k, v) in &t.rows {
        let _ = write!(
            h,
            "<tr><th scope=\"row\">{}</th><td class=\"n\">{}</td></tr>",
            esc(k),
            esc(v)
        );
    }
    h.push_str("</tbody></table>");
}

fn part_html<T>(h: &mut String, part: &Part<T>, body: fn(&mut String, &T)) {
    match part {
        Part::Available(v) => body(h, v),
        Part::NotAvailable { reason } => {
            let _ = write!(
                h,
                "<p class=\"absent\">Not available in this report: {}.</p>",
                esc(reason)
            );
        }
    }
}

fn shift_html(h: &mut String, s: &ShiftPart) {
    let _ = write!(
        h,
        "<p class=\"verdict {cls}\">{}</p>",
        if s.significant {
            "The source and target inputs differ significantly."
        } else {
            "No significant difference between source and target inputs was found."
        },
        cls = if s.significant { "alert" } else { "calm" }
    );
    fact_table(
        h,
        &FactTable {
            caption: "Two-sample test".into(),
            rows: vec![
                ("method".into(), s.method.clone()),
                ("statistic".into(), num(s.statistic)),
                ("p-value".into(), num(s.p_value)),
                ("significance level".into(), num(s.level)),
            ],
        },
    );
}

fn estimator_html(h: &mut String, e: &EstimatorPart) {
    let chosen: Vec<String> = e
        .chosen
        .iter()
        .map(|(k, v)| format!("{k} = {}", num(*v)))
        .collect();
    let _ = write!(
        h,
        "<p>Method: <strong>{}</strong>. Chosen: {}. Candidates were scored by {} (lower is better).</p>",
        esc(&e.method),
        esc(&chosen.join(", ")),
        esc(&e.criterion)
    );
    for w in &e.warnings {
        let _ = write!(h, "<p class=\"warn\">{}</p>", esc(w));
    }
    if e.candidates.is_empty() {
        h.push_str("<p>No candidates were scored: every hyperparameter was given.</p>");
        return;
    }
    // Line chart: score against the parameter that varies most, one line per value of the others.
    let names: Vec<String> = e.candidates[0].params.keys().cloned().collect();
    let varying = |k: &String| {
        let mut v: Vec<f64> = e
            .candidates
            .iter()
            .filter_map(|c| c.params.get(k).copied())
            .collect();
        v.sort_by(f64::total_cmp);
        v.dedup();
        v.len()
    };
    if let Some(xname) = names.iter().max_by_key(|k| varying(k)).cloned() {
        let mut groups: BTreeMap<String, Vec<(f64, f64)>> = BTreeMap::new();
        for c in &e.candidates {
            let label: Vec<String> = c
                .params
                .iter()
                .filter(|(k, _)| **k != xname)
                .map(|(k, v)| format!("{k}={}", num(*v)))
                .collect();
            let x = c.params.get(&xname).copied().unwrap_or(f64::NAN);
            groups
                .entry(label.join(" "))
                .or_default()
                .push((x, c.score));
        }
        let all_pos = e
            .candidates
            .iter()
            .all(|c| c.params.get(&xname).is_some_and(|v| *v > 0.0));
        let series: Vec<Series> = groups
            .into_iter()
            .take(svg::SERIES.len())
            .map(|(name, mut points)| {
                points.sort_by(|a, b| a.0.total_cmp(&b.0));
                Series {
                    name: if name.is_empty() {
                        "score".into()
                    } else {
                        name
                    },
                    points,
                }
            })
            .collect();
        h.push_str("<figure>");
        h.push_str(&svg::line_chart(
            &series,
            "Selection score of each candidate",
            &xname,
            "score (lower is better)",
            all_pos,
        ));
        h.push_str("</figure>");
    }
    h.push_str("<table><caption>Candidates and their scores</caption><thead><tr>");
    for n in &names {
        let _ = write!(h, "<th>{}</th>", esc(n));
    }
    h.push_str("<th>score</th></tr></thead><tbody>");
    for c in &e.candidates {
        let is_chosen = names.iter().all(|n| c.params.get(n) == e.chosen.get(n));
        let _ = write!(
            h,
            "<tr{}>",
            if is_chosen { " class=\"chosen\"" } else { "" }
        );
        for n in &names {
            let _ = write!(
                h,
                "<td class=\"n\">{}</td>",
                c.params.get(n).map_or(String::new(), |v| num(*v))
            );
        }
        let _ = write!(h, "<td class=\"n\">{}</td></tr>", num(c.score));
    }
    h.push_str("</tbody></table>");
}

fn weights_html(h: &mut String, w: &WeightsPart) {
    h.push_str("<figure>");
    h.push_str(&svg::log_histogram(
        &w.values,
        "Distribution of the weights (log scale)",
        "weight",
        30,
    ));
    h.push_str("</figure>");
    let mut rows = vec![
        ("rows".to_string(), w.n.to_string()),
        ("stabilisation".to_string(), w.stabilisation.clone()),
        ("mean".to_string(), num(w.mean)),
        ("min".to_string(), num(w.min)),
    ];
    for (p, v) in &w.quantiles {
        rows.push((format!("{}% quantile", num(100.0 * p)), num(*v)));
    }
    rows.push(("max".into(), num(w.max)));
    rows.push((
        "effective sample size (Kish)".into(),
        num(w.effective_sample_size),
    ));
    for (k, v) in &w.diagnostics {
        rows.push((k.clone(), v.clone()));
    }
    fact_table(
        h,
        &FactTable {
            caption: "Weight statistics".into(),
            rows,
        },
    );
    if w.diagnostics.is_empty() {
        h.push_str("<p class=\"absent\">Tail diagnostics (Pareto k and a verdict) are not available in this build.</p>");
    }
}

fn clipping_html(h: &mut String, rows: &[ClipRow]) {
    let series = vec![Series {
        name: "effective sample size".into(),
        points: rows
            .iter()
            .map(|r| (r.cap, r.effective_sample_size))
            .collect(),
    }];
    h.push_str("<figure>");
    h.push_str(&svg::line_chart(
        &series,
        "Effective sample size against the cap",
        "cap on the weights",
        "effective sample size",
        true,
    ));
    h.push_str("</figure><table><caption>Caps and their effect</caption><thead><tr><th>cap</th><th>rows capped</th><th>effective sample size</th><th>shift of the weighted mean</th></tr></thead><tbody>");
    for r in rows {
        let _ = write!(
            h,
            "<tr><td class=\"n\">{}</td><td class=\"n\">{}%</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            num(r.cap),
            num(100.0 * r.share_capped),
            num(r.effective_sample_size),
            r.shift_of_mean.map_or("-".to_string(), num)
        );
    }
    h.push_str("</tbody></table>");
}

fn features_html(h: &mut String, rows: &[FeatureRow]) {
    let labels: Vec<String> = rows.iter().map(|r| r.feature.clone()).collect();
    let values: Vec<f64> = rows.iter().map(|r| r.score).collect();
    h.push_str("<figure>");
    h.push_str(&svg::bar_chart(
        &labels,
        &values,
        "Shift of each feature",
        "shift score (larger = more shifted)",
    ));
    h.push_str("</figure><table><caption>Feature shift, most shifted first</caption><thead><tr><th>feature</th><th>score</th><th>p-value</th></tr></thead><tbody>");
    for r in rows {
        let _ = write!(
            h,
            "<tr><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            esc(&r.feature),
            num(r.score),
            r.p_value.map_or("-".to_string(), num)
        );
    }
    h.push_str("</tbody></table>");
}

const STYLE: &str = "body{font-family:system-ui,sans-serif;color:#23303b;background:#fbfaf7;margin:0}\
header{background:#1f6f78;color:#fff;padding:1rem 2rem}header h1{margin:0;font-size:1.5rem}\
.meta{margin:.2rem 0 0;opacity:.85}nav{padding:.5rem 2rem;background:#eef1ee}nav ol{margin:0;padding-left:1.2rem}\
main{max-width:60rem;padding:0 2rem}section{border-bottom:1px solid #d9dee3;padding:1rem 0}\
h2{color:#1f6f78;font-size:1.2rem}table{border-collapse:collapse;margin:.8rem 0}\
caption{text-align:left;font-weight:bold;padding:.3rem 0}th,td{border:1px solid #d9dee3;padding:.25rem .6rem}\
td.n{text-align:right;font-variant-numeric:tabular-nums}tr.chosen{background:#f6e7d2}\
.absent{color:#5c6b78;font-style:italic}.warn{color:#b23a48}.verdict{font-weight:bold;padding:.4rem .6rem}\
.alert{background:#f8dfe2}.calm{background:#e2efe0}.cautions li{margin:.3rem 0}\
footer{padding:1rem 2rem;color:#5c6b78;font-size:.85rem}svg.chart{max-width:100%;height:auto;background:#fff}";

/// Descriptive statistics of weights for the report.
///
/// The effective sample size here is Kish's formula; `steps::finish_weights` replaces it and fills
/// the diagnostics map from `shiftweight::diagnostics`.
pub fn describe_weights(w: &[f64], stabilisation: &str) -> WeightsPart {
    let n = w.len();
    let mut sorted = w.to_vec();
    sorted.sort_by(f64::total_cmp);
    let q = |p: f64| -> f64 {
        if sorted.is_empty() {
            return f64::NAN;
        }
        // Linear interpolation between order statistics (numpy's default "linear" method).
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
        diagnostics: BTreeMap::new(),
        stabilisation: stabilisation.to_string(),
        values: w.to_vec(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_match_numpy_linear() {
        // reference: numpy.quantile([1, 2, 3, 4], 0.25) == 1.75 (default method "linear")
        let d = describe_weights(&[4.0, 1.0, 3.0, 2.0], "none");
        assert_eq!(d.quantiles[1], (0.25, 1.75));
        assert_eq!(d.quantiles[2], (0.5, 2.5));
        // Kish ESS of (1,2,3,4): 100 / 30 (Kish 1965, effective sample size formula)
        assert!((d.effective_sample_size - 100.0 / 30.0).abs() < 1e-12);
    }

    #[test]
    fn a_full_report_is_well_formed_with_every_chart() {
        let mut r = Report::new("weigh", 3);
        r.shift = Part::Available(ShiftPart {
            method: "mmd".into(),
            statistic: 0.2,
            p_value: 0.01,
            level: 0.05,
            significant: true,
        });
        let mut chosen = BTreeMap::new();
        chosen.insert("sigma".to_string(), 1.0);
        let candidates = [0.5, 1.0, 2.0]
            .iter()
            .map(|&s| shiftweight::ratio::ScoreRow {
                params: [("sigma".to_string(), s)].into(),
                score: -s,
            })
            .collect();
        r.estimator = Part::Available(EstimatorPart {
            method: "uLSIF".into(),
            criterion: "held-out <loss> & more".into(),
            chosen,
            candidates,
            warnings: vec!["a warning".into()],
        });
        r.weights = Part::Available(describe_weights(&[0.0, 0.1, 1.0, 3.0, 10.0], "none"));
        r.clipping = Part::Available(vec![
            ClipRow {
                cap: 2.0,
                share_capped: 0.2,
                effective_sample_size: 3.0,
                shift_of_mean: None,
            },
            ClipRow {
                cap: 5.0,
                share_capped: 0.1,
                effective_sample_size: 2.0,
                shift_of_mean: Some(0.1),
            },
        ]);
        r.features = Part::Available(vec![FeatureRow {
            feature: "a<b".into(),
            score: 0.4,
            p_value: Some(0.2),
        }]);
        let html = r.to_html();
        // reference: roxmltree, an independent strict XML parser (rejects unbalanced tags)
        let doc = roxmltree::Document::parse_with_options(
            &html,
            roxmltree::ParsingOptions {
                allow_dtd: true,
                ..Default::default()
            },
        )
        .unwrap();
        assert_eq!(
            doc.descendants().filter(|n| n.has_tag_name("svg")).count(),
            4
        );
        assert!(!html.contains("Not available"));
        let json: serde_json::Value = serde_json::from_str(&r.to_json()).unwrap();
        assert_eq!(json["clipping"]["data"][1]["cap"], 5.0);
        assert_eq!(json["shift"]["status"], "available");
    }

    #[test]
    fn every_section_is_present_even_when_empty() {
        let html = Report::new("weigh", 0).to_html();
        for (id, _) in SECTIONS {
            assert!(html.contains(&format!("<section id=\"{id}\">")), "{id}");
        }
        assert!(html.contains("Not available in this report"));
    }
}
