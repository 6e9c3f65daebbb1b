//! The encoding of a typed table into the numeric matrix the estimators work on, fitted on the
//! pooled source and target rows ([`TableEncoding::fit`]) or, for a learner, on its training rows
//! ([`TableEncoding::fit_rows`]), and stored in the model file.
//!
//! # Encoded columns
//! - A **numeric** column `x` gives `(x - mean) / sd`, with the mean and standard deviation of its
//!   present values in the pooled rows (sd = 1 for a constant column). A missing value is filled
//!   with the mean (encoded 0). When the pooled rows have any missing value in the column, a
//!   second column `x (missing)` holds 1 for a missing value and 0 otherwise.
//! - A **categorical** column gives one 0/1 column per level kept (`region=south`, ...). At most
//!   [`MAX_LEVELS`] levels are kept, the most frequent in the pooled rows (ties by name); the rarer
//!   ones are pooled into one column [`OTHER_LEVEL`]. When the pooled rows have any missing value
//!   in the column, missing is a level of its own, [`MISSING_LEVEL`].
//!
//! The estimators then standardise every encoded column on the pooled rows as they do for any
//! matrix, so a 0/1 column of a level with pooled frequency p is scaled by sqrt(p (1 - p)).
//!
//! # Values never seen in the pooled rows
//! When scoring, a level of a categorical column that was neither kept nor pooled (a region the
//! fitted rows never had) is encoded with 0 in every column of that categorical column, and a
//! missing value in a column that had none is encoded as the fill value (0, indicator absent) or
//! with 0 in every level column. Such rows are counted per column and level in
//! [`EncodedTable::unseen`]; nothing fails. The ratio at such rows is an extrapolation: no source
//! row looks like them, so no weighting can represent them reliably.
//!
//! # Complexity
//! Fitting: one pass over each column, O(n) time and O(levels) memory per column. Encoding:
//! O(n w) time for w encoded columns, written straight into the output buffer.

use super::{Column, ColumnData, ColumnKind, Table, MISSING_CODE};
use crate::data::Matrix;
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Most levels kept per categorical column; rarer levels are pooled into [`OTHER_LEVEL`].
pub const MAX_LEVELS: usize = 30;
/// Name of the pooled level of rare levels.
pub const OTHER_LEVEL: &str = "(other)";
/// Name of the level of missing values in a categorical column.
pub const MISSING_LEVEL: &str = "(missing)";

/// How one column of the table is encoded.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ColumnEncoding {
    /// Standardised value (missing filled with the mean) and, if any value was missing in the
    /// pooled rows, a missing indicator.
    Numeric {
        /// Column name.
        name: String,
        /// Pooled mean of the present values (also the fill value of a missing one).
        mean: f64,
        /// Pooled standard deviation of the present values (1 when constant).
        scale: f64,
        /// Whether a missing-indicator column follows.
        missing_indicator: bool,
    },
    /// One-hot over the kept levels, then the pooled rare levels, then the missing level.
    Categorical {
        /// Column name.
        name: String,
        /// Levels with a column of their own, in column order.
        levels: Vec<String>,
        /// Levels pooled into [`OTHER_LEVEL`] (empty: no such column).
        pooled: Vec<String>,
        /// Whether a [`MISSING_LEVEL`] column follows.
        missing_level: bool,
    },
}

impl ColumnEncoding {
    /// The table column it encodes.
    pub fn name(&self) -> &str {
        match self {
            ColumnEncoding::Numeric { name, .. } | ColumnEncoding::Categorical { name, .. } => name,
        }
    }
    /// The column type it expects.
    pub fn kind(&self) -> ColumnKind {
        match self {
            ColumnEncoding::Numeric { .. } => ColumnKind::Numeric,
            ColumnEncoding::Categorical { .. } => ColumnKind::Categorical,
        }
    }
    /// Number of encoded columns.
    pub fn width(&self) -> usize {
        match self {
            ColumnEncoding::Numeric {
                missing_indicator, ..
            } => 1 + usize::from(*missing_indicator),
            ColumnEncoding::Categorical {
                levels,
                pooled,
                missing_level,
                ..
            } => levels.len() + usize::from(!pooled.is_empty()) + usize::from(*missing_level),
        }
    }
    /// Names of the encoded columns (`x`, `x (missing)`; `c=level`, `c=(other)`, `c=(missing)`).
    pub fn feature_names(&self) -> Vec<String> {
        match self {
            ColumnEncoding::Numeric {
                name,
                missing_indicator,
                ..
            } => {
                let mut v = vec![name.clone()];
                if *missing_indicator {
                    v.push(format!("{name} (missing)"));
                }
                v
            }
            ColumnEncoding::Categorical {
                name,
                levels,
                pooled,
                missing_level,
            } => {
                let mut v: Vec<String> = levels.iter().map(|l| format!("{name}={l}")).collect();
                if !pooled.is_empty() {
                    v.push(format!("{name}={OTHER_LEVEL}"));
                }
                if *missing_level {
                    v.push(format!("{name}={MISSING_LEVEL}"));
                }
                v
            }
        }
    }
}

/// Rows of a scored table whose value in a column never occurred in the pooled rows the encoding
/// was fitted on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct UnseenValues {
    /// The column.
    pub column: String,
    /// The level never seen, or `None` for a missing value in a column that had none.
    pub level: Option<String>,
    /// How many rows hold it.
    pub rows: usize,
    /// The first such row (0-based).
    pub first_row: usize,
}

/// A table encoded as a matrix, with the counts of values never seen when fitting.
#[derive(Debug, Clone, PartialEq)]
pub struct EncodedTable {
    /// One row per table row, [`TableEncoding::width`] columns.
    pub matrix: Matrix,
    /// Values never seen when fitting, per column and level, in column order.
    pub unseen: Vec<UnseenValues>,
}

/// The encoding of a typed table (see the module documentation), fitted on pooled rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TableEncoding {
    /// One entry per table column, in the order of the encoded columns.
    pub columns: Vec<ColumnEncoding>,
}

/// Where a categorical code goes within its column's block.
#[derive(Clone, Copy)]
enum Slot {
    At(usize),
    Unseen,
}

impl TableEncoding {
    /// Fits on the pooled rows of `source` and `target`. Columns are those of `source`, in its
    /// order, found in `target` by name (a missing one is an error naming it; extra target
    /// columns are ignored with a warning). A column numeric in one table and categorical in the
    /// other is converted to the source's type when it can be, and refused otherwise. Returns
    /// the encoding and plain-language warnings.
    pub fn fit(source: &Table, target: &Table) -> Result<(Self, Vec<String>)> {
        let mut warnings = Vec::new();
        let mut columns = Vec::with_capacity(source.n_columns());
        for s in source.columns() {
            let t = aligned(s.kind(), target, s.name(), "target")?;
            columns.push(fit_column(&[s, &t], &mut warnings));
        }
        for t in target.columns() {
            if source.column(t.name()).is_none() {
                warnings.push(format!(
                    "column `{}` of `target` is not in `source`; it is ignored",
                    t.name()
                ));
            }
        }
        Ok((Self { columns }, warnings))
    }

    /// Fits on the rows of one table (the training rows of a learner, see
    /// [`crate::learn`]): the same encoding as [`TableEncoding::fit`], with the means, scales,
    /// levels and missing indicators taken from `table` alone. Returns the encoding and
    /// plain-language warnings.
    pub fn fit_rows(table: &Table) -> Result<(Self, Vec<String>)> {
        let mut warnings = Vec::new();
        let columns = table
            .columns()
            .iter()
            .map(|c| fit_column(&[c], &mut warnings))
            .collect();
        Ok((Self { columns }, warnings))
    }

    /// Number of encoded columns.
    pub fn width(&self) -> usize {
        self.columns.iter().map(ColumnEncoding::width).sum()
    }

    /// Names of the encoded columns, in order.
    pub fn feature_names(&self) -> Vec<String> {
        self.columns
            .iter()
            .flat_map(ColumnEncoding::feature_names)
            .collect()
    }

    /// The table columns the encoding reads, with their types: the schema a scored table must
    /// provide (by name, in any order).
    pub fn schema(&self) -> Vec<(&str, ColumnKind)> {
        self.columns.iter().map(|c| (c.name(), c.kind())).collect()
    }

    /// Encodes every row of `table` (named `argument` in errors): columns are found by name, in
    /// any order; extra columns are ignored; a missing column is an error naming it. A column of
    /// the other type is converted when it can be (see [`Column::with_kind`]).
    pub fn encode(&self, table: &Table, argument: &str) -> Result<EncodedTable> {
        self.encode_rows(table, argument, 0, table.rows())
    }

    /// As [`TableEncoding::encode`] for rows `start..end` only (row numbers in
    /// [`UnseenValues::first_row`] count from 0 at `start`).
    pub fn encode_rows(
        &self,
        table: &Table,
        argument: &str,
        start: usize,
        end: usize,
    ) -> Result<EncodedTable> {
        if start > end || end > table.rows() {
            return Err(Error::param(
                "rows",
                format!(
                    "{start}..{end} is not within the table's {} rows",
                    table.rows()
                ),
            ));
        }
        let n = end - start;
        let w = self.width();
        let mut out = vec![0.0; n * w];
        let mut unseen = Vec::new();
        let mut offset = 0;
        for enc in &self.columns {
            let col = aligned(enc.kind(), table, enc.name(), argument)?;
            write_column(enc, &col, start, end, offset, w, &mut out, &mut unseen);
            offset += enc.width();
        }
        Ok(EncodedTable {
            matrix: Matrix::new(out, n, w)?,
            unseen,
        })
    }

    /// Encodes the rows of `table` (named `argument` in errors) in blocks of at most `block`
    /// rows, handing each block to `f` as `(start, end, matrix)`, so that memory stays flat in
    /// the number of rows. Returns the values never seen when fitting, merged over the blocks per
    /// column and level (row numbers count from the table's first row).
    pub fn encode_in_blocks(
        &self,
        table: &Table,
        argument: &str,
        block: usize,
        mut f: impl FnMut(usize, usize, crate::data::MatrixView) -> Result<()>,
    ) -> Result<Vec<UnseenValues>> {
        let n = table.rows();
        let mut unseen: Vec<UnseenValues> = Vec::new();
        let mut start = 0;
        while start < n {
            let end = (start + block.max(1)).min(n);
            let e = self.encode_rows(table, argument, start, end)?;
            f(start, end, e.matrix.view())?;
            for u in e.unseen {
                match unseen
                    .iter_mut()
                    .find(|v| v.column == u.column && v.level == u.level)
                {
                    Some(v) => v.rows += u.rows,
                    None => unseen.push(UnseenValues {
                        first_row: u.first_row + start,
                        ..u
                    }),
                }
            }
            start = end;
        }
        Ok(unseen)
    }

    /// Checks internal consistency after loading from a model file.
    pub(crate) fn check(&self) -> Result<()> {
        let bad = |m: String| Err(Error::ModelFile(format!("table encoding: {m}")));
        if self.columns.is_empty() {
            return bad("no columns".into());
        }
        let mut names = std::collections::HashSet::new();
        for c in &self.columns {
            if c.name().is_empty() || !names.insert(c.name()) {
                return bad(format!("column name {:?} is empty or repeated", c.name()));
            }
            match c {
                ColumnEncoding::Numeric { mean, scale, .. } => {
                    if !(mean.is_finite() && scale.is_finite() && *scale > 0.0) {
                        return bad(format!(
                            "column `{}` has mean {mean} and scale {scale}; both must be finite and the scale > 0",
                            c.name()
                        ));
                    }
                }
                ColumnEncoding::Categorical { levels, pooled, .. } => {
                    let mut seen = std::collections::HashSet::new();
                    if let Some(l) = levels
                        .iter()
                        .chain(pooled)
                        .find(|l| !seen.insert(l.as_str()))
                    {
                        return bad(format!("column `{}` lists the level {l:?} twice", c.name()));
                    }
                }
            }
            if c.width() == 0 {
                return bad(format!("column `{}` encodes to no columns", c.name()));
            }
        }
        Ok(())
    }
}

/// Fits the encoding on the pooled rows of `source` and `target` and encodes both: the
/// encoding, the encoded source and target matrices, and the encoding's warnings. The start of
/// every table-aware estimator, test and diagnostic.
pub fn encode_pair(
    source: &Table,
    target: &Table,
) -> Result<(TableEncoding, Matrix, Matrix, Vec<String>)> {
    let (enc, warnings) = TableEncoding::fit(source, target)?;
    let s = enc.encode(source, "source")?.matrix;
    let t = enc.encode(target, "target")?.matrix;
    Ok((enc, s, t, warnings))
}

/// The column `name` of `table` as `kind`, converted if needed; errors name the column and the
/// argument.
pub(crate) fn aligned<'a>(
    kind: ColumnKind,
    table: &'a Table,
    name: &str,
    argument: &str,
) -> Result<std::borrow::Cow<'a, Column>> {
    let col = table.column(name).ok_or_else(|| Error::MissingColumn {
        argument: argument.to_string(),
        column: name.to_string(),
    })?;
    if col.kind() == kind {
        return Ok(std::borrow::Cow::Borrowed(col));
    }
    col.clone()
        .with_kind(kind)
        .map(std::borrow::Cow::Owned)
        .map_err(|e| Error::BadColumn {
            column: name.to_string(),
            reason: format!(
                "is {} in `{argument}` but was fitted as {}, and it cannot be converted ({e}); \
                 declare its type explicitly",
                col.kind().name(),
                kind.name()
            ),
        })
}

/// The encoding of one column fitted on the pooled rows of `parts` (the same column of one or
/// more tables, all of the first one's type).
fn fit_column(parts: &[&Column], warnings: &mut Vec<String>) -> ColumnEncoding {
    let name = parts[0].name().to_string();
    let any_missing = parts.iter().any(|c| c.n_missing() > 0);
    match parts[0].data() {
        ColumnData::Numeric(_) => {
            let values: Vec<&[f64]> = parts
                .iter()
                .map(|c| match c.data() {
                    ColumnData::Numeric(v) => v.as_slice(),
                    ColumnData::Categorical { .. } => {
                        unreachable!("every part was aligned to the first one's type")
                    }
                })
                .collect();
            let present = || values.iter().flat_map(|v| v.iter()).filter(|v| !v.is_nan());
            let k = present().count();
            let mean = if k == 0 {
                0.0
            } else {
                present().sum::<f64>() / k as f64
            };
            let ss: f64 = present().map(|v| (v - mean) * (v - mean)).sum();
            let sd = (ss / (k.max(2) - 1) as f64).sqrt();
            if k == 0 {
                let whose = if parts.len() > 1 {
                    "source or target"
                } else {
                    "the rows it was fitted on"
                };
                warnings.push(format!(
                    "column `{name}` has no values in {whose}; it carries no information"
                ));
            }
            let scale = if sd.is_finite() && sd > 1e-12 * mean.abs().max(1e-300) {
                sd
            } else {
                1.0
            };
            ColumnEncoding::Numeric {
                name,
                mean: if mean.is_finite() { mean } else { 0.0 },
                scale,
                missing_indicator: any_missing,
            }
        }
        ColumnData::Categorical { .. } => {
            let mut counts: HashMap<&str, usize> = HashMap::new();
            for part in parts {
                let ColumnData::Categorical { levels, codes } = part.data() else {
                    unreachable!("every part was aligned to the first one's type")
                };
                let mut per_code = vec![0usize; levels.len()];
                for &c in codes.iter().filter(|&&c| c != MISSING_CODE) {
                    per_code[c as usize] += 1;
                }
                for (l, k) in levels.iter().zip(per_code) {
                    if k > 0 {
                        *counts.entry(l.as_str()).or_default() += k;
                    }
                }
            }
            let mut order: Vec<(&str, usize)> = counts.into_iter().collect();
            order.sort_by(|x, y| y.1.cmp(&x.1).then(x.0.cmp(y.0)));
            let levels: Vec<String> = order
                .iter()
                .take(MAX_LEVELS)
                .map(|(l, _)| l.to_string())
                .collect();
            let mut pooled: Vec<String> = order
                .iter()
                .skip(MAX_LEVELS)
                .map(|(l, _)| l.to_string())
                .collect();
            pooled.sort();
            if !pooled.is_empty() {
                warnings.push(format!(
                    "column `{name}` has {} levels; the {} rarest are pooled into `{OTHER_LEVEL}`",
                    order.len(),
                    pooled.len()
                ));
            }
            ColumnEncoding::Categorical {
                name,
                levels,
                pooled,
                missing_level: any_missing,
            }
        }
    }
}

/// Writes column `enc` of rows `start..end` into the row-major `out` (row width `w`) at column
/// `offset`, and appends the counts of values never seen when fitting.
#[allow(clippy::too_many_arguments)]
fn write_column(
    enc: &ColumnEncoding,
    col: &Column,
    start: usize,
    end: usize,
    offset: usize,
    w: usize,
    out: &mut [f64],
    unseen: &mut Vec<UnseenValues>,
) {
    let mut missing_unseen = (0usize, 0usize);
    let mut note_missing = |i: usize| {
        if missing_unseen.0 == 0 {
            missing_unseen.1 = i;
        }
        missing_unseen.0 += 1;
    };
    match (enc, col.data()) {
        (
            ColumnEncoding::Numeric {
                mean,
                scale,
                missing_indicator,
                ..
            },
            ColumnData::Numeric(v),
        ) => {
            for (i, x) in v[start..end].iter().enumerate() {
                let row = &mut out[i * w + offset..];
                if x.is_nan() {
                    row[0] = 0.0;
                    if *missing_indicator {
                        row[1] = 1.0;
                    } else {
                        note_missing(i);
                    }
                } else {
                    row[0] = (x - mean) / scale;
                }
            }
        }
        (
            ColumnEncoding::Categorical {
                levels,
                pooled,
                missing_level,
                ..
            },
            ColumnData::Categorical {
                levels: table_levels,
                codes,
            },
        ) => {
            let kept: HashMap<&str, usize> = levels
                .iter()
                .enumerate()
                .map(|(k, l)| (l.as_str(), k))
                .collect();
            let pooled_set: std::collections::HashSet<&str> =
                pooled.iter().map(String::as_str).collect();
            let other_at = levels.len();
            let missing_at = levels.len() + usize::from(!pooled.is_empty());
            let slots: Vec<Slot> = table_levels
                .iter()
                .map(|l| match kept.get(l.as_str()) {
                    Some(&k) => Slot::At(k),
                    None if pooled_set.contains(l.as_str()) => Slot::At(other_at),
                    None => Slot::Unseen,
                })
                .collect();
            let mut level_unseen = vec![(0usize, 0usize); table_levels.len()];
            for (i, &c) in codes[start..end].iter().enumerate() {
                let row = &mut out[i * w + offset..];
                if c == MISSING_CODE {
                    if *missing_level {
                        row[missing_at] = 1.0;
                    } else {
                        note_missing(i);
                    }
                    continue;
                }
                match slots[c as usize] {
                    Slot::At(k) => row[k] = 1.0,
                    Slot::Unseen => {
                        let u = &mut level_unseen[c as usize];
                        if u.0 == 0 {
                            u.1 = i;
                        }
                        u.0 += 1;
                    }
                }
            }
            for (l, (rows, first_row)) in table_levels.iter().zip(level_unseen) {
                if rows > 0 {
                    unseen.push(UnseenValues {
                        column: enc.name().to_string(),
                        level: Some(l.clone()),
                        rows,
                        first_row,
                    });
                }
            }
        }
        _ => unreachable!("the column was aligned to the encoding's type"),
    }
    if missing_unseen.0 > 0 {
        unseen.push(UnseenValues {
            column: enc.name().to_string(),
            level: None,
            rows: missing_unseen.0,
            first_row: missing_unseen.1,
        });
    }
}
