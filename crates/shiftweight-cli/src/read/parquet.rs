//! Parquet tables through the Arrow record-batch reader (uncompressed, snappy, gzip, lz4, zstd
//! and brotli pages; plain and dictionary-encoded columns; nullable columns). Only the chosen
//! columns are decoded (a projection mask).

use super::{
    bad, level_code, parse_number, resolve, Chunk, ColumnState, ColumnType, Problem, TableReader,
    TypeOverrides, Values, MISSING_CODE,
};
use crate::io::ColumnChoice;
use crate::{exit, Failure};
use arrow_array::{Array, ArrayRef, RecordBatch};
use arrow_schema::DataType;
use rayon::prelude::*;
use std::fs::File;
use std::path::Path;
use std::sync::Arc;

/// An open Parquet file: the batch reader and where the features and the key are in a batch.
pub(super) struct ParquetSource {
    batches: parquet::arrow::arrow_reader::ParquetRecordBatchReader,
    /// Column index in the projected batch of each feature, and of the key.
    feature_at: Vec<usize>,
    key_at: Option<usize>,
    /// A batch partly handed out, and the offset of its first unread row.
    pending: Option<(RecordBatch, usize)>,
}

impl ParquetSource {
    /// Reads up to `max_rows` rows into `chunk` (columns and keys); returns the number read.
    pub(super) fn read(
        &mut self,
        path: &Path,
        columns: &mut [ColumnState],
        first_row: usize,
        max_rows: usize,
        chunk: &mut Chunk,
    ) -> Result<usize, Failure> {
        let ParquetSource {
            batches,
            feature_at,
            key_at,
            pending,
        } = self;
        let mut parts: Vec<RecordBatch> = Vec::new();
        let mut n = 0;
        while n < max_rows {
            let (batch, off) = match pending.take() {
                Some(p) => p,
                None => match batches.next() {
                    None => break,
                    Some(Err(e)) => return Err(arrow_fail(path, e)),
                    Some(Ok(b)) => (b, 0),
                },
            };
            let take = (batch.num_rows() - off).min(max_rows - n);
            parts.push(batch.slice(off, take));
            n += take;
            if off + take < batch.num_rows() {
                *pending = Some((batch, off + take));
            }
        }
        let cols: Vec<Vec<ArrayRef>> = feature_at
            .iter()
            .map(|&c| parts.iter().map(|b| b.column(c).clone()).collect())
            .collect();
        chunk.columns = columns
            .par_iter_mut()
            .zip(cols.par_iter())
            .map(|(col, arrays)| {
                let mut out = match col.kind {
                    ColumnType::Numeric => Values::Numeric(Vec::with_capacity(n)),
                    ColumnType::Categorical => Values::Categorical(Vec::with_capacity(n)),
                };
                let mut row = first_row;
                for a in arrays {
                    arrow_column(path, col, a, row, &mut out)?;
                    row += a.len();
                }
                Ok(out)
            })
            .collect::<Result<Vec<_>, Failure>>()?;
        chunk.keys = match key_at {
            Some(k) => {
                let mut keys = Vec::with_capacity(n);
                for b in &parts {
                    arrow_text(path, b.column(*k), &mut keys)?;
                }
                Some(keys)
            }
            None => None,
        };
        Ok(n)
    }
}

fn parquet_fail(path: &Path, e: parquet::errors::ParquetError) -> Failure {
    let code = match e {
        parquet::errors::ParquetError::External(_) => exit::IO,
        _ => exit::BAD_INPUT,
    };
    Failure {
        code,
        message: format!("cannot read Parquet file `{}`: {e}", path.display()),
    }
}

fn arrow_fail(path: &Path, e: arrow_schema::ArrowError) -> Failure {
    let code = match e {
        arrow_schema::ArrowError::IoError(..) => exit::IO,
        _ => exit::BAD_INPUT,
    };
    Failure {
        code,
        message: format!("cannot read Parquet file `{}`: {e}", path.display()),
    }
}

/// Reads the footer of `file` and resolves the chosen columns against its schema.
pub(super) fn open_parquet(
    path: &Path,
    file: File,
    choice: &ColumnChoice,
    types: &TypeOverrides,
) -> Result<(ParquetSource, Vec<ColumnState>), Failure> {
    use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
    use parquet::arrow::ProjectionMask;
    let builder =
        ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| parquet_fail(path, e))?;
    let schema: Arc<arrow_schema::Schema> = builder.schema().clone();
    let header: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let (positions, key_pos) = resolve(path, &header, choice)?;
    let mut columns = Vec::with_capacity(positions.len());
    for &j in &positions {
        let f = schema.field(j);
        let t = f.data_type();
        if t.is_nested() {
            return Err(bad(format!(
                "column `{}` of `{}` is nested ({t}); only plain columns can be features",
                header[j],
                path.display()
            )));
        }
        let kind = types.of(&header[j]).or(if is_categorical_type(t) {
            Some(ColumnType::Categorical)
        } else {
            Some(ColumnType::Numeric)
        });
        let mut c = ColumnState::new(header[j].clone(), kind);
        c.given = types.of(&header[j]).is_some();
        columns.push(c);
    }
    // The batches hold the projected columns in file order.
    let mut proj: Vec<usize> = positions.clone();
    proj.extend(key_pos);
    proj.sort_unstable();
    let at = |j: usize| proj.iter().position(|&p| p == j).unwrap_or(0);
    let feature_at = positions.iter().map(|&j| at(j)).collect();
    let key_at = key_pos.map(at);
    let mask = ProjectionMask::roots(builder.parquet_schema(), proj.iter().copied());
    let batches = builder
        .with_projection(mask)
        .with_batch_size(65_536)
        .build()
        .map_err(|e| parquet_fail(path, e))?;
    Ok((
        ParquetSource {
            batches,
            feature_at,
            key_at,
            pending: None,
        },
        columns,
    ))
}

/// Appends one Arrow column slice to `out`, in the column's type.
fn arrow_column(
    path: &Path,
    col: &mut ColumnState,
    a: &ArrayRef,
    first_row: usize,
    out: &mut Values,
) -> Result<(), Failure> {
    use arrow_array::cast::AsArray;
    match out {
        Values::Numeric(v) => {
            if is_text(a.data_type()) {
                // A text column given as numeric: parse every value.
                let mut texts = Vec::with_capacity(a.len());
                arrow_optional_text(path, a, &mut texts)?;
                for (i, t) in texts.into_iter().enumerate() {
                    match t.as_deref().map(str::trim) {
                        None => v.push(f64::NAN),
                        Some(s) => match parse_number(s) {
                            Ok(x) => v.push(x),
                            Err(Problem::Missing) => v.push(f64::NAN),
                            Err(Problem::NotNumeric) => {
                                return Err(TableReader::not_numeric(
                                    path,
                                    first_row + i,
                                    &col.name,
                                    s,
                                ))
                            }
                        },
                    }
                }
                return Ok(());
            }
            let f = arrow_cast::cast(a, &DataType::Float64).map_err(|_| {
                bad(format!(
                    "column `{}` of `{}` has the Parquet/Arrow type {}, which cannot be read as \
                     numbers or levels; leave it out with --exclude {}",
                    col.name,
                    path.display(),
                    a.data_type(),
                    col.name
                ))
            })?;
            let f = f.as_primitive::<arrow_array::types::Float64Type>();
            if f.null_count() == 0 {
                v.extend(
                    f.values()
                        .iter()
                        .map(|&x| if x.is_finite() { x } else { f64::NAN }),
                );
            } else {
                v.extend(f.iter().map(|x| match x {
                    Some(x) if x.is_finite() => x,
                    _ => f64::NAN,
                }));
            }
            if let Some(i) = f.values().iter().position(|x| x.is_infinite()) {
                return Err(bad(format!(
                    "`{}`, data row {} (1-based), column `{}`: an infinite value",
                    path.display(),
                    first_row + i,
                    col.name
                )));
            }
            Ok(())
        }
        Values::Categorical(codes) => {
            if let Some(d) = a.as_any_dictionary_opt() {
                // Intern each dictionary entry once, then map the keys.
                let map = level_codes(path, col, d.values())?;
                let keys = d.normalized_keys();
                let nulls = d.keys().logical_nulls();
                for (i, k) in keys.into_iter().enumerate() {
                    let null = nulls.as_ref().is_some_and(|n| n.is_null(i));
                    codes.push(if null { MISSING_CODE } else { map[k] });
                }
                return Ok(());
            }
            codes.extend(level_codes(path, col, a)?);
            Ok(())
        }
    }
}

/// The level code of every value of an Arrow array (numbers and booleans spelled by Arrow's cast
/// to text; null as missing).
fn level_codes(path: &Path, col: &mut ColumnState, a: &dyn Array) -> Result<Vec<u32>, Failure> {
    use arrow_array::cast::AsArray;
    let s = arrow_cast::cast(a, &DataType::Utf8).map_err(|e| arrow_fail(path, e))?;
    Ok(s.as_string::<i32>()
        .iter()
        .map(|t| match t {
            Some(t) => level_code(col, t.trim()),
            None => MISSING_CODE,
        })
        .collect())
}

fn is_text(t: &DataType) -> bool {
    match t {
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => true,
        DataType::Dictionary(_, v) => is_text(v),
        _ => false,
    }
}

/// Whether an Arrow type is read as categorical when no type is given.
fn is_categorical_type(t: &DataType) -> bool {
    match t {
        DataType::Boolean => true,
        DataType::Dictionary(_, v) => is_categorical_type(v),
        other => is_text(other),
    }
}

/// The values of an Arrow array as optional text (None for null); numbers and booleans are
/// spelled by Arrow's cast to text.
fn arrow_optional_text(
    path: &Path,
    a: &dyn Array,
    out: &mut Vec<Option<String>>,
) -> Result<(), Failure> {
    use arrow_array::cast::AsArray;
    let s = arrow_cast::cast(a, &DataType::Utf8).map_err(|e| arrow_fail(path, e))?;
    let s = s.as_string::<i32>();
    out.extend(s.iter().map(|x| x.map(str::to_string)));
    Ok(())
}

/// Key column values as text (null as the empty string).
fn arrow_text(path: &Path, a: &ArrayRef, out: &mut Vec<String>) -> Result<(), Failure> {
    let mut t = Vec::with_capacity(a.len());
    arrow_optional_text(path, a, &mut t)?;
    out.extend(t.into_iter().map(Option::unwrap_or_default));
    Ok(())
}
