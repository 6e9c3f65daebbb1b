use super::*;

fn parse(svg: &str) -> roxmltree::Document<'_> {
    // reference: roxmltree, an independent strict XML parser (rejects unbalanced tags)
    roxmltree::Document::parse(svg).unwrap()
}

#[test]
fn escapes_markup() {
    assert_eq!(esc("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
}

#[test]
fn numbers_without_noise_or_false_zeros() {
    assert_eq!(num(-1.776e-15), "0");
    assert_eq!(num(54.7723), "54.77");
    assert_eq!(num(0.0871), "0.0871");
    assert_eq!(num(194.0), "194");
    assert_eq!(num(-1.9e5), "-1.900e5");
    assert_eq!(num(0.000_123_4), "1.234e-4");
    assert_eq!(p_value(0.0), "< 1e-300");
    assert_eq!(p_value(3.2e-7), "3.2e-7");
    assert_eq!(p_value(0.0099), "0.0099");
    assert_eq!(p_value(0.5), "0.500");
}

#[test]
fn ticks_cover_range() {
    let t = ticks(0.0, 10.0);
    assert_eq!(t.first(), Some(&0.0));
    assert_eq!(t.last(), Some(&10.0));
}

#[test]
fn bins_count_every_finite_value_once() {
    let c = bin_counts(&[0.0, 0.5, 1.0, 2.0, f64::NAN, -5.0, 9.0], 0.0, 2.0, 4);
    // Bins of width 0.5: 0 and the clamped -5 in the first, 0.5 and 1 in the next two, the
    // closed end 2 and the clamped 9 in the last; NaN is dropped.
    assert_eq!(c, vec![2, 1, 1, 2]);
}

#[test]
fn histogram_counts_every_positive_value() {
    // 3 positive values, one zero: the bars' tooltips must add up to 3 and the zero be noted.
    let s = log_histogram(&[0.0, 0.5, 1.0, 2.0], "w", "weight", 4);
    parse(&s);
    let total: usize = s
        .split("<title>")
        .skip(2)
        .filter_map(|p| p.split(" rows</title>").next()?.parse::<usize>().ok())
        .sum();
    assert_eq!(total, 3);
    assert!(s.contains("1 zero weight(s)"));
}

#[test]
fn two_samples_are_told_apart_without_colour() {
    let (lo, hi, hs, ht) = shared_bins(&[0.0, 1.0, 2.0], &[1.0, 2.0, 3.0, 3.0], 3).unwrap();
    // Pooled range [0, 3] in 3 bins of width 1; each sample's shares add up to 1.
    assert_eq!((lo, hi), (0.0, 3.0));
    assert_eq!(hs, vec![1.0 / 3.0, 1.0 / 3.0, 1.0 / 3.0]);
    assert_eq!(ht, vec![0.0, 0.25, 0.75]);
    let s = two_sample_histogram(lo, hi, &hs, &ht, "x", "x");
    let doc = parse(&s);
    assert!(s.contains("source (filled bars)") && s.contains("target (dashed outline)"));
    assert!(doc
        .descendants()
        .any(|n| n.attribute("stroke-dasharray").is_some()));
    let lv = level_bars(
        &["a".into(), "b".into()],
        &[0.25, 0.75],
        &[0.5, 0.5],
        "levels",
    );
    parse(&lv);
    assert!(lv.contains("source 25.0%") && lv.contains("target 50.0%"));
}

#[test]
fn dot_chart_marks_the_chosen_row_in_words() {
    let rows = vec![
        Dot {
            label: "first".into(),
            value: -0.6,
            spread: Some(0.05),
            marked: false,
        },
        Dot {
            label: "second".into(),
            value: -0.7,
            spread: Some(0.02),
            marked: true,
        },
    ];
    let s = dot_chart(&rows, "scores", "score");
    parse(&s);
    assert_eq!(s.matches(">chosen<").count(), 1);
    assert!(s.contains(">first<") && s.contains(">second<"));
}

/// The x-axis tick labels of a chart, as numbers (labels at the axis in 11-point type, centred).
fn x_tick_values(svg: &str) -> Vec<f64> {
    parse(svg)
        .descendants()
        .filter(|n| {
            n.has_tag_name("text")
                && n.attribute("font-size") == Some("11")
                && n.attribute("text-anchor") == Some("middle")
        })
        .map(|n| n.text().unwrap_or("").parse::<f64>().unwrap())
        .collect()
}

#[test]
fn log_ticks_are_powers_of_ten_over_wide_spans() {
    // 10^-3 .. 10^2: one tick per decade (the definition of a log10 axis's major ticks).
    let t = log_ticks(-3.0, 2.0);
    let want = [1e-3, 1e-2, 1e-1, 1.0, 10.0, 100.0];
    assert_eq!(t.len(), want.len());
    for (a, b) in t.iter().zip(want) {
        assert!((a / b - 1.0).abs() < 1e-12, "{t:?}");
    }
    // Twenty decades: every third power of ten, so at most MAX_DECADES labels.
    let t = log_ticks(-10.0, 10.0);
    assert!(t.len() >= MIN_LOG_TICKS && t.len() <= MAX_DECADES, "{t:?}");
    assert!(t.windows(2).all(|w| (w[1] / w[0]).log10().round() == 3.0));
}

#[test]
fn log_ticks_use_one_two_five_under_two_decades() {
    // 0.3 .. 20: the 1-2-5 multiples of each power of ten inside the span.
    let t = log_ticks(0.3f64.log10(), 20f64.log10());
    let want = [0.5, 1.0, 2.0, 5.0, 10.0, 20.0];
    assert_eq!(t.len(), want.len(), "{t:?}");
    for (a, b) in t.iter().zip(want) {
        assert!((a / b - 1.0).abs() < 1e-12, "{t:?}");
    }
    // 0.15 .. 12 holds the powers 1 and 10 only: two are too few, so 1-2-5 again.
    let t = log_ticks(0.15f64.log10(), 12f64.log10());
    assert_eq!(t.len(), 6, "{t:?}"); // 0.2, 0.5, 1, 2, 5, 10
}

#[test]
fn every_log_axis_has_at_least_three_ticks_inside_its_span() {
    // Spans from a twentieth of a decade to six decades at many offsets.
    let mut lo = -4.0;
    while lo < 2.0 {
        let mut span = 0.05;
        while span < 6.0 {
            let hi = lo + span;
            let t = log_ticks(lo, hi);
            assert!(t.len() >= MIN_LOG_TICKS, "[{lo}, {hi}]: {t:?}");
            assert!(t.windows(2).all(|w| w[1] > w[0]), "[{lo}, {hi}]: {t:?}");
            for v in &t {
                let l = v.log10();
                assert!(l >= lo - 1e-9 && l <= hi + 1e-9, "[{lo}, {hi}]: {t:?}");
            }
            span *= 1.37;
        }
        lo += 0.13;
    }
}

#[test]
fn log_charts_label_at_least_three_ticks() {
    // Weights within less than one decade (0.6 .. 3): the histogram's axis still names 3+ values,
    // each inside the drawn range.
    let w: Vec<f64> = (0..200).map(|i| 0.6 + 2.4 * i as f64 / 199.0).collect();
    let t = x_tick_values(&log_histogram(&w, "w", "weight", 20));
    assert!(t.len() >= MIN_LOG_TICKS, "{t:?}");
    assert!(t.iter().all(|v| (0.6..=3.0).contains(v)), "{t:?}");
    // A clipping curve with caps 1.45 .. 54.8 (as in the demo): 2, 5, 10, 20, 50.
    let caps = [1.452, 2.25, 4.05, 6.597, 13.41, 22.75, 28.54, 54.77];
    let series = vec![Series {
        name: "ess".into(),
        points: caps.iter().map(|&c| (c, 100.0 / c)).collect(),
    }];
    let t = x_tick_values(&line_chart(&series, "c", "cap", "ess", true));
    assert_eq!(t, vec![2.0, 5.0, 10.0, 20.0, 50.0]);
}
