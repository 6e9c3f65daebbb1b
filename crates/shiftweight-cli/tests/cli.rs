//! End-to-end tests of the `shiftweight` binary on small files in a temporary folder.
//!
//! The reference for every weight is the library itself called directly on the same numbers
//! (`LeastSquaresRatio::fit(...).source_weights`, `FittedRatio::ratio`): the command must be a
//! faithful door into it. The HTML report is checked with an independent strict XML parser
//! (roxmltree), which rejects any unbalanced or malformed markup.

use shiftweight::{FittedRatio, LeastSquaresRatio, MatrixView, RatioEstimator};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

const BIN: &str = env!("CARGO_BIN_EXE_shiftweight");

fn run(args: &[&str], dir: &Path) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the binary runs")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Small invented data (the demo scenario): source with an id and a label, target without label.
struct Data {
    names: Vec<String>,
    source: Vec<f64>,
    target: Vec<f64>,
    n_s: usize,
    n_t: usize,
    y: Vec<f64>,
}

fn data() -> Data {
    let d = shiftweight::demo::electricity(160, 120, 7);
    Data {
        names: d.feature_names.clone(),
        n_s: d.source.rows(),
        n_t: d.target.rows(),
        source: d.source.as_slice().to_vec(),
        target: d.target.as_slice().to_vec(),
        y: d.y_source,
    }
}

/// Writes a CSV with `id` (when ids is Some), the features and, optionally, a `kwh` label.
/// Values use Rust's shortest round-trip formatting, so they read back exactly.
fn write_csv(path: &Path, names: &[String], x: &[f64], ids: Option<&[String]>, y: Option<&[f64]>) {
    let d = names.len();
    let n = x.len() / d;
    let mut s = String::new();
    let mut header: Vec<String> = Vec::new();
    if ids.is_some() {
        header.push("id".into());
    }
    header.extend(names.iter().cloned());
    if y.is_some() {
        header.push("kwh".into());
    }
    s.push_str(&header.join(","));
    s.push('\n');
    for i in 0..n {
        let mut f: Vec<String> = Vec::new();
        if let Some(ids) = ids {
            f.push(ids[i].clone());
        }
        f.extend(x[i * d..(i + 1) * d].iter().map(|v| format!("{v}")));
        if let Some(y) = y {
            f.push(format!("{}", y[i]));
        }
        let _ = writeln!(s, "{}", f.join(","));
    }
    std::fs::write(path, s).unwrap();
}

fn ids(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("house-{i:04}")).collect()
}

/// Reads a weights file: (keys if present, weights).
fn read_weights(path: &Path) -> (Option<Vec<String>>, Vec<f64>) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap();
    let keyed = header.contains(',');
    let mut keys = Vec::new();
    let mut w = Vec::new();
    for l in lines {
        if keyed {
            let (k, v) = l.rsplit_once(',').unwrap();
            keys.push(k.to_string());
            w.push(v.parse().unwrap());
        } else {
            w.push(l.parse().unwrap());
        }
    }
    (keyed.then_some(keys), w)
}

fn library_weights(src: &[f64], n_s: usize, tgt: &[f64], n_t: usize, d: usize) -> FittedRatio {
    LeastSquaresRatio::new()
        .seed(0)
        .fit(
            MatrixView::new(src, n_s, d).unwrap(),
            MatrixView::new(tgt, n_t, d).unwrap(),
        )
        .unwrap()
}

struct Files {
    _tmp: tempfile::TempDir,
    dir: PathBuf,
}

fn setup(d: &Data) -> Files {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().to_path_buf();
    write_csv(
        &dir.join("source.csv"),
        &d.names,
        &d.source,
        Some(&ids(d.n_s)),
        Some(&d.y),
    );
    write_csv(&dir.join("target.csv"), &d.names, &d.target, None, None);
    Files { _tmp: tmp, dir }
}

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
fn gaps_are_kept_and_text_in_a_numeric_column_names_file_row_and_column() {
    let d = data();
    let f = setup(&d);
    let text = std::fs::read_to_string(f.dir.join("source.csv")).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    // Data row 5 (line 6): blank the floor area (column index 2 with the id first).
    let mut cells: Vec<String> = lines[5].split(',').map(str::to_string).collect();
    cells[2] = String::new();
    lines[5] = cells.join(",");
    std::fs::write(f.dir.join("holes.csv"), lines.join("\n") + "\n").unwrap();
    let args = [
        "weigh",
        "--source",
        "holes.csv",
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
    ];
    // A gap is kept: the fit goes through the library's typed-table encoding (a missing
    // indicator for that column), and the weights equal the library's on the same values.
    let o = run(&args, &f.dir);
    assert!(o.status.success(), "{}", stderr(&o));
    let (_, w) = read_weights(&f.dir.join("w.csv"));
    let mut holed = d.source.clone();
    holed[4 * d.names.len() + 1] = f64::NAN;
    let reference = LeastSquaresRatio::new()
        .seed(0)
        .fit_table(
            &numeric_table(&d.names, &holed, d.n_s),
            &numeric_table(&d.names, &d.target, d.n_t),
        )
        .unwrap();
    assert_eq!(w, reference.source_weights);

    cells[2] = "big".into();
    lines[5] = cells.join(",");
    std::fs::write(f.dir.join("words.csv"), lines.join("\n") + "\n").unwrap();
    let o = run(
        &[
            "weigh",
            "--source",
            "words.csv",
            "--target",
            "target.csv",
            "--exclude",
            "kwh,id",
            "--estimator",
            "lsif",
            "--numeric",
            "floor_area_m2",
            "--out",
            "w.csv",
        ],
        &f.dir,
    );
    // Given as numeric, the column's text is an error naming file, row and column (and the way
    // to read it as levels instead), never advice to drop rows.
    assert_eq!(o.status.code(), Some(2));
    let e = stderr(&o);
    assert!(
        e.contains("words.csv")
            && e.contains("data row 5")
            && e.contains("`floor_area_m2`")
            && e.contains("\"big\" is not a number")
            && e.contains("--categorical floor_area_m2")
            && !e.contains("--drop-missing"),
        "{e}"
    );

    // --drop-missing: the row is skipped, counted, and the weights equal the library's on the rest.
    let mut a: Vec<&str> = args.to_vec();
    a.push("--drop-missing");
    let o = run(&a, &f.dir);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stderr(&o).contains("dropped 1 source"), "{}", stderr(&o));
    let (k, w) = read_weights(&f.dir.join("w.csv"));
    let k = k.unwrap();
    assert_eq!(k.len(), d.n_s - 1);
    assert!(
        !k.contains(&"house-0004".to_string()),
        "data row 5 is house-0004"
    );
    let dd = d.names.len();
    let kept: Vec<f64> = (0..d.n_s)
        .filter(|&i| i != 4)
        .flat_map(|i| d.source[i * dd..(i + 1) * dd].to_vec())
        .collect();
    let reference = library_weights(&kept, d.n_s - 1, &d.target, d.n_t, dd);
    assert_eq!(w, reference.source_weights);
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

fn write_parquet(
    path: &Path,
    names: &[String],
    x: &[f64],
    ids: &[String],
    null_at: Option<(usize, usize)>,
) {
    use parquet::basic::Compression;
    use parquet::data_type::{ByteArray, ByteArrayType, DoubleType};
    use parquet::file::properties::WriterProperties;
    use parquet::file::writer::SerializedFileWriter;
    use parquet::schema::parser::parse_message_type;
    use std::sync::Arc;
    let d = names.len();
    let n = ids.len();
    let mut msg = String::from("message rows { required binary id (UTF8);");
    for nm in names {
        let _ = write!(msg, " optional double {nm};");
    }
    msg.push_str(" }");
    let schema = Arc::new(parse_message_type(&msg).unwrap());
    let props = Arc::new(
        WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .build(),
    );
    let file = std::fs::File::create(path).unwrap();
    let mut w = SerializedFileWriter::new(file, schema, props).unwrap();
    let mut rg = w.next_row_group().unwrap();
    let mut col_idx = 0;
    while let Some(mut col) = rg.next_column().unwrap() {
        if col_idx == 0 {
            let v: Vec<ByteArray> = ids.iter().map(|s| ByteArray::from(s.as_str())).collect();
            col.typed::<ByteArrayType>()
                .write_batch(&v, None, None)
                .unwrap();
        } else {
            let j = col_idx - 1;
            let mut vals = Vec::new();
            let mut defs = Vec::new();
            for i in 0..n {
                if null_at == Some((i, j)) {
                    defs.push(0);
                } else {
                    defs.push(1);
                    vals.push(x[i * d + j]);
                }
            }
            col.typed::<DoubleType>()
                .write_batch(&vals, Some(&defs), None)
                .unwrap();
        }
        col.close().unwrap();
        col_idx += 1;
    }
    rg.close().unwrap();
    w.close().unwrap();
}

#[test]
fn parquet_input_gives_the_same_weights_as_csv() {
    let d = data();
    let f = setup(&d);
    write_parquet(
        &f.dir.join("source.parquet"),
        &d.names,
        &d.source,
        &ids(d.n_s),
        None,
    );
    let o = run(
        &[
            "weigh",
            "--source",
            "source.parquet",
            "--target",
            "target.csv",
            "--key",
            "id",
            "--estimator",
            "lsif",
            "--out",
            "wp.csv",
            "--model",
            "m.json",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let (k, w) = read_weights(&f.dir.join("wp.csv"));
    assert_eq!(k.unwrap(), ids(d.n_s));
    let reference = library_weights(&d.source, d.n_s, &d.target, d.n_t, d.names.len());
    assert_eq!(w, reference.source_weights);

    // apply on Parquet, in small chunks, equals the model's ratios.
    let o = run(
        &[
            "apply",
            "--model",
            "m.json",
            "--input",
            "source.parquet",
            "--key",
            "id",
            "--out",
            "ap.csv",
            "--chunk-rows",
            "13",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let (_, wa) = read_weights(&f.dir.join("ap.csv"));
    assert_eq!(
        wa,
        reference
            .ratio(MatrixView::new(&d.source, d.n_s, d.names.len()).unwrap())
            .unwrap()
    );

    // A null at data row 3, column 2 (occupants) is reported by file, row and column.
    write_parquet(
        &f.dir.join("nulls.parquet"),
        &d.names,
        &d.source,
        &ids(d.n_s),
        Some((2, 2)),
    );
    let o = run(
        &[
            "weigh",
            "--source",
            "nulls.parquet",
            "--target",
            "target.csv",
            "--key",
            "id",
            "--estimator",
            "lsif",
            "--out",
            "wp.csv",
        ],
        &f.dir,
    );
    // The null is a gap, kept and encoded like a CSV gap: the library's typed-table weights.
    assert!(o.status.success(), "{}", stderr(&o));
    let (_, w) = read_weights(&f.dir.join("wp.csv"));
    let mut holed = d.source.clone();
    holed[2 * d.names.len() + 2] = f64::NAN;
    let reference = LeastSquaresRatio::new()
        .seed(0)
        .fit_table(
            &numeric_table(&d.names, &holed, d.n_s),
            &numeric_table(&d.names, &d.target, d.n_t),
        )
        .unwrap();
    assert_eq!(w, reference.source_weights);
}

/// A core typed table of numeric columns (NaN = missing) from row-major values.
fn numeric_table(names: &[String], x: &[f64], n: usize) -> shiftweight::table::Table {
    let d = names.len();
    shiftweight::table::Table::new(
        names
            .iter()
            .enumerate()
            .map(|(j, nm)| {
                shiftweight::table::Column::numeric(
                    nm.clone(),
                    (0..n).map(|i| x[i * d + j]).collect(),
                )
                .unwrap()
            })
            .collect(),
    )
    .unwrap()
}

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

/// The report parses as strict XML (so every tag is balanced), has every section, and references
/// nothing outside itself.
fn check_html(path: &Path) {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = roxmltree::Document::parse_with_options(
        &text,
        roxmltree::ParsingOptions {
            allow_dtd: true,
            ..Default::default()
        },
    )
    .unwrap_or_else(|e| panic!("report is not well-formed: {e}"));
    let ids: Vec<&str> = doc
        .descendants()
        .filter(|n| n.has_tag_name("section"))
        .filter_map(|n| n.attribute("id"))
        .collect();
    assert_eq!(
        ids,
        [
            "summary",
            "shift",
            "features",
            "estimator",
            "weights",
            "clipping",
            "cautions"
        ]
    );
    for n in doc.descendants().filter(|n| n.is_element()) {
        let tag = n.tag_name().name();
        assert!(
            !["script", "link", "img", "iframe", "object", "embed"].contains(&tag),
            "no <{tag}>"
        );
        for a in n.attributes() {
            if ["src", "href", "xlink:href", "action"].contains(&a.name()) {
                assert!(
                    a.value().starts_with('#'),
                    "only in-page links: {}={}",
                    a.name(),
                    a.value()
                );
            }
        }
    }
    let lower = text.to_ascii_lowercase();
    assert!(
        !lower.contains("http://") && !lower.contains("https://") && !lower.contains("url("),
        "no external reference"
    );
    assert!(
        doc.descendants().any(|n| n.has_tag_name("svg")),
        "has an inline chart"
    );
    assert!(
        text.contains("covariate shift only"),
        "carries the cautions"
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

/// The `weigh` arguments shared by the reading tests: uLSIF, keyed by `id`, leaving out `exclude`.
fn weigh_args<'a>(source: &'a str, exclude: &'a str, out: &'a str) -> Vec<&'a str> {
    vec![
        "weigh",
        "--source",
        source,
        "--target",
        "target.csv",
        "--exclude",
        exclude,
        "--key",
        "id",
        "--estimator",
        "lsif",
        "--out",
        out,
    ]
}

/// The heating level of row `i` (`None` = gap): quoted commas and quotes, a line break inside
/// quotes, and a gap every seventh row; `shift` moves the level frequencies.
fn heating(i: usize, shift: usize) -> Option<&'static str> {
    const LEVELS: [&str; 3] = ["gas", "oil, \"old\"", "heat\r\npump"];
    (i % 7 != 3).then(|| LEVELS[(i + shift * (i / 2)) % 3])
}

/// CSV text of rows with the given column order; `cell(i, name)` gives the raw (unquoted) value.
fn csv_text(header: &[&str], n: usize, cell: impl Fn(usize, &str) -> String, eol: &str) -> String {
    let quote = |v: String| {
        if v.contains([',', '"', '\r', '\n']) {
            format!("\"{}\"", v.replace('"', "\"\""))
        } else {
            v
        }
    };
    let mut s = String::from("\u{feff}");
    s.push_str(&header.join(","));
    s.push_str(eol);
    for i in 0..n {
        let row: Vec<String> = header.iter().map(|h| quote(cell(i, h))).collect();
        s.push_str(&row.join(","));
        s.push_str(eol);
    }
    s
}

/// The core typed table the library gets for the same values: `heating` then the features.
fn core_table(d: &Data, x: &[f64], n: usize, shift: usize) -> shiftweight::table::Table {
    use shiftweight::table::{Column, Table};
    let dd = d.names.len();
    let mut cols = vec![Column::from_levels(
        "heating",
        (0..n).map(|i| heating(i, shift)),
    )];
    for (j, nm) in d.names.iter().enumerate() {
        cols.push(Column::numeric(nm.clone(), (0..n).map(|i| x[i * dd + j]).collect()).unwrap());
    }
    Table::new(cols).unwrap()
}

#[test]
fn csv_with_text_gaps_quotes_and_crlf_gives_the_library_weights_and_apply_scores_by_name() {
    let d = data();
    let f = setup(&d);
    let dd = d.names.len();
    let value = |x: &[f64], i: usize, h: &str| -> Option<f64> {
        d.names.iter().position(|n| n == h).map(|j| x[i * dd + j])
    };
    // Source: BOM, CRLF, quoted keys with commas, the text column with gaps, quotes and a line
    // break inside quotes. Target: LF line ends, another level mix.
    let mut header = vec!["id", "heating"];
    header.extend(d.names.iter().map(String::as_str));
    let src = csv_text(
        &header,
        d.n_s,
        |i, h| match h {
            "id" => format!("house, {i:04}"),
            "heating" => heating(i, 0).unwrap_or("").to_string(),
            _ => value(&d.source, i, h).unwrap().to_string(),
        },
        "\r\n",
    );
    std::fs::write(f.dir.join("typed_source.csv"), src).unwrap();
    let tgt = csv_text(
        &header[1..],
        d.n_t,
        |i, h| match h {
            "heating" => heating(i, 1).unwrap_or("").to_string(),
            _ => value(&d.target, i, h).unwrap().to_string(),
        },
        "\n",
    );
    std::fs::write(f.dir.join("typed_target.csv"), tgt).unwrap();
    let o = run(
        &[
            "weigh",
            "--source",
            "typed_source.csv",
            "--target",
            "typed_target.csv",
            "--key",
            "id",
            "--estimator",
            "lsif",
            "--out",
            "w.csv",
            "--model",
            "typed.json",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let (k, w) = read_weights(&f.dir.join("w.csv"));
    let expected_keys: Vec<String> = (0..d.n_s).map(|i| format!("\"house, {i:04}\"")).collect();
    assert_eq!(k.unwrap(), expected_keys);
    // Reference: the library's typed-table fit on the same values.
    let s_table = core_table(&d, &d.source, d.n_s, 0);
    let t_table = core_table(&d, &d.target, d.n_t, 1);
    let reference = LeastSquaresRatio::new()
        .seed(0)
        .fit_table(&s_table, &t_table)
        .unwrap();
    assert_eq!(w, reference.source_weights);

    // apply: columns reordered, an extra column, and one row with a level never seen.
    let mut reordered: Vec<&str> = d.names.iter().rev().map(String::as_str).collect();
    reordered.insert(2, "heating");
    reordered.push("comment");
    let new = csv_text(
        &reordered,
        d.n_t,
        |i, h| match h {
            "heating" if i == 5 => "wood".to_string(),
            "heating" => heating(i, 1).unwrap_or("").to_string(),
            "comment" => "extra".to_string(),
            _ => value(&d.target, i, h).unwrap().to_string(),
        },
        "\r\n",
    );
    std::fs::write(f.dir.join("new.csv"), new).unwrap();
    let o = run(
        &[
            "apply",
            "--model",
            "typed.json",
            "--input",
            "new.csv",
            "--out",
            "a.csv",
            "--chunk-rows",
            "13",
        ],
        &f.dir,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("1 rows have the level \"wood\" in column `heating`")
            && e.contains("data row 6"),
        "{e}"
    );
    let (_, wa) = read_weights(&f.dir.join("a.csv"));
    assert_eq!(wa.len(), d.n_t, "every row is written");
    let mut expected_table = core_table(&d, &d.target, d.n_t, 1).into_columns();
    let levels_with_wood: Vec<Option<&str>> = (0..d.n_t)
        .map(|i| if i == 5 { Some("wood") } else { heating(i, 1) })
        .collect();
    expected_table[0] = shiftweight::table::Column::from_levels("heating", levels_with_wood);
    let model = FittedRatio::from_json(&std::fs::read_to_string(f.dir.join("typed.json")).unwrap())
        .unwrap();
    let scores = model
        .ratio_table(&shiftweight::table::Table::new(expected_table).unwrap())
        .unwrap();
    assert_eq!(wa, scores.weights);

    // A column the model needs is missing: an error naming it.
    std::fs::write(
        f.dir.join("short.csv"),
        csv_text(
            &header[2..],
            3,
            |i, h| value(&d.target, i, h).unwrap().to_string(),
            "\n",
        ),
    )
    .unwrap();
    let o = run(
        &[
            "apply",
            "--model",
            "typed.json",
            "--input",
            "short.csv",
            "--out",
            "s.csv",
        ],
        &f.dir,
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("`heating`"), "{}", stderr(&o));
}

/// Writes the source rows as Parquet through Arrow: `id` (text), the features (float64) and a
/// dictionary-encoded text column `heating`, with the given compression.
fn write_arrow_parquet(path: &Path, d: &Data, compression: parquet::basic::Compression) {
    use arrow_array::{ArrayRef, DictionaryArray, Float64Array, RecordBatch, StringArray};
    use std::sync::Arc;
    let dd = d.names.len();
    let mut cols: Vec<(String, ArrayRef)> = vec![(
        "id".into(),
        Arc::new(StringArray::from(ids(d.n_s))) as ArrayRef,
    )];
    for (j, n) in d.names.iter().enumerate() {
        let v: Vec<f64> = (0..d.n_s).map(|i| d.source[i * dd + j]).collect();
        cols.push((n.clone(), Arc::new(Float64Array::from(v)) as ArrayRef));
    }
    let heating: DictionaryArray<arrow_array::types::Int32Type> = (0..d.n_s)
        .map(|i| ["gas", "heat pump", "oil"][i % 3])
        .collect();
    cols.push(("heating".into(), Arc::new(heating) as ArrayRef));
    let batch = RecordBatch::try_from_iter(cols).unwrap();
    let props = parquet::file::properties::WriterProperties::builder()
        .set_compression(compression)
        .build();
    let file = std::fs::File::create(path).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(file, batch.schema(), Some(props)).unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
}

#[test]
fn parquet_with_every_common_codec_reads_the_same_numbers() {
    use parquet::basic::{BrotliLevel, Compression, GzipLevel, ZstdLevel};
    let d = data();
    let f = setup(&d);
    let reference = library_weights(&d.source, d.n_s, &d.target, d.n_t, d.names.len());
    for (name, c) in [
        ("plain", Compression::UNCOMPRESSED),
        ("snappy", Compression::SNAPPY),
        ("zstd", Compression::ZSTD(ZstdLevel::default())),
        ("gzip", Compression::GZIP(GzipLevel::default())),
        ("lz4", Compression::LZ4_RAW),
        ("brotli", Compression::BROTLI(BrotliLevel::default())),
    ] {
        let file = format!("{name}.parquet");
        write_arrow_parquet(&f.dir.join(&file), &d, c);
        let o = run(&weigh_args(&file, "heating", "w.csv"), &f.dir);
        assert!(o.status.success(), "{name}: {}", stderr(&o));
        let (k, w) = read_weights(&f.dir.join("w.csv"));
        assert_eq!(k.unwrap(), ids(d.n_s), "{name}");
        assert_eq!(w, reference.source_weights, "{name}");
    }
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
