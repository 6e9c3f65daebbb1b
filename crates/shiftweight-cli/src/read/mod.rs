//! Reading tables: CSV with a header, or Parquet, into typed columns, streamed in chunks of rows.
//!
//! Every feature column is either **numeric** (`f64`, missing as NaN) or **categorical** (levels
//! as text, each value a level code, missing as [`MISSING_CODE`]). A column's type is, in order
//! of precedence: the type given for it (`--numeric` / `--categorical`, or the schema stored in a
//! model file); for Parquet, the column's stored type (integers, floats and decimals are numeric;
//! text, dictionary-encoded text and booleans are categorical); for CSV, numeric while every value
//! read so far is a number or missing, categorical from the first other text on. When a CSV column
//! turns categorical after numbers were read, those numbers become levels spelled in their
//! shortest round-trip form (`1.50` becomes `1.5`); name the column with `--categorical` to keep
//! its text exactly as written.
//!
//! Missing: an empty field or one of `NA`, `N/A`, `NaN`, `nan`, `null`, `NULL`, `None` (after
//! trimming spaces) in CSV; a null or NaN in Parquet. A value that is not a number in a column
//! given as numeric is an error naming the file, the data row (1-based, the header not counted)
//! and the column.
//!
//! CSV (`csv.rs`): quoted fields (holding delimiters, quotes or line breaks), LF or CRLF line
//! ends and a UTF-8 byte-order mark follow the `csv` crate's rules. Lines whose fields are plain
//! (unquoted, or quoted as a whole without inner quotes) are split into fields in parallel; from
//! the first chunk holding any other line, the `csv` crate's sequential reader takes over. Field
//! conversion runs column by column in parallel over a chunk of records. Parquet (`parquet.rs`) goes through
//! the Arrow record-batch reader (uncompressed, snappy, gzip, lz4, zstd and brotli pages; plain
//! and dictionary-encoded columns; nullable columns), only the chosen columns, split into groups
//! that decode in parallel. Levels are numbered in order of first appearance in the rows, for
//! both formats. Memory is bounded by the chunk size plus the level dictionaries.
//!
//! Cost: O(rows x columns) conversions; each categorical CSV value is one hash-table lookup; a
//! Parquet text column costs one lookup per dictionary entry used in a batch plus one array index
//! per row.

mod csv;
mod parquet;

use crate::io::{ColumnChoice, FileOptions, Format};
use crate::{exit, Failure};
use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};

/// The code of a missing categorical value.
pub const MISSING_CODE: u32 = u32::MAX;

/// Text treated as a missing value (after trimming spaces).
const MISSING_TOKENS: [&str; 8] = ["", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"];

/// The type of a feature column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColumnType {
    /// Numbers; missing as NaN.
    Numeric,
    /// Levels given as text; missing as [`MISSING_CODE`].
    Categorical,
}

/// Types given for some columns by name (the rest are inferred).
#[derive(Debug, Clone, Default)]
pub struct TypeOverrides {
    /// Columns read as numeric.
    pub numeric: Vec<String>,
    /// Columns read as categorical.
    pub categorical: Vec<String>,
}

impl TypeOverrides {
    fn of(&self, name: &str) -> Option<ColumnType> {
        if self.categorical.iter().any(|c| c == name) {
            Some(ColumnType::Categorical)
        } else if self.numeric.iter().any(|c| c == name) {
            Some(ColumnType::Numeric)
        } else {
            None
        }
    }

    /// Checks that no column is given both types and that every named column is read.
    pub fn check(&self, path: &Path, names: &[String]) -> Result<(), Failure> {
        for c in &self.categorical {
            if self.numeric.contains(c) {
                return Err(bad(format!(
                    "column `{c}` is given both in --categorical and in --numeric"
                )));
            }
        }
        for (flag, list) in [
            ("--categorical", &self.categorical),
            ("--numeric", &self.numeric),
        ] {
            for c in list {
                if !names.contains(c) {
                    return Err(bad(format!(
                        "{flag} names `{c}`, which is not among the feature columns read from `{}` ({})",
                        path.display(),
                        names.join(", ")
                    )));
                }
            }
        }
        Ok(())
    }
}

/// The values of one column in one chunk.
#[derive(Debug, Clone)]
pub enum Values {
    /// Numbers, NaN for missing.
    Numeric(Vec<f64>),
    /// Level codes into the reader's levels of that column, [`MISSING_CODE`] for missing.
    Categorical(Vec<u32>),
}

impl Values {
    /// Number of values.
    pub fn len(&self) -> usize {
        match self {
            Values::Numeric(v) => v.len(),
            Values::Categorical(v) => v.len(),
        }
    }

    /// Whether value `i` is missing.
    pub fn is_missing(&self, i: usize) -> bool {
        match self {
            Values::Numeric(v) => v[i].is_nan(),
            Values::Categorical(v) => v[i] == MISSING_CODE,
        }
    }

    /// Keeps the values where `keep` is true.
    fn retain(&mut self, keep: &[bool]) {
        fn go<T: Copy>(v: &mut Vec<T>, keep: &[bool]) {
            let mut i = 0;
            v.retain(|_| {
                i += 1;
                keep[i - 1]
            });
        }
        match self {
            Values::Numeric(v) => go(v, keep),
            Values::Categorical(v) => go(v, keep),
        }
    }
}

/// One chunk of rows: one [`Values`] per feature column and, if a key column was named, the keys.
#[derive(Debug, Default)]
pub struct Chunk {
    /// Feature columns in output order.
    pub columns: Vec<Values>,
    /// One key per row when a key column was named.
    pub keys: Option<Vec<String>>,
    /// Number of rows in this chunk.
    pub rows: usize,
    /// The 1-based data-row number of each kept row (used for messages).
    pub row_numbers: Vec<usize>,
}

/// The state of one feature column across chunks: its type and, for a categorical column, its
/// levels in order of first appearance.
#[derive(Debug, Clone)]
pub struct ColumnState {
    /// Column name.
    pub name: String,
    /// Current type.
    pub kind: ColumnType,
    /// Whether the type is settled (given, or stored in a Parquet file), so it cannot change
    /// while reading.
    pub fixed: bool,
    /// Whether the type was given by the caller (`--categorical`/`--numeric` or a model file).
    pub given: bool,
    /// Levels of a categorical column, indexed by code.
    pub levels: Vec<String>,
    index: HashMap<String, u32>,
}

impl ColumnState {
    fn new(name: String, kind: Option<ColumnType>) -> Self {
        ColumnState {
            name,
            kind: kind.unwrap_or(ColumnType::Numeric),
            fixed: kind.is_some(),
            given: kind.is_some(),
            levels: Vec::new(),
            index: HashMap::new(),
        }
    }

    /// The code of `level`, adding it if new.
    pub fn intern(&mut self, level: &str) -> u32 {
        if let Some(&c) = self.index.get(level) {
            return c;
        }
        let c = self.levels.len() as u32;
        self.levels.push(level.to_string());
        self.index.insert(level.to_string(), c);
        c
    }

    /// Level code of a number in a column that turned categorical (shortest round-trip text).
    pub fn intern_number(&mut self, v: f64) -> u32 {
        if v.is_nan() {
            MISSING_CODE
        } else {
            self.intern(&v.to_string())
        }
    }

    /// Turns numeric values already read into level codes.
    pub fn numbers_to_codes(&mut self, values: &[f64]) -> Vec<u32> {
        values.iter().map(|&v| self.intern_number(v)).collect()
    }
}

/// Why a numeric field could not be read.
enum Problem {
    Missing,
    NotNumeric,
}

fn parse_number(t: &str) -> Result<f64, Problem> {
    match t.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(v) if v.is_nan() => Err(Problem::Missing),
        _ if MISSING_TOKENS.contains(&t) => Err(Problem::Missing),
        _ => Err(Problem::NotNumeric),
    }
}

pub(crate) fn bad(message: String) -> Failure {
    Failure {
        code: exit::BAD_INPUT,
        message,
    }
}

pub(crate) fn io_fail(path: &Path, what: &str, e: impl std::fmt::Display) -> Failure {
    Failure {
        code: exit::IO,
        message: format!("{what} `{}`: {e}", path.display()),
    }
}

/// Where the rows come from.
enum Source {
    Csv(self::csv::CsvSource),
    Parquet(self::parquet::ParquetSource),
}

/// Streams a table in chunks of rows, choosing feature columns by name.
pub struct TableReader {
    path: PathBuf,
    source: Source,
    /// Feature columns in output order, with their types and levels.
    pub columns: Vec<ColumnState>,
    keyed: bool,
    drop_missing: bool,
    /// Data rows read so far.
    pub rows_seen: usize,
    /// Rows dropped because of missing values (only with `drop_missing`).
    pub rows_dropped: usize,
}

/// Resolves the chosen columns against a header, returning feature positions and key position.
fn resolve(
    path: &Path,
    header: &[String],
    choice: &ColumnChoice,
) -> Result<(Vec<usize>, Option<usize>), Failure> {
    let find = |name: &str, what: &str| -> Result<usize, Failure> {
        header.iter().position(|h| h == name).ok_or_else(|| {
            bad(format!(
                "{what} `{name}` is not in `{}`; its columns are: {}",
                path.display(),
                header.join(", ")
            ))
        })
    };
    for (i, h) in header.iter().enumerate() {
        if header[..i].contains(h) {
            return Err(bad(format!(
                "`{}` has the column name `{h}` more than once",
                path.display()
            )));
        }
    }
    let key_pos = match &choice.key {
        Some(k) => Some(find(k, "key column")?),
        None => None,
    };
    for e in &choice.exclude {
        find(e, "excluded column")?;
    }
    let positions: Vec<usize> = match &choice.columns {
        Some(cols) => {
            let mut p = Vec::with_capacity(cols.len());
            for c in cols {
                let j = find(c, "column")?;
                if Some(j) == key_pos {
                    return Err(bad(format!(
                        "column `{c}` is the key column; a key cannot also be a feature"
                    )));
                }
                if p.contains(&j) {
                    return Err(bad(format!("column `{c}` is named twice in --columns")));
                }
                p.push(j);
            }
            p
        }
        None => (0..header.len())
            .filter(|j| Some(*j) != key_pos && !choice.exclude.contains(&header[*j]))
            .collect(),
    };
    if positions.is_empty() {
        return Err(bad(format!(
            "no feature columns are left to read in `{}`",
            path.display()
        )));
    }
    Ok((positions, key_pos))
}

impl TableReader {
    /// Opens `path`, resolves the chosen columns against its header and fixes the types given in
    /// `types` (the others are inferred while reading).
    pub fn open(
        path: &Path,
        opts: &FileOptions,
        choice: &ColumnChoice,
        types: &TypeOverrides,
    ) -> Result<Self, Failure> {
        let file = File::open(path).map_err(|e| io_fail(path, "cannot open", e))?;
        let (source, columns) = match opts.format_of(path) {
            Format::Csv => {
                let (s, c) = self::csv::CsvSource::open(path, file, opts, choice, types)?;
                (Source::Csv(s), c)
            }
            Format::Parquet => {
                let (s, c) = self::parquet::open_parquet(path, file, choice, types)?;
                (Source::Parquet(s), c)
            }
        };
        let names: Vec<String> = columns.iter().map(|c| c.name.clone()).collect();
        types.check(path, &names)?;
        Ok(TableReader {
            path: path.to_path_buf(),
            source,
            columns,
            keyed: choice.key.is_some(),
            drop_missing: opts.drop_missing,
            rows_seen: 0,
            rows_dropped: 0,
        })
    }

    /// Names of the feature columns in output order.
    pub fn names(&self) -> Vec<String> {
        self.columns.iter().map(|c| c.name.clone()).collect()
    }

    /// Number of feature columns.
    pub fn n_features(&self) -> usize {
        self.columns.len()
    }

    /// Reads up to `max_rows` rows into `chunk` (replacing its contents). Returns false at the
    /// end of the file (and then `chunk` holds no rows). With `drop_missing`, rows with a missing
    /// value in any feature column are left out and counted.
    pub fn next_chunk(&mut self, chunk: &mut Chunk, max_rows: usize) -> Result<bool, Failure> {
        let max_rows = max_rows.max(1);
        let first_row = self.rows_seen + 1;
        let rows = match &mut self.source {
            Source::Csv(s) => s.read(&self.path, &mut self.columns, first_row, max_rows, chunk)?,
            Source::Parquet(s) => {
                s.read(&self.path, &mut self.columns, first_row, max_rows, chunk)?
            }
        };
        self.rows_seen += rows;
        chunk.rows = rows;
        chunk.row_numbers.clear();
        chunk.row_numbers.extend(first_row..first_row + rows);
        if !self.keyed {
            chunk.keys = None;
        }
        if self.drop_missing && rows > 0 {
            let keep: Vec<bool> = (0..rows)
                .map(|i| chunk.columns.iter().all(|c| !c.is_missing(i)))
                .collect();
            let kept = keep.iter().filter(|&&k| k).count();
            if kept < rows {
                for c in &mut chunk.columns {
                    c.retain(&keep);
                }
                if let Some(keys) = chunk.keys.as_mut() {
                    let mut i = 0;
                    keys.retain(|_| {
                        i += 1;
                        keep[i - 1]
                    });
                }
                let mut i = 0;
                chunk.row_numbers.retain(|_| {
                    i += 1;
                    keep[i - 1]
                });
                self.rows_dropped += rows - kept;
                chunk.rows = kept;
            }
        }
        Ok(rows > 0)
    }

    /// An error for a value that is not a number in a column given as numeric.
    fn not_numeric(path: &Path, row: usize, column: &str, text: &str) -> Failure {
        bad(format!(
            "`{}`, data row {row} (1-based, header not counted), column `{column}`: the value \
             \"{text}\" is not a number, and the column is read as numeric; fix the file, or read \
             the column as categorical with --categorical {column}",
            path.display()
        ))
    }
}

fn level_code(col: &mut ColumnState, t: &str) -> u32 {
    if MISSING_TOKENS.contains(&t) {
        MISSING_CODE
    } else {
        col.intern(t)
    }
}

/// A whole table in memory, columns typed.
#[derive(Debug)]
pub struct TypedTable {
    /// Feature columns with their final types and levels.
    pub columns: Vec<ColumnState>,
    /// One [`Values`] per column, every one `rows` long.
    pub values: Vec<Values>,
    /// Keys when a key column was named.
    pub keys: Option<Vec<String>>,
    /// Rows kept.
    pub rows: usize,
    /// Rows dropped for missing values.
    pub rows_dropped: usize,
    /// The 1-based data-row number of each kept row.
    pub row_numbers: Vec<usize>,
}

impl TypedTable {
    /// Names of the feature columns.
    pub fn names(&self) -> Vec<String> {
        self.columns.iter().map(|c| c.name.clone()).collect()
    }

    /// Whether every column is numeric without a missing value (a plain matrix).
    pub fn is_plain_numeric(&self) -> bool {
        self.values
            .iter()
            .all(|v| matches!(v, Values::Numeric(x) if x.iter().all(|x| !x.is_nan())))
    }

    /// The types read, to read a second file (the target) with the same ones.
    pub fn types(&self) -> TypeOverrides {
        let of = |k: ColumnType| {
            self.columns
                .iter()
                .filter(|c| c.kind == k)
                .map(|c| c.name.clone())
                .collect()
        };
        TypeOverrides {
            numeric: of(ColumnType::Numeric),
            categorical: of(ColumnType::Categorical),
        }
    }

    /// The core library's typed table. A categorical column whose type was inferred and whose
    /// values are all different is refused as a likely row identifier (the core's rule).
    pub fn to_core(&self, path: &Path) -> Result<shiftweight::table::Table, Failure> {
        let cols = self
            .columns
            .iter()
            .zip(&self.values)
            .map(|(c, v)| {
                let col = core_column(path, c, v.clone())?;
                if !c.given {
                    col.refuse_identifier()
                        .map_err(|e| bad(format!("`{}`: {e}", path.display())))?;
                }
                Ok(col)
            })
            .collect::<Result<Vec<_>, Failure>>()?;
        shiftweight::table::Table::new(cols).map_err(|e| bad(format!("`{}`: {e}", path.display())))
    }
}

/// One column for the core table.
fn core_column(
    path: &Path,
    state: &ColumnState,
    values: Values,
) -> Result<shiftweight::table::Column, Failure> {
    use shiftweight::table::Column;
    let c = match values {
        Values::Numeric(v) => Column::numeric(state.name.clone(), v),
        Values::Categorical(codes) => {
            Column::categorical(state.name.clone(), state.levels.clone(), codes)
        }
    };
    c.map_err(|e| bad(format!("`{}`: {e}", path.display())))
}

/// The rows of a chunk as a core typed table (the chunk's columns are moved out).
pub fn chunk_to_core(
    path: &Path,
    columns: &[ColumnState],
    chunk: &mut Chunk,
) -> Result<shiftweight::table::Table, Failure> {
    let cols = columns
        .iter()
        .zip(chunk.columns.drain(..))
        .map(|(c, v)| core_column(path, c, v))
        .collect::<Result<Vec<_>, Failure>>()?;
    shiftweight::table::Table::new(cols).map_err(|e| bad(format!("`{}`: {e}", path.display())))
}

/// Reads a whole table (for fitting), through the same streaming reader as `apply`.
pub fn read_typed(
    path: &Path,
    opts: &FileOptions,
    choice: &ColumnChoice,
    types: &TypeOverrides,
) -> Result<TypedTable, Failure> {
    let mut reader = TableReader::open(path, opts, choice, types)?;
    let mut values: Vec<Values> = reader
        .columns
        .iter()
        .map(|c| match c.kind {
            ColumnType::Numeric => Values::Numeric(Vec::new()),
            ColumnType::Categorical => Values::Categorical(Vec::new()),
        })
        .collect();
    let mut keys = choice.key.as_ref().map(|_| Vec::new());
    let mut rows = 0;
    let mut row_numbers = Vec::new();
    let mut chunk = Chunk::default();
    while reader.next_chunk(&mut chunk, 65_536)? {
        for (j, part) in chunk.columns.drain(..).enumerate() {
            match (&mut values[j], part) {
                (Values::Numeric(all), Values::Numeric(p)) => all.extend_from_slice(&p),
                (Values::Categorical(all), Values::Categorical(p)) => all.extend_from_slice(&p),
                (all @ Values::Numeric(_), Values::Categorical(p)) => {
                    // The column turned categorical in this chunk: recode what came before.
                    let Values::Numeric(before) = &*all else {
                        unreachable!()
                    };
                    let mut codes = reader.columns[j].numbers_to_codes(before);
                    codes.extend_from_slice(&p);
                    *all = Values::Categorical(codes);
                }
                (Values::Categorical(_), Values::Numeric(_)) => {
                    unreachable!("a categorical column never turns numeric")
                }
            }
        }
        if let (Some(all), Some(part)) = (keys.as_mut(), chunk.keys.as_mut()) {
            all.append(part);
        }
        row_numbers.extend_from_slice(&chunk.row_numbers);
        rows += chunk.rows;
    }
    if rows == 0 {
        return Err(bad(format!(
            "`{}` has no usable data rows ({} read, {} dropped)",
            path.display(),
            reader.rows_seen,
            reader.rows_dropped
        )));
    }
    Ok(TypedTable {
        columns: reader.columns,
        values,
        keys,
        rows,
        rows_dropped: reader.rows_dropped,
        row_numbers,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_tokens_and_numbers() {
        assert!(matches!(parse_number("1.5"), Ok(v) if v == 1.5));
        assert!(matches!(parse_number("NA"), Err(Problem::Missing)));
        assert!(matches!(parse_number(""), Err(Problem::Missing)));
        assert!(matches!(parse_number("abc"), Err(Problem::NotNumeric)));
        assert!(matches!(parse_number("inf"), Err(Problem::NotNumeric)));
    }

    #[test]
    fn a_column_turns_categorical_and_keeps_earlier_numbers_as_levels() {
        let mut col = ColumnState::new("c".into(), None);
        assert_eq!(
            col.numbers_to_codes(&[1.5, f64::NAN, 2.0]),
            vec![0, MISSING_CODE, 1]
        );
        assert_eq!(col.levels, vec!["1.5", "2"]);
        assert_eq!(col.intern("north"), 2);
        assert_eq!(col.intern("1.5"), 0);
    }
}
