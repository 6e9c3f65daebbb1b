use super::*;
use crate::data::Matrix;

fn text(cells: &[&str]) -> Vec<Option<String>> {
    cells.iter().map(|c| Some(c.to_string())).collect()
}

#[test]
fn numbers_in_text_are_numeric_and_markers_are_missing() {
    let c = Column::from_text("kwh", &text(&["1.5", " 2 ", "", "NA", "-3e1"]), None).unwrap();
    assert_eq!(c.kind(), ColumnKind::Numeric);
    match c.data() {
        ColumnData::Numeric(v) => {
            assert_eq!(v[0], 1.5);
            assert_eq!(v[1], 2.0);
            assert!(v[2].is_nan() && v[3].is_nan());
            assert_eq!(v[4], -30.0);
        }
        _ => panic!("expected numeric"),
    }
    assert_eq!(c.n_missing(), 2);
}

#[test]
fn text_and_booleans_are_categorical() {
    let c = Column::from_text("tariff", &text(&["flat", "night", "", "flat"]), None).unwrap();
    assert_eq!(c.kind(), ColumnKind::Categorical);
    assert_eq!(c.level(0), Some("flat"));
    assert_eq!(c.level(1), Some("night"));
    assert!(c.is_missing(2));
    let b = Column::from_text("weekend", &text(&["TRUE", "false", "True", "null"]), None).unwrap();
    match b.data() {
        ColumnData::Categorical { levels, codes } => {
            assert_eq!(levels, &["false", "true"]);
            assert_eq!(codes, &[1, 0, 1, MISSING_CODE]);
        }
        _ => panic!("expected categorical"),
    }
}

#[test]
fn explicit_types_override_inference() {
    let c = Column::from_text(
        "zone",
        &text(&["1", "2", "2"]),
        Some(ColumnKind::Categorical),
    )
    .unwrap();
    assert_eq!(c.kind(), ColumnKind::Categorical);
    assert_eq!(c.level(2), Some("2"));
    let e = Column::from_text("area", &text(&["1", "2", "big"]), Some(ColumnKind::Numeric))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("`area`") && e.contains("row 2") && e.contains("big"),
        "{e}"
    );
}

#[test]
fn identifier_columns_are_refused_unless_declared() {
    let ids: Vec<String> = (0..IDENTIFIER_MIN_ROWS)
        .map(|i| format!("meter-{i}"))
        .collect();
    let cells: Vec<Option<&str>> = ids.iter().map(|s| Some(s.as_str())).collect();
    let e = Column::from_text("meter_id", &cells, None)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("`meter_id`") && e.contains("--key") && e.contains("identifier"),
        "{e}"
    );
    assert!(Column::from_text("meter_id", &cells, Some(ColumnKind::Categorical)).is_ok());
    // One repeated value: not an identifier.
    let mut cells2 = cells.clone();
    cells2[1] = cells2[0];
    assert!(Column::from_text("meter_id", &cells2, None).is_ok());
    // Fewer rows than the threshold: kept.
    assert!(Column::from_text("meter_id", &cells[..IDENTIFIER_MIN_ROWS - 1], None).is_ok());
}

#[test]
fn bad_columns_and_tables_are_refused_with_names() {
    let e = Column::numeric("temp", vec![1.0, f64::INFINITY])
        .unwrap_err()
        .to_string();
    assert!(e.contains("`temp`") && e.contains("row 1"), "{e}");
    let e = Column::categorical("c", vec!["a".into()], vec![0, 3])
        .unwrap_err()
        .to_string();
    assert!(e.contains("`c`") && e.contains("row 1"), "{e}");
    let a = Column::numeric("a", vec![1.0, 2.0]).unwrap();
    let e = Table::new(vec![a.clone(), a.clone()])
        .unwrap_err()
        .to_string();
    assert!(e.contains("`a`") && e.contains("twice"), "{e}");
    let b = Column::numeric("b", vec![1.0]).unwrap();
    let e = Table::new(vec![a, b]).unwrap_err().to_string();
    assert!(e.contains("`b`") && e.contains("1 rows"), "{e}");
}

#[test]
fn kind_conversions() {
    let n = Column::numeric("rooms", vec![3.0, f64::NAN, 2.5]).unwrap();
    let c = n.with_kind(ColumnKind::Categorical).unwrap();
    assert_eq!(c.level(0), Some("3"));
    assert!(c.is_missing(1));
    assert_eq!(c.level(2), Some("2.5"));
    let back = c.with_kind(ColumnKind::Numeric).unwrap();
    match back.data() {
        ColumnData::Numeric(v) => assert!(v[0] == 3.0 && v[1].is_nan() && v[2] == 2.5),
        _ => panic!(),
    }
    let e = Column::from_levels("heating", [Some("gas"), None])
        .with_kind(ColumnKind::Numeric)
        .unwrap_err()
        .to_string();
    assert!(e.contains("`heating`") && e.contains("gas"), "{e}");
}

fn small_pair() -> (Table, Table) {
    // source: temp 1, 2, NaN; heating gas, heat_pump, gas
    // target: temp 3, 4;      heating heat_pump, missing
    let s = Table::new(vec![
        Column::numeric("temp", vec![1.0, 2.0, f64::NAN]).unwrap(),
        Column::from_levels("heating", [Some("gas"), Some("heat_pump"), Some("gas")]),
    ])
    .unwrap();
    let t = Table::new(vec![
        Column::from_levels("heating", [Some("heat_pump"), None]),
        Column::numeric("temp", vec![3.0, 4.0]).unwrap(),
    ])
    .unwrap();
    (s, t)
}

#[test]
fn encoding_of_a_hand_worked_table() {
    let (s, t) = small_pair();
    let (enc, warnings) = TableEncoding::fit(&s, &t).unwrap();
    assert!(warnings.is_empty(), "{warnings:?}");
    // Hand-worked: pooled present temps 1, 2, 3, 4: mean 2.5, sample sd sqrt(5/3).
    let sd = (5.0f64 / 3.0).sqrt();
    match &enc.columns[0] {
        ColumnEncoding::Numeric {
            mean,
            scale,
            missing_indicator,
            ..
        } => {
            assert_eq!(*mean, 2.5);
            assert!((scale - sd).abs() < 1e-15);
            assert!(missing_indicator);
        }
        _ => panic!(),
    }
    // Levels by pooled count: gas 2, heat_pump 2 (tie, by name); missing seen once.
    assert_eq!(
        enc.feature_names(),
        [
            "temp",
            "temp (missing)",
            "heating=gas",
            "heating=heat_pump",
            "heating=(missing)"
        ]
    );
    let e = enc.encode(&t, "target").unwrap();
    assert!(e.unseen.is_empty());
    let z = |v: f64| (v - 2.5) / sd;
    let expected = Matrix::from_rows(&[
        vec![z(3.0), 0.0, 0.0, 1.0, 0.0],
        vec![z(4.0), 0.0, 0.0, 0.0, 1.0],
    ])
    .unwrap();
    assert_eq!(e.matrix, expected);
    let e = enc.encode(&s, "source").unwrap();
    assert_eq!(e.matrix.row(2), &[0.0, 1.0, 1.0, 0.0, 0.0]);
}

#[test]
fn scoring_tables_find_columns_by_name() {
    let (s, t) = small_pair();
    let (enc, _) = TableEncoding::fit(&s, &t).unwrap();
    // Reordered, with an extra column: same encoding as the source itself.
    let mut cols = s.clone().into_columns();
    cols.reverse();
    cols.push(Column::numeric("extra", vec![9.0, 9.0, 9.0]).unwrap());
    let reordered = Table::new(cols).unwrap();
    assert_eq!(
        enc.encode(&reordered, "X").unwrap().matrix,
        enc.encode(&s, "X").unwrap().matrix
    );
    let only_temp = Table::new(vec![s.columns()[0].clone()]).unwrap();
    let e = enc.encode(&only_temp, "X").unwrap_err();
    assert_eq!(
        e,
        crate::Error::MissingColumn {
            argument: "X".into(),
            column: "heating".into()
        }
    );
    // Missing target column at fit time names the argument.
    let e = TableEncoding::fit(&s, &only_temp).unwrap_err().to_string();
    assert!(e.contains("`target`") && e.contains("`heating`"), "{e}");
}

#[test]
fn unseen_levels_are_counted_and_scored_as_zero_blocks() {
    let s = Table::new(vec![Column::from_levels(
        "heating",
        [Some("gas"), Some("oil")],
    )])
    .unwrap();
    let (enc, _) = TableEncoding::fit(&s, &s).unwrap();
    let x = Table::new(vec![Column::from_levels(
        "heating",
        [Some("gas"), Some("wood"), None, Some("wood")],
    )])
    .unwrap();
    let e = enc.encode(&x, "X").unwrap();
    assert_eq!(e.matrix.row(0), &[1.0, 0.0]);
    assert_eq!(e.matrix.row(1), &[0.0, 0.0]);
    assert_eq!(e.matrix.row(2), &[0.0, 0.0]);
    assert_eq!(
        e.unseen,
        vec![
            UnseenValues {
                column: "heating".into(),
                level: Some("wood".into()),
                rows: 2,
                first_row: 1
            },
            UnseenValues {
                column: "heating".into(),
                level: None,
                rows: 1,
                first_row: 2
            },
        ]
    );
    // A missing number in a column that had none: filled with the mean, counted.
    let s = Table::new(vec![Column::numeric("temp", vec![1.0, 3.0]).unwrap()]).unwrap();
    let (enc, _) = TableEncoding::fit(&s, &s).unwrap();
    let x = Table::new(vec![Column::numeric("temp", vec![f64::NAN]).unwrap()]).unwrap();
    let e = enc.encode(&x, "X").unwrap();
    assert_eq!(e.matrix.row(0), &[0.0]);
    assert_eq!(e.unseen[0].level, None);
}

#[test]
fn rare_levels_are_pooled_above_the_cap() {
    // Level k appears k + 1 times, so the MAX_LEVELS most frequent are the highest k.
    let n_levels = MAX_LEVELS + 7;
    let mut vals = Vec::new();
    for k in 0..n_levels {
        for _ in 0..=k {
            vals.push(Some(format!("L{k:02}")));
        }
    }
    let s = Table::new(vec![Column::from_levels("tariff", vals.clone())]).unwrap();
    let (enc, warnings) = TableEncoding::fit(&s, &s).unwrap();
    assert!(warnings[0].contains("`tariff`") && warnings[0].contains("7 rarest"));
    match &enc.columns[0] {
        ColumnEncoding::Categorical { levels, pooled, .. } => {
            assert_eq!(levels.len(), MAX_LEVELS);
            assert_eq!(levels[0], format!("L{:02}", n_levels - 1));
            let expect: Vec<String> = (0..7).map(|k| format!("L{k:02}")).collect();
            assert_eq!(pooled, &expect);
        }
        _ => panic!(),
    }
    assert_eq!(enc.width(), MAX_LEVELS + 1);
    // A pooled level scores in the (other) column, not as unseen.
    let x = Table::new(vec![Column::from_levels("tariff", [Some("L00")])]).unwrap();
    let e = enc.encode(&x, "X").unwrap();
    assert!(e.unseen.is_empty());
    assert_eq!(e.matrix.row(0)[MAX_LEVELS], 1.0);
    assert_eq!(e.matrix.row(0).iter().sum::<f64>(), 1.0);
}

#[test]
fn types_are_aligned_between_tables() {
    let s = Table::new(vec![Column::from_levels("zone", [Some("1"), Some("2")])]).unwrap();
    let t = Table::new(vec![Column::numeric("zone", vec![2.0, 1.0]).unwrap()]).unwrap();
    let (enc, _) = TableEncoding::fit(&s, &t).unwrap();
    assert_eq!(enc.feature_names(), ["zone=1", "zone=2"]);
    assert_eq!(enc.encode(&t, "X").unwrap().matrix.row(0), &[0.0, 1.0]);
    let s = Table::new(vec![Column::numeric("area", vec![1.0, 2.0]).unwrap()]).unwrap();
    let t = Table::new(vec![Column::from_levels("area", [Some("big"), Some("1")])]).unwrap();
    let e = TableEncoding::fit(&s, &t).unwrap_err().to_string();
    assert!(
        e.contains("`area`") && e.contains("`target`") && e.contains("big"),
        "{e}"
    );
}

#[test]
fn encoding_round_trips_through_json() {
    let (s, t) = small_pair();
    let (enc, _) = TableEncoding::fit(&s, &t).unwrap();
    let text = serde_json::to_string(&enc).unwrap();
    let back: TableEncoding = serde_json::from_str(&text).unwrap();
    assert_eq!(back, enc);
    back.check().unwrap();
}

#[test]
fn table_types_are_send_and_sync() {
    fn both<T: Send + Sync>() {}
    both::<Table>();
    both::<TableEncoding>();
}

#[test]
fn support_gaps_name_column_and_level() {
    let s = Table::new(vec![
        Column::from_levels("heating", [Some("gas"), Some("oil"), Some("gas")]),
        Column::numeric("temp", vec![1.0, 2.0, 3.0]).unwrap(),
        Column::numeric("area", vec![1.0, f64::NAN, 3.0]).unwrap(),
    ])
    .unwrap();
    let t = Table::new(vec![
        Column::numeric("area", vec![f64::NAN, 1.0, 2.0, 3.0]).unwrap(),
        Column::numeric("temp", vec![1.0, f64::NAN, 2.0, f64::NAN]).unwrap(),
        Column::from_levels(
            "heating",
            [Some("gas"), Some("wood"), Some("pellet"), Some("wood")],
        ),
    ])
    .unwrap();
    let gaps = support_gaps(&s, &t).unwrap();
    let g = |column: &str, level: Option<&str>, target_rows, first_row| SupportGap {
        column: column.into(),
        level: level.map(String::from),
        target_rows,
        first_row,
    };
    // area: the source has a missing value, so a missing target value is not a gap.
    assert_eq!(
        gaps,
        vec![
            g("heating", Some("wood"), 2, 1),
            g("heating", Some("pellet"), 1, 2),
            g("temp", None, 2, 1),
        ]
    );
    // Rows 1, 2, 3 are touched (row 1 twice).
    assert_eq!(rows_with_gaps(&s, &t).unwrap(), 3);
    let text = gaps[0].describe(4);
    assert!(
        text.contains("`heating`") && text.contains("\"wood\"") && text.contains("2 of 4"),
        "{text}"
    );
    assert!(support_gaps(&s, &s).unwrap().is_empty());
    let only = Table::new(vec![t.columns()[0].clone()]).unwrap();
    assert!(support_gaps(&s, &only)
        .unwrap_err()
        .to_string()
        .contains("`heating`"));
}

#[test]
fn reports_carry_support_gaps() {
    let gap = SupportGap {
        column: "heating".into(),
        level: Some("wood".into()),
        target_rows: 5,
        first_row: 0,
    };
    let r = crate::diagnostics::check_overlap(&[1.0; 100], 20.0, 0.01).unwrap();
    assert!(!r.flagged);
    let r = r.with_support_gaps(vec![gap.clone()], 5);
    assert!(r.flagged && r.n_outside_support == 5);
    assert!(r.warnings[0].contains("`heating`"));
    assert!(r
        .warnings
        .last()
        .unwrap()
        .contains("No weighting fixes missing support"));
    let d = crate::diagnostics::diagnose(&[1.0; 50], None).unwrap();
    let d = d.with_support_gaps(vec![gap], 100);
    assert!(d.warnings[0].contains("\"wood\""));
    let back = crate::diagnostics::Diagnosis::from_json(&d.to_json().unwrap()).unwrap();
    assert_eq!(back.support_gaps, d.support_gaps);
}
