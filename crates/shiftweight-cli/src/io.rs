//! The file layer: input options, whole tables for fitting, and outputs (weights, reports).
//!
//! Reading itself lives in [`crate::read`] (typed columns, streamed in chunks). [`numeric_rows`]
//! turns typed columns that are all numeric and complete into a row-major matrix (for models
//! fitted on a matrix); a categorical column or a missing value is an error naming the file, the
//! data row (1-based, the header not counted) and the column.
//!
//! Every output goes through [`AtomicFile`]: written to a temporary file in the destination's
//! directory, flushed and fsynced, then renamed over the destination, so a failed run leaves any
//! earlier file of that name untouched.

use crate::read::{bad, io_fail, Values};
use crate::Failure;
use clap::ValueEnum;
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// Input file formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Format {
    /// Delimited text with a header line.
    Csv,
    /// Apache Parquet (uncompressed, snappy, gzip, lz4, zstd or brotli pages).
    Parquet,
}

/// How to read an input file.
#[derive(Debug, Clone)]
pub struct FileOptions {
    /// Forced format; `None` chooses by extension (`.parquet`/`.pq` is Parquet, anything else CSV).
    pub format: Option<Format>,
    /// CSV field delimiter.
    pub delimiter: u8,
    /// Drop rows with a missing value in any feature column.
    pub drop_missing: bool,
}

impl FileOptions {
    pub(crate) fn format_of(&self, path: &Path) -> Format {
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

/// A whole table of numeric columns in memory, row-major.
#[derive(Debug)]
pub struct Table {
    /// Feature names in column order.
    pub names: Vec<String>,
    /// Row-major values.
    pub values: Vec<f64>,
    /// Rows.
    pub rows: usize,
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

/// Row-major numbers of typed columns that must all be numeric and complete: a categorical column
/// or a missing value is an error naming the file, the column and (for a gap) the data row.
pub fn numeric_rows(
    path: &Path,
    names: &[String],
    columns: &[Values],
    row_numbers: &[usize],
) -> Result<Vec<f64>, Failure> {
    let rows = row_numbers.len();
    let d = columns.len();
    let mut out = vec![0.0; rows * d];
    for (j, col) in columns.iter().enumerate() {
        let Values::Numeric(v) = col else {
            return Err(bad(format!(
                "column `{}` of `{}` holds text and is read as categorical; these commands \
                 need numeric columns: leave it out with --exclude {}",
                names[j],
                path.display(),
                names[j]
            )));
        };
        for (i, &x) in v.iter().enumerate() {
            if x.is_nan() {
                return Err(bad(format!(
                    "`{}`, data row {} (1-based, header not counted), column `{}`: a missing \
                     value; fix the file, or pass --drop-missing to skip rows with missing values",
                    path.display(),
                    row_numbers[i],
                    names[j]
                )));
            }
            out[i * d + j] = x;
        }
    }
    Ok(out)
}

/// An output file written atomically: a temporary file in the same directory, renamed over the
/// destination by [`AtomicFile::commit`]. Dropped without commit, the temporary file is removed
/// and the destination is untouched.
pub struct AtomicFile {
    dest: PathBuf,
    tmp: PathBuf,
    out: Option<BufWriter<File>>,
    committed: bool,
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
            committed: false,
        })
    }

    /// The writer.
    pub fn writer(&mut self) -> &mut BufWriter<File> {
        // `out` is only taken by `commit`, which consumes self.
        self.out.as_mut().expect("writer used after commit")
    }

    /// Hands the writer to an encoder that owns it (the Parquet writer); give it back with
    /// [`AtomicFile::put_writer`] before [`AtomicFile::commit`]. Dropped meanwhile, the temporary
    /// file is still removed.
    pub fn take_writer(&mut self) -> BufWriter<File> {
        self.out.take().expect("writer taken once")
    }

    /// Gives back the writer taken by [`AtomicFile::take_writer`].
    pub fn put_writer(&mut self, out: BufWriter<File>) {
        self.out = Some(out);
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
        let out = self
            .out
            .take()
            .expect("commit called once, with the writer in place");
        let file = out
            .into_inner()
            .map_err(|e| io_fail(&self.dest, "cannot write", e.error()))?;
        file.sync_all()
            .map_err(|e| io_fail(&self.dest, "cannot flush", e))?;
        drop(file);
        fs::rename(&self.tmp, &self.dest).map_err(|e| io_fail(&self.dest, "cannot replace", e))?;
        self.committed = true;
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
        if !self.committed {
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

/// Streams weights as CSV (a header `key,weight` or `weight`, then one line per row) or, for a
/// `.parquet`/`.pq` name, as Parquet (columns `key` as text, when a key column was named, and
/// `weight` as float64; snappy pages, row groups of [`PARQUET_ROW_GROUP`] rows, so memory stays
/// flat in the number of rows). Either way the file is written atomically ([`AtomicFile`]).
pub struct WeightsWriter {
    sink: Sink,
    key_name: Option<String>,
}

/// Rows per Parquet row group of a weights file.
pub const PARQUET_ROW_GROUP: usize = 65_536;

enum Sink {
    Csv {
        file: AtomicFile,
        line: String,
    },
    Parquet {
        file: AtomicFile,
        writer: Box<parquet::arrow::ArrowWriter<BufWriter<File>>>,
        schema: std::sync::Arc<arrow_schema::Schema>,
    },
}

/// Whether `path` names a Parquet file (by extension, `.parquet` or `.pq`, any letter case).
pub fn is_parquet_path(path: &Path) -> bool {
    matches!(
        path.extension()
            .and_then(|e| e.to_str())
            .map(|e| e.to_ascii_lowercase())
            .as_deref(),
        Some("parquet" | "pq")
    )
}

fn parquet_fail(dest: &Path, e: impl std::fmt::Display) -> Failure {
    Failure {
        code: crate::exit::IO,
        message: format!("cannot write `{}` as Parquet: {e}", dest.display()),
    }
}

impl WeightsWriter {
    /// Starts the file; `key_name` is the name of the key column, if any. The format follows the
    /// extension of `path` (see [`WeightsWriter`]).
    pub fn create(path: &Path, key_name: Option<&str>) -> Result<Self, Failure> {
        let mut file = AtomicFile::create(path)?;
        let sink = if is_parquet_path(path) {
            use arrow_schema::{DataType, Field, Schema};
            use parquet::basic::Compression;
            use parquet::file::properties::WriterProperties;
            let mut fields = Vec::new();
            if let Some(k) = key_name {
                fields.push(Field::new(k, DataType::Utf8, false));
            }
            fields.push(Field::new("weight", DataType::Float64, false));
            let schema = std::sync::Arc::new(Schema::new(fields));
            let props = WriterProperties::builder()
                .set_compression(Compression::SNAPPY)
                .set_max_row_group_size(PARQUET_ROW_GROUP)
                .build();
            let out = file.take_writer();
            let writer = parquet::arrow::ArrowWriter::try_new(out, schema.clone(), Some(props))
                .map_err(|e| parquet_fail(path, e))?;
            Sink::Parquet {
                file,
                writer: Box::new(writer),
                schema,
            }
        } else {
            let header = match key_name {
                Some(k) => format!("{},weight\n", csv_field(k)),
                None => "weight\n".to_string(),
            };
            file.write_all(header.as_bytes())?;
            Sink::Csv {
                file,
                line: String::new(),
            }
        };
        Ok(WeightsWriter {
            sink,
            key_name: key_name.map(str::to_string),
        })
    }

    /// Appends rows; `keys` must be given exactly when a key column was named.
    pub fn write(&mut self, weights: &[f64], keys: Option<&[String]>) -> Result<(), Failure> {
        use std::fmt::Write as _;
        let key = |i: usize| -> &str {
            keys.and_then(|k| k.get(i))
                .map(String::as_str)
                .unwrap_or("")
        };
        match &mut self.sink {
            Sink::Csv { file, line } => {
                for (i, w) in weights.iter().enumerate() {
                    line.clear();
                    if self.key_name.is_some() {
                        line.push_str(&csv_field(key(i)));
                        line.push(',');
                    }
                    // Rust's `Display` for f64 prints the shortest text that reads back to the
                    // same value.
                    let _ = writeln!(line, "{w}");
                    file.write_all(line.as_bytes())?;
                }
            }
            Sink::Parquet {
                file,
                writer,
                schema,
            } => {
                use arrow_array::{ArrayRef, Float64Array, RecordBatch, StringArray};
                let mut cols: Vec<ArrayRef> = Vec::new();
                if self.key_name.is_some() {
                    let k: StringArray = (0..weights.len()).map(|i| Some(key(i))).collect();
                    cols.push(std::sync::Arc::new(k));
                }
                cols.push(std::sync::Arc::new(Float64Array::from(weights.to_vec())));
                let batch = RecordBatch::try_new(schema.clone(), cols)
                    .map_err(|e| parquet_fail(&file.dest, e))?;
                writer
                    .write(&batch)
                    .map_err(|e| parquet_fail(&file.dest, e))?;
            }
        }
        Ok(())
    }

    /// Makes the file visible under its name.
    pub fn commit(self) -> Result<(), Failure> {
        match self.sink {
            Sink::Csv { file, .. } => file.commit(),
            Sink::Parquet {
                mut file, writer, ..
            } => {
                let out = writer
                    .into_inner()
                    .map_err(|e| parquet_fail(&file.dest, e))?;
                file.put_writer(out);
                file.commit()
            }
        }
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
    fn csv_quoting() {
        assert_eq!(csv_field("a"), "a");
        assert_eq!(csv_field("a,b"), "\"a,b\"");
        assert_eq!(csv_field("say \"x\""), "\"say \"\"x\"\"\"");
    }
}
