//! CSV tables, read in chunks of records.
//!
//! Fast path: the bytes after the header are read in blocks; one sequential pass finds the line
//! ends (`memchr`), then the lines of a chunk are split into fields in parallel (rayon, pieces of
//! [`PIECE_LINES`] lines). A line is accepted only when its meaning under the `csv` crate's rules
//! is plain: fields either unquoted (no quote, no carriage return inside) or quoted as a whole
//! (`"..."` with no quote inside, followed by the delimiter or the line end), exactly as many
//! fields as the header, a trailing `\r` taken as part of the line end, blank lines skipped. Every
//! accepted line is then one complete record that starts where the previous one ended, so the
//! fields are the ones the `csv` crate would return. If any line of a chunk is not of that form
//! (a doubled quote, a quoted line break, a stray quote, a wrong field count, a lone `\r`), the
//! whole chunk and the rest of the file are read by the `csv` crate's sequential reader, seeked to
//! the start of the chunk with the byte, line and record counts kept up to date, so its results
//! and error messages are those of a fully sequential read.
//!
//! Field conversion then runs column by column in parallel (one rayon task per column), over the
//! records of a chunk in row order, so levels are numbered in order of first appearance either way.
//! Quoted fields, LF or CRLF line ends and a UTF-8 byte-order mark are the `csv` crate's rules.
//!
//! Cost: one newline scan plus one field scan per byte; O(rows x columns) conversions.

use super::{
    bad, level_code, parse_number, resolve, Chunk, ColumnState, ColumnType, Problem, TableReader,
    TypeOverrides, Values,
};
use crate::io::{ColumnChoice, FileOptions};
use crate::{exit, Failure};
use rayon::prelude::*;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

/// Bytes read from the file at a time by the fast path.
const BLOCK_BYTES: usize = 4 << 20;
/// Lines per parallel task when splitting fields.
const PIECE_LINES: usize = 2048;

/// An open CSV file: the reader, the records of a chunk, and where the features and the key are
/// in each record.
pub(super) struct CsvSource {
    reader: csv::Reader<File>,
    records: Vec<csv::ByteRecord>,
    positions: Vec<usize>,
    key_pos: Option<usize>,
    /// The parallel line splitter; `None` once the sequential reader has taken over.
    fast: Option<Box<FastLines>>,
}

/// State of the fast path: unread bytes and the position of the next record.
struct FastLines {
    /// Byte, line and record of the next unread record (the `csv` crate's counting).
    pos: csv::Position,
    /// Bytes read ahead; `buf[start..]` begins at `pos.byte()`.
    buf: Vec<u8>,
    start: usize,
    /// Whether the file has been read to its end.
    eof: bool,
    /// Whether the file handle has been moved to `pos.byte()`.
    seeked: bool,
    n_fields: usize,
    delimiter: u8,
    block: usize,
    /// Content ranges (line end and a trailing `\r` excluded) of the non-blank lines of a chunk.
    lines: Vec<(usize, usize)>,
    /// Field ranges, `n_fields` per line.
    fields: Vec<(usize, usize)>,
}

impl FastLines {
    /// Collects up to `max_rows` non-blank lines into `lines`; returns the bytes and newlines
    /// they span.
    fn collect_lines(&mut self, file: &mut File, max_rows: usize) -> std::io::Result<(usize, u64)> {
        if !self.seeked {
            file.seek(SeekFrom::Start(self.pos.byte()))?;
            self.seeked = true;
        }
        if self.start > 0 {
            self.buf.drain(..self.start);
            self.start = 0;
        }
        self.lines.clear();
        let mut scan = 0;
        let mut line_start = 0;
        let mut newlines = 0u64;
        'fill: loop {
            for i in memchr::memchr_iter(b'\n', &self.buf[scan..]) {
                let e = scan + i;
                newlines += 1;
                let ce = if e > line_start && self.buf[e - 1] == b'\r' {
                    e - 1
                } else {
                    e
                };
                if ce > line_start {
                    self.lines.push((line_start, ce));
                }
                line_start = e + 1;
                if self.lines.len() == max_rows {
                    break 'fill;
                }
            }
            scan = self.buf.len();
            if self.eof {
                let len = self.buf.len();
                if line_start < len {
                    let ce = if self.buf[len - 1] == b'\r' {
                        len - 1
                    } else {
                        len
                    };
                    if ce > line_start {
                        self.lines.push((line_start, ce));
                    }
                    line_start = len;
                }
                break;
            }
            let len = self.buf.len();
            self.buf.resize(len + self.block, 0);
            let n = loop {
                match file.read(&mut self.buf[len..]) {
                    Ok(n) => break n,
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                    Err(e) => return Err(e),
                }
            };
            self.buf.truncate(len + n);
            self.eof = n == 0;
        }
        Ok((line_start, newlines))
    }

    /// Splits the collected lines into fields in parallel; false if any line is not plain.
    fn split_lines(&mut self) -> bool {
        let nf = self.n_fields;
        let (buf, delim) = (&self.buf, self.delimiter);
        self.fields.clear();
        self.fields.resize(self.lines.len() * nf, (0, 0));
        self.fields
            .par_chunks_mut(PIECE_LINES * nf)
            .zip(self.lines.par_chunks(PIECE_LINES))
            .all(|(out, lines)| {
                lines
                    .iter()
                    .zip(out.chunks_mut(nf))
                    .all(|(&(a, e), o)| split_line(buf, a, e, delim, o))
            })
    }
}

/// Splits the line `buf[a..e]` into exactly `out.len()` fields when every field is plain
/// (unquoted without quote or `\r`, or wholly quoted without an inner quote or `\r`).
pub(crate) fn split_line(
    buf: &[u8],
    a: usize,
    e: usize,
    delim: u8,
    out: &mut [(usize, usize)],
) -> bool {
    let mut p = a;
    let mut k = 0;
    loop {
        if k == out.len() {
            return false;
        }
        if p < e && buf[p] == b'"' {
            let q = match memchr::memchr2(b'"', b'\r', &buf[p + 1..e]) {
                Some(i) if buf[p + 1 + i] == b'"' => p + 1 + i,
                _ => return false,
            };
            out[k] = (p + 1, q);
            k += 1;
            if q + 1 == e {
                break;
            }
            if buf[q + 1] != delim {
                return false;
            }
            p = q + 2;
        } else {
            match memchr::memchr3(delim, b'"', b'\r', &buf[p..e]) {
                Some(i) if buf[p + i] == delim => {
                    out[k] = (p, p + i);
                    k += 1;
                    p += i + 1;
                }
                Some(_) => return false,
                None => {
                    out[k] = (p, e);
                    k += 1;
                    break;
                }
            }
        }
    }
    k == out.len()
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
        let fast = (!matches!(opts.delimiter, b'"' | b'\r' | b'\n')).then(|| {
            Box::new(FastLines {
                pos: reader.position().clone(),
                buf: Vec::new(),
                start: 0,
                eof: false,
                seeked: false,
                n_fields: header.len(),
                delimiter: opts.delimiter,
                block: BLOCK_BYTES,
                lines: Vec::new(),
                fields: Vec::new(),
            })
        });
        Ok((
            CsvSource {
                reader,
                records: Vec::new(),
                positions,
                key_pos,
                fast,
            },
            columns,
        ))
    }

    /// Sets the fast path's read size (small sizes put chunk and block ends inside records).
    #[cfg(test)]
    pub(crate) fn set_block_bytes(&mut self, block: usize) {
        if let Some(f) = self.fast.as_mut() {
            f.block = block.max(1);
        }
    }

    /// Whether the fast path is still in use.
    #[cfg(test)]
    pub(crate) fn is_fast(&self) -> bool {
        self.fast.is_some()
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
            fast,
        } = self;
        if let Some(f) = fast.as_mut() {
            let (consumed, newlines) = f
                .collect_lines(reader.get_mut(), max_rows)
                .map_err(|e| super::io_fail(path, "cannot read", e))?;
            if f.split_lines() {
                let n = f.lines.len();
                let (buf, fields, nf) = (&f.buf, &f.fields, f.n_fields);
                let get = |i: usize, j: usize| -> &[u8] {
                    let (a, b) = fields[i * nf + j];
                    &buf[a..b]
                };
                chunk.columns = columns
                    .par_iter_mut()
                    .zip(positions.par_iter())
                    .map(|(col, &j)| csv_column(path, col, n, |i| get(i, j), first_row))
                    .collect::<Result<Vec<_>, Failure>>()?;
                chunk.keys =
                    key_pos.map(|k| (0..n).map(|i| field_text(get(i, k)).into_owned()).collect());
                let p = &mut f.pos;
                let (byte, line, record) = (p.byte(), p.line(), p.record());
                p.set_byte(byte + consumed as u64)
                    .set_line(line + newlines)
                    .set_record(record + n as u64);
                f.start = consumed;
                return Ok(n);
            }
            let pos = f.pos.clone();
            *fast = None;
            reader
                .seek_raw(SeekFrom::Start(pos.byte()), pos)
                .map_err(|e| csv_fail(path, e))?;
        }
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
        let get = |i: usize, j: usize| -> &[u8] { recs[i].get(j).unwrap_or(b"") };
        chunk.columns = columns
            .par_iter_mut()
            .zip(positions.par_iter())
            .map(|(col, &j)| csv_column(path, col, n, |i| get(i, j), first_row))
            .collect::<Result<Vec<_>, Failure>>()?;
        chunk.keys = key_pos.map(|k| (0..n).map(|i| field_text(get(i, k)).into_owned()).collect());
        Ok(n)
    }
}

fn field_text(bytes: &[u8]) -> std::borrow::Cow<'_, str> {
    String::from_utf8_lossy(bytes)
}

/// Converts one column's field of `n` records (`field(i)` gives record `i`'s bytes). A column not
/// fixed to numeric turns categorical at the first non-numeric, non-missing text.
fn csv_column<'a>(
    path: &Path,
    col: &mut ColumnState,
    n: usize,
    field: impl Fn(usize) -> &'a [u8],
    first_row: usize,
) -> Result<Values, Failure> {
    let text = |i| trimmed(field(i));
    if col.kind == ColumnType::Numeric {
        let mut out = Vec::with_capacity(n);
        let mut switch_at = None;
        for i in 0..n {
            let t = text(i);
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
        codes.reserve(n - at);
        for i in at..n {
            codes.push(level_code(col, &text(i)));
        }
        return Ok(Values::Categorical(codes));
    }
    Ok(Values::Categorical(
        (0..n).map(|i| level_code(col, &text(i))).collect(),
    ))
}

/// A field's text, spaces trimmed (invalid UTF-8 replaced).
fn trimmed(b: &[u8]) -> std::borrow::Cow<'_, str> {
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

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Write;

    /// Every row of `text` read through `CsvSource` with the given read size and chunk size:
    /// column `x` as numbers, `t` as level text (`None` when missing), the key `k`, and whether the
    /// fast path was still in use at the end.
    #[allow(clippy::type_complexity)]
    fn read_all(
        text: &str,
        block: usize,
        max_rows: usize,
    ) -> (Vec<f64>, Vec<Option<String>>, Vec<String>, bool) {
        let mut f = tempfile::NamedTempFile::new().unwrap();
        f.write_all(text.as_bytes()).unwrap();
        let path = f.path().to_path_buf();
        let opts = FileOptions {
            format: None,
            delimiter: b',',
            drop_missing: false,
        };
        let choice = ColumnChoice {
            columns: Some(vec!["x".into(), "t".into()]),
            exclude: Vec::new(),
            key: Some("k".into()),
        };
        let types = TypeOverrides {
            numeric: vec!["x".into()],
            categorical: vec!["t".into()],
        };
        let file = File::open(&path).unwrap();
        let (mut src, mut cols) = CsvSource::open(&path, file, &opts, &choice, &types)
            .unwrap_or_else(|e| panic!("{}", e.message));
        src.set_block_bytes(block);
        let (mut x, mut t, mut k) = (Vec::new(), Vec::new(), Vec::new());
        let mut chunk = Chunk::default();
        loop {
            let n = src
                .read(&path, &mut cols, x.len() + 1, max_rows, &mut chunk)
                .unwrap_or_else(|e| panic!("{}", e.message));
            if n == 0 {
                break;
            }
            let Values::Numeric(v) = &chunk.columns[0] else {
                panic!("x is numeric")
            };
            x.extend_from_slice(v);
            let Values::Categorical(c) = &chunk.columns[1] else {
                panic!("t is categorical")
            };
            t.extend(c.iter().map(|&c| {
                (c != super::super::MISSING_CODE).then(|| cols[1].levels[c as usize].clone())
            }));
            k.extend(chunk.keys.take().unwrap());
        }
        (x, t, k, src.is_fast())
    }

    /// (x text, t field as written, t value per RFC 4180 (2005) section 2, key).
    type Row = (String, String, Option<String>, String);

    /// `n` rows, the ones listed in `awkward` with the given field and value.
    fn rows(n: usize, awkward: &[(usize, &'static str, &'static str)]) -> Vec<Row> {
        let plain = [
            ("\"b,c\"", Some("b,c")),
            ("a", Some("a")),
            ("\"\"", None),
            ("NA", None),
            ("\"z y\"", Some("z y")),
        ];
        (0..n)
            .map(|i| {
                let (raw, val) = match awkward.iter().find(|a| a.0 == i) {
                    Some(&(_, raw, val)) => (raw.to_string(), Some(val.to_string())),
                    None => {
                        let (raw, val) = plain[i % plain.len()];
                        (raw.to_string(), val.map(str::to_string))
                    }
                };
                (format!("{}.25", i), raw, val, format!("r{i}"))
            })
            .collect()
    }

    fn check(text: &str, expect: &[Row], stays_fast: bool) {
        for block in [1, 7, 64, 1 << 20] {
            for max_rows in [1, 3, 16, 1000] {
                let (x, t, k, fast) = read_all(text, block, max_rows);
                let want_x: Vec<f64> = expect.iter().map(|r| r.0.parse().unwrap()).collect();
                let want_t: Vec<Option<String>> = expect.iter().map(|r| r.2.clone()).collect();
                let want_k: Vec<String> = expect.iter().map(|r| r.3.clone()).collect();
                assert_eq!(x, want_x, "block {block}, chunk {max_rows}");
                assert_eq!(t, want_t, "block {block}, chunk {max_rows}");
                assert_eq!(k, want_k, "block {block}, chunk {max_rows}");
                assert_eq!(fast, stays_fast, "block {block}, chunk {max_rows}");
            }
        }
    }

    #[test]
    fn plain_and_wholly_quoted_fields_stay_on_the_parallel_path() {
        // RFC 4180 (2005) section 2, rules 5-6: a quoted field may hold the delimiter; CRLF line
        // ends; a blank line is skipped and the last line may lack its line end (csv crate rules).
        let expect = rows(40, &[]);
        let mut text = String::from("x,t,k\r\n");
        for (i, r) in expect.iter().enumerate() {
            text.push_str(&format!("{},{},{}\r\n", r.0, r.1, r.3));
            if i == 17 {
                text.push_str("\r\n");
            }
        }
        text.truncate(text.len() - 2);
        check(&text, &expect, true);
    }

    #[test]
    fn quoted_line_breaks_and_doubled_quotes_across_chunk_ends_read_as_written() {
        // RFC 4180 (2005) section 2, rules 6-7: a quoted field may hold line breaks, and a quote
        // inside a quoted field is written twice. Rows 21 and 30 hold both; with chunk sizes 1-16
        // and read sizes from 1 byte, a chunk or read block ends inside them.
        let expect = rows(
            40,
            &[
                (21, "\"d,\ne\"", "d,\ne"),
                (30, "\"f\"\"g\r\nh\"", "f\"g\r\nh"),
            ],
        );
        let mut text = String::from("x,t,k\n");
        for r in &expect {
            text.push_str(&format!("{},{},{}\n", r.0, r.1, r.3));
        }
        check(&text, &expect, false);
    }

    #[test]
    fn split_line_takes_only_plain_fields() {
        let mut out = [(0, 0); 3];
        let line = b"1,\"a,b\",";
        assert!(split_line(line, 0, line.len(), b',', &mut out));
        assert_eq!(out, [(0, 1), (3, 6), (8, 8)]);
        for bad in [
            &b"1,a\"b,c"[..],
            b"1,\"a\"\"b\",c",
            b"1,\"a\"b,c",
            b"1,2",
            b"1,2,3,4",
            b"1,\"a,c",
        ] {
            assert!(
                !split_line(bad, 0, bad.len(), b',', &mut out),
                "{:?}",
                std::str::from_utf8(bad)
            );
        }
    }

    #[test]
    fn a_short_line_after_parallel_chunks_is_reported_at_its_line() {
        // 10 data rows (lines 2-11), a blank line (12), then a record of 2 fields (line 13). The
        // line reported must be the one a fully sequential `csv::Reader` (csv 1.4) reports.
        let mut text = String::from("x,t,k\n");
        for i in 0..10 {
            text.push_str(&format!("{i},\"a\",r{i}\n"));
        }
        text.push_str("\n1,2\n3,\"b\",r\n");
        let mut f = tempfile::NamedTempFile::new().unwrap();
        f.write_all(text.as_bytes()).unwrap();
        let path = f.path().to_path_buf();
        let opts = FileOptions {
            format: None,
            delimiter: b',',
            drop_missing: false,
        };
        let file = File::open(&path).unwrap();
        let (mut src, mut cols) = CsvSource::open(
            &path,
            file,
            &opts,
            &ColumnChoice::default(),
            &TypeOverrides::default(),
        )
        .unwrap_or_else(|e| panic!("{}", e.message));
        src.set_block_bytes(5);
        let mut chunk = Chunk::default();
        let mut row = 1;
        let err = loop {
            match src.read(&path, &mut cols, row, 3, &mut chunk) {
                Ok(n) => {
                    assert!(n > 0, "the short line must stop the reading");
                    row += n;
                }
                Err(e) => break e,
            }
        };
        assert_eq!(
            row, 10,
            "rows 1-9 read in chunks of 3 before the failing chunk"
        );
        let mut seq = csv::Reader::from_reader(text.as_bytes());
        let reference = seq
            .byte_records()
            .find_map(Result::err)
            .expect("the csv crate rejects the short line");
        let line = reference.position().expect("a position").line();
        assert!(
            err.message.contains(&format!(
                "(line {line}): a line has 2 fields but the header has 3"
            )),
            "{}",
            err.message
        );
    }
}
