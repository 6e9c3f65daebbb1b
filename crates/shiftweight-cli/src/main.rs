//! The `shiftweight` command: batch steps of the covariate-shift workflow.
//!
//! `demo` runs the whole job on the invented scenario; `detect` tests for a shift; `weigh` fits
//! importance weights for the source rows; `apply` scores new rows with a saved model, streaming;
//! `columns` shows how a table is read (column types, gaps, levels); `class-mix` estimates a new
//! class mix (label shift) from a classifier's probabilities.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod apply;
mod args;
mod class_mix;
mod columns;
mod demo;
mod detect;
mod estimators;
mod io;
mod progress;
mod read;
mod report_cmd;
mod steps;
mod weigh;

/// The report (shared with the Python package).
use shiftweight_report as report;

/// Exit codes: 0 success, 2 bad input or usage, 3 file I/O failure, 4 internal error,
/// 10 shift detected with --fail-on-shift.
pub mod exit {
    /// Bad input or usage: a missing column, a non-numeric value, an invalid option, a feature
    /// that is not available in this build. (clap's own usage errors also exit with 2.)
    pub const BAD_INPUT: u8 = 2;
    /// A file could not be opened, read, written or renamed.
    pub const IO: u8 = 3;
    /// A numerical failure or a bug.
    pub const INTERNAL: u8 = 4;
    /// `detect --fail-on-shift` found a significant shift.
    pub const SHIFT_DETECTED: u8 = 10;
}

const AFTER_HELP: &str = "Examples:
  shiftweight demo
  shiftweight detect --source train.csv --target recent.csv --exclude label --fail-on-shift
  shiftweight weigh --source train.csv --target recent.csv --exclude label --key id --estimator lsif \\
      --out weights.csv --model ratio.json --report report.html
  shiftweight apply --model ratio.json --input more_rows.csv --out more_weights.csv
  shiftweight report --source train.csv --target recent.csv --exclude label --out report.html
  shiftweight class-mix --source oof_proba.csv --label y --target target_proba.csv --columns p_no,p_yes \
      --out class_mix.csv

Exit status: 0 success, 2 bad input or usage, 3 file I/O failure, 4 internal error,
10 shift detected (detect --fail-on-shift).
Weighting corrects covariate shift only and needs overlap between source and target; validate on
labelled target data, and follow your domain's regulations when weights affect people.";

#[derive(Parser)]
#[command(
    name = "shiftweight",
    version,
    about = "Detect covariate shift, estimate importance weights p_target/p_source, check them, and report.",
    after_help = AFTER_HELP
)]
struct Cli {
    /// Worker threads (default: all cores).
    #[arg(long, global = true, value_name = "N")]
    threads: Option<usize>,
    /// Seed of every random choice (results are reproducible for a given seed).
    #[arg(long, global = true, default_value_t = 0, value_name = "N")]
    seed: u64,
    /// Print only errors; no progress display.
    #[arg(long, global = true)]
    quiet: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Runs the whole job on the built-in invented scenario (coastal vs inland household
    /// electricity use) and writes the report files.
    Demo(demo::DemoArgs),
    /// Tests whether the target inputs differ from the source inputs, and in which features.
    Detect(detect::DetectCmdArgs),
    /// Fits importance weights p_target/p_source and writes one weight per source row.
    Weigh(weigh::WeighArgs),
    /// Scores rows with a saved model, streaming through the file in bounded memory.
    Apply(apply::ApplyArgs),
    /// Shows how a table is read: each column's type (numeric or categorical), gaps and levels.
    Columns(columns::ColumnsArgs),
    /// Writes the full HTML report of a source/target pair (shift test, features, weights and
    /// their health), the same report as the Python package's `write_report`.
    Report(report_cmd::ReportArgs),
    /// Label shift: estimates the target's class mix from a classifier's probabilities (with
    /// intervals), tests the predicted-class mix, and writes class weights and adjusted
    /// probabilities.
    ClassMix(class_mix::ClassMixArgs),
}

/// Settings shared by every command.
pub struct Globals {
    /// Seed of every random choice.
    pub seed: u64,
    /// Print only errors.
    pub quiet: bool,
}

/// A failure with the exit code it maps to.
pub struct Failure {
    pub code: u8,
    pub message: String,
}

impl From<shiftweight::Error> for Failure {
    fn from(e: shiftweight::Error) -> Self {
        let code = if e.is_input_error() {
            exit::BAD_INPUT
        } else {
            exit::INTERNAL
        };
        Failure {
            code,
            message: e.to_string(),
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    if let Some(n) = cli.threads {
        if n == 0 {
            eprintln!("error: --threads must be at least 1");
            return ExitCode::from(exit::BAD_INPUT);
        }
        if let Err(e) = shiftweight::set_threads(n) {
            eprintln!("error: {e}");
            return ExitCode::from(exit::BAD_INPUT);
        }
    }
    // A bug must end with a plain message and the internal-error code, never a panic dump.
    let panic_text = std::sync::Arc::new(std::sync::Mutex::new(String::new()));
    let slot = panic_text.clone();
    std::panic::set_hook(Box::new(move |info| {
        if let Ok(mut s) = slot.lock() {
            *s = info.to_string();
        }
    }));
    let g = Globals {
        seed: cli.seed,
        quiet: cli.quiet,
    };
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| match cli.command {
        Command::Demo(a) => demo::run(a, &g),
        Command::Detect(a) => detect::run(a, &g),
        Command::Weigh(a) => weigh::run(a, &g),
        Command::Apply(a) => apply::run(a, &g),
        Command::Columns(a) => columns::run(a, &g),
        Command::Report(a) => report_cmd::run(a, &g),
        Command::ClassMix(a) => class_mix::run(a, &g),
    }));
    match result {
        Ok(Ok(code)) => ExitCode::from(code),
        Ok(Err(f)) => {
            eprintln!("error: {}", f.message);
            ExitCode::from(f.code)
        }
        Err(_) => {
            let detail = panic_text.lock().map(|s| s.clone()).unwrap_or_default();
            eprintln!(
                "error: internal failure in shiftweight (a bug; please report it with the command and input): {detail}"
            );
            ExitCode::from(exit::INTERNAL)
        }
    }
}
