//! Hand-written SVG charts for the HTML report: plain strings, no scripts, no external references.
//!
//! Three shapes are enough for the report: a histogram on a log10 axis (weights), a horizontal
//! bar chart (feature shift, estimator scores), and a line chart (selection scores, clipping
//! trade-off). Every chart carries a `<title>` for screen readers and is well-formed XML.

use std::fmt::Write as _;

/// Colours of the report (our own palette).
pub const INK: &str = "#23303b";
pub const GRID: &str = "#d9dee3";
/// Series colours, used in order.
pub const SERIES: [&str; 6] = [
    "#1f6f78", "#c9772c", "#6d4a8c", "#4f8a3a", "#b23a48", "#5c6b78",
];

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

/// A number in at most 4 significant digits, switching to exponent notation when very small/large.
pub fn num(v: f64) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e5).contains(&a) {
        format!("{v:.3e}")
    } else if a >= 100.0 || v == v.trunc() && a < 1e5 {
        if v == v.trunc() {
            format!("{v:.0}")
        } else {
            format!("{v:.1}")
        }
    } else {
        let s = format!("{v:.4}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        s.to_string()
    }
}

fn open(title: &str, h: f64) -> String {
    format!(
        "<svg class=\"chart\" viewBox=\"0 0 {W} {h}\" width=\"{W}\" height=\"{h}\" role=\"img\" aria-label=\"{t}\">\
         <title>{t}</title><text x=\"{LEFT}\" y=\"20\" fill=\"{INK}\" font-size=\"14\" font-weight=\"bold\">{t}</text>",
        t = esc(title)
    )
}

/// Roughly 5 round tick values covering [lo, hi].
fn ticks(lo: f64, hi: f64) -> Vec<f64> {
    if hi.is_nan() || lo.is_nan() || hi <= lo {
        return vec![lo];
    }
    let raw = (hi - lo) / 5.0;
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
    /// Axes, grid lines and labels. `xfmt` formats x tick values.
    fn axes(&self, s: &mut String, x_label: &str, y_label: &str, xfmt: &dyn Fn(f64) -> String) {
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
        for t in ticks(self.x0, self.x1) {
            let x = self.px(t);
            let _ = write!(
                s,
                "<line x1=\"{x:.1}\" x2=\"{x:.1}\" y1=\"{:.1}\" y2=\"{:.1}\" stroke=\"{INK}\"/>\
                 <text x=\"{x:.1}\" y=\"{:.1}\" font-size=\"11\" text-anchor=\"middle\" fill=\"{INK}\">{}</text>",
                self.h - BOTTOM,
                self.h - BOTTOM + 5.0,
                self.h - BOTTOM + 18.0,
                esc(&xfmt(t))
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

/// Histogram of the positive values on a log10 axis; zeros and non-finite values are counted in
/// the caption instead of drawn.
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
    let bins = bins.max(1);
    let width = (hi - lo) / bins as f64;
    let mut counts = vec![0usize; bins];
    for l in &logs {
        let b = (((l - lo) / width) as usize).min(bins - 1);
        counts[b] += 1;
    }
    let top = *counts.iter().max().unwrap_or(&1) as f64;
    let f = Frame {
        x0: lo,
        x1: hi,
        y0: 0.0,
        y1: top,
        h: H,
    };
    f.axes(&mut s, x_label, "rows", &|t| num(10f64.powf(t)));
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

/// Horizontal bar chart, one bar per label, in the given order.
pub fn bar_chart(labels: &[String], values: &[f64], title: &str, value_label: &str) -> String {
    let n = labels.len().min(values.len());
    let h = TOP + 22.0 * n as f64 + BOTTOM;
    let mut s = open(title, h);
    let label_w = 170.0;
    let vmax = values
        .iter()
        .take(n)
        .cloned()
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    let vmax = if vmax > 0.0 { vmax } else { 1.0 };
    let plot_w = W - label_w - RIGHT - 60.0;
    for i in 0..n {
        let y = TOP + 22.0 * i as f64;
        let v = if values[i].is_finite() {
            values[i].max(0.0)
        } else {
            0.0
        };
        let bw = v / vmax * plot_w;
        let _ = write!(
            s,
            "<text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"end\" fill=\"{INK}\">{}</text>\
             <rect x=\"{label_w}\" y=\"{:.1}\" width=\"{bw:.1}\" height=\"16\" fill=\"{}\"/>\
             <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" fill=\"{INK}\">{}</text>",
            label_w - 6.0,
            y + 12.0,
            esc(&labels[i]),
            y,
            SERIES[i % 2],
            label_w + bw + 4.0,
            y + 12.0,
            esc(&num(values[i]))
        );
    }
    let _ = write!(
        s,
        "<line x1=\"{label_w}\" x2=\"{label_w}\" y1=\"{TOP}\" y2=\"{:.1}\" stroke=\"{INK}\"/>\
         <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"12\" text-anchor=\"middle\" fill=\"{INK}\">{}</text></svg>",
        h - BOTTOM,
        label_w + plot_w / 2.0,
        h - 16.0,
        esc(value_label)
    );
    s
}

/// One line of a line chart.
pub struct Series {
    /// Legend text.
    pub name: String,
    /// Points (x, y), drawn in the given order; non-finite points are skipped.
    pub points: Vec<(f64, f64)>,
}

/// Line chart; with `log_x`, x values are drawn on a log10 axis (non-positive x skipped).
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
    f.axes(&mut s, x_label, y_label, &|t| {
        if log_x {
            num(10f64.powf(t))
        } else {
            num(t)
        }
    });
    for (k, ser) in series.iter().enumerate() {
        let colour = SERIES[k % SERIES.len()];
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
            "<path d=\"{}\" fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\"/>\
             <rect x=\"{:.1}\" y=\"{:.1}\" width=\"10\" height=\"10\" fill=\"{colour}\"/>\
             <text x=\"{:.1}\" y=\"{:.1}\" font-size=\"11\" fill=\"{INK}\">{}</text>",
            d.trim_end(),
            W - RIGHT - 150.0,
            TOP + 14.0 * k as f64,
            W - RIGHT - 136.0,
            TOP + 14.0 * k as f64 + 9.0,
            esc(&ser.name)
        );
    }
    s.push_str("</svg>");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_markup() {
        assert_eq!(esc("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }

    #[test]
    fn ticks_cover_range() {
        let t = ticks(0.0, 10.0);
        assert_eq!(t.first(), Some(&0.0));
        assert_eq!(t.last(), Some(&10.0));
    }

    #[test]
    fn histogram_counts_every_positive_value() {
        // 3 positive values, one zero: the bars' tooltips must add up to 3 and the zero be noted.
        let s = log_histogram(&[0.0, 0.5, 1.0, 2.0], "w", "weight", 4);
        let total: usize = s
            .split("<title>")
            .skip(2)
            .filter_map(|p| p.split(" rows</title>").next()?.parse::<usize>().ok())
            .sum();
        assert_eq!(total, 3);
        assert!(s.contains("1 zero weight(s)"));
    }
}
