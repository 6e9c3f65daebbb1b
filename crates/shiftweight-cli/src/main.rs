//! The `shiftweight` command: batch steps of the covariate-shift workflow.

use clap::{Parser, Subcommand};
use std::process::ExitCode;

mod demo;

/// Exit codes: 0 success, 2 bad input or usage, 3 file I/O failure, 4 internal error,
/// 10 shift detected with --fail-on-shift.
pub mod exit {
    pub const BAD_INPUT: u8 = 2;
    pub const IO: u8 = 3;
    pub const INTERNAL: u8 = 4;
}

#[derive(Parser)]
#[command(name = "shiftweight", version, about = "Detect covariate shift, estimate importance weights p_target/p_source, check them, and report.", long_about = None)]
struct Cli {
    /// Worker threads (default: all cores).
    #[arg(long, global = true)]
    threads: Option<usize>,
    /// Print only errors.
    #[arg(long, global = true)]
    quiet: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Runs the whole job on the built-in invented scenario (coastal vs inland household electricity use).
    ///
    /// Example: shiftweight demo --out shiftweight-demo
    Demo(demo::DemoArgs),
}

/// A failure with the exit code it maps to.
pub struct Failure {
    pub code: u8,
    pub message: String,
}

impl From<shiftweight::Error> for Failure {
    fn from(e: shiftweight::Error) -> Self {
        let code = match e {
            shiftweight::Error::Numerical { .. } => exit::INTERNAL,
            _ => exit::BAD_INPUT,
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
        if let Err(e) = shiftweight::set_threads(n.max(1)) {
            eprintln!("error: {e}");
            return ExitCode::from(exit::BAD_INPUT);
        }
    }
    let result = std::panic::catch_unwind(|| match cli.command {
        Command::Demo(args) => demo::run(args, cli.quiet),
    });
    match result {
        Ok(Ok(())) => ExitCode::SUCCESS,
        Ok(Err(f)) => {
            eprintln!("error: {}", f.message);
            ExitCode::from(f.code)
        }
        Err(_) => {
            eprintln!("error: internal failure in shiftweight (a bug; please report it with the command and input)");
            ExitCode::from(exit::INTERNAL)
        }
    }
}
