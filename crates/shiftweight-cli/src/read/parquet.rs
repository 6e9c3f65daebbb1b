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

/// What one projected column of a group's batches feeds.
#[derive(Debug, Clone, Copy)]
enum Target {
    /// The feature column with this output index.
    Feature(usize),
    /// The key column.
    Key,
}

/// A subset of the projected columns decoded by its own batch reader (its own file handle), so
/// that groups decode in parallel: the Arrow reader decodes the columns of one reader in turn.
struct Group {
    batches: parquet::arrow::arrow_reader::ParquetRecordBatchReader,
    /// What each column of this group's batches (file order) feeds.
    targets: Vec<Target>,
    /// A batch partly handed out, and the offset of its first unread row.
    pending: Option<(RecordBatch, usize)>,
}

/// What one group read for one chunk: the row count, its feature columns, and the keys if the
/// key column is in this group.
type GroupPart = (usize, Vec<(usize, Values)>, Option<Vec<String>>);

impl Group {
    /// Reads up to `max_rows` rows of this group's columns and converts them.
    fn read(
        &mut self,
        path: &Path,
        mut cols: Vec<(usize, &mut ColumnState)>,
        first_row: usize,
        max_rows: usize,
    ) -> Result<GroupPart, Failure> {
        let mut parts: Vec<RecordBatch> = Vec::new();
        let mut n = 0;
        while n < max_rows {
            let (batch, off) = match self.pending.take() {
                Some(p) => p,
                None => match self.batches.next() {
                    None => break,
                    Some(Err(e)) => return Err(arrow_fail(path, e)),
                    Some(Ok(b)) => (b, 0),
                },
            };
            let take = (batch.num_rows() - off).min(max_rows - n);
            parts.push(batch.slice(off, take));
            n += take;
            if off + take < batch.num_rows() {
                self.pending = Some((batch, off + take));
            }
        }
        let at = |t: usize| {
            parts
                .iter()
                .map(|b| b.column(t).clone())
                .collect::<Vec<_>>()
        };
        let mut key_arrays = None;
        let mut feature_arrays = Vec::new();
        for (t, target) in self.targets.iter().enumerate() {
            match target {
                Target::Key => key_arrays = Some(at(t)),
                Target::Feature(j) => feature_arrays.push((*j, at(t))),
            }
        }
        let values = cols
            .par_iter_mut()
            .map(|(j, col)| {
                let arrays = feature_arrays
                    .iter()
                    .find(|(k, _)| k == j)
                    .map(|(_, a)| a.as_slice())
                    .unwrap_or(&[]);
                let mut out = match col.kind {
                    ColumnType::Numeric => Values::Numeric(Vec::with_capacity(n)),
                    ColumnType::Categorical => Values::Categorical(Vec::with_capacity(n)),
                };
                let mut row = first_row;
                for a in arrays {
                    arrow_column(path, col, a, row, &mut out)?;
                    row += a.len();
                }
                Ok((*j, out))
            })
            .collect::<Result<Vec<_>, Failure>>()?;
        let keys = match key_arrays {
            Some(arrays) => {
                let mut keys = Vec::with_capacity(n);
                for a in &arrays {
                    arrow_text(path, a, &mut keys)?;
                }
                Some(keys)
            }
            None => None,
        };
        Ok((n, values, keys))
    }
}

/// An open Parquet file: the projected columns split into groups that decode in parallel.
pub(super) struct ParquetSource {
    groups: Vec<Group>,
    /// The group of each feature column.
    group_of: Vec<usize>,
}

impl ParquetSource {
    /// Reads up to `max_rows` rows into `chunk` (columns and keys); returns the number read.
    /// The groups decode and convert in parallel (one rayon task per group, and within a group
    /// one per column).
    pub(super) fn read(
        &mut self,
        path: &Path,
        columns: &mut [ColumnState],
        first_row: usize,
        max_rows: usize,
        chunk: &mut Chunk,
    ) -> Result<usize, Failure> {
        let mut per_group: Vec<Vec<(usize, &mut ColumnState)>> =
            self.groups.iter().map(|_| Vec::new()).collect();
        for (j, col) in columns.iter_mut().enumerate() {
            per_group[self.group_of[j]].push((j, col));
        }
        let parts = self
            .groups
            .par_iter_mut()
            .zip(per_group.into_par_iter())
            .map(|(g, cols)| g.read(path, cols, first_row, max_rows))
            .collect::<Result<Vec<_>, Failure>>()?;
        let n = parts.first().map_or(0, |p| p.0);
        let mut values: Vec<Option<Values>> = (0..columns.len()).map(|_| None).collect();
        chunk.keys = None;
        for (rows, vals, keys) in parts {
            if rows != n {
                return Err(bad(format!(
                    "`{}`: its columns hold different numbers of rows ({n} and {rows} from data \
                     row {first_row} on)",
                    path.display()
                )));
            }
            for (j, v) in vals {
                values[j] = Some(v);
            }
            if keys.is_some() {
                chunk.keys = keys;
            }
        }
        chunk.columns = values
            .into_iter()
            .map(|v| v.unwrap_or(Values::Numeric(Vec::new())))
            .collect();
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

/// Reads the footer of `file` and resolves the chosen columns against its schema. The projected
/// columns are dealt into at most twice as many groups as rayon has threads, largest compressed
/// size first to the lightest group, each group with its own reader and file handle. Text columns
/// read as levels are decoded as Arrow dictionary arrays, which keep the Parquet dictionary
/// pages' indices instead of building one string per row.
pub(super) fn open_parquet(
    path: &Path,
    file: File,
    choice: &ColumnChoice,
    types: &TypeOverrides,
) -> Result<(ParquetSource, Vec<ColumnState>), Failure> {
    use parquet::arrow::arrow_reader::{
        ArrowReaderMetadata, ArrowReaderOptions, ParquetRecordBatchReaderBuilder,
    };
    use parquet::arrow::ProjectionMask;
    let meta = ArrowReaderMetadata::load(&file, ArrowReaderOptions::new())
        .map_err(|e| parquet_fail(path, e))?;
    let schema: Arc<arrow_schema::Schema> = meta.schema().clone();
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
    // Text features read as levels: ask for dictionary arrays (kept when the pages are
    // dictionary-encoded; otherwise the reader builds the dictionary). If the file's schema does
    // not take the hint, read it as stored.
    let mut hinted = false;
    let fields: Vec<arrow_schema::FieldRef> = schema
        .fields()
        .iter()
        .enumerate()
        .map(|(j, f)| {
            let feature = positions.iter().position(|&p| p == j);
            let as_levels = feature.is_some_and(|i| columns[i].kind == ColumnType::Categorical);
            match f.data_type() {
                DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View if as_levels => {
                    hinted = true;
                    let value = match f.data_type() {
                        DataType::LargeUtf8 => DataType::LargeUtf8,
                        _ => DataType::Utf8,
                    };
                    let t = DataType::Dictionary(Box::new(DataType::Int32), Box::new(value));
                    Arc::new(f.as_ref().clone().with_data_type(t))
                }
                _ => f.clone(),
            }
        })
        .collect();
    let meta = if hinted {
        let hint = Arc::new(arrow_schema::Schema::new_with_metadata(
            fields,
            schema.metadata().clone(),
        ));
        ArrowReaderMetadata::try_new(
            meta.metadata().clone(),
            ArrowReaderOptions::new().with_schema(hint),
        )
        .unwrap_or(meta)
    } else {
        meta
    };
    // Compressed bytes of each root column, to balance the groups.
    let pq_schema = meta.parquet_schema();
    let mut size = vec![0i64; header.len()];
    for rg in meta.metadata().row_groups() {
        for (leaf, c) in rg.columns().iter().enumerate() {
            size[pq_schema.get_column_root_idx(leaf)] += c.compressed_size();
        }
    }
    let mut proj: Vec<(usize, Target)> = positions
        .iter()
        .enumerate()
        .map(|(i, &j)| (j, Target::Feature(i)))
        .collect();
    proj.extend(key_pos.map(|k| (k, Target::Key)));
    proj.sort_by_key(|&(j, _)| std::cmp::Reverse(size[j]));
    let n_groups = proj
        .len()
        .min(2 * rayon::current_num_threads().max(1))
        .max(1);
    let mut members: Vec<Vec<(usize, Target)>> = vec![Vec::new(); n_groups];
    let mut load = vec![0i64; n_groups];
    for (j, t) in proj {
        let g = (0..n_groups).min_by_key(|&g| load[g]).unwrap_or(0);
        load[g] += size[j];
        members[g].push((j, t));
    }
    let mut group_of = vec![0; positions.len()];
    let mut groups = Vec::with_capacity(n_groups);
    let mut first = Some(file);
    for mut m in members {
        if m.is_empty() {
            continue;
        }
        // A batch holds its projected columns in file order.
        m.sort_by_key(|&(j, _)| j);
        let own = match first.take() {
            Some(f) => f,
            None => File::open(path).map_err(|e| super::io_fail(path, "cannot open", e))?,
        };
        let mask = ProjectionMask::roots(pq_schema, m.iter().map(|&(j, _)| j));
        let batches = ParquetRecordBatchReaderBuilder::new_with_metadata(own, meta.clone())
            .with_projection(mask)
            .with_batch_size(65_536)
            .build()
            .map_err(|e| parquet_fail(path, e))?;
        for &(_, t) in &m {
            if let Target::Feature(i) = t {
                group_of[i] = groups.len();
            }
        }
        groups.push(Group {
            batches,
            targets: m.into_iter().map(|(_, t)| t).collect(),
            pending: None,
        });
    }
    Ok((ParquetSource { groups, group_of }, columns))
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
                // Each dictionary entry is interned once, at its first use in row order, so the
                // levels keep their order of first appearance in the rows.
                // Text dictionaries are read in place (no copy per batch); others are spelled by
                // Arrow's cast to text.
                let values = d.values();
                let cast;
                let (small, large) =
                    match (values.as_string_opt::<i32>(), values.as_string_opt::<i64>()) {
                        (None, None) => {
                            cast = arrow_cast::cast(values, &DataType::Utf8)
                                .map_err(|e| arrow_fail(path, e))?;
                            (cast.as_string_opt::<i32>(), None)
                        }
                        other => other,
                    };
                let text = |k: usize| -> Option<&str> {
                    match (small, large) {
                        (Some(s), _) => (!s.is_null(k)).then(|| s.value(k)),
                        (_, Some(l)) => (!l.is_null(k)).then(|| l.value(k)),
                        _ => None,
                    }
                };
                let mut map: Vec<Option<u32>> = vec![None; values.len()];
                let keys = d.normalized_keys();
                let nulls = d.keys().logical_nulls();
                codes.reserve(keys.len());
                for (i, k) in keys.into_iter().enumerate() {
                    if nulls.as_ref().is_some_and(|n| n.is_null(i)) {
                        codes.push(MISSING_CODE);
                        continue;
                    }
                    let code = match map[k] {
                        Some(c) => c,
                        None => {
                            let c = match text(k) {
                                None => MISSING_CODE,
                                Some(t) => level_code(col, t.trim()),
                            };
                            map[k] = Some(c);
                            c
                        }
                    };
                    codes.push(code);
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
