use super::*;
use shiftweight::ratio::{LeastSquaresRatio, RatioEstimator};
use shiftweight::MatrixView;

fn gaussian(n: usize, d: usize, mean: f64, seed: u64) -> Vec<f64> {
    // Box-Muller on a seeded xorshift generator (no test-only randomness crate needed).
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut u = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        ((state >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    (0..n * d)
        .map(|_| mean + (-2.0 * u().ln()).sqrt() * (2.0 * std::f64::consts::PI * u()).cos())
        .collect()
}

fn parse(html: &str) -> roxmltree::Document<'_> {
    // reference: roxmltree, an independent strict XML parser (rejects unbalanced tags)
    roxmltree::Document::parse_with_options(
        html,
        roxmltree::ParsingOptions {
            allow_dtd: true,
            ..Default::default()
        },
    )
    .unwrap_or_else(|e| panic!("report is not well-formed: {e}"))
}

fn rows_of<'a>(doc: &'a roxmltree::Document<'a>, id: &str) -> Vec<roxmltree::Node<'a, 'a>> {
    doc.descendants()
        .find(|n| n.attribute("id") == Some(id))
        .unwrap_or_else(|| panic!("no #{id}"))
        .descendants()
        .filter(|n| n.has_tag_name("tr") && n.parent().is_some_and(|p| p.has_tag_name("tbody")))
        .collect()
}

fn text(n: &roxmltree::Node) -> String {
    n.descendants().filter_map(|t| t.text()).collect::<String>()
}

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
fn repeated_caps_are_shown_once() {
    let row = |cap: f64, ess: f64| ClipRow {
        cap,
        share_capped: 0.0,
        effective_sample_size: ess,
        shift_of_mean: Some(-1.776e-15),
    };
    let rows = distinct_caps(vec![
        row(54.7723, 194.0),
        row(54.7723, 194.0),
        row(54.772_300_000_000_01, 194.0),
        row(80.0, 190.0),
    ]);
    assert_eq!(rows.len(), 2);
    assert_eq!(rows[1].cap, 80.0);
}

#[test]
fn every_section_is_present_even_when_empty() {
    let html = Report::new("weigh", 0).to_html();
    let doc = parse(&html);
    let ids: Vec<&str> = doc
        .descendants()
        .filter(|n| n.has_tag_name("section"))
        .filter_map(|n| n.attribute("id"))
        .collect();
    assert_eq!(ids, SECTIONS.map(|(id, _)| id));
    assert!(html.contains("Not available in this report"));
}

#[test]
fn a_full_report_answers_the_reviewers_questions() {
    let (n, d) = (300, 3);
    let s = gaussian(n, d, 0.0, 1);
    let t = gaussian(n, d, 0.7, 2);
    let (sv, tv) = (
        MatrixView::new(&s, n, d).unwrap(),
        MatrixView::new(&t, n, d).unwrap(),
    );
    let names: Vec<String> = ["a", "b<c", "d"].iter().map(|x| x.to_string()).collect();
    let opts = ShiftOptions {
        permutations: 19,
        ..Default::default()
    };
    let mut r = full_report("report", sv, tv, &names, WeightSource::Automatic, &opts, 7).unwrap();
    r.extra_sections.push(ExtraSection {
        id: "label_shift".into(),
        title: "Label shift".into(),
        paragraphs: vec!["an optional section".into()],
        tables: Vec::new(),
    });
    let html = r.to_html();
    let doc = parse(&html);

    // Every candidate by name in the candidates table, exactly one marked chosen.
    let e = r.estimator.get().unwrap();
    let rows = rows_of(&doc, "candidates");
    assert_eq!(rows.len(), e.candidates.len());
    for (row, c) in rows.iter().zip(&e.candidates) {
        assert!(text(row).contains(&c.name), "{}", c.name);
    }
    let chosen: Vec<_> = rows
        .iter()
        .filter(|r| r.attribute("class") == Some("chosen"))
        .collect();
    assert_eq!(chosen.len(), 1);
    assert!(text(chosen[0]).contains("chosen"));
    assert!(e.candidates.iter().any(|c| c.name == "uniform"));

    // The shift test names its statistic and interval; 19 permutations give p >= 1/20.
    let s = r.shift.get().unwrap();
    assert_eq!(s.statistic_name, "AUC");
    let (lo, hi) = s.interval.unwrap();
    assert!(lo <= s.statistic && s.statistic <= hi);
    assert!(html.contains(&format!("AUC = {}", svg::num(s.statistic))));
    assert!(html.contains(&format!("{} to {}", svg::num(lo), svg::num(hi))));
    assert_eq!(s.p_floor, Some(0.05));
    assert!(s.p_value >= 0.05);
    assert!(html.contains("1/(B+1)"));

    // One distribution figure per most shifted feature (3 features < FEATURE_FIGURES).
    let figs = doc
        .descendants()
        .filter(|n| n.attribute("class") == Some("feature-distribution"))
        .count();
    assert_eq!(figs, d.min(FEATURE_FIGURES));
    assert_eq!(rows_of(&doc, "feature-table").len(), d);
    // The wide feature table scrolls inside its own box instead of widening the page.
    let table = doc
        .descendants()
        .find(|n| n.attribute("id") == Some("feature-table"))
        .unwrap();
    assert_eq!(
        table.parent_element().and_then(|p| p.attribute("class")),
        Some("table-scroll")
    );
    assert!(html.contains("b&lt;c"));

    // The clipping table has distinct rows only, and no floating-point noise anywhere.
    let clip: Vec<String> = rows_of(&doc, "clip-table").iter().map(text).collect();
    let mut dedup = clip.clone();
    dedup.sort();
    dedup.dedup();
    assert_eq!(dedup.len(), clip.len(), "{clip:?}");
    // (Exponents like e-17 are legitimate for p-values; noise would show in these tables.)
    for id in ["clip-table", "diagnostics", "candidates"] {
        for row in rows_of(&doc, id) {
            let t = text(&row);
            assert!(!t.contains("e-1"), "{id}: {t}");
        }
    }

    // Optional section before the cautions; nothing external.
    let ids: Vec<&str> = doc
        .descendants()
        .filter(|n| n.has_tag_name("section"))
        .filter_map(|n| n.attribute("id"))
        .collect();
    assert_eq!(ids[ids.len() - 2..], ["label_shift", "cautions"]);
    let lower = html.to_ascii_lowercase();
    assert!(
        !lower.contains("http://") && !lower.contains("https://") && !lower.contains("@import")
    );
    for n in doc.descendants().filter(|n| n.is_element()) {
        for a in n.attributes() {
            if ["src", "href"].contains(&a.name()) {
                assert!(a.value().starts_with('#'), "{}={}", a.name(), a.value());
            }
        }
    }

    // The JSON carries the same numbers and the summary.
    let json: serde_json::Value = serde_json::from_str(&r.to_json()).unwrap();
    assert_eq!(json["version"], REPORT_VERSION);
    assert_eq!(json["shift"]["data"]["statistic"], s.statistic);
    assert!(json["summary"].as_str().unwrap().contains("AUC"));
}

#[test]
fn grid_candidates_are_named_by_their_hyperparameters() {
    let (n, d) = (120, 2);
    let s = gaussian(n, d, 0.0, 3);
    let t = gaussian(n, d, 0.5, 4);
    let m = LeastSquaresRatio::new()
        .n_basis(30)
        .fit(
            MatrixView::new(&s, n, d).unwrap(),
            MatrixView::new(&t, n, d).unwrap(),
        )
        .unwrap();
    let e = EstimatorPart::from_model(&m);
    assert_eq!(e.candidates.len(), m.selection.table.len());
    assert_eq!(e.candidates.iter().filter(|c| c.chosen).count(), 1);
    assert!(
        e.candidates[0].name.starts_with("lam = "),
        "{}",
        e.candidates[0].name
    );
    assert!(e.description.starts_with("uLSIF"), "{}", e.description);
    assert!(e.description.contains("leave-one-out"));
}

#[test]
fn given_weights_of_the_wrong_length_are_refused_by_name() {
    let s = gaussian(50, 1, 0.0, 5);
    let v = MatrixView::new(&s, 50, 1).unwrap();
    let err = full_report(
        "report",
        v,
        v,
        &["x".to_string()],
        WeightSource::Given(&[1.0; 3]),
        &ShiftOptions {
            permutations: 9,
            ..Default::default()
        },
        0,
    )
    .unwrap_err();
    assert!(err.to_string().contains("`weights`"), "{err}");
}

#[test]
fn the_summary_names_a_low_effective_sample_size_and_its_cost() {
    // 20 of 100 rows at weight 5, the rest 0: Kish ESS = (sum w)^2 / sum w^2 = 100^2 / 500 = 20,
    // and the design effect n / ESS = 5 (Kish 1965).
    let w: Vec<f64> = (0..100).map(|i| if i < 20 { 5.0 } else { 0.0 }).collect();
    let (part, _) = weight_sections(&w, &w, "none");
    assert!((part.effective_sample_size - 20.0).abs() < 1e-9);
    let mut r = Report::new("weigh", 0);
    r.weights = Part::Available(part);
    let s = r.summary();
    assert!(
        s.contains("effective sample size is 20 of 100 source rows (20%)"),
        "{s}"
    );
    assert!(s.contains("That is low"), "{s}");
    assert!(s.contains("roughly 5 times"), "{s}");

    // Equal weights: ESS = n, nothing to warn about.
    let w = vec![1.0; 100];
    let (part, _) = weight_sections(&w, &w, "none");
    let mut r = Report::new("weigh", 0);
    r.weights = Part::Available(part);
    let s = r.summary();
    assert!(
        s.contains("effective sample size is 100 of 100 source rows (100%)"),
        "{s}"
    );
    assert!(!s.contains("That is low"), "{s}");
}

fn typed_pair(n: usize, seed: u64) -> (shiftweight::Table, shiftweight::Table) {
    use shiftweight::Column;
    // Source: heating gas/oil/heat pump in shares 1/2, 1/4, 1/4, every 10th age missing; target:
    // mostly heat pumps, a level the source never has ("district"), older ages.
    let heat_s = ["gas", "gas", "oil", "heat pump"];
    let heat_t = ["heat pump", "heat pump", "heat pump", "gas", "district"];
    let x = gaussian(2 * n, 1, 0.0, seed);
    let source = shiftweight::Table::new(vec![
        Column::numeric(
            "age",
            (0..n)
                .map(|i| {
                    if i % 10 == 0 {
                        f64::NAN
                    } else {
                        40.0 + 10.0 * x[i]
                    }
                })
                .collect(),
        )
        .unwrap(),
        Column::from_levels("heating", (0..n).map(|i| Some(heat_s[i % 4]))),
    ])
    .unwrap();
    let target = shiftweight::Table::new(vec![
        Column::numeric("age", (0..n).map(|i| 50.0 + 10.0 * x[n + i]).collect()).unwrap(),
        Column::from_levels("heating", (0..n).map(|i| Some(heat_t[i % 5]))),
    ])
    .unwrap();
    (source, target)
}

#[test]
fn a_typed_table_report_shows_columns_as_they_are() {
    let (s, t) = typed_pair(200, 11);
    let opts = ShiftOptions {
        permutations: 9,
        ..Default::default()
    };
    let r = full_report_table("report", &s, &t, WeightSource::Automatic, &opts, 3).unwrap();
    assert_eq!(r.features_used, ["age", "heating"]);
    let f = r.features.get().unwrap();
    let kinds: Vec<(&str, &str)> = f
        .rows
        .iter()
        .map(|r| (r.feature.as_str(), r.kind.as_str()))
        .collect();
    assert!(kinds.contains(&("heating", "categorical")), "{kinds:?}");
    assert!(kinds.contains(&("age", "numeric")), "{kinds:?}");
    // The missing ages are a row of their own (missing in 10% of the source, none of the target).
    assert!(f
        .rows
        .iter()
        .any(|r| r.kind == "missing values" && r.direction.contains("10.0% of the source")));
    // The heating figure: shares of the levels among each side's rows, counted by hand from the
    // construction above (source gas 1/2, oil 1/4, heat pump 1/4; target heat pump 3/5, gas 1/5,
    // district 1/5).
    let g = f.figures.iter().find(|g| g.feature == "heating").unwrap();
    let share = |side: &[f64], level: &str| side[g.levels.iter().position(|l| l == level).unwrap()];
    assert_eq!(share(&g.source, "gas"), 0.5);
    assert_eq!(share(&g.source, "district"), 0.0);
    assert_eq!(share(&g.target, "heat pump"), 0.6);
    assert_eq!(share(&g.target, "district"), 0.2);
    // The age figure is a histogram of the numbers, not of an encoding.
    let a = f.figures.iter().find(|g| g.feature == "age").unwrap();
    assert_eq!(a.kind, "numeric");
    assert!(a.lo > 0.0, "{}", a.lo);
    // Target rows with a level the source never has are named: no weighting covers them.
    let w = r.weights.get().unwrap();
    assert_eq!(w.n, 200);
    assert!(
        w.warnings[0].contains("40 of 200 target rows") && w.warnings[0].contains("district"),
        "{:?}",
        w.warnings
    );
    // ... and the summary says so: 40 of 200 target rows (every 5th) are "district".
    assert!(
        r.summary()
            .contains("heating = \"district\": 40 of 200 target rows"),
        "{}",
        r.summary()
    );
    let html = r.to_html();
    parse(&html);
    assert!(html.contains("heating: source and target"));
}

#[test]
fn an_all_numeric_table_gives_the_matrix_report() {
    let (n, d) = (150, 2);
    let (sx, tx) = (gaussian(n, d, 0.0, 21), gaussian(n, d, 0.6, 22));
    let names: Vec<String> = vec!["p".into(), "q".into()];
    let (sv, tv) = (
        MatrixView::new(&sx, n, d).unwrap(),
        MatrixView::new(&tx, n, d).unwrap(),
    );
    let opts = ShiftOptions {
        permutations: 9,
        ..Default::default()
    };
    let a = full_report("report", sv, tv, &names, WeightSource::Automatic, &opts, 5).unwrap();
    // The target's columns in another order: found by name.
    let st = shiftweight::Table::from_matrix(sv, Some(&names)).unwrap();
    let tt = shiftweight::Table::from_matrix(tv, Some(&names)).unwrap();
    let tt = shiftweight::Table::new(vec![
        tt.column("q").unwrap().clone(),
        tt.column("p").unwrap().clone(),
    ])
    .unwrap();
    let b = full_report_table("report", &st, &tt, WeightSource::Automatic, &opts, 5).unwrap();
    assert_eq!(a.to_json(), b.to_json());
}

#[test]
fn one_effective_sample_size_is_printed_everywhere() {
    // 180 rows at weight 1, 5 at weight 2, 2815 at 0: Kish ESS = (180 + 10)^2 / (180 + 20) =
    // 36100 / 200 = 180.5 exactly (Kish 1965). Half-to-even formatting would print 180 and a
    // one-decimal one 180.5; the one rule rounds half away from zero: 181 everywhere.
    let w: Vec<f64> = (0..3000)
        .map(|i| match i {
            0..180 => 1.0,
            180..185 => 2.0,
            _ => 0.0,
        })
        .collect();
    let (part, clipping) = weight_sections(&w, &w, "none");
    assert_eq!(part.effective_sample_size, 180.5);
    let mut r = Report::new("weigh", 0);
    r.weights = Part::Available(part);
    r.clipping = clipping;
    let html = r.to_html();
    let doc = parse(&html);
    let summary = text(
        &doc.descendants()
            .find(|n| n.attribute("class") == Some("summary"))
            .unwrap(),
    );
    assert!(
        summary.contains("effective sample size is 181 of 3000 source rows (6.0%)"),
        "{summary}"
    );
    assert!(summary.contains("rests on about 181 rows"), "{summary}");
    let diag: Vec<String> = rows_of(&doc, "diagnostics").iter().map(text).collect();
    assert!(
        diag.iter().any(|d| d.contains("181 of 3000 rows (6.0%)")),
        "{diag:?}"
    );
    let weights = text(
        &doc.descendants()
            .find(|n| n.attribute("id") == Some("weights"))
            .unwrap(),
    );
    assert!(
        weights.contains("The effective sample size is 181 of 3000 rows (6.0%)"),
        "{weights}"
    );
    // The uncapped row of the clipping table (no row capped) shows the same number.
    let clip: Vec<Vec<String>> = rows_of(&doc, "clip-table")
        .iter()
        .map(|tr| {
            tr.children()
                .filter(|c| c.is_element())
                .map(|c| {
                    c.descendants()
                        .filter(|t| t.is_text())
                        .filter_map(|t| t.text())
                        .collect()
                })
                .collect()
        })
        .collect();
    assert!(
        clip.iter().any(|c| c[1] == "0%" && c[2] == "181"),
        "{clip:?}"
    );
    assert!(
        !html.contains("180.5") && !html.contains(">180<"),
        "ESS printed otherwise"
    );
}

/// The declarations of `selector` in the template's print styles (every rule whose selector list
/// names it exactly, comments left out), joined.
fn print_rules(selector: &str) -> String {
    let start = TEMPLATE.find("@media print{").expect("print styles") + "@media print{".len();
    let end = start
        + TEMPLATE[start..]
            .find("\n}\n")
            .expect("end of the print styles");
    let mut css = TEMPLATE[start..end].to_string();
    while let Some(a) = css.find("/*") {
        let b = a + css[a..].find("*/").expect("closed comment") + 2;
        css.replace_range(a..b, "");
    }
    css.split('}')
        .filter_map(|rule| rule.split_once('{'))
        .filter(|(sel, _)| sel.split(',').any(|s| s.trim() == selector))
        .map(|(_, decls)| decls.to_string())
        .collect::<Vec<_>>()
        .join(";")
}

#[test]
fn print_styles_keep_headings_with_what_follows_and_figures_whole() {
    // CSS Fragmentation Module Level 3 (W3C): break-after: avoid keeps a heading on the page of
    // the content after it; break-inside: avoid keeps a box on one page when it fits.
    for heading in ["h2", "h3", "caption"] {
        let r = print_rules(heading);
        assert!(r.contains("break-after:avoid"), "{heading}: {r}");
    }
    // A section's lead-in sentence stays with the figure or table it introduces, and each heading
    // reserves room below it without taking space (a block of height h with margin-bottom -h).
    assert!(print_rules("h2+p").contains("break-after:avoid"));
    let room = print_rules("h2::after");
    assert!(
        room.contains("height:8cm") && room.contains("margin-bottom:-8cm"),
        "{room}"
    );
    for block in ["figure", "table", "tr"] {
        let r = print_rules(block);
        assert!(r.contains("break-inside:avoid"), "{block}: {r}");
    }
}
