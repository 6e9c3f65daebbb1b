//! `shiftweight apply`: score rows with a saved model, streaming through the input in chunks.

use crate::args::InputArgs;
use crate::io::{numeric_rows, ColumnChoice, WeightsWriter};
use crate::progress::Progress;
use crate::read::{chunk_to_core, Chunk, TableReader, TypeOverrides};
use crate::{exit, Failure, Globals};
use clap::Args;
use shiftweight::{FittedRatio, MatrixView};
use std::path::PathBuf;

/// Arguments of `apply`.
#[derive(Debug, Clone, Args)]
#[command(after_help = "Examples:
  shiftweight apply --model ratio.json --input new_rows.csv --out new_weights.csv
  shiftweight apply --model ratio.json --input big.parquet --key id --out weights.csv --chunk-rows 100000

Columns are found by the names stored in the model (written by `weigh`), in any order; other columns
are ignored and a missing one is an error naming it. A model fitted on text columns or gaps stores
their types and encoding: rows with a level (or a gap) never seen when fitting are still scored, by
the encoding's rule, and counted on stderr. Memory stays bounded by --chunk-rows whatever the
number of rows.")]
pub struct ApplyArgs {
    /// Model file written by `shiftweight weigh --model` (or the Python package).
    #[arg(long, value_name = "FILE")]
    pub model: PathBuf,
    /// Rows to score: CSV with a header, or Parquet.
    #[arg(long, value_name = "FILE")]
    pub input: PathBuf,
    #[command(flatten)]
    pub columns: InputArgs,
    /// Where to write the weights, replaced atomically when every row is scored: Parquet for a
    /// `.parquet`/`.pq` name, else CSV.
    #[arg(long, value_name = "FILE")]
    pub out: PathBuf,
    /// Rows read, scored and written at a time; rounded up to a multiple of 2048 (the library's
    /// scoring block), so the weights are bitwise identical to scoring the whole file at once.
    #[arg(long, default_value_t = 65_536)]
    pub chunk_rows: usize,
}

/// Runs `apply`.
pub fn run(args: ApplyArgs, g: &Globals) -> Result<u8, Failure> {
    if args.chunk_rows == 0 {
        return Err(Failure {
            code: exit::BAD_INPUT,
            message: "--chunk-rows must be at least 1".into(),
        });
    }
    let block = shiftweight::CHUNK_ROWS;
    let chunk_rows = args.chunk_rows.div_ceil(block) * block;
    let text = std::fs::read_to_string(&args.model).map_err(|e| Failure {
        code: exit::IO,
        message: format!("cannot read model `{}`: {e}", args.model.display()),
    })?;
    let model = FittedRatio::from_json(&text).map_err(|e| Failure {
        code: exit::BAD_INPUT,
        message: format!("`{}`: {e}", args.model.display()),
    })?;
    drop(text);
    if model.encoding.is_some() {
        return apply_table(&args, g, &model, chunk_rows);
    }
    let mut choice: ColumnChoice = args.columns.choice();
    if choice.columns.is_none() {
        if let Some(names) = &model.meta.feature_names {
            choice.columns = Some(names.clone());
        }
    }
    // The model's features are numeric: read every chosen column as numeric.
    let types = TypeOverrides {
        numeric: choice.columns.clone().unwrap_or_default(),
        categorical: Vec::new(),
    };
    let mut reader = TableReader::open(&args.input, &args.columns.file_options(), &choice, &types)?;
    let names = reader.names();
    if reader.n_features() != model.n_features() {
        return Err(Failure {
            code: exit::BAD_INPUT,
            message: format!(
                "`{}`: {} feature columns chosen ({}) but the model expects {}",
                args.input.display(),
                reader.n_features(),
                names.join(", "),
                model.n_features()
            ),
        });
    }
    let mut out = WeightsWriter::create(&args.out, args.columns.key.as_deref())?;
    let step = Progress::new(g.quiet).counter("scoring");
    let mut chunk = Chunk::default();
    let mut weights = Vec::with_capacity(chunk_rows);
    let mut total = 0usize;
    while reader.next_chunk(&mut chunk, chunk_rows)? {
        if chunk.rows == 0 {
            continue; // every row of this chunk was dropped for a gap
        }
        let values = numeric_rows(&args.input, &names, &chunk.columns, &chunk.row_numbers)?;
        let x = MatrixView::named(&values, chunk.rows, reader.n_features(), "input")?;
        weights.resize(chunk.rows, 0.0);
        model.ratio_into(x, &mut weights)?;
        out.write(&weights, chunk.keys.as_deref())?;
        total += chunk.rows;
        step.inc(chunk.rows as u64);
    }
    drop(step);
    out.commit()?;
    if !g.quiet {
        eprintln!(
            "wrote {total} weights to {}{}",
            args.out.display(),
            if reader.rows_dropped > 0 {
                format!("; dropped {} rows with missing values", reader.rows_dropped)
            } else {
                String::new()
            }
        );
    }
    Ok(0)
}

/// `apply` with a model fitted on a typed table: the columns and their types come from the
/// stored encoding; values never seen when fitting are counted per column and level.
fn apply_table(
    args: &ApplyArgs,
    g: &Globals,
    model: &FittedRatio,
    chunk_rows: usize,
) -> Result<u8, Failure> {
    use shiftweight::table::{ColumnKind, UnseenValues};
    let Some(encoding) = &model.encoding else {
        return Err(Failure {
            code: exit::INTERNAL,
            message: "apply_table called without an encoding".into(),
        });
    };
    let mut types = TypeOverrides::default();
    let mut names = Vec::new();
    for (name, kind) in encoding.schema() {
        names.push(name.to_string());
        match kind {
            ColumnKind::Numeric => types.numeric.push(name.to_string()),
            ColumnKind::Categorical => types.categorical.push(name.to_string()),
        }
    }
    let choice = ColumnChoice {
        columns: Some(names),
        exclude: Vec::new(),
        key: args.columns.key.clone(),
    };
    let mut reader = TableReader::open(&args.input, &args.columns.file_options(), &choice, &types)?;
    let mut out = WeightsWriter::create(&args.out, args.columns.key.as_deref())?;
    let step = Progress::new(g.quiet).counter("scoring");
    let mut chunk = Chunk::default();
    let mut unseen: Vec<UnseenValues> = Vec::new();
    let mut total = 0usize;
    while reader.next_chunk(&mut chunk, chunk_rows)? {
        if chunk.rows == 0 {
            continue; // every row of this chunk was dropped for a gap
        }
        let keys = chunk.keys.take();
        let rows = chunk.rows;
        let table = chunk_to_core(&args.input, &reader.columns, &mut chunk)?;
        let scores = model.ratio_table(&table)?;
        out.write(&scores.weights, keys.as_deref())?;
        for u in scores.unseen {
            match unseen
                .iter_mut()
                .find(|v| v.column == u.column && v.level == u.level)
            {
                Some(v) => v.rows += u.rows,
                None => unseen.push(UnseenValues {
                    // As a 1-based data-row number of the file.
                    first_row: chunk.row_numbers[u.first_row],
                    ..u
                }),
            }
        }
        total += rows;
        step.inc(rows as u64);
    }
    drop(step);
    out.commit()?;
    for u in &unseen {
        eprintln!(
            "warning: {} rows have {} in column `{}`, never seen when the model was fitted \
             (first at data row {}); they are scored by the encoding's rule for unseen values \
             and written like every other row",
            u.rows,
            match &u.level {
                Some(l) => format!("the level {l:?}"),
                None => "a missing value".to_string(),
            },
            u.column,
            u.first_row
        );
    }
    if !g.quiet {
        eprintln!(
            "wrote {total} weights to {}{}",
            args.out.display(),
            if reader.rows_dropped > 0 {
                format!("; dropped {} rows with missing values", reader.rows_dropped)
            } else {
                String::new()
            }
        );
    }
    Ok(0)
}
