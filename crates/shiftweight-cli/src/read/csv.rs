//! CSV tables: the `csv` crate's byte-record reader fills a chunk of records (reused from chunk to
//! chunk), then each feature column's fields are converted in parallel (one rayon task per
//! column). Quoted fields, LF or CRLF line ends and a UTF-8 byte-order mark are the `csv` crate's.

use super::{
    bad, level_code, parse_number, resolve, Chunk, ColumnState, ColumnType, Problem, TableReader,
    TypeOverrides, Values,
};
use crate::io::{ColumnChoice, FileOptions};
use crate::{exit, Failure};
use rayon::prelude::*;
use std::fs::File;
use std::path::Path;

/// An open CSV file: the reader, the records of a chunk, and where the features and the key are
/// in each record.
pub(super) struct CsvSource {
    reader: csv::Reader<File>,
    records: Vec<csv::ByteRecord>,
    positions: Vec<usize>,
    key_pos: Option<usize>,
}

impl CsvSource {
    /// Reads the header of `file` and resolves the chosen columns against it.
    pub(super) fn open(
        path: &Path,
        file: File,
        opts: &FileOptions,
        choice: &ColumnChoice,
        types: &TypeOverrides,
    ) -> Result<(Self, Vec<ColumnState>), Failure> {
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
        let columns = positions
            .iter()
            .map(|&j| ColumnState::new(header[j].clone(), types.of(&header[j])))
            .collect();
        Ok((
            CsvSource {
                reader,
                records: Vec::new(),
                positions,
                key_pos,
            },
            columns,
        ))
    }

    /// Reads up to `max_rows` records into `chunk` (columns and keys); returns the number read.
    pub(super) fn read(
        &mut self,
        path: &Path,
        columns: &mut [ColumnState],
        first_row: usize,
        max_rows: usize,
        chunk: &mut Chunk,
    ) -> Result<usize, Failure> {
        let CsvSource {
            reader,
            records,
            positions,
            key_pos,
        } = self;
        let mut n = 0;
        while n < max_rows {
            if records.len() == n {
                records.push(csv::ByteRecord::new());
            }
            match reader.read_byte_record(&mut records[n]) {
                Ok(false) => break,
                Ok(true) => n += 1,
                Err(e) => return Err(csv_fail(path, e)),
            }
        }
        let recs = &records[..n];
        chunk.columns = columns
            .par_iter_mut()
            .zip(positions.par_iter())
            .map(|(col, &j)| csv_column(path, col, recs, j, first_row))
            .collect::<Result<Vec<_>, Failure>>()?;
        chunk.keys = key_pos.map(|k| {
            recs.iter()
                .map(|r| field_text(r.get(k).unwrap_or(b"")).into_owned())
                .collect()
        });
        Ok(n)
    }
}

fn field_text(bytes: &[u8]) -> std::borrow::Cow<'_, str> {
    String::from_utf8_lossy(bytes)
}

/// Converts field `j` of `recs` for one column. A column not fixed to numeric turns categorical
/// at the first non-numeric, non-missing text.
fn csv_column(
    path: &Path,
    col: &mut ColumnState,
    recs: &[csv::ByteRecord],
    j: usize,
    first_row: usize,
) -> Result<Values, Failure> {
    let text = |r| trimmed(r, j);
    if col.kind == ColumnType::Numeric {
        let mut out = Vec::with_capacity(recs.len());
        let mut switch_at = None;
        for (i, r) in recs.iter().enumerate() {
            let t = text(r);
            match parse_number(&t) {
                Ok(v) => out.push(v),
                Err(Problem::Missing) => out.push(f64::NAN),
                Err(Problem::NotNumeric) if col.fixed => {
                    return Err(TableReader::not_numeric(path, first_row + i, &col.name, &t));
                }
                Err(Problem::NotNumeric) => {
                    switch_at = Some(i);
                    break;
                }
            }
        }
        let Some(at) = switch_at else {
            return Ok(Values::Numeric(out));
        };
        col.kind = ColumnType::Categorical;
        let mut codes = col.numbers_to_codes(&out);
        codes.reserve(recs.len() - at);
        for r in &recs[at..] {
            codes.push(level_code(col, &text(r)));
        }
        return Ok(Values::Categorical(codes));
    }
    Ok(Values::Categorical(
        recs.iter().map(|r| level_code(col, &text(r))).collect(),
    ))
}

/// Field `j` of a record, spaces trimmed (invalid UTF-8 replaced).
fn trimmed(r: &csv::ByteRecord, j: usize) -> std::borrow::Cow<'_, str> {
    let b = r.get(j).unwrap_or(b"");
    match std::str::from_utf8(b) {
        Ok(s) => std::borrow::Cow::Borrowed(s.trim()),
        Err(_) => std::borrow::Cow::Owned(String::from_utf8_lossy(b).trim().to_string()),
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
