//! `shiftweight weigh`: fit a density-ratio model on source and target files, write one weight per
//! source row, and optionally the model file and the reports.

use crate::args::InputArgs;
use crate::estimators::{build_estimator, EstimatorArgs};
use crate::io::{self, numeric_rows, ColumnChoice, WeightsWriter};
use crate::progress::Progress;
use crate::read::read_typed;
use crate::report::{EstimatorPart, Part, Report};
use crate::steps::{finish_weights, input_facts, StabiliseArgs};
use crate::{Failure, Globals};
use clap::Args;
use shiftweight::MatrixView;
use std::path::PathBuf;

/// Arguments of `weigh`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight weigh --source train.csv --target recent.csv --exclude label --key id --estimator lsif --out weights.csv
  shiftweight weigh --source train.parquet --target live.parquet --columns age,income --estimator rulsif --alpha 0.1 \\
      --out weights.csv --model ratio.json --report weights.html --json weights.json

The weights file has a header (`weight`, or `KEY,weight` with --key) and one line per source row, in
source order (rows skipped by --drop-missing are left out: use --key to join). Text columns are read
as categorical and gaps are kept (see --categorical, --numeric, --drop-missing); the model file then
stores the encoding, and `apply` finds its columns by name.
Cautions: weighting corrects covariate shift only; it needs overlap between source and target;
validate on labelled target data; the rules of your domain come first.")]
pub struct WeighArgs {
    /// Source rows (the labelled training data): CSV with a header, or Parquet.
    #[arg(long, value_name = "FILE")]
    pub source: PathBuf,
    /// Target rows (an unlabelled sample of the inputs the model will see), same columns.
    #[arg(long, value_name = "FILE")]
    pub target: PathBuf,
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub estimator: EstimatorArgs,
    #[command(flatten)]
    pub stabilise: StabiliseArgs,
    /// Where to write the weights, replaced atomically: Parquet for a `.parquet`/`.pq` name, else CSV.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Also write the fitted model (JSON), for `shiftweight apply` or the Python package.
    #[arg(long, value_name = "FILE")]
    pub model: Option<PathBuf>,
    /// Also write the HTML report.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Also write the JSON report.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

/// Runs `weigh`.
pub fn run(args: WeighArgs, g: &Globals) -> Result<u8, Failure> {
    let estimator = build_estimator(&args.estimator, g.seed)?;
    let progress = Progress::new(g.quiet);
    let opts = args.input.file_options();
    let types = args.input.types();
    let mut source = {
        let _s = progress.step("reading source rows");
        read_typed(&args.source, &opts, &args.input.choice(), &types)?
    };
    // The target is read with exactly the source's feature columns, by name, and their types.
    let target_choice = ColumnChoice {
        columns: Some(source.names()),
        exclude: Vec::new(),
        key: None,
    };
    let mut target = {
        let _s = progress.step("reading target rows");
        read_typed(&args.target, &opts, &target_choice, &source.types())?
    };
    let names = source.names();
    let mut gaps = Vec::new();
    let model = {
        let _s = progress.step("fitting the density-ratio model");
        if source.is_plain_numeric() && target.is_plain_numeric() {
            // Numbers only, no gaps: the matrix fit, exactly as the library's on a matrix.
            let d = names.len();
            let s = numeric_rows(&args.source, &names, &source.values, &source.row_numbers)?;
            let t = numeric_rows(&args.target, &names, &target.values, &target.row_numbers)?;
            // The column-wise copies are not needed after this: free them before the fit, so the
            // values are held once (row-major) while the estimator runs.
            source.values = Vec::new();
            target.values = Vec::new();
            let mut m = estimator.fit(
                MatrixView::named(&s, source.rows, d, "source")?,
                MatrixView::named(&t, target.rows, d, "target")?,
            )?;
            m.meta.feature_names = Some(names.clone());
            m
        } else {
            // Categorical columns or gaps: the core's typed-table encoding, stored in the model.
            let (s, t) = (source.to_core(&args.source)?, target.to_core(&args.target)?);
            gaps = shiftweight::table::support_gaps(&s, &t)?;
            estimator.fit_table(&s, &t)?
        }
    };
    let outcome = finish_weights(&model, &args.stabilise)?;

    let mut report = Report::new("weigh", g.seed);
    report.inputs = vec![
        input_facts("source", &args.source, &source),
        input_facts("target", &args.target, &target),
    ];
    report.features_used = names.clone();
    report.shift = Part::missing("`weigh` does not test for a shift; run `shiftweight detect`");
    report.features =
        Part::missing("`weigh` does not measure per-feature shift; run `shiftweight detect`");
    let est = EstimatorPart::from_model(&model);
    let described = est.description.clone();
    report.estimator = Part::Available(est);
    let ess = outcome.part.effective_sample_size;
    report.weights = Part::Available(outcome.part);
    report.clipping = outcome.clipping;

    // Everything is computed; now write, each file atomically.
    let mut w = WeightsWriter::create(&args.out, args.input.key.as_deref())?;
    w.write(&outcome.weights, source.keys.as_deref())?;
    w.commit()?;
    if let Some(p) = &args.model {
        io::write_text(p, &model.to_json()?)?;
    }
    if let Some(p) = &args.json {
        io::write_text(p, &report.to_json())?;
    }
    if let Some(p) = &args.report {
        io::write_text(p, &report.to_html())?;
    }
    // Values of the target the source never has: no weighting of source rows can cover them.
    for gap in &gaps {
        eprintln!(
            "warning: {} target rows have {} in column `{}`, which the source never has; no \
             weighting of the source rows covers them (first at target data row {})",
            gap.target_rows,
            match &gap.level {
                Some(l) => format!("the level {l:?}"),
                None => "a missing value".to_string(),
            },
            gap.column,
            target.row_numbers.get(gap.first_row).copied().unwrap_or(0)
        );
    }
    if !g.quiet {
        let n = outcome.weights.len();
        eprintln!("weighting: {described}");
        eprintln!(
            "wrote {n} weights to {} (effective sample size {}){}",
            args.out.display(),
            shiftweight::diagnostics::ess_words(ess, n, "rows"),
            if source.rows_dropped + target.rows_dropped > 0 {
                format!(
                    "; dropped {} source and {} target rows with missing values",
                    source.rows_dropped, target.rows_dropped
                )
            } else {
                String::new()
            }
        );
        if let Some(words) = shiftweight::ratio::decision_summary(&model) {
            eprintln!("automatic choice: {words}");
        }
    }
    Ok(0)
}
