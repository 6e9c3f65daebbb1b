//! `shiftweight detect`: is there a shift between source and target inputs, and where?

use crate::args::InputArgs;
use crate::io::{self, numeric_rows, ColumnChoice, Table};
use crate::progress::Progress;
use crate::read::{read_typed, TypedTable};
use crate::read::{Values, MISSING_CODE};
use crate::report::{FeatureFigure, FeaturesPart, Part, Report};
use crate::steps::{detect_exit_code, input_facts, run_detection, DetectArgs};
use crate::{Failure, Globals};
use clap::Args;
use std::path::PathBuf;

/// Arguments of `detect`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight detect --source train.csv --target recent.csv --exclude label
  shiftweight detect --source train.parquet --target live.parquet --method mmd --fail-on-shift --json shift.json

Exit status: 0 when the test ran (shift or not), 10 with --fail-on-shift when the shift is
significant, 2 bad input, 3 file failure, 4 internal error.")]
pub struct DetectCmdArgs {
    /// Source rows: CSV with a header, or Parquet.
    #[arg(long, value_name = "FILE")]
    pub source: PathBuf,
    /// Target rows, same columns.
    #[arg(long, value_name = "FILE")]
    pub target: PathBuf,
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub test: DetectArgs,
    /// Exit with status 10 when the shift is significant, so a pipeline can stop.
    #[arg(long)]
    pub fail_on_shift: bool,
    /// Also write the HTML report.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Also write the JSON report.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

/// Runs `detect`.
pub fn run(args: DetectCmdArgs, g: &Globals) -> Result<u8, Failure> {
    let progress = Progress::new(g.quiet);
    let opts = args.input.file_options();
    let types = args.input.types();
    let source = {
        let _s = progress.step("reading source rows");
        read_typed(&args.source, &opts, &args.input.choice(), &types)?
    };
    let target_choice = ColumnChoice {
        columns: Some(source.names()),
        exclude: Vec::new(),
        key: None,
    };
    let target = {
        let _s = progress.step("reading target rows");
        read_typed(&args.target, &opts, &target_choice, &source.types())?
    };
    let names = source.names();
    let outcome = {
        let _s = progress.step("testing for a shift");
        if source.is_plain_numeric() && target.is_plain_numeric() {
            let plain = |t: &TypedTable, path: &std::path::Path| -> Result<Table, Failure> {
                Ok(Table {
                    names: names.clone(),
                    values: numeric_rows(path, &names, &t.values, &t.row_numbers)?,
                    rows: t.rows,
                })
            };
            run_detection(
                &plain(&source, &args.source)?,
                &plain(&target, &args.target)?,
                &args.test,
                g.seed,
            )?
        } else {
            // Categorical columns or gaps: the shift test runs on the core's encoding of the
            // pooled rows; the per-feature table tests each column by its type.
            let (s, t) = (source.to_core(&args.source)?, target.to_core(&args.target)?);
            let (enc, zs, zt, _) = shiftweight::table::encode_pair(&s, &t)?;
            let encoded = |m: &shiftweight::Matrix| Table {
                names: enc.feature_names(),
                values: m.as_slice().to_vec(),
                rows: m.rows(),
            };
            let mut outcome = run_detection(&encoded(&zs), &encoded(&zt), &args.test, g.seed)?;
            outcome.features = match shiftweight::FeatureShift::new()
                .seed(g.seed)
                .run_table(&s, &t)
            {
                Ok(table) => Part::Available(FeaturesPart::from_typed_table(&table, |r| {
                    typed_figure(&source, &target, &r.feature)
                })),
                Err(e) => Part::missing(format!("per-feature shift failed: {e}")),
            };
            outcome
        }
    };
    let significant = outcome.shift.significant;
    let mut report = Report::new("detect", g.seed);
    report.inputs = vec![
        input_facts("source", &args.source, &source),
        input_facts("target", &args.target, &target),
    ];
    report.features_used = names.clone();
    if !g.quiet {
        println!("{}", shift_line(&outcome.shift));
    }
    report.shift = Part::Available(outcome.shift);
    report.features = outcome.features;
    report.estimator = Part::missing("`detect` fits no weights; run `shiftweight weigh`");
    report.weights = Part::missing("`detect` fits no weights; run `shiftweight weigh`");
    report.clipping = Part::missing("`detect` fits no weights; run `shiftweight weigh`");
    if let Some(p) = &args.json {
        io::write_text(p, &report.to_json())?;
    }
    if let Some(p) = &args.report {
        io::write_text(p, &report.to_html())?;
    }
    Ok(detect_exit_code(significant, args.fail_on_shift))
}

/// The source-vs-target figure of the column `name` of two typed tables (the target read with
/// the source's columns and types); `None` when the column is not found.
fn typed_figure(source: &TypedTable, target: &TypedTable, name: &str) -> Option<FeatureFigure> {
    let j = source.columns.iter().position(|c| c.name == name)?;
    let k = target.columns.iter().position(|c| c.name == name)?;
    match (&source.values[j], &target.values[k]) {
        (Values::Numeric(s), Values::Numeric(t)) => {
            Some(FeatureFigure::from_numbers(name, s, t, false))
        }
        (Values::Categorical(s), Values::Categorical(t)) => {
            let s = level_text(s, &source.columns[j].levels);
            let t = level_text(t, &target.columns[k].levels);
            Some(FeatureFigure::from_levels(name, &s, &t))
        }
        _ => None,
    }
}

/// The text of each level code, `None` for a missing value.
fn level_text<'a>(codes: &[u32], levels: &'a [String]) -> Vec<Option<&'a str>> {
    codes
        .iter()
        .map(|&c| {
            (c != MISSING_CODE)
                .then(|| levels.get(c as usize).map(String::as_str))
                .flatten()
        })
        .collect()
}

/// One line of plain words on the shift test: verdict, named statistic with its interval, and
/// the p-value with its resolution (never a false `p = 0.0000`).
pub fn shift_line(s: &crate::report::ShiftPart) -> String {
    let stat = match s.interval {
        Some((lo, hi)) => format!(
            "{} {} (95% interval {} to {})",
            s.statistic_name,
            crate::report::svg::num(s.statistic),
            crate::report::svg::num(lo),
            crate::report::svg::num(hi)
        ),
        None => format!(
            "{} {}",
            s.statistic_name,
            crate::report::svg::num(s.statistic)
        ),
    };
    format!(
        "{}: {} test, {stat}, {} (level {})",
        if s.significant {
            "shift detected"
        } else {
            "no significant shift"
        },
        s.method,
        s.p_text(),
        s.level
    )
}
