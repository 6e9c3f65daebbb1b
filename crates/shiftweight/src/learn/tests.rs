//! Tests of the weighted linear models.

use super::logistic::log1p_unit;
use super::*;

#[test]
fn ridge_without_penalty_is_weighted_least_squares_by_hand() {
    // y = 1 + 2x exactly: any weights recover it.
    let x = [0.0, 1.0, 2.0, 3.0];
    let y = [1.0, 3.0, 5.0, 7.0];
    let m = WeightedRidge::new()
        .l2(0.0)
        .fit(
            MatrixView::new(&x, 4, 1).unwrap(),
            &y,
            Some(&[1.0, 2.0, 3.0, 4.0]),
        )
        .unwrap();
    assert!((m.coef[0] - 2.0).abs() < 1e-12 && (m.intercept - 1.0).abs() < 1e-12);
}

#[test]
fn weights_are_checked() {
    assert!(validate_weights(&[1.0, -1.0], 2, "w").is_err());
    assert!(validate_weights(&[0.0, 0.0], 2, "w").is_err());
    assert!(validate_weights(&[1.0], 2, "w").is_err());
    assert!(validate_weights(&[1.0, f64::NAN], 2, "w").is_err());
}

#[test]
fn log1p_unit_matches_std_ln_1p() {
    // Reference: Rust's f64::ln_1p (the platform libm) over [0, 1], including both sides of
    // the sqrt(2) - 1 switch and tiny arguments; a few units in the last place.
    let mut worst = 0.0f64;
    for k in 0..=100_000 {
        let u = k as f64 / 100_000.0;
        for v in [
            u,
            u * 1e-9,
            (std::f64::consts::SQRT_2 - 1.0) * (1.0 + (u - 0.5) * 1e-12),
        ] {
            let (a, b) = (log1p_unit(v), v.ln_1p());
            let rel = if b == 0.0 {
                a.abs()
            } else {
                ((a - b) / b).abs()
            };
            worst = worst.max(rel);
        }
    }
    assert!(worst < 4.0 * f64::EPSILON, "worst relative error {worst:e}");
}

#[test]
fn logistic_gradient_vanishes_at_solution() {
    let x: Vec<f64> = (0..40).map(|i| (i as f64 - 20.0) / 7.0).collect();
    // Overlapping classes: more ones on the right, some on both sides.
    let y: Vec<f64> = (0..40)
        .map(|i| {
            if (i * 37) % 11 < 3 + 5 * usize::from(i > 20) {
                1.0
            } else {
                0.0
            }
        })
        .collect();
    let w: Vec<f64> = (0..40).map(|i| 0.5 + (i % 3) as f64).collect();
    let m = WeightedLogistic::new()
        .l2(0.3)
        .fit(MatrixView::new(&x, 40, 1).unwrap(), &y, Some(&w))
        .unwrap();
    let (mut g0, mut g1) = (0.3 * m.coef[0], 0.0);
    for i in 0..40 {
        let r = w[i] * (sigmoid(m.coef[0] * x[i] + m.intercept) - y[i]);
        g0 += r * x[i];
        g1 += r;
    }
    assert!(g0.abs() < 1e-8 && g1.abs() < 1e-8, "gradient {g0} {g1}");
}

/// Overlapping two-class rows in 3 columns (deterministic), with zero weights on every fifth
/// row as in a cross-fitting fold.
fn fold_like_problem(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut x = Vec::with_capacity(3 * n);
    let mut y = Vec::with_capacity(n);
    for i in 0..n {
        let a = ((i * 7919) % 1000) as f64 / 250.0 - 2.0;
        let b = ((i * 104_729) % 997) as f64 / 300.0 - 1.5;
        let c = ((i * 31) % 101) as f64 / 50.0 - 1.0;
        x.extend_from_slice(&[a, b, c]);
        let s = 0.8 * a - 0.5 * b + 0.2 * c + 0.3;
        y.push(
            if ((i * 2_654_435_761) % 1000) as f64 / 1000.0 < sigmoid(s) {
                1.0
            } else {
                0.0
            },
        );
    }
    let w = (0..n).map(|i| if i % 5 == 2 { 0.0 } else { 1.0 }).collect();
    (x, y, w)
}

#[test]
fn warm_start_reaches_the_same_optimum_as_the_usual_start() {
    // Strict convexity (l2 > 0): the optimum does not depend on the start, so a start near it
    // (as cross-fitting gives) and a start far from it must agree to the tolerance. 420,000
    // rows take the large-input path (start subsample, scaling from the subsample).
    for n in [3_000usize, 420_000] {
        let (x, y, w) = fold_like_problem(n);
        let xv = MatrixView::new(&x, n, 3).unwrap();
        let (c0, b0, _) = fit_logistic_unchecked(xv, &y, &w, 1.0, 100, 1e-10).unwrap();
        for start in [
            (vec![0.0, 0.0, 0.0], 0.0),
            (vec![5.0, -3.0, 1.0], -2.0),
            (c0.iter().map(|c| c * 1.01).collect(), b0 - 0.01),
        ] {
            let (c1, b1, _) =
                fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&start.0, start.1)).unwrap();
            for (a, b) in c0.iter().zip(&c1).chain([(&b0, &b1)]) {
                assert!(
                    (a - b).abs() <= 1e-7 * (1.0 + a.abs()),
                    "n = {n}, start {start:?}: {c0:?} {b0} vs {c1:?} {b1}"
                );
            }
        }
    }
}

#[test]
fn warm_start_of_the_wrong_length_or_not_finite_is_rejected() {
    let (x, y, w) = fold_like_problem(100);
    let xv = MatrixView::new(&x, 100, 3).unwrap();
    for (c, b) in [(vec![0.0, 0.0], 0.0), (vec![0.0, f64::NAN, 0.0], 0.0)] {
        let e = fit_logistic_warm(xv, &y, &w, 1.0, 100, 1e-10, (&c, b)).unwrap_err();
        assert!(e.to_string().contains("warm start"), "{e}");
    }
}

/// A small typed table: `temp` (numeric, one missing value), `heating` (categorical), and the
/// targets y = 2 temp + level effect + a deterministic wiggle.
fn typed_rows() -> (crate::table::Table, Vec<f64>, Vec<f64>) {
    use crate::table::{Column, Table};
    let n = 24;
    let levels = ["gas", "oil", "heat pump"];
    let temp: Vec<f64> = (0..n)
        .map(|i| {
            if i == 5 {
                f64::NAN
            } else {
                (i as f64 * 0.7).sin() * 6.0 + 10.0
            }
        })
        .collect();
    let heating: Vec<Option<String>> = (0..n)
        .map(|i| Some(levels[(i * 7) % 3].to_string()))
        .collect();
    let y: Vec<f64> = (0..n)
        .map(|i| {
            let t = if temp[i].is_nan() { 10.0 } else { temp[i] };
            2.0 * t + [0.0, 3.0, -1.0][(i * 7) % 3] + ((i * 13) % 5) as f64 * 0.1
        })
        .collect();
    let w: Vec<f64> = (0..n).map(|i| 0.5 + (i % 4) as f64 * 0.5).collect();
    let table = Table::new(vec![
        Column::numeric("temp", temp).unwrap(),
        Column::from_text("heating", &heating, None).unwrap(),
    ])
    .unwrap();
    (table, y, w)
}

#[test]
fn ridge_on_a_table_is_ridge_on_the_documented_encoding() {
    // Reference: the encoding as crate::table's module documentation defines it, written out by
    // hand: temp -> (temp - mean) / sd (sample sd of the present values), missing -> 0 with an
    // indicator column; heating -> one 0/1 column per level, most frequent first (ties by name).
    let (table, y, w) = typed_rows();
    let crate::table::ColumnData::Numeric(temp) = table.column("temp").unwrap().data() else {
        unreachable!()
    };
    let present: Vec<f64> = temp.iter().copied().filter(|v| !v.is_nan()).collect();
    let mean = present.iter().sum::<f64>() / present.len() as f64;
    let sd = (present.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (present.len() - 1) as f64)
        .sqrt();
    let heating = table.column("heating").unwrap();
    // 24 rows, i * 7 mod 3 cycles through all three levels: 8 rows each, so the order is by name.
    let order = ["gas", "heat pump", "oil"];
    let mut z = Vec::new();
    for (i, t) in temp.iter().enumerate() {
        z.push(if t.is_nan() { 0.0 } else { (t - mean) / sd });
        z.push(if t.is_nan() { 1.0 } else { 0.0 });
        for l in order {
            z.push(f64::from(heating.level(i) == Some(l)));
        }
    }
    let by_hand = WeightedRidge::new()
        .l2(0.7)
        .fit(MatrixView::new(&z, 24, 5).unwrap(), &y, Some(&w))
        .unwrap();
    let m = WeightedRidge::new()
        .l2(0.7)
        .fit_table(&table, &y, Some(&w))
        .unwrap();
    assert_eq!(
        m.feature_names().unwrap(),
        [
            "temp",
            "temp (missing)",
            "heating=gas",
            "heating=heat pump",
            "heating=oil"
        ]
    );
    for (a, b) in m
        .coef
        .iter()
        .chain([&m.intercept])
        .zip(by_hand.coef.iter().chain([&by_hand.intercept]))
    {
        assert!((a - b).abs() <= 1e-12 * (1.0 + b.abs()), "{a} vs {b}");
    }
}

#[test]
fn table_predictions_find_columns_by_name() {
    use crate::table::{Column, Table};
    let (table, y, w) = typed_rows();
    let m = WeightedRidge::new()
        .fit_table(&table, &y, Some(&w))
        .unwrap();
    let p = m.predict_table(&table).unwrap();
    assert!(p.unseen.is_empty());
    // Columns in another order plus an extra column: the same values, bit for bit.
    let cols = table.columns();
    let extra = Column::numeric("meter", vec![1.0; 24]).unwrap();
    let shuffled = Table::new(vec![extra, cols[1].clone(), cols[0].clone()]).unwrap();
    assert_eq!(m.predict_table(&shuffled).unwrap().values, p.values);
    // A missing column is an error naming it.
    let short = Table::new(vec![cols[0].clone()]).unwrap();
    let e = m.predict_table(&short).unwrap_err().to_string();
    assert!(e.contains("heating"), "{e}");
    // A matrix-fitted model has no table encoding and says so.
    let e = WeightedRidge::new()
        .fit(
            MatrixView::new(&[0.0, 1.0, 2.0], 3, 1).unwrap(),
            &[0.0, 1.0, 3.0],
            None,
        )
        .unwrap()
        .predict_table(&table)
        .unwrap_err()
        .to_string();
    assert!(e.contains("matrix"), "{e}");
}

#[test]
fn an_unseen_level_is_counted_and_encoded_as_no_level() {
    use crate::table::{Column, Table};
    let (table, y, w) = typed_rows();
    let m = WeightedRidge::new()
        .fit_table(&table, &y, Some(&w))
        .unwrap();
    // Documented in crate::table: an unseen level gives 0 in every column of its block, so the
    // prediction is the intercept plus the numeric part alone.
    let new = Table::new(vec![
        Column::numeric("temp", vec![12.0, 12.0]).unwrap(),
        Column::from_text(
            "heating",
            &[Some("wood".to_string()), Some("gas".to_string())],
            None,
        )
        .unwrap(),
    ])
    .unwrap();
    let p = m.predict_table(&new).unwrap();
    let crate::table::ColumnEncoding::Numeric { mean, scale, .. } =
        &m.encoding.as_ref().unwrap().columns[0]
    else {
        unreachable!()
    };
    let expected = m.intercept + m.coef[0] * (12.0 - mean) / scale;
    assert!((p.values[0] - expected).abs() <= 1e-12 * expected.abs());
    assert!((p.values[1] - (expected + m.coef[2])).abs() <= 1e-12 * expected.abs());
    assert_eq!(p.unseen.len(), 1);
    assert_eq!(
        (
            p.unseen[0].column.as_str(),
            p.unseen[0].level.as_deref(),
            p.unseen[0].rows,
            p.unseen[0].first_row
        ),
        ("heating", Some("wood"), 1, 0)
    );
}

#[test]
fn logistic_on_a_table_predicts_on_tables_and_its_file_keeps_the_encoding() {
    let (table, y, w) = typed_rows();
    let labels: Vec<f64> = y.iter().map(|v| f64::from(*v > 20.0)).collect();
    let m = WeightedLogistic::new()
        .fit_table(&table, &labels, Some(&w))
        .unwrap();
    let proba = m.predict_proba_table(&table).unwrap().values;
    let eta = m.decision_function_table(&table).unwrap().values;
    for (p, e) in proba.iter().zip(&eta) {
        assert_eq!(*p, sigmoid(*e));
    }
    let text = m.to_json().unwrap();
    assert!(text.contains("\"version\":2"), "{text}");
    let back = LinearModel::from_json(&text).unwrap();
    assert_eq!(back, m);
    assert_eq!(back.predict_proba_table(&table).unwrap().values, proba);
    // A model fitted on a matrix is still written at version 1, without an encoding.
    let plain = WeightedRidge::new()
        .fit(
            MatrixView::new(&[0.0, 1.0, 2.0], 3, 1).unwrap(),
            &[0.0, 1.0, 3.0],
            None,
        )
        .unwrap()
        .to_json()
        .unwrap();
    assert!(
        plain.contains("\"version\":1") && !plain.contains("encoding"),
        "{plain}"
    );
    // An encoding whose width does not match the coefficients is refused.
    let broken = text.replacen("\"coef\":[", "\"coef\":[1.0,", 1);
    let e = LinearModel::from_json(&broken).unwrap_err().to_string();
    assert!(e.contains("encoding"), "{e}");
}
