//! Typed tables end to end: fitting on tables, scoring tables by column name, the model file of
//! version 2 with its encoding, and version-1 model files that still load and score as before.

mod common;

use serde_json::Value;
use shiftweight::ratio::RatioForm;
use shiftweight::table::{Column, Table, UnseenValues};
use shiftweight::{
    ClassifierRatio, Error, FittedRatio, LeastSquaresRatio, MatrixView, RatioEstimator,
};

/// A small mixed table: a temperature (some missing) and a heating type.
fn mixed(n: usize, shift: f64, seed: u64) -> Table {
    let x = common::gaussian(n, &[shift], 1.0, seed);
    let temp: Vec<f64> = (0..n)
        .map(|i| if i % 17 == 3 { f64::NAN } else { x.row(i)[0] })
        .collect();
    let kinds = ["gas", "heat_pump", "oil"];
    let heating = (0..n).map(|i| Some(kinds[(i * 7 + seed as usize) % 3]));
    Table::new(vec![
        Column::numeric("temp", temp).unwrap(),
        Column::from_levels("heating", heating),
    ])
    .unwrap()
}

#[test]
fn table_models_score_by_name_and_survive_the_model_file() {
    let (s, t) = (mixed(80, 0.0, 1), mixed(60, 0.7, 2));
    for model in [
        LeastSquaresRatio::new()
            .n_basis(20)
            .fit_table(&s, &t)
            .unwrap(),
        ClassifierRatio::new().folds(2).fit_table(&s, &t).unwrap(),
    ] {
        let enc = model.encoding.as_ref().unwrap();
        assert_eq!(
            model.meta.feature_names.as_deref().unwrap(),
            enc.feature_names().as_slice()
        );
        // Scoring the table equals scoring its encoded matrix, bitwise.
        let m = enc.encode(&t, "X").unwrap().matrix;
        let direct = model.ratio(m.view()).unwrap();
        let mut cols = t.clone().into_columns();
        cols.reverse();
        cols.push(Column::numeric("ignored", vec![0.0; t.rows()]).unwrap());
        let scored = model.ratio_table(&Table::new(cols).unwrap()).unwrap();
        assert_eq!(scored.weights, direct);
        assert!(scored.unseen.is_empty());
        // Written as version 2 with the encoding; read back, scores the same bitwise.
        let doc = model.to_json().unwrap();
        let v: Value = serde_json::from_str(&doc).unwrap();
        assert_eq!(v["version"], 2);
        assert!(v["model"]["encoding"]["columns"].is_array());
        let back = FittedRatio::from_json(&doc).unwrap();
        assert_eq!(back, model);
        assert_eq!(back.ratio_table(&t).unwrap().weights, direct);
    }
}

#[test]
fn unseen_levels_and_missing_columns_when_scoring_tables() {
    let (s, t) = (mixed(80, 0.0, 1), mixed(60, 0.7, 2));
    let model = LeastSquaresRatio::new()
        .n_basis(20)
        .fit_table(&s, &t)
        .unwrap();
    let x = Table::new(vec![
        Column::numeric("temp", vec![0.1, 0.2, 0.3]).unwrap(),
        Column::from_levels("heating", [Some("gas"), Some("wood"), Some("wood")]),
    ])
    .unwrap();
    let scored = model.ratio_table(&x).unwrap();
    assert_eq!(scored.weights.len(), 3);
    assert!(scored.weights.iter().all(|w| w.is_finite() && *w >= 0.0));
    assert_eq!(
        scored.unseen,
        vec![UnseenValues {
            column: "heating".into(),
            level: Some("wood".into()),
            rows: 2,
            first_row: 1
        }]
    );
    let only_temp = Table::new(vec![x.columns()[0].clone()]).unwrap();
    assert_eq!(
        model.ratio_table(&only_temp).unwrap_err(),
        Error::MissingColumn {
            argument: "X".into(),
            column: "heating".into()
        }
    );
}

#[test]
fn hand_edited_encodings_are_refused() {
    let (s, t) = (mixed(40, 0.0, 1), mixed(30, 0.7, 2));
    let doc = ClassifierRatio::new()
        .folds(2)
        .fit_table(&s, &t)
        .unwrap()
        .to_json()
        .unwrap();
    let refuse = |edit: &dyn Fn(&mut Value), needle: &str| {
        let mut v: Value = serde_json::from_str(&doc).unwrap();
        edit(&mut v);
        match FittedRatio::from_json(&v.to_string()) {
            Err(Error::ModelFile(m)) => assert!(m.contains(needle), "{m}"),
            other => panic!("expected a model-file error mentioning {needle:?}, got {other:?}"),
        }
    };
    refuse(
        &|v| {
            v["model"]["encoding"]["columns"]
                .as_array_mut()
                .unwrap()
                .truncate(1)
        },
        "table encoding gives",
    );
    refuse(
        &|v| v["model"]["encoding"]["columns"][0]["scale"] = 0.0.into(),
        "scale",
    );
    refuse(
        &|v| {
            let first = v["model"]["encoding"]["columns"][1]["levels"][0].clone();
            v["model"]["encoding"]["columns"][1]["levels"][1] = first;
        },
        "twice",
    );
    refuse(&|v| v["version"] = 3.into(), "version");
}

/// The ratio a version-1 model file defines, computed from its fields with plain loops
/// (the kernel expansion and log-linear forms documented in `ratio::RatioForm`), independently
/// of the library's blocked scoring.
fn ratio_from_fields(doc: &Value, x: &[f64]) -> f64 {
    let m = &doc["model"];
    let f64s = |v: &Value| -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|a| a.as_f64().unwrap())
            .collect()
    };
    let (mean, scale) = (
        f64s(&m["standardizer"]["mean"]),
        f64s(&m["standardizer"]["scale"]),
    );
    let z: Vec<f64> = x
        .iter()
        .zip(&mean)
        .zip(&scale)
        .map(|((v, a), s)| (v - a) / s)
        .collect();
    let form = &m["form"];
    match form["form"].as_str().unwrap() {
        "kernel_expansion" => {
            let sigma = form["sigma"].as_f64().unwrap();
            let centres = f64s(&form["centres"]["data"]);
            let coef = f64s(&form["coef"]);
            let d = z.len();
            let w: f64 = coef
                .iter()
                .zip(centres.chunks(d))
                .map(|(c, ctr)| {
                    let sq: f64 = z.iter().zip(ctr).map(|(a, b)| (a - b) * (a - b)).sum();
                    c * (-sq / (2.0 * sigma * sigma)).exp()
                })
                .sum();
            w.max(0.0)
        }
        "log_linear" => {
            assert_eq!(
                form["map"]["map"], "linear",
                "test covers the linear map only"
            );
            let coef = f64s(&form["coef"]);
            let eta = form["intercept"].as_f64().unwrap()
                + z.iter().zip(&coef).map(|(a, c)| a * c).sum::<f64>();
            // Class-prior corrected odds (Bickel et al. 2009): exp(eta + ln(n_s / n_t)).
            (eta + form["log_prior_ratio"].as_f64().unwrap())
                .min(700.0)
                .exp()
        }
        other => panic!("unexpected form {other}"),
    }
}

#[test]
fn version_one_model_files_still_load_and_score_as_before() {
    let rows = [0.0, 0.0, 0.5, -0.3, 1.2, 0.8, -1.0, 1.5, 2.0, -2.0];
    let x = MatrixView::new(&rows, 5, 2).unwrap();
    for text in [
        include_str!("data/v1_least_squares.json"),
        include_str!("data/v1_classifier.json"),
    ] {
        let doc: Value = serde_json::from_str(text).unwrap();
        assert_eq!(doc["version"], 1);
        let model = FittedRatio::from_json(text).unwrap();
        assert!(model.encoding.is_none());
        let w = model.ratio(x).unwrap();
        for (i, wi) in w.iter().enumerate() {
            let expect = ratio_from_fields(&doc, x.row(i));
            assert!(
                (wi - expect).abs() <= 1e-12 * expect.abs().max(1e-12),
                "row {i}: {wi} vs {expect}"
            );
        }
        // Saved again it is a version-2 file with the same body and the same ratios, bitwise.
        let again = model.to_json().unwrap();
        let v2: Value = serde_json::from_str(&again).unwrap();
        assert_eq!(v2["version"], 2);
        assert_eq!(v2["model"], doc["model"]);
        assert_eq!(FittedRatio::from_json(&again).unwrap().ratio(x).unwrap(), w);
        // A plain numeric table scores like the matrix (columns taken in order, no names).
        let table = Table::from_matrix(x, None).unwrap();
        assert_eq!(model.ratio_table(&table).unwrap().weights, w);
        assert!(matches!(
            model.form,
            RatioForm::KernelExpansion { .. } | RatioForm::LogLinear { .. }
        ));
    }
}
