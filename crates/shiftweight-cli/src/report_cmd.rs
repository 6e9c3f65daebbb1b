//! `shiftweight report`: the full HTML (and optionally JSON) report of a source/target pair,
//! through `shiftweight_report::full_report_table`, the same call the Python package's `write_report`
//! makes, so both give the same report for the same inputs and seed.

use crate::args::InputArgs;
use crate::io::{self, ColumnChoice};
use crate::progress::Progress;
use crate::read::read_typed;
use crate::report::{full_report_table, WeightSource};
use crate::steps::{input_facts, DetectArgs};
use crate::{exit, Failure, Globals};
use clap::Args;
use shiftweight::FittedRatio;
use std::path::PathBuf;

/// Arguments of `report`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight report --source train.csv --target recent.csv --exclude label --out report.html
  shiftweight report --source train.csv --target recent.csv --exclude label --model ratio.json \\
      --out report.html --json report.json

Without --model the weights come from the automatic choice among estimators (seeded by --seed).
Open the HTML file in any browser; it loads nothing from elsewhere and prints cleanly.")]
pub struct ReportArgs {
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
    /// A fitted model (from `weigh --model` or the Python package) whose weights to report
    /// (default: fit the automatic choice).
    #[arg(long, value_name = "FILE")]
    pub model: Option<PathBuf>,
    /// Where to write the HTML report, replaced atomically.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Also write the JSON report.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
}

/// Runs `report`.
pub fn run(args: ReportArgs, g: &Globals) -> Result<u8, Failure> {
    let progress = Progress::new(g.quiet);
    let shift_opts = args.test.shift_options()?;
    let model = match &args.model {
        None => None,
        Some(p) => {
            let text = std::fs::read_to_string(p).map_err(|e| Failure {
                code: exit::IO,
                message: format!("cannot read --model `{}`: {e}", p.display()),
            })?;
            Some(FittedRatio::from_json(&text).map_err(|e| Failure {
                code: exit::BAD_INPUT,
                message: format!("--model `{}`: {e}", p.display()),
            })?)
        }
    };
    let opts = args.input.file_options();
    let types = args.input.types();
    let (source, target) = {
        let _s = progress.stage(1, 3, "reading source and target rows");
        let source = read_typed(&args.source, &opts, &args.input.choice(), &types)?;
        // The target is read with exactly the source's feature columns, by name, and their types.
        let target_choice = ColumnChoice {
            columns: Some(source.names()),
            exclude: Vec::new(),
            key: None,
        };
        let target = read_typed(&args.target, &opts, &target_choice, &source.types())?;
        (source, target)
    };
    // Typed columns (text levels, gaps) take the core's typed path; all-numeric tables give
    // exactly the report of the same numbers as a matrix (Python's `write_report` on arrays).
    let (s, t) = (source.to_core(&args.source)?, target.to_core(&args.target)?);
    let mut report = {
        let _s = progress.stage(
            2,
            3,
            "testing for a shift, measuring each feature and fitting the weights",
        );
        full_report_table(
            "report",
            &s,
            &t,
            model
                .as_ref()
                .map_or(WeightSource::Automatic, WeightSource::Model),
            &shift_opts,
            g.seed,
        )?
    };
    report.inputs = vec![
        input_facts("source", &args.source, &source),
        input_facts("target", &args.target, &target),
    ];
    {
        let _s = progress.stage(3, 3, "writing the report");
        io::write_text(&args.out, &report.to_html())?;
        if let Some(p) = &args.json {
            io::write_text(p, &report.to_json())?;
        }
    }
    if !g.quiet {
        println!("{}", report.summary());
        println!("report: {}", args.out.display());
    }
    Ok(0)
}
