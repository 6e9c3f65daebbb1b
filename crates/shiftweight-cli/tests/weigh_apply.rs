//! End-to-end tests of `weigh`, `apply` and the shift test through the `shiftweight` binary on small
//! files in a temporary folder: weights, keys, models, streaming, atomic output, exit codes.
//!
//! The reference for every weight is the library itself called directly on the same numbers
//! (`LeastSquaresRatio::fit(...).source_weights`, `FittedRatio::ratio`).

mod common;

use common::*;

#[test]
fn weigh_writes_the_library_weights_with_keys_and_a_loadable_model() {
    let d = data();
    let f = setup(&d);
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh",
            "--key",
            "id",
            "--estimator",
            "lsif",
            "--out",
            "w.csv",
            "--model",
            "m.json",
            "--json",
            "r.json",
            "--report",
            "r.html",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let (keys, w) = read_weights(&f.dir.join("w.csv"));
    assert_eq!(
        keys.unwrap(),
        ids(d.n_s),
        "the key column is carried in source order"
    );
    let reference = library_weights(&d.source, d.n_s, &d.target, d.n_t, d.names.len());
    assert_eq!(
        w, reference.source_weights,
        "weights equal LeastSquaresRatio's for the same input"
    );

    let model =
        FittedRatio::from_json(&std::fs::read_to_string(f.dir.join("m.json")).unwrap()).unwrap();
    assert_eq!(model.meta.feature_names.as_deref(), Some(&d.names[..]));
    let x = MatrixView::new(&d.target, d.n_t, d.names.len()).unwrap();
    assert_eq!(
        model.ratio(x).unwrap(),
        reference.ratio(x).unwrap(),
        "the saved model gives the same ratios"
    );

    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.dir.join("r.json")).unwrap()).unwrap();
    assert_eq!(json["format"], "shiftweight.report");
    assert_eq!(json["weights"]["status"], "available");
    assert_eq!(json["weights"]["data"]["n"], d.n_s);
    assert_eq!(json["shift"]["status"], "not_available");
    check_html(&f.dir.join("r.html"));
}

#[test]
fn apply_streams_and_equals_fitted_ratio() {
    let d = data();
    let f = setup(&d);
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "rulsif",
            "--out",
            "w.csv",
            "--model",
            "m.json",
            "--quiet",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        o.stderr.is_empty() && o.stdout.is_empty(),
        "--quiet prints nothing on success"
    );
    // 5000 new rows (three 2048-row chunks) in a different column order, with keys: columns are
    // found by the names stored in the model.
    let new = shiftweight::demo::electricity(2, 5000, 11).target;
    let n_new = new.rows();
    let mut names = d.names.clone();
    names.reverse();
    let x: Vec<f64> = (0..n_new)
        .flat_map(|i| new.row(i).iter().rev().copied().collect::<Vec<_>>())
        .collect();
    let keys = ids(n_new);
    write_csv(&f.dir.join("new.csv"), &names, &x, Some(&keys), None);
    let o = run(
        &[
            "apply",
            "--model",
            "m.json",
            "--input",
            "new.csv",
            "--key",
            "id",
            "--out",
            "a.csv",
            "--chunk-rows",
            "7",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let (k, w) = read_weights(&f.dir.join("a.csv"));
    assert_eq!(k.unwrap(), keys);
    let model =
        FittedRatio::from_json(&std::fs::read_to_string(f.dir.join("m.json")).unwrap()).unwrap();
    let expected = model.ratio(new.view()).unwrap();
    assert_eq!(
        w, expected,
        "apply in chunks equals FittedRatio::ratio on the whole file"
    );
    assert!(
        model.selection.chosen["alpha"] > 0.0,
        "rulsif fitted with alpha > 0"
    );
}

#[test]
fn a_failed_run_leaves_the_earlier_output_unchanged() {
    let d = data();
    let f = setup(&d);
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "lsif",
            "--out",
            "w.csv",
            "--model",
            "m.json",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(
        &[
            "apply",
            "--model",
            "m.json",
            "--input",
            "target.csv",
            "--out",
            "a.csv",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let before = std::fs::read(f.dir.join("a.csv")).unwrap();
    // A bad value at data row 4500 of a 5000-row file: the first two 2048-row chunks are already
    // scored and written to the temporary file when the run fails.
    let new = shiftweight::demo::electricity(2, 5000, 12).target;
    write_csv(
        &f.dir.join("late_error.csv"),
        &d.names,
        new.as_slice(),
        None,
        None,
    );
    let text = std::fs::read_to_string(f.dir.join("late_error.csv")).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let mut cells: Vec<String> = lines[4500].split(',').map(str::to_string).collect();
    cells[1] = "oops".into();
    lines[4500] = cells.join(",");
    std::fs::write(f.dir.join("late_error.csv"), lines.join("\n") + "\n").unwrap();
    let o = run(
        &[
            "apply",
            "--model",
            "m.json",
            "--input",
            "late_error.csv",
            "--out",
            "a.csv",
            "--chunk-rows",
            "2048",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("data row 4500"), "{}", stderr(&o));
    assert_eq!(
        std::fs::read(f.dir.join("a.csv")).unwrap(),
        before,
        "earlier output untouched"
    );
    let leftovers: Vec<_> = std::fs::read_dir(&f.dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with(".partial"))
        .collect();
    assert!(leftovers.is_empty(), "no temporary file is left behind");
}

#[test]
fn every_estimator_and_the_shift_test_run_with_clear_codes() {
    let d = data();
    let f = setup(&d);
    // KLIEP through the CLI equals the library on the same rows.
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "kliep",
            "--n-basis",
            "50",
            "--out",
            "w.csv",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let (_, w) = read_weights(&f.dir.join("w.csv"));
    let lib = shiftweight::KLRatio::new()
        .n_basis(50)
        .seed(0)
        .fit(
            MatrixView::new(&d.source, d.n_s, d.names.len()).unwrap(),
            MatrixView::new(&d.target, d.n_t, d.names.len()).unwrap(),
        )
        .unwrap();
    assert_eq!(w, lib.source_weights);

    // KMM is transductive: its model file cannot score new rows, and says why.
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "kmm",
            "--out",
            "k.csv",
            "--model",
            "kmm.json",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));
    let o = run(
        &[
            "apply",
            "--model",
            "kmm.json",
            "--input",
            "target.csv",
            "--out",
            "a.csv",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("transductive"), "{}", stderr(&o));
    assert!(!f.dir.join("a.csv").exists());

    // The two towns differ: --fail-on-shift stops the pipeline with the distinct code 10.
    let o = run(
        &[
            "detect",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--permutations",
            "49",
            "--fail-on-shift",
            "--json",
            "shift.json",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(10), "{}", stderr(&o));
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(f.dir.join("shift.json")).unwrap()).unwrap();
    assert!(report.to_string().contains("p_value"));
    // A sample against itself (no shift): exit 0 even with --fail-on-shift.
    let o = run(
        &[
            "detect",
            "--source",
            "target.csv",
            "--target",
            "target.csv",
            "--method",
            "mmd",
            "--permutations",
            "49",
            "--fail-on-shift",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(0), "{}", stderr(&o));

    let o = run(
        &[
            "weigh",
            "--source",
            "nowhere.csv",
            "--target",
            "target.csv",
            "--estimator",
            "lsif",
            "--out",
            "w.csv",
        ],
        &f.dir,
    );
    assert_eq!(
        o.status.code(),
        Some(3),
        "a missing file is an I/O failure: {}",
        stderr(&o)
    );
    assert!(stderr(&o).contains("nowhere.csv"));

    std::fs::write(
        f.dir.join("bad.json"),
        "{\"format\": \"something-else\", \"version\": 1}",
    )
    .unwrap();
    let o = run(
        &[
            "apply",
            "--model",
            "bad.json",
            "--input",
            "target.csv",
            "--out",
            "a.csv",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("model file rejected"), "{}", stderr(&o));

    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--columns",
            "no_such",
            "--estimator",
            "lsif",
            "--out",
            "w.csv",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("`no_such`"), "{}", stderr(&o));

    for cmd in ["demo", "detect", "weigh", "apply", "report"] {
        let o = run(&[cmd, "--help"], &f.dir);
        assert!(o.status.success());
        let out = String::from_utf8_lossy(&o.stdout);
        assert!(out.contains("Examples:"), "{cmd} --help has examples");
    }
    let o = run(&["detect", "--help"], &f.dir);
    let help = String::from_utf8_lossy(&o.stdout);
    assert!(help.contains("--fail-on-shift"));
    // The classifier test's statistic is its out-of-fold AUC, not an accuracy.
    assert!(help.contains("out-of-fold AUC"), "{help}");
    assert!(!help.contains("accuracy"), "{help}");
}

#[test]
fn tab_delimited_input_and_thread_count_give_the_same_weights() {
    let d = data();
    let f = setup(&d);
    for name in ["source", "target"] {
        let t = std::fs::read_to_string(f.dir.join(format!("{name}.csv"))).unwrap();
        std::fs::write(f.dir.join(format!("{name}.tsv")), t.replace(',', "\t")).unwrap();
    }
    let o = run(
        &[
            "weigh",
            "--source",
            "source.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "lsif",
            "--out",
            "w1.csv",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(
        &[
            "--threads",
            "1",
            "weigh",
            "--source",
            "source.tsv",
            "--target",
            "target.tsv",
            "--delimiter",
            "tab",
            "--exclude",
            "kwh,id",
            "--estimator",
            "lsif",
            "--out",
            "w2.csv",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        read_weights(&f.dir.join("w1.csv")).1,
        read_weights(&f.dir.join("w2.csv")).1
    );
}

#[test]
fn disjoint_supports_are_reported_unreliable_with_and_without_stabilisation() {
    // Source on [-2, 2], target on [8, 12]: no shared support, so the true ratio is 0 on every
    // source row and the source mean of any ratio (RuLSIF's relative one included: on disjoint
    // supports it is 0 on the source and 1/alpha on the target, Yamada et al. 2013) is far
    // below the 1 that E_source[w] = 1 needs (Sugiyama, Suzuki & Kanamori 2012).
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let names = vec!["x".to_string()];
    let src: Vec<f64> = (0..60).map(|i| -2.0 + 4.0 * i as f64 / 59.0).collect();
    let tgt: Vec<f64> = (0..50).map(|i| 8.0 + 4.0 * i as f64 / 49.0).collect();
    write_csv(&dir.join("s.csv"), &names, &src, None, None);
    write_csv(&dir.join("t.csv"), &names, &tgt, None, None);
    for extra in [&[][..], &["--clip-quantile", "0.99"][..]] {
        let mut args = vec![
            "weigh",
            "--source",
            "s.csv",
            "--target",
            "t.csv",
            "--estimator",
            "rulsif",
            "--out",
            "w.csv",
            "--json",
            "r.json",
        ];
        args.extend_from_slice(extra);
        let o = run(&args, dir);
        assert!(o.status.success(), "{}", stderr(&o));
        let json: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(dir.join("r.json")).unwrap()).unwrap();
        let part = &json["weights"]["data"];
        assert_eq!(part["verdict"], "unreliable", "{extra:?}: {part}");
        let mean = part["diagnostics"]
            .as_array()
            .unwrap()
            .iter()
            .find(|d| d["name"] == "mean of the raw weights")
            .unwrap();
        assert_eq!(mean["status"], "bad", "{extra:?}: {mean}");
        assert!(
            part["warnings"][0]
                .as_str()
                .unwrap()
                .contains("far below 1"),
            "{part}"
        );
        let (_, w) = read_weights(&dir.join("w.csv"));
        assert!(w.iter().all(|v| v.is_finite() && *v >= 0.0));
    }
}
