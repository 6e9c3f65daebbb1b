//! The file layer: tables in (CSV with a header, or Parquet), weights and reports out.
//!
//! Reading goes through one streaming [`TableReader`] that yields chunks of at most a given number
//! of rows, so `apply` runs in memory independent of the row count; [`read_table`] simply collects
//! every chunk. Columns are chosen by name. A missing or non-numeric value is an error naming the
//! file, the data row (1-based, the header not counted) and the column, unless the caller asked to
//! drop such rows, in which case they are counted.
//!
//! Every output goes through [`AtomicFile`]: written to a temporary file in the destination's
//! directory, flushed and fsynced, then renamed over the destination, so a failed run leaves any
//! earlier file of that name untouched.

use crate::{exit, Failure};
use clap::ValueEnum;
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// Input file formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Format {
    /// Delimited text with a header line.
    Csv,
    /// Apache Parquet (uncompressed, snappy, lz4 or gzip pages).
    Parquet,
}

/// How to read an input file.
#[derive(Debug, Clone)]
pub struct FileOptions {
    /// Forced format; `None` chooses by extension (`.parquet`/`.pq` is Parquet, anything else CSV).
    pub format: Option<Format>,
    /// CSV field delimiter.
    pub delimiter: u8,
    /// Drop rows with a missing or non-numeric value instead of failing.
    pub drop_missing: bool,
}

impl FileOptions {
    fn format_of(&self, path: &Path) -> Format {
        if let Some(f) = self.format {
            return f;
        }
        match path
            .extension()
            .and_then(|e| e.to_str())
            .map(|e| e.to_ascii_lowercase())
        {
            Some(e) if e == "parquet" || e == "pq" => Format::Parquet,
            _ => Format::Csv,
        }
    }
}

/// Which columns to read.
#[derive(Debug, Clone, Default)]
pub struct ColumnChoice {
    /// Feature columns in this order; `None` means every column not excluded and not the key.
    pub columns: Option<Vec<String>>,
    /// Columns left out when `columns` is `None`.
    pub exclude: Vec<String>,
    /// A row key column carried to the output verbatim (never a feature).
    pub key: Option<String>,
}

/// Text treated as a missing value (after trimming spaces).
const MISSING_TOKENS: [&str; 8] = ["", "NA", "N/A", "NaN", "nan", "null", "NULL", "None"];

fn bad(message: String) -> Failure {
    Failure {
        code: exit::BAD_INPUT,
        message,
    }
}

fn io_fail(path: &Path, what: &str, e: impl std::fmt::Display) -> Failure {
    Failure {
        code: exit::IO,
        message: format!("{what} `{}`: {e}", path.display()),
    }
}

/// One chunk of rows: row-major feature values and, if a key column was named, the keys.
#[derive(Debug, Default)]
pub struct Chunk {
    /// `rows * n_features` values, row-major.
    pub values: Vec<f64>,
    /// One key per row when a key column was named.
    pub keys: Option<Vec<String>>,
    /// Number of rows in this chunk.
    pub rows: usize,
}

impl Chunk {
    fn clear(&mut self, keyed: bool) {
        self.values.clear();
        self.rows = 0;
        if keyed {
            self.keys.get_or_insert_with(Vec::new).clear();
        } else {
            self.keys = None;
        }
    }
}

/// Why a field could not be used as a number.
enum FieldProblem {
    Missing,
    NotNumeric(String),
}

fn parse_number(text: &str) -> Result<f64, FieldProblem> {
    let t = text.trim();
    if MISSING_TOKENS.contains(&t) {
        return Err(FieldProblem::Missing);
    }
    match t.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(FieldProblem::NotNumeric(t.to_string())),
        Err(_) => Err(FieldProblem::NotNumeric(t.to_string())),
    }
}

enum Source {
    Csv {
        reader: csv::Reader<File>,
        record: csv::StringRecord,
        positions: Vec<usize>,
        key_pos: Option<usize>,
    },
    Parquet {
        rows: parquet::record::reader::RowIter<'static>,
        n_cols: usize,
        key: Option<String>,
    },
}

/// Streams a table in chunks of rows, choosing feature columns by name.
pub struct TableReader {
    path: PathBuf,
    source: Source,
    /// Names of the feature columns, in output order.
    pub names: Vec<String>,
    keyed: bool,
    drop_missing: bool,
    /// Data rows read so far (1-based numbering of the next row is `rows_seen + 1`).
    pub rows_seen: usize,
    /// Rows dropped because of missing or non-numeric values.
    pub rows_dropped: usize,
    row_buf: Vec<f64>,
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
    /// Opens `path` and resolves the chosen columns against its header.
    pub fn open(path: &Path, opts: &FileOptions, choice: &ColumnChoice) -> Result<Self, Failure> {
        let file = File::open(path).map_err(|e| io_fail(path, "cannot open", e))?;
        let (source, names) = match opts.format_of(path) {
            Format::Csv => {
                let mut reader = csv::ReaderBuilder::new()
                    .delimiter(opts.delimiter)
                    .has_headers(true)
                    .flexible(false)
                    .from_reader(file);
                let header: Vec<String> = reader
                    .headers()
                    .map_err(|e| csv_fail(path, e))?
                    .iter()
                    .map(|h| h.trim().to_string())
                    .collect();
                if header.is_empty() || (header.len() == 1 && header[0].is_empty()) {
                    return Err(bad(format!(
                        "`{}` is empty or has no header line",
                        path.display()
                    )));
                }
                let (positions, key_pos) = resolve(path, &header, choice)?;
                let names = positions.iter().map(|&j| header[j].clone()).collect();
                (
                    Source::Csv {
                        reader,
                        record: csv::StringRecord::new(),
                        positions,
                        key_pos,
                    },
                    names,
                )
            }
            Format::Parquet => open_parquet(path, file, choice)?,
        };
        let n = match &source {
            Source::Csv { positions, .. } => positions.len(),
            Source::Parquet { n_cols, .. } => *n_cols,
        };
        Ok(TableReader {
            path: path.to_path_buf(),
            source,
            names,
            keyed: choice.key.is_some(),
            drop_missing: opts.drop_missing,
            rows_seen: 0,
            rows_dropped: 0,
            row_buf: vec![0.0; n],
        })
    }

    /// Number of feature columns.
    pub fn n_features(&self) -> usize {
        self.names.len()
    }

    fn field_error(&self, row: usize, column: &str, problem: FieldProblem) -> Failure {
        let what = match problem {
            FieldProblem::Missing => "a missing value".to_string(),
            FieldProblem::NotNumeric(t) => format!("the non-numeric value \"{t}\""),
        };
        bad(format!(
            "`{}`, data row {row} (1-based, header not counted), column `{column}`: {what}; \
             fix the file, choose other columns, or pass --drop-missing to skip such rows",
            self.path.display()
        ))
    }

    /// Reads up to `max_rows` rows into `chunk` (cleared first). Returns false at end of file.
    pub fn next_chunk(&mut self, chunk: &mut Chunk, max_rows: usize) -> Result<bool, Failure> {
        chunk.clear(self.keyed);
        while chunk.rows < max_rows {
            let row = self.rows_seen + 1;
            // Fill row_buf (and the key) for one row, or find the end of the file.
            let (ok, key) = match &mut self.source {
                Source::Csv {
                    reader,
                    record,
                    positions,
                    key_pos,
                } => {
                    match reader.read_record(record) {
                        Ok(false) => return Ok(chunk.rows > 0),
                        Ok(true) => {}
                        Err(e) => return Err(csv_fail(&self.path, e)),
                    }
                    self.rows_seen += 1;
                    let mut problem = None;
                    for (slot, &j) in self.row_buf.iter_mut().zip(positions.iter()) {
                        match parse_number(record.get(j).unwrap_or("")) {
                            Ok(v) => *slot = v,
                            Err(p) => {
                                problem = Some((j, p));
                                break;
                            }
                        }
                    }
                    let key = key_pos.map(|k| record.get(k).unwrap_or("").to_string());
                    match problem {
                        None => (Ok(()), key),
                        Some((j, p)) => {
                            let name = self.names
                                [positions.iter().position(|&q| q == j).unwrap_or(0)]
                            .clone();
                            (Err((name, p)), key)
                        }
                    }
                }
                Source::Parquet {
                    rows,
                    key: key_name,
                    ..
                } => {
                    let r = match rows.next() {
                        None => return Ok(chunk.rows > 0),
                        Some(Err(e)) => return Err(parquet_fail(&self.path, e)),
                        Some(Ok(r)) => r,
                    };
                    self.rows_seen += 1;
                    let mut key = None;
                    let mut problem = None;
                    let mut k = 0;
                    for (name, field) in r.get_column_iter() {
                        if key.is_none() && Some(name) == key_name.as_ref() {
                            key = Some(field_text(field));
                            continue;
                        }
                        if problem.is_some() || k >= self.row_buf.len() {
                            continue;
                        }
                        match field_number(field) {
                            Ok(v) => self.row_buf[k] = v,
                            Err(p) => problem = Some((name.clone(), p)),
                        }
                        k += 1;
                    }
                    match problem {
                        None => (Ok(()), key),
                        Some(p) => (Err(p), key),
                    }
                }
            };
            match ok {
                Ok(()) => {
                    chunk.values.extend_from_slice(&self.row_buf);
                    if let Some(keys) = chunk.keys.as_mut() {
                        keys.push(key.unwrap_or_default());
                    }
                    chunk.rows += 1;
                }
                Err((name, p)) => {
                    if self.drop_missing {
                        self.rows_dropped += 1;
                    } else {
                        return Err(self.field_error(row, &name, p));
                    }
                }
            }
        }
        Ok(true)
    }
}

fn csv_fail(path: &Path, e: csv::Error) -> Failure {
    let code = if e.is_io_error() {
        exit::IO
    } else {
        exit::BAD_INPUT
    };
    let at = e
        .position()
        .map(|p| format!(" (line {})", p.line()))
        .unwrap_or_default();
    let detail = match e.kind() {
        csv::ErrorKind::UnequalLengths {
            expected_len, len, ..
        } => {
            format!("a line has {len} fields but the header has {expected_len}")
        }
        _ => e.to_string(),
    };
    Failure {
        code,
        message: format!("cannot read `{}`{at}: {detail}", path.display()),
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

fn field_number(f: &parquet::record::Field) -> Result<f64, FieldProblem> {
    use parquet::record::Field as F;
    let v = match f {
        F::Null => return Err(FieldProblem::Missing),
        F::Bool(b) => f64::from(u8::from(*b)),
        F::Byte(v) => f64::from(*v),
        F::Short(v) => f64::from(*v),
        F::Int(v) => f64::from(*v),
        F::Long(v) => *v as f64,
        F::UByte(v) => f64::from(*v),
        F::UShort(v) => f64::from(*v),
        F::UInt(v) => f64::from(*v),
        F::ULong(v) => *v as f64,
        F::Float(v) => f64::from(*v),
        F::Double(v) => *v,
        F::Str(s) => return parse_number(s),
        other => return Err(FieldProblem::NotNumeric(other.to_string())),
    };
    if v.is_nan() {
        Err(FieldProblem::Missing)
    } else if !v.is_finite() {
        Err(FieldProblem::NotNumeric(v.to_string()))
    } else {
        Ok(v)
    }
}

fn field_text(f: &parquet::record::Field) -> String {
    match f {
        parquet::record::Field::Str(s) => s.clone(),
        parquet::record::Field::Null => String::new(),
        other => other.to_string(),
    }
}

fn open_parquet(
    path: &Path,
    file: File,
    choice: &ColumnChoice,
) -> Result<(Source, Vec<String>), Failure> {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    use parquet::schema::types::Type;
    let reader = SerializedFileReader::new(file).map_err(|e| parquet_fail(path, e))?;
    let root = reader
        .metadata()
        .file_metadata()
        .schema_descr()
        .root_schema()
        .clone();
    let fields = root.get_fields().to_vec();
    let header: Vec<String> = fields.iter().map(|f| f.name().to_string()).collect();
    let (positions, key_pos) = resolve(path, &header, choice)?;
    for &j in &positions {
        if !fields[j].is_primitive() {
            return Err(bad(format!(
                "column `{}` of `{}` is nested (a list, map or struct); only plain numeric columns can be features",
                header[j],
                path.display()
            )));
        }
    }
    // The row reader yields projected columns in file order; features must come out in the
    // chosen order, so project on file order and check it matches (or reorder below).
    let mut proj: Vec<usize> = positions.clone();
    proj.extend(key_pos);
    proj.sort_unstable();
    let projected = Type::group_type_builder(root.name())
        .with_fields(proj.iter().map(|&j| fields[j].clone()).collect())
        .build()
        .map_err(|e| parquet_fail(path, e))?;
    let rows = parquet::record::reader::RowIter::from_file_into(Box::new(reader))
        .project(Some(projected))
        .map_err(|e| parquet_fail(path, e))?;
    // Features come out in file order; record that order as the names.
    let ordered: Vec<usize> = proj.into_iter().filter(|j| Some(*j) != key_pos).collect();
    if ordered != positions {
        return Err(bad(format!(
            "for Parquet input, --columns must list the columns in the order they appear in `{}` ({})",
            path.display(),
            ordered.iter().map(|&j| header[j].as_str()).collect::<Vec<_>>().join(", ")
        )));
    }
    let names = positions.iter().map(|&j| header[j].clone()).collect();
    let n_cols = positions.len();
    Ok((
        Source::Parquet {
            rows,
            n_cols,
            key: choice.key.clone(),
        },
        names,
    ))
}

/// A whole table in memory.
#[derive(Debug)]
pub struct Table {
    /// Feature names in column order.
    pub names: Vec<String>,
    /// Row-major values.
    pub values: Vec<f64>,
    /// Keys when a key column was named.
    pub keys: Option<Vec<String>>,
    /// Rows kept.
    pub rows: usize,
    /// Rows dropped for missing or non-numeric values.
    pub rows_dropped: usize,
}

impl Table {
    /// A matrix view of the values.
    pub fn view(&self, argument: &str) -> Result<shiftweight::MatrixView<'_>, Failure> {
        Ok(shiftweight::MatrixView::named(
            &self.values,
            self.rows,
            self.names.len(),
            argument,
        )?)
    }
}

/// Reads a whole table (for fitting), through the same streaming reader as `apply`.
pub fn read_table(
    path: &Path,
    opts: &FileOptions,
    choice: &ColumnChoice,
) -> Result<Table, Failure> {
    let mut reader = TableReader::open(path, opts, choice)?;
    let mut table = Table {
        names: reader.names.clone(),
        values: Vec::new(),
        keys: choice.key.as_ref().map(|_| Vec::new()),
        rows: 0,
        rows_dropped: 0,
    };
    let mut chunk = Chunk::default();
    while reader.next_chunk(&mut chunk, 65_536)? {
        table.values.extend_from_slice(&chunk.values);
        if let (Some(all), Some(part)) = (table.keys.as_mut(), chunk.keys.as_mut()) {
            all.append(part);
        }
        table.rows += chunk.rows;
    }
    table.rows_dropped = reader.rows_dropped;
    if table.rows == 0 {
        return Err(bad(format!(
            "`{}` has no usable data rows ({} read, {} dropped)",
            path.display(),
            reader.rows_seen,
            reader.rows_dropped
        )));
    }
    Ok(table)
}

/// An output file written atomically: a temporary file in the same directory, renamed over the
/// destination by [`AtomicFile::commit`]. Dropped without commit, the temporary file is removed
/// and the destination is untouched.
pub struct AtomicFile {
    dest: PathBuf,
    tmp: PathBuf,
    out: Option<BufWriter<File>>,
}

impl AtomicFile {
    /// Creates the temporary file beside `dest`.
    pub fn create(dest: &Path) -> Result<Self, Failure> {
        let dir = match dest.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        let name = dest
            .file_name()
            .ok_or_else(|| bad(format!("`{}` is not a file path", dest.display())))?
            .to_string_lossy()
            .into_owned();
        let tmp = dir.join(format!(".{name}.{}.partial", std::process::id()));
        let file = File::create(&tmp).map_err(|e| io_fail(dest, "cannot write beside", e))?;
        Ok(AtomicFile {
            dest: dest.to_path_buf(),
            tmp,
            out: Some(BufWriter::new(file)),
        })
    }

    /// The writer.
    pub fn writer(&mut self) -> &mut BufWriter<File> {
        // `out` is only taken by `commit`, which consumes self.
        self.out.as_mut().expect("writer used after commit")
    }

    /// Writes bytes, mapping failures to an I/O failure naming the destination.
    pub fn write_all(&mut self, bytes: &[u8]) -> Result<(), Failure> {
        let dest = self.dest.clone();
        self.writer()
            .write_all(bytes)
            .map_err(|e| io_fail(&dest, "cannot write", e))
    }

    /// Flushes, fsyncs and renames the temporary file over the destination.
    pub fn commit(mut self) -> Result<(), Failure> {
        let out = self.out.take().expect("commit called once");
        let file = out
            .into_inner()
            .map_err(|e| io_fail(&self.dest, "cannot write", e.error()))?;
        file.sync_all()
            .map_err(|e| io_fail(&self.dest, "cannot flush", e))?;
        drop(file);
        fs::rename(&self.tmp, &self.dest).map_err(|e| io_fail(&self.dest, "cannot replace", e))?;
        // Make the rename itself durable where the platform allows opening a directory.
        if let Some(dir) = self.dest.parent().filter(|p| !p.as_os_str().is_empty()) {
            if let Ok(d) = File::open(dir) {
                let _ = d.sync_all();
            }
        }
        Ok(())
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        if self.out.is_some() {
            self.out = None;
            let _ = fs::remove_file(&self.tmp);
        }
    }
}

/// Writes a whole text file atomically.
pub fn write_text(dest: &Path, text: &str) -> Result<(), Failure> {
    let mut f = AtomicFile::create(dest)?;
    f.write_all(text.as_bytes())?;
    f.commit()
}

/// Streams weights as CSV: a header (`key,weight` or `weight`) then one line per row.
pub struct WeightsWriter {
    file: AtomicFile,
    key_name: Option<String>,
    line: String,
}

/// Refuses output names this build cannot write.
pub fn check_weights_path(path: &Path) -> Result<(), Failure> {
    match path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
    {
        Some(e) if e == "parquet" || e == "pq" => Err(bad(format!(
            "`{}`: weights are written as CSV; choose a .csv name",
            path.display()
        ))),
        _ => Ok(()),
    }
}

impl WeightsWriter {
    /// Starts the file; `key_name` is the name of the key column, if any.
    pub fn create(path: &Path, key_name: Option<&str>) -> Result<Self, Failure> {
        check_weights_path(path)?;
        let mut file = AtomicFile::create(path)?;
        let header = match key_name {
            Some(k) => format!("{},weight\n", csv_field(k)),
            None => "weight\n".to_string(),
        };
        file.write_all(header.as_bytes())?;
        Ok(WeightsWriter {
            file,
            key_name: key_name.map(str::to_string),
            line: String::new(),
        })
    }

    /// Appends rows; `keys` must be given exactly when a key column was named.
    pub fn write(&mut self, weights: &[f64], keys: Option<&[String]>) -> Result<(), Failure> {
        use std::fmt::Write as _;
        for (i, w) in weights.iter().enumerate() {
            self.line.clear();
            if self.key_name.is_some() {
                let k = keys
                    .and_then(|k| k.get(i))
                    .map(String::as_str)
                    .unwrap_or("");
                self.line.push_str(&csv_field(k));
                self.line.push(',');
            }
            // Rust's `Display` for f64 prints the shortest text that reads back to the same value.
            let _ = writeln!(self.line, "{w}");
            self.file.write_all(self.line.as_bytes())?;
        }
        Ok(())
    }

    /// Makes the file visible under its name.
    pub fn commit(self) -> Result<(), Failure> {
        self.file.commit()
    }
}

/// Quotes a CSV field when needed.
fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_tokens_and_numbers() {
        assert!(matches!(parse_number(" 1.5 "), Ok(v) if v == 1.5));
        assert!(matches!(parse_number("NA"), Err(FieldProblem::Missing)));
        assert!(matches!(parse_number(""), Err(FieldProblem::Missing)));
        assert!(matches!(
            parse_number("abc"),
            Err(FieldProblem::NotNumeric(_))
        ));
        assert!(matches!(
            parse_number("inf"),
            Err(FieldProblem::NotNumeric(_))
        ));
    }

    #[test]
    fn csv_quoting() {
        assert_eq!(csv_field("a"), "a");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"x\""), "\"say \"\"x\"\"\"");
    }
}
