//! `shiftweight demo`: the whole job on the invented electricity scenario, with the report files.
//!
//! It runs on the scenario's typed tables (the categorical column `heating` and gaps in
//! `home_age_years`), so it takes the same path as `detect` and `weigh` on a file with text
//! columns and empty cells: one encoding fitted on the pooled rows, the shift test on the encoded
//! rows, per-column tests by type, and a model file that stores the encoding.

use crate::detect::shift_line;
use crate::estimators::{build_estimator, EstimatorArgs, EstimatorName};
use crate::io::{self, Table, WeightsWriter};
use crate::progress::Progress;
use crate::report::{EstimatorPart, FactTable, InputFacts, Part, Report};
use crate::report::{FeatureFigure, FeaturesPart};
use crate::steps::{finish_weights, run_detection, DetectArgs, StabiliseArgs, TestMethod};
use crate::{exit, Failure, Globals};
use clap::Args;
use shiftweight::learn::WeightedRidge;
use shiftweight::table::{ColumnData, Table as TypedTable};
use std::path::PathBuf;

/// The estimator the demo uses.
///
const DEMO_ESTIMATOR: EstimatorName = EstimatorName::Auto;

#[derive(Args)]
#[command(after_help = "Examples:
  shiftweight demo
  shiftweight demo --out /tmp/shiftweight-demo --seed 3

Writes report.html, report.json, weights.csv and model.json into the output folder.
Every number of the scenario is invented.")]
pub struct DemoArgs {
    /// Folder for the report files (created if needed).
    #[arg(long, default_value = "shiftweight-demo", value_name = "DIR")]
    out: PathBuf,
    /// Source (coastal town) rows to generate.
    #[arg(long, default_value_t = 3000)]
    n_source: usize,
    /// Target (inland town) rows to generate.
    #[arg(long, default_value_t = 1500)]
    n_target: usize,
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn table(m: &shiftweight::Matrix, names: &[String]) -> Table {
    Table {
        names: names.to_vec(),
        values: m.as_slice().to_vec(),
        rows: m.rows(),
    }
}

/// The source-vs-target figure of the column `name` of two typed tables.
fn figure(source: &TypedTable, target: &TypedTable, name: &str) -> Option<FeatureFigure> {
    let (s, t) = (source.column(name)?, target.column(name)?);
    match (s.data(), t.data()) {
        (ColumnData::Numeric(a), ColumnData::Numeric(b)) => {
            Some(FeatureFigure::from_numbers(name, a, b, false))
        }
        (ColumnData::Categorical { .. }, ColumnData::Categorical { .. }) => {
            let a: Vec<Option<&str>> = (0..s.len()).map(|i| s.level(i)).collect();
            let b: Vec<Option<&str>> = (0..t.len()).map(|i| t.level(i)).collect();
            Some(FeatureFigure::from_levels(name, &a, &b))
        }
        _ => None,
    }
}

pub fn run(args: DemoArgs, g: &Globals) -> Result<u8, Failure> {
    std::fs::create_dir_all(&args.out).map_err(|e| Failure {
        code: exit::IO,
        message: format!("cannot create the folder `{}`: {e}", args.out.display()),
    })?;
    let progress = Progress::new(g.quiet);
    let data = shiftweight::demo::electricity(args.n_source, args.n_target, g.seed);
    let (st, tt) = (&data.source_table, &data.target_table);
    let names: Vec<String> = st.names().iter().map(|n| n.to_string()).collect();
    // One encoding of the pooled rows: the shift test and the linear models work on it; the
    // estimator fits the same encoding again and stores it in the model file.
    let (enc, zs, zt, _) = shiftweight::table::encode_pair(st, tt)?;
    let encoded_names = enc.feature_names();
    let (s, t) = (zs.view(), zt.view());
    let mut report = Report::new("demo", g.seed);
    report.inputs = vec![
        InputFacts {
            role: "source".into(),
            path: "generated: coastal town".into(),
            rows: s.rows(),
            rows_dropped: 0,
        },
        InputFacts {
            role: "target".into(),
            path: "generated: inland town".into(),
            rows: t.rows(),
            rows_dropped: 0,
        },
    ];
    report.features_used = names.clone();

    let detect_opts = DetectArgs {
        method: TestMethod::Classifier,
        permutations: 100,
        level: 0.05,
    };
    let detection = {
        let _s = progress.stage(
            1,
            3,
            "testing for a shift (refitting the classifier for 100 permutations)",
        );
        run_detection(
            &table(&zs, &encoded_names),
            &table(&zt, &encoded_names),
            &detect_opts,
            g.seed,
        )
        .map(|mut d| {
            // Per-column tests by type (chi-square for `heating`, missing rates for the gaps).
            d.features = match shiftweight::FeatureShift::new()
                .seed(g.seed)
                .run_table(st, tt)
            {
                Ok(table) => Part::Available(FeaturesPart::from_typed_table(&table, |r| {
                    figure(st, tt, &r.feature)
                })),
                Err(e) => Part::missing(format!("per-feature shift failed: {e}")),
            };
            d
        })
    };
    let shift_line = match detection {
        Ok(d) => {
            let line = format!("  {}", shift_line(&d.shift));
            report.shift = Part::Available(d.shift);
            report.features = d.features;
            line
        }
        Err(f) => {
            report.shift = Part::missing(f.message.clone());
            report.features = Part::missing(f.message.clone());
            format!("  shift test: {}", f.message)
        }
    };

    let est_args = EstimatorArgs {
        estimator: DEMO_ESTIMATOR,
        sigma: None,
        lambda: None,
        n_basis: 200,
        alpha: None,
    };
    let estimator = build_estimator(&est_args, g.seed)?;
    let model = {
        let _s = progress.stage(
            2,
            3,
            "choosing and fitting the weighting (5 held-out folds per candidate)",
        );
        estimator.fit_table(st, tt)?
    };
    let gaps = shiftweight::table::support_gaps(st, tt)?;
    // The automatic choice hands over weights with their cap chosen and applied; the demo adds
    // no stabilisation of its own, so it shows what `weigh` and Python give by default.
    let outcome = finish_weights(&model, &StabiliseArgs::default())?;
    let w = &outcome.weights;
    let ess = outcome.part.effective_sample_size;
    let verdict_line = format!(
        "  weight diagnostics: {} (Pareto k {}); stabilised by {}",
        outcome.part.verdict.as_deref().unwrap_or("not available"),
        outcome
            .part
            .pareto_k
            .map_or("not estimable".into(), crate::report::svg::num),
        outcome.part.stabilisation
    );
    let est = EstimatorPart::from_model(&model);
    let plain = WeightedRidge::new().l2(1e-6).fit(s, &data.y_source, None)?;
    let weighted = WeightedRidge::new()
        .l2(1e-6)
        .fit(s, &data.y_source, Some(w))?;
    let mse = |m: &shiftweight::learn::LinearModel| -> Result<f64, Failure> {
        let p = m.predict(t)?;
        Ok(mean(
            &p.iter()
                .zip(&data.y_target)
                .map(|(a, b)| (a - b) * (a - b))
                .collect::<Vec<_>>(),
        ))
    };
    let (e_plain, e_weighted) = (mse(&plain)?, mse(&weighted)?);
    report.extra.push(FactTable {
        caption: "Linear model of daily kWh on the encoded columns, its mean squared error on the target town in kWh² (target labels are known only in this demo)".into(),
        rows: vec![
            ("unweighted fit: mean squared error".into(), format!("{e_plain:.3} kWh²")),
            ("weighted fit: mean squared error".into(), format!("{e_weighted:.3} kWh²")),
        ],
    });
    let described = est.description.clone();
    report.estimator = Part::Available(est);
    report.weights = Part::Available(outcome.part);
    report.clipping = outcome.clipping;

    let html = args.out.join("report.html");
    let json = args.out.join("report.json");
    let weights_path = args.out.join("weights.csv");
    let model_path = args.out.join("model.json");
    {
        let _s = progress.stage(3, 3, "writing the report");
        io::write_text(&html, &report.to_html())?;
    }
    io::write_text(&json, &report.to_json())?;
    io::write_text(&model_path, &model.to_json()?)?;
    let mut ww = WeightsWriter::create(&weights_path, None)?;
    ww.write(w, None)?;
    ww.commit()?;

    if !g.quiet {
        println!("shiftweight demo: household electricity use, coastal town (source) -> inland town (target)");
        println!(
            "  rows: {} source, {} target, features: {}",
            s.rows(),
            t.rows(),
            names.join(", ")
        );
        println!(
            "  typed columns: `heating` is categorical ({}); `home_age_years` is missing for {} source and {} target rows",
            shiftweight::demo::HEATING_LEVELS.join(", "),
            st.column("home_age_years").map_or(0, |c| c.n_missing()),
            tt.column("home_age_years").map_or(0, |c| c.n_missing()),
        );
        println!("{shift_line}");
        for gap in &gaps {
            println!("  support gap: {}", gap.describe(tt.rows()));
        }
        println!("  weighting: {described}");
        println!(
            "  source weights: mean {:.3}, max {:.2}, effective sample size {}",
            mean(w),
            w.iter().cloned().fold(0.0, f64::max),
            shiftweight::diagnostics::ess_words(ess, w.len(), "rows"),
        );
        println!("{verdict_line}");
        if let Some(words) = shiftweight::ratio::decision_summary(&model) {
            println!("  why: {words}");
        }
        println!("  linear model of daily kWh on the encoded columns, error on the target town (labels known only in this demo):");
        println!("    unweighted fit: mean squared error {e_plain:.2} kWh^2");
        println!("    weighted fit:   mean squared error {e_weighted:.2} kWh^2");
        println!("  Caution: weighting corrects covariate shift only; it needs overlap between the towns,");
        println!("  and must be validated on labelled target data before decisions rely on it.");
        println!("  report: {}", html.display());
        println!(
            "  also written: {}, {}, {}",
            json.display(),
            weights_path.display(),
            model_path.display()
        );
    }
    Ok(0)
}
