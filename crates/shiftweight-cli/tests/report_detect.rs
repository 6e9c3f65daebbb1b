//! End-to-end tests of `demo`, `report` and `detect` through the `shiftweight` binary: the HTML
//! report is checked with an independent strict XML parser (roxmltree), which rejects any
//! unbalanced or malformed markup.

mod common;

use common::*;
use std::fmt::Write as _;

#[test]
fn demo_writes_a_self_contained_report() {
    let tmp = tempfile::tempdir().unwrap();
    let o = run(
        &[
            "demo",
            "--out",
            "demo-out",
            "--n-source",
            "400",
            "--n-target",
            "200",
        ],
        tmp.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(out.contains("report.html"), "{out}");
    for f in ["report.html", "report.json", "weights.csv", "model.json"] {
        assert!(tmp.path().join("demo-out").join(f).exists(), "{f}");
    }
    check_html(&tmp.path().join("demo-out/report.html"));
}

#[test]
fn report_command_writes_the_full_report_with_plain_words() {
    let d = data();
    let f = setup(&d);
    let o = run(
        &[
            "report",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--permutations",
            "19",
            "--out",
            "full.html",
            "--json",
            "full.json",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(
        out.contains("Weighting: ") && out.contains("full.html"),
        "{out}"
    );
    check_html(&f.dir.join("full.html"));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.dir.join("full.json")).unwrap()).unwrap();
    for part in ["shift", "features", "estimator", "weights", "clipping"] {
        assert_eq!(json[part]["status"], "available", "{part}");
    }
    // 19 permutations: p is at least 1/20, and the report says how it was obtained.
    assert!(json["shift"]["data"]["p_value"].as_f64().unwrap() >= 0.05);
    assert!(json["shift"]["data"]["p_method"]
        .as_str()
        .unwrap()
        .contains("permutation"));
}

#[test]
fn detect_on_text_columns_and_gaps_reports_every_feature_in_words() {
    let dir = tempfile::tempdir().unwrap();
    // Invented rows: `heating` is text, `area` has gaps in 2 of 40 source and 12 of 40 target rows.
    let mut src = String::from("area,heating\n");
    let mut tgt = String::from("area,heating\n");
    for i in 0..40 {
        let s_area = if i % 20 == 0 {
            String::new()
        } else {
            format!("{}", 60 + i % 7)
        };
        let t_area = if i % 10 < 3 {
            String::new()
        } else {
            format!("{}", 70 + i % 9)
        };
        let s_heat = if i % 2 == 0 { "gas" } else { "oil" };
        let t_heat = if i % 4 == 0 { "gas" } else { "heat pump" };
        writeln!(src, "{s_area},{s_heat}").unwrap();
        writeln!(tgt, "{t_area},{t_heat}").unwrap();
    }
    std::fs::write(dir.path().join("s.csv"), src).unwrap();
    std::fs::write(dir.path().join("t.csv"), tgt).unwrap();
    let o = run(
        &[
            "--quiet", "detect", "--source", "s.csv", "--target", "t.csv", "--json", "d.json",
            "--report", "d.html",
        ],
        dir.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    check_html(&dir.path().join("d.html"));
    let j: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.path().join("d.json")).unwrap()).unwrap();
    let rows = j["features"]["data"]["rows"].as_array().unwrap();
    let find = |name: &str| rows.iter().find(|r| r["feature"] == name).unwrap();
    assert_eq!(find("heating")["kind"], "categorical");
    assert_eq!(find("heating")["test"], "chi-square");
    assert_eq!(find("area")["test"], "Kolmogorov-Smirnov");
    // Shares of missing values counted from the rows written above: 2/40 and 12/40.
    let gaps = find("area (missing)");
    assert_eq!(gaps["kind"], "missing values");
    assert_eq!(
        gaps["direction"],
        "missing in 5.0% of the source, 30.0% of the target"
    );
    // The text column is drawn as level shares: gas 50% / 25%, oil 50% / 0%, heat pump 0% / 75%.
    let html = std::fs::read_to_string(dir.path().join("d.html")).unwrap();
    assert!(html.contains("heat pump"), "the new level is drawn");
    let figs = html.matches("class=\"feature-distribution\"").count();
    assert_eq!(
        figs, 2,
        "one figure per column, none for the missing-value row"
    );
}
