//! Hand-written SVG charts for the HTML report: plain strings, no scripts, no external references.
//!
//! Five shapes cover the report: a histogram on a log10 axis (weights), a line chart (clipping
//! trade-off), a dot chart with standard-error whiskers (candidate scores), overlaid histograms of
//! two samples (a numeric feature in source and target) and paired bars of level frequencies (a
//! categorical feature). Every chart carries a `<title>` for screen readers and is well-formed
//! XML. Meaning never rests on colour alone: the two samples differ in fill (solid against
//! outlined and dashed), lines in dash pattern, and every series is named in a legend or label.
//! Colours come from the Okabe & Ito (2008) palette, chosen to stay distinct for the common forms
//! of colour-blindness.
//!
//! Cost: linear in the number of points (the histograms sort nothing; bins are computed in one
//! pass).

use std::fmt::Write as _;

/// Text colour.
pub const INK: &str = "#222222";
/// Grid lines.
pub const GRID: &str = "#d9dee3";
/// Series colours in order (Okabe & Ito 2008: blue, orange, bluish green, reddish purple,
/// vermillion, sky blue).
pub const SERIES: [&str; 6] = [
    "#0072B2", "#E69F00", "#009E73", "#CC79A7", "#D55E00", "#56B4E9",
];
/// Dash patterns of line series in order (`""` is solid), so lines differ without colour.
pub const DASHES: [&str; 6] = ["", "6 3", "2 3", "8 3 2 3", "1 2", "10 4"];
/// Colour of the source sample.
pub const SOURCE_COLOUR: &str = SERIES[0];
/// Colour of the target sample.
pub const TARGET_COLOUR: &str = SERIES[4];

const W: f64 = 640.0;
const H: f64 = 300.0;
const LEFT: f64 = 64.0;
const RIGHT: f64 = 20.0;
const TOP: f64 = 34.0;
const BOTTOM: f64 = 48.0;

/// Escapes text for HTML/XML content and attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

pub use crate::format::{num, p_value, NOISE};

fn open(title: &str, h: f64) -> String {
    format!(
        "<svg class=\"chart\" viewBox=\"0 0 {W} {h}\" width=\"{W}\" height=\"{h}\" role=\"img\" aria-label=\"{t}\">\
         <title>{t}</title><text x=\"{LEFT}\" y=\"20\" fill=\"{INK}\" font-size=\"14\" font-weight=\"bold\">{t}</text>",
        t = esc(title)
    )
}

/// Roughly 5 round tick values covering [lo, hi].
fn ticks(lo: f64, hi: f64) -> Vec<f64> {
    ticks_n(lo, hi, 5.0)
}

/// Round tick values inside [lo, hi] at a step of 1, 2, 2.5 or 5 times a power of ten, the
/// smallest such step at least (hi - lo) / `n` (at most 12 ticks).
fn ticks_n(lo: f64, hi: f64, n: f64) -> Vec<f64> {
    if hi.is_nan() || lo.is_nan() || hi <= lo {
        return vec![lo];
    }
    let raw = (hi - lo) / n;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let mut t = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while t <= hi + step * 1e-9 && out.len() < 12 {
        out.push(if t.abs() < step * 1e-9 { 0.0 } else { t });
        t += step;
    }
    out
}

/// Fewest labelled ticks of a log axis.
pub const MIN_LOG_TICKS: usize = 3;

/// Most powers of ten labelled on a log axis (every k-th decade beyond that).
pub const MAX_DECADES: usize = 8;

/// Tick values (not logs) of a log10 axis spanning [10^lo, 10^hi], at least [`MIN_LOG_TICKS`]
/// of them: powers of ten when the span holds at least that many (every k-th, at most
/// [`MAX_DECADES`]), else the 1-2-5 multiples of each power of ten (spans under about two
/// decades), else, for spans too narrow even for those, round values at an even linear step.
/// O(decades + ticks).
pub fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite()) || hi <= lo {
        return vec![10f64.powf(lo)];
    }
    let eps = 1e-9;
    let (d0, d1) = ((lo - eps).ceil() as i32, (hi + eps).floor() as i32);
    let decades = (d1 - d0 + 1).max(0) as usize;
    if decades >= MIN_LOG_TICKS {
        let every = decades.div_ceil(MAX_DECADES);
        return (d0..=d1).step_by(every).map(|k| 10f64.powi(k)).collect();
    }
    let one_two_five: Vec<f64> = ((lo.floor() as i32)..=(hi.ceil() as i32))
        .flat_map(|k| [1.0, 2.0, 5.0].map(|m| m * 10f64.powi(k)))
        .filter(|v| (lo - eps..=hi + eps).contains(&v.log10()))
        .collect();
    if one_two_five.len() >= MIN_LOG_TICKS {
        return one_two_five;
    }
    let (a, b) = (10f64.powf(lo), 10f64.powf(hi));
    let mut n = 5.0;
    loop {
        let t: Vec<f64> = ticks_n(a, b, n).into_iter().filter(|v| *v > 0.0).collect();
        if t.len() >= MIN_LOG_TICKS || n > 1e3 {
            return t;
        }
        n *= 2.0;
    }
}

/// Ticks of a linear axis over [lo, hi] as (position, label).
fn linear_axis(lo: f64, hi: f64) -> Vec<(f64, String)> {
    ticks(lo, hi).into_iter().map(|t| (t, num(t))).collect()
}

/// Ticks of a log10 axis over [lo, hi] (in logs) as (position in logs, label of the value).
fn log_axis(lo: f64, hi: f64) -> Vec<(f64, String)> {
    log_ticks(lo, hi)
        .into_iter()
        .map(|v| (v.log10(), num(v)))
        .collect()
}

struct Frame {
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
    h: f64,
}

impl Frame {
    fn px(&self, x: f64) -> f64 {
        let span = if self.x1 > self.x0 {
            self.x1 - self.x0
        } else {
            1.0
        };
        LEFT + (x - self.x0) / span * (W - LEFT - RIGHT)
    }
    fn py(&self, y: f64) -> f64 {
        let span = if self.y1 > self.y0 {
            self.y1 - self.y0
        } else {
            1.0
        };
        self.h - BOTTOM - (y - self.y0) / span * (self.h - TOP - BOTTOM)
    }
    /// Axes, grid lines and labels; the x ticks are given as (position, label).
    fn axes(&self, s: &mut String, x_label: &str, y_label: &str, x_ticks: &[(f64, String)]) {
        for t in ticks(self.y0, self.y1) {
            let y = self.py(t);
            let _ = write!(
                s,
                "<line x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"{GRID}\"/>\
                 <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"end\" fill=\"{INK}\">{}</text>",
                W - RIGHT,
                LEFT - 6.0,
                y + 4.0,
                esc(&num(t))
            );
        }
        for (t, label) in x_ticks {
            let x = self.px(*t);
            let _ = write!(
                s,
                "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"{INK}\"/>\
                 <text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>",
                self.h - BOTTOM,
                self.h - BOTTOM + 5.0,
                self.h - BOTTOM + 18.0,
                esc(label)
            );
        }
        let _ = write!(
            s,
            "<line x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"{b:.1}\" y2=\"{b:.1}\" stroke=\"{INK}\"/>\
             <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>\
             <text x=\"14\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"middle\" fill=\"{INK}\" transform=\"rotate(-90 14 {:.1})\">{}</text>",
            W - RIGHT,
            (LEFT + W - RIGHT) / 2.0,
            self.h - 10.0,
            esc(x_label),
            (TOP + self.h - BOTTOM) / 2.0,
            (TOP + self.h - BOTTOM) / 2.0,
            esc(y_label),
            b = self.h - BOTTOM,
        );
    }
}

/// Legend entry: a swatch drawn like the series (filled, or outlined and dashed) and its name.
fn legend(s: &mut String, k: usize, name: &str, colour: &str, filled: bool, dash: &str) {
    let (x, y) = (W - RIGHT - 190.0, TOP + 16.0 * k as f64);
    let _ = write!(
        s,
        "<rect x=\"{x:.1}\" y=\"{y:.1}\" width=\"14\" height=\"10\" fill=\"{}\" fill-opacity=\"0.45\" stroke=\"{colour}\" stroke-width=\"2\"{}/>\
         <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" fill=\"{INK}\">{}</text>",
        if filled { colour } else { "none" },
        dash_attr(dash),
        x + 20.0,
        y + 9.0,
        esc(name)
    );
}

fn dash_attr(dash: &str) -> String {
    if dash.is_empty() {
        String::new()
    } else {
        format!(" stroke-dasharray=\"{dash}\"")
    }
}

/// Histogram of the positive values on a log10 axis; zeros and non-finite values are counted in
/// a note instead of drawn.
pub fn log_histogram(values: &[f64], title: &str, x_label: &str, bins: usize) -> String {
    let logs: Vec<f64> = values
        .iter()
        .filter(|v| v.is_finite() && **v > 0.0)
        .map(|v| v.log10())
        .collect();
    let zeros = values.len() - logs.len();
    let mut s = open(title, H);
    if logs.is_empty() {
        let _ = write!(
            s,
            "<text x=\"{LEFT}\" y=\"80\" fill=\"{INK}\">no positive values to draw</text></svg>"
        );
        return s;
    }
    let lo = logs.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = logs.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    let (lo, hi) = if hi - lo < 1e-9 {
        (lo - 0.5, hi + 0.5)
    } else {
        (lo, hi)
    };
    let counts = bin_counts(&logs, lo, hi, bins);
    let width = (hi - lo) / counts.len() as f64;
    let top = *counts.iter().max().unwrap_or(&1) as f64;
    let f = Frame {
        x0: lo,
        x1: hi,
        y0: 0.0,
        y1: top,
        h: H,
    };
    f.axes(&mut s, x_label, "rows", &log_axis(lo, hi));
    for (b, c) in counts.iter().enumerate() {
        let (xa, xb) = (
            f.px(lo + b as f64 * width),
            f.px(lo + (b + 1) as f64 * width),
        );
        let (ya, yb) = (f.py(*c as f64), f.py(0.0));
        let _ = write!(
            s,
            "<rect x=\"{xa:.1}\" y=\"{ya:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{}\"><title>{} rows</title></rect>",
            (xb - xa - 1.0).max(0.5),
            yb - ya,
            SERIES[0],
            c
        );
    }
    if zeros > 0 {
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"20\" font-size=\"11\" text-anchor=\"end\" fill=\"{INK}\">{zeros} zero weight(s) not drawn</text>",
            W - RIGHT
        );
    }
    s.push_str("</svg>");
    s
}

/// Counts of `values` in `bins` equal-width bins over [lo, hi] (the last bin closed; values
/// outside are clamped into the end bins).
pub fn bin_counts(values: &[f64], lo: f64, hi: f64, bins: usize) -> Vec<usize> {
    let bins = bins.max(1);
    let width = if hi > lo {
        (hi - lo) / bins as f64
    } else {
        1.0
    };
    let mut counts = vec![0usize; bins];
    for v in values.iter().filter(|v| v.is_finite()) {
        let b = ((v - lo) / width).max(0.0) as usize;
        counts[b.min(bins - 1)] += 1;
    }
    counts
}

/// One line of a line chart.
pub struct Series {
    /// Legend text.
    pub name: String,
    /// Points (x, y), drawn in the given order; non-finite points are skipped.
    pub points: Vec<(f64, f64)>,
}

/// Line chart; with `log_x`, x values are drawn on a log10 axis (non-positive x skipped). Series
/// differ in colour and dash pattern and are named in a legend.
pub fn line_chart(
    series: &[Series],
    title: &str,
    x_label: &str,
    y_label: &str,
    log_x: bool,
) -> String {
    let tx = |x: f64| if log_x { x.log10() } else { x };
    let pts: Vec<(f64, f64)> = series
        .iter()
        .flat_map(|s| s.points.iter())
        .map(|&(x, y)| (tx(x), y))
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .collect();
    let mut s = open(title, H);
    if pts.is_empty() {
        let _ = write!(
            s,
            "<text x=\"{LEFT}\" y=\"80\" fill=\"{INK}\">no finite points to draw</text></svg>"
        );
        return s;
    }
    let (mut x0, mut x1, mut y0, mut y1) = (
        f64::INFINITY,
        f64::NEG_INFINITY,
        f64::INFINITY,
        f64::NEG_INFINITY,
    );
    for (x, y) in &pts {
        x0 = x0.min(*x);
        x1 = x1.max(*x);
        y0 = y0.min(*y);
        y1 = y1.max(*y);
    }
    if x1 - x0 < 1e-12 {
        x0 -= 0.5;
        x1 += 0.5;
    }
    let pad = if y1 - y0 < 1e-12 {
        0.5
    } else {
        0.05 * (y1 - y0)
    };
    let f = Frame {
        x0,
        x1,
        y0: y0 - pad,
        y1: y1 + pad,
        h: H,
    };
    let xt = if log_x {
        log_axis(f.x0, f.x1)
    } else {
        linear_axis(f.x0, f.x1)
    };
    f.axes(&mut s, x_label, y_label, &xt);
    for (k, ser) in series.iter().enumerate() {
        let colour = SERIES[k % SERIES.len()];
        let dash = DASHES[k % DASHES.len()];
        let mut d = String::new();
        for &(x, y) in &ser.points {
            let x = tx(x);
            if !(x.is_finite() && y.is_finite()) {
                continue;
            }
            let _ = write!(
                d,
                "{}{:.1},{:.1} ",
                if d.is_empty() { "M" } else { "L" },
                f.px(x),
                f.py(y)
            );
            let _ = write!(
                s,
                "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3\" fill=\"{colour}\"/>",
                f.px(x),
                f.py(y)
            );
        }
        let _ = write!(
            s,
            "<path d=\"{}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\"{}/>",
            d.trim_end(),
            dash_attr(dash)
        );
        if series.len() > 1 {
            legend(&mut s, k, &ser.name, colour, false, dash);
        }
    }
    s.push_str("</svg>");
    s
}

/// One row of a dot chart with whiskers.
pub struct Dot {
    /// Label at the left of the row.
    pub label: String,
    /// The value (drawn as a dot).
    pub value: f64,
    /// Half-width of the whisker (e.g. one standard error), when known.
    pub spread: Option<f64>,
    /// Drawn as a larger diamond and labelled `chosen`.
    pub marked: bool,
}

/// Horizontal dot chart with whiskers, one row per entry in the given order; the axis spans the
/// values and whiskers given (callers leave out entries that would squeeze the rest, and say so).
pub fn dot_chart(rows: &[Dot], title: &str, value_label: &str) -> String {
    let h = TOP + 24.0 * rows.len().max(1) as f64 + BOTTOM;
    let mut s = open(title, h);
    let finite: Vec<&Dot> = rows.iter().filter(|r| r.value.is_finite()).collect();
    if finite.is_empty() {
        let _ = write!(
            s,
            "<text x=\"{LEFT}\" y=\"80\" fill=\"{INK}\">no finite values to draw</text></svg>"
        );
        return s;
    }
    let spread = |r: &Dot| r.spread.filter(|v| v.is_finite()).unwrap_or(0.0).abs();
    let lo = finite
        .iter()
        .map(|r| r.value - spread(r))
        .fold(f64::INFINITY, f64::min);
    let hi = finite
        .iter()
        .map(|r| r.value + spread(r))
        .fold(f64::NEG_INFINITY, f64::max);
    let pad = if hi - lo < 1e-12 {
        0.5
    } else {
        0.05 * (hi - lo)
    };
    // Room for the longest label at about 6.2 px a character (11 px sans-serif), within bounds.
    let longest = rows
        .iter()
        .map(|r| r.label.chars().count())
        .max()
        .unwrap_or(0);
    let label_w = (longest as f64 * 6.2 + 16.0).clamp(120.0, 330.0);
    let plot_w = W - label_w - RIGHT - 70.0;
    let (x0, x1) = (lo - pad, hi + pad);
    let px = |v: f64| label_w + (v - x0) / (x1 - x0) * plot_w;
    let bottom = h - BOTTOM;
    for t in ticks(x0, x1) {
        let x = px(t);
        let _ = write!(
            s,
            "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{TOP}\" y2=\"{bottom:.1}\" stroke=\"{GRID}\"/>\
             <text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>",
            bottom + 16.0,
            esc(&num(t))
        );
    }
    for (i, r) in rows.iter().enumerate() {
        let y = TOP + 24.0 * i as f64 + 12.0;
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"end\" fill=\"{INK}\"{}>{}</text>",
            label_w - 8.0,
            y + 4.0,
            if r.marked { " font-weight=\"bold\"" } else { "" },
            esc(&r.label)
        );
        if !r.value.is_finite() {
            continue;
        }
        let x = px(r.value);
        if let Some(e) = r.spread.filter(|v| v.is_finite() && *v > 0.0) {
            let _ = write!(
                s,
                "<line x1=\"{:.1}\" x2=\"{:.1}\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"{INK}\" stroke-width=\"1.5\"/>",
                px(r.value - e),
                px(r.value + e)
            );
        }
        if r.marked {
            let _ = write!(
                s,
                "<path d=\"M{x:.1},{:.1} L{:.1},{y:.1} L{x:.1},{:.1} L{:.1},{y:.1} Z\" fill=\"{}\" stroke=\"{INK}\"/>\
                 <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" font-weight=\"bold\" fill=\"{INK}\">chosen</text>",
                y - 7.0,
                x + 7.0,
                y + 7.0,
                x - 7.0,
                SERIES[1],
                (x + 10.0).min(W - 50.0),
                y - 6.0
            );
        } else {
            let _ = write!(
                s,
                "<circle cx=\"{x:.1}\" cy=\"{y:.1}\" r=\"4\" fill=\"{}\"/>",
                SERIES[0]
            );
        }
    }
    let _ = write!(
        s,
        "<line x1=\"{label_w}\" x2=\"{:.1}\" y1=\"{bottom:.1}\" y2=\"{bottom:.1}\" stroke=\"{INK}\"/>\
         <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"middle\" fill=\"{INK}\">{}</text></svg>",
        label_w + plot_w,
        label_w + plot_w / 2.0,
        h - 10.0,
        esc(value_label)
    );
    s
}

/// Shared bins of two samples of one numeric column: the range is the pooled 0.5% to 99.5%
/// quantiles, so a few extreme rows do not flatten the picture (rows outside are counted in the
/// end bins); each sample's counts are divided by its finite rows, so samples of different sizes
/// compare. Returns (lo, hi, source shares, target shares); `None` when no value is finite.
pub fn shared_bins(
    source: &[f64],
    target: &[f64],
    bins: usize,
) -> Option<(f64, f64, Vec<f64>, Vec<f64>)> {
    let mut pooled: Vec<f64> = source
        .iter()
        .chain(target)
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    if pooled.is_empty() {
        return None;
    }
    pooled.sort_by(f64::total_cmp);
    let q = |p: f64| pooled[((pooled.len() - 1) as f64 * p).round() as usize];
    let (mut lo, mut hi) = (q(0.005), q(0.995));
    if hi - lo < 1e-12 {
        lo -= 0.5;
        hi += 0.5;
    }
    let share = |v: &[f64]| -> Vec<f64> {
        let c = bin_counts(v, lo, hi, bins);
        let n = c.iter().sum::<usize>().max(1) as f64;
        c.iter().map(|k| *k as f64 / n).collect()
    };
    Some((lo, hi, share(source), share(target)))
}

/// Source and target histograms of one numeric column on the shared bins of [`shared_bins`]
/// (`hs`, `ht`: shares per bin over [lo, hi]): the source as filled bars, the target as a dashed
/// outline on top, both named in the legend.
pub fn two_sample_histogram(
    lo: f64,
    hi: f64,
    hs: &[f64],
    ht: &[f64],
    title: &str,
    x_label: &str,
) -> String {
    let mut s = open(title, H);
    let nb = hs.len().min(ht.len());
    if nb == 0 || hi.is_nan() || lo.is_nan() || hi <= lo {
        let _ = write!(
            s,
            "<text x=\"{LEFT}\" y=\"80\" fill=\"{INK}\">no finite values to draw</text></svg>"
        );
        return s;
    }
    let top = hs.iter().chain(ht).cloned().fold(0.0, f64::max);
    let f = Frame {
        x0: lo,
        x1: hi,
        y0: 0.0,
        y1: if top > 0.0 { top * 1.15 } else { 1.0 },
        h: H,
    };
    f.axes(&mut s, x_label, "share of rows", &linear_axis(f.x0, f.x1));
    let width = (hi - lo) / nb as f64;
    for (b, v) in hs.iter().take(nb).enumerate() {
        let (xa, xb) = (
            f.px(lo + b as f64 * width),
            f.px(lo + (b + 1) as f64 * width),
        );
        let _ = write!(
            s,
            "<rect x=\"{xa:.1}\" y=\"{:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{SOURCE_COLOUR}\" fill-opacity=\"0.45\"/>",
            f.py(*v),
            (xb - xa - 0.5).max(0.5),
            f.py(0.0) - f.py(*v)
        );
    }
    // Target: a step outline over the same bins.
    let mut d = format!("M{:.1},{:.1}", f.px(lo), f.py(0.0));
    for (b, v) in ht.iter().take(nb).enumerate() {
        let _ = write!(
            d,
            " L{:.1},{:.1} L{:.1},{:.1}",
            f.px(lo + b as f64 * width),
            f.py(*v),
            f.px(lo + (b + 1) as f64 * width),
            f.py(*v)
        );
    }
    let _ = write!(d, " L{:.1},{:.1}", f.px(hi), f.py(0.0));
    let _ = write!(
        s,
        "<path d=\"{d}\" fill=\"none\" stroke=\"{TARGET_COLOUR}\" stroke-width=\"2\" stroke-dasharray=\"6 3\"/>"
    );
    legend(&mut s, 0, "source (filled bars)", SOURCE_COLOUR, true, "");
    legend(
        &mut s,
        1,
        "target (dashed outline)",
        TARGET_COLOUR,
        false,
        "6 3",
    );
    s.push_str("</svg>");
    s
}

/// Level frequencies of one categorical column: for each level, a filled source bar and an
/// outlined, dashed target bar side by side, as shares of each sample, with the share printed.
pub fn level_bars(levels: &[String], source: &[f64], target: &[f64], title: &str) -> String {
    let n = levels.len().min(source.len()).min(target.len());
    let h = TOP + 40.0 * n.max(1) as f64 + BOTTOM;
    let mut s = open(title, h);
    let label_w = 170.0;
    let plot_w = W - label_w - RIGHT - 60.0;
    let top = source
        .iter()
        .chain(target)
        .take(2 * n)
        .cloned()
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    let top = if top > 0.0 { top } else { 1.0 };
    for i in 0..n {
        let y = TOP + 40.0 * i as f64;
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"end\" fill=\"{INK}\">{}</text>",
            label_w - 6.0,
            y + 20.0,
            esc(&levels[i])
        );
        for (k, (v, colour, filled)) in [
            (source[i], SOURCE_COLOUR, true),
            (target[i], TARGET_COLOUR, false),
        ]
        .into_iter()
        .enumerate()
        {
            let v = if v.is_finite() { v.max(0.0) } else { 0.0 };
            let bw = v / top * plot_w;
            let yy = y + 2.0 + 17.0 * k as f64;
            let _ = write!(
                s,
                "<rect x=\"{label_w}\" y=\"{yy:.1}\" width=\"{bw:.1}\" height=\"14\" fill=\"{}\" fill-opacity=\"0.45\" stroke=\"{colour}\" stroke-width=\"1.5\"{}/>\
                 <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" fill=\"{INK}\">{} {}</text>",
                if filled { colour } else { "none" },
                if filled { "" } else { " stroke-dasharray=\"4 2\"" },
                label_w + bw + 4.0,
                yy + 11.0,
                if k == 0 { "source" } else { "target" },
                esc(&format!("{:.1}%", 100.0 * v))
            );
        }
    }
    let _ = write!(
        s,
        "<line x1=\"{label_w}\" x2=\"{label_w}\" y1=\"{TOP}\" y2=\"{:.1}\" stroke=\"{INK}\"/>\
         <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"middle\" fill=\"{INK}\">share of rows</text></svg>",
        h - BOTTOM,
        label_w + plot_w / 2.0,
        h - 16.0,
    );
    s
}

#[cfg(test)]
mod tests;
