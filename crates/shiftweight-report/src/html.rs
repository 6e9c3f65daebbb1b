//! Rendering of the HTML page: a view of the [`Report`] (the report's data, its summary, the
//! charts as SVG strings) passed to [`crate::TEMPLATE`] through minijinja, with filters for the
//! report's number formats.

use crate::svg::{self, Dot, Series};
use crate::{ClipRow, EstimatorPart, FeaturesPart, Part, Report, WeightsPart, SECTIONS};
use minijinja::{context, Environment, Value};
use serde::Serialize;

/// A figure of the page: its SVG and caption.
#[derive(Serialize)]
struct Figure {
    svg: String,
    caption: String,
}

/// Largest number of candidates drawn in the candidates chart (all are in the table).
const MAX_DOTS: usize = 16;

fn candidates_figure(e: &EstimatorPart) -> Option<Figure> {
    // Excluded or failed candidates are left off the chart (their scores can be far off the
    // others' and would squeeze them into one point); the caption names them.
    let mut drawn: Vec<&crate::CandidateRow> = e
        .candidates
        .iter()
        .filter(|c| c.excluded.is_none() && c.score.is_finite())
        .collect();
    if drawn.is_empty() {
        return None;
    }
    drawn.sort_by(|a, b| a.score.total_cmp(&b.score));
    let mut kept: Vec<&crate::CandidateRow> = drawn.iter().take(MAX_DOTS).copied().collect();
    if let Some(c) = drawn.iter().skip(MAX_DOTS).find(|c| c.chosen) {
        kept.push(c);
    }
    let dots: Vec<Dot> = kept
        .iter()
        .map(|c| Dot {
            label: c.words.clone().unwrap_or_else(|| c.name.clone()),
            value: c.score,
            spread: c.std_error,
            marked: c.chosen,
        })
        .collect();
    let off: Vec<String> = e
        .candidates
        .iter()
        .filter(|c| c.excluded.is_some() || !c.score.is_finite())
        .map(|c| c.words.clone().unwrap_or_else(|| c.name.clone()))
        .collect();
    let mut caption = "Selection score of each candidate (lower is better); the whiskers span one standard error either side where it is recorded; the chosen candidate is the diamond labelled \u{201c}chosen\u{201d}.".to_string();
    if drawn.len() > kept.len() {
        caption.push_str(&format!(
            " The {} best of {} scored candidates are drawn; the table lists all.",
            MAX_DOTS,
            drawn.len()
        ));
    }
    if !off.is_empty() {
        caption.push_str(&format!(
            " Not drawn (excluded or not scored, see the table): {}.",
            off.join(", ")
        ));
    }
    Some(Figure {
        svg: svg::dot_chart(
            &dots,
            "Selection score of each candidate",
            "score (lower is better)",
        ),
        caption,
    })
}

fn weights_figure(w: &WeightsPart) -> Figure {
    Figure {
        svg: svg::log_histogram(
            &w.values,
            "Distribution of the weights (log scale)",
            "weight",
            30,
        ),
        caption: "Number of source rows by weight, on a log scale. A long right tail means a few rows carry much of the weight.".into(),
    }
}

fn clipping_figure(rows: &[ClipRow]) -> Figure {
    let series = vec![Series {
        name: "effective sample size".into(),
        points: rows
            .iter()
            .map(|r| (r.cap, r.effective_sample_size))
            .collect(),
    }];
    Figure {
        svg: svg::line_chart(
            &series,
            "Effective sample size against the cap",
            "cap on the weights (log scale)",
            "effective sample size",
            true,
        ),
        caption: "Lower caps keep more of the sample's precision but move the weighted estimates further from the uncapped ones (the table's last column).".into(),
    }
}

fn feature_figures(f: &FeaturesPart) -> Vec<Figure> {
    f.figures
        .iter()
        .map(|g| {
            let title = format!("{}: source and target", g.feature);
            if g.kind == "categorical" {
                Figure {
                    svg: svg::level_bars(&g.levels, &g.source, &g.target, &title),
                    caption: format!(
                        "Share of rows at each value of {} in the source (filled) and the target (dashed outline).",
                        g.feature
                    ),
                }
            } else {
                Figure {
                    svg: svg::two_sample_histogram(g.lo, g.hi, &g.source, &g.target, &title, &g.feature),
                    caption: format!(
                        "Histograms of {} as shares of each sample on shared bins: source as filled bars, target as a dashed outline (range: pooled 0.5% to 99.5% quantiles; rows outside it are counted in the end bins; missing values left out).",
                        g.feature
                    ),
                }
            }
        })
        .collect()
}

fn none_or<T, U>(p: &Part<T>, f: impl FnOnce(&T) -> U) -> Option<U> {
    p.get().map(f)
}

fn env() -> Environment<'static> {
    let mut env = Environment::new();
    env.set_auto_escape_callback(|_| minijinja::AutoEscape::Html);
    env.add_filter("num", |v: Option<f64>| {
        v.map_or("n/a".to_string(), crate::format::num)
    });
    env.add_filter("pval", |v: Option<f64>| {
        v.map_or("n/a".to_string(), crate::format::p_value)
    });
    env.add_filter("pct", |v: Option<f64>| {
        // One decimal: shares of rows or weight; magnitudes below the noise floor print as 0%.
        v.map_or("n/a".to_string(), |v| {
            if v.abs() < crate::format::NOISE {
                "0%".to_string()
            } else if v.abs() < 0.0005 {
                // No false zero: a share that rounds to 0.0% is not nothing.
                format!("{}%", crate::format::num(100.0 * v))
            } else {
                format!("{:.1}%", 100.0 * v)
            }
        })
    });
    // Every effective sample size on the page prints by the one rule of the summary and messages.
    env.add_filter("ess", |v: Option<f64>| {
        v.map_or("n/a".to_string(), crate::format::ess_rows)
    });
    // The template is part of the crate and checked by its tests; a failure here is a bug.
    env.add_template("report.html", crate::TEMPLATE)
        .expect("the report template parses");
    env.add_template("label_shift.html", crate::label::TEMPLATE)
        .expect("the label-shift template parses");
    env
}

/// The page of `r`.
pub(crate) fn render(r: &Report) -> String {
    let shift_text = r.shift.get().map(|s| s.p_text());
    let ctx = context! {
        r => Value::from_serialize(r),
        summary => r.summary(),
        sections => SECTIONS.iter().map(|(id, t)| context!{ id => *id, title => *t }).collect::<Vec<_>>(),
        p_text => shift_text,
        candidates_figure => none_or(&r.estimator, candidates_figure).flatten(),
        weights_figure => none_or(&r.weights, weights_figure),
        clipping_figure => none_or(&r.clipping, |c| clipping_figure(c)),
        feature_figures => none_or(&r.features, feature_figures).unwrap_or_default(),
        feature_figures_max => crate::FEATURE_FIGURES,
        label_shift_section => context!{ id => crate::label::LABEL_SHIFT_SECTION.0, title => crate::label::LABEL_SHIFT_SECTION.1 },
    };
    let env = env();
    match env.get_template("report.html").and_then(|t| t.render(ctx)) {
        Ok(s) => s,
        // Rendering plain data with a template the tests cover does not fail; if it ever does,
        // the page says so instead of being half written.
        Err(e) => format!(
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"/><title>shiftweight report</title></head><body><p>The report could not be rendered: {}</p></body></html>\n",
            svg::esc(&e.to_string())
        ),
    }
}
