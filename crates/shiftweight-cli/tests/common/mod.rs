//! Helpers shared by the end-to-end tests of the `shiftweight` binary (each test file is its own
//! crate and uses a part of them).
//!
//! The reference for every weight is the library itself called directly on the same numbers
//! (`LeastSquaresRatio::fit(...).source_weights`, `FittedRatio::ratio`): the command must be a
//! faithful door into it. The HTML report is checked with an independent strict XML parser
//! (roxmltree), which rejects any unbalanced or malformed markup.

#![allow(dead_code)]

pub use shiftweight::{FittedRatio, LeastSquaresRatio, MatrixView, RatioEstimator};
use std::fmt::Write as _;
pub use std::path::{Path, PathBuf};
pub use std::process::{Command, Output};

pub const BIN: &str = env!("CARGO_BIN_EXE_shiftweight");

pub fn run(args: &[&str], dir: &Path) -> Output {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the binary runs")
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Small invented data (the demo scenario): source with an id and a label, target without label.
pub struct Data {
    pub names: Vec<String>,
    pub source: Vec<f64>,
    pub target: Vec<f64>,
    pub n_s: usize,
    pub n_t: usize,
    pub y: Vec<f64>,
}

pub fn data() -> Data {
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
pub fn write_csv(
    path: &Path,
    names: &[String],
    x: &[f64],
    ids: Option<&[String]>,
    y: Option<&[f64]>,
) {
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

pub fn ids(n: usize) -> Vec<String> {
    (0..n).map(|i| format!("house-{i:04}")).collect()
}

/// Reads a weights file: (keys if present, weights).
pub fn read_weights(path: &Path) -> (Option<Vec<String>>, Vec<f64>) {
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

pub fn library_weights(src: &[f64], n_s: usize, tgt: &[f64], n_t: usize, d: usize) -> FittedRatio {
    LeastSquaresRatio::new()
        .seed(0)
        .fit(
            MatrixView::new(src, n_s, d).unwrap(),
            MatrixView::new(tgt, n_t, d).unwrap(),
        )
        .unwrap()
}

pub struct Files {
    pub _tmp: tempfile::TempDir,
    pub dir: PathBuf,
}

pub fn setup(d: &Data) -> Files {
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

pub fn write_parquet(
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

/// A core typed table of numeric columns (NaN = missing) from row-major values.
pub fn numeric_table(names: &[String], x: &[f64], n: usize) -> shiftweight::table::Table {
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

/// The report parses as strict XML (so every tag is balanced), has every section, and references
/// nothing outside itself.
pub fn check_html(path: &Path) {
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

/// The `weigh` arguments shared by the reading tests: uLSIF, keyed by `id`, leaving out `exclude`.
pub fn weigh_args<'a>(source: &'a str, exclude: &'a str, out: &'a str) -> Vec<&'a str> {
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
pub fn heating(i: usize, shift: usize) -> Option<&'static str> {
    const LEVELS: [&str; 3] = ["gas", "oil, \"old\"", "heat\r\npump"];
    (i % 7 != 3).then(|| LEVELS[(i + shift * (i / 2)) % 3])
}

/// CSV text of rows with the given column order; `cell(i, name)` gives the raw (unquoted) value.
pub fn csv_text(
    header: &[&str],
    n: usize,
    cell: impl Fn(usize, &str) -> String,
    eol: &str,
) -> String {
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
pub fn core_table(d: &Data, x: &[f64], n: usize, shift: usize) -> shiftweight::table::Table {
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

/// Writes the source rows as Parquet through Arrow: `id` (text), the features (float64) and a
/// dictionary-encoded text column `heating`, with the given compression.
pub fn write_arrow_parquet(path: &Path, d: &Data, compression: parquet::basic::Compression) {
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
