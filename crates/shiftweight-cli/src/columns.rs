//! `shiftweight columns`: how a table is read (each column's type, gaps and levels) without
//! fitting anything, so the types can be checked, and overridden, before a long run.
//!
//! Streams through the file in chunks with the same reader as every other command; memory is
//! bounded by the chunk size plus the level dictionaries.

use crate::args::InputArgs;
use crate::read::{Chunk, ColumnType, TableReader};
use crate::{Failure, Globals};
use clap::Args;
use std::fmt::Write as _;
use std::path::PathBuf;

/// Arguments of `columns`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight columns --input train.csv --exclude label --key id
  shiftweight columns --input live.parquet --categorical postcode")]
pub struct ColumnsArgs {
    /// The table to describe: CSV with a header, or Parquet.
    #[arg(long, value_name = "FILE")]
    pub input: PathBuf,
    #[command(flatten)]
    pub columns: InputArgs,
}

/// How many levels are named per categorical column.
const LEVELS_SHOWN: usize = 5;

/// Runs `columns`: prints one line per feature column (type, missing count, levels).
pub fn run(args: ColumnsArgs, _g: &Globals) -> Result<u8, Failure> {
    let mut reader = TableReader::open(
        &args.input,
        &args.columns.file_options(),
        &args.columns.choice(),
        &args.columns.types(),
    )?;
    let mut missing = vec![0usize; reader.n_features()];
    let mut chunk = Chunk::default();
    let mut rows = 0usize;
    while reader.next_chunk(&mut chunk, 65_536)? {
        rows += chunk.rows;
        for (m, col) in missing.iter_mut().zip(&chunk.columns) {
            *m += (0..col.len()).filter(|&i| col.is_missing(i)).count();
        }
    }
    let width = reader
        .columns
        .iter()
        .map(|c| c.name.chars().count())
        .max()
        .unwrap_or(0)
        .max(6);
    let mut s = String::new();
    let _ = writeln!(
        s,
        "`{}`: {rows} rows, {} feature columns{}",
        args.input.display(),
        reader.n_features(),
        if reader.rows_dropped > 0 {
            format!(" ({} rows with gaps dropped)", reader.rows_dropped)
        } else {
            String::new()
        }
    );
    let _ = writeln!(
        s,
        "{:<width$}  {:<11}  {:>8}  levels",
        "column", "type", "missing"
    );
    for (c, m) in reader.columns.iter().zip(&missing) {
        let (kind, levels) = match c.kind {
            ColumnType::Numeric => ("numeric", String::new()),
            ColumnType::Categorical => {
                let shown: Vec<String> = c
                    .levels
                    .iter()
                    .take(LEVELS_SHOWN)
                    .map(|l| format!("{l:?}"))
                    .collect();
                let more = if c.levels.len() > LEVELS_SHOWN {
                    ", ..."
                } else {
                    ""
                };
                (
                    "categorical",
                    format!("{} ({}{more})", c.levels.len(), shown.join(", ")),
                )
            }
        };
        let line = format!("{:<width$}  {kind:<11}  {m:>8}  {levels}", c.name);
        let _ = writeln!(s, "{}", line.trim_end());
    }
    print!("{s}");
    Ok(0)
}
