//! End-to-end tests of reading tables through the `shiftweight` binary: gaps, text columns, quoted
//! CSV fields and CRLF line ends, and Parquet files with every common codec, each giving the
//! library's weights for the same numbers.
//!
//! The reference for every weight is the library itself called directly on the same numbers
//! (`LeastSquaresRatio::fit(...).source_weights`, `FittedRatio::ratio`) and on the core typed
//! table of the same values.

mod common;

use common::*;

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
