//! Typed tables: named columns that are numeric or categorical, any of them with missing values,
//! and the one encoding ([`TableEncoding`]) that turns such a table into the numeric matrix every
//! estimator, test and diagnostic works on.
//!
//! # Column types
//! - **Numeric**: `f64` values; `NaN` marks a missing value. Infinite values are refused (they
//!   are not measurements), naming the column and row.
//! - **Categorical**: levels are strings; each row holds the index of its level, or
//!   [`MISSING_CODE`] when missing. A boolean column is categorical with the two levels
//!   `"false"` and `"true"`.
//!
//! # Inference rules ([`Column::from_text`])
//! Cells given as text (a CSV file, a Python object or string column) are typed as follows:
//! 1. A cell is missing when it is absent (`None`), empty or blank, or one of [`MISSING_MARKERS`]
//!    (`NA`, `N/A`, `NaN`, `nan`, `null`, `NULL`).
//! 2. An explicit type wins: a column listed as categorical is categorical whatever its cells; a
//!    column listed as numeric must parse as numbers (the first cell that does not is named with
//!    its row).
//! 3. Otherwise a column whose present cells all parse as finite numbers is numeric (so codes
//!    such as `1`, `2`, `3` are numbers unless the caller says otherwise); a column whose present
//!    cells are all `true`/`false` (any letter case) is categorical with levels `"false"` and
//!    `"true"`; every other column is categorical with its distinct texts as levels.
//! 4. A column inferred as categorical whose present cells are all different, over at least
//!    [`IDENTIFIER_MIN_ROWS`] rows, looks like a row identifier (a customer number, a meter id):
//!    it is refused with an error naming it. Pass it as the key column or exclude it; declare it
//!    categorical explicitly to keep it anyway.
//!
//! Columns that arrive typed (Python numbers, booleans, pandas categories, Arrow dictionaries)
//! keep their type; [`Column::with_kind`] converts when the caller overrides it.
//!
//! # Complexity
//! Inference is one pass over the cells with a hash map of levels: O(n) time, O(n + levels)
//! memory.

mod encode;
mod support;
#[cfg(test)]
mod tests;

pub(crate) use encode::aligned;
pub use encode::{
    encode_pair, ColumnEncoding, EncodedTable, TableEncoding, UnseenValues, MAX_LEVELS,
    MISSING_LEVEL, OTHER_LEVEL,
};
pub use support::{rows_with_gaps, support_gaps, SupportGap};

use crate::data::MatrixView;
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// Code of a missing value in a categorical column.
pub const MISSING_CODE: u32 = u32::MAX;

/// Texts read as a missing value (besides an absent, empty or blank cell).
pub const MISSING_MARKERS: [&str; 6] = ["NA", "N/A", "NaN", "nan", "null", "NULL"];

/// A text column with all-distinct values over at least this many rows is refused as a likely
/// row identifier (rule 4 of the module documentation).
pub const IDENTIFIER_MIN_ROWS: usize = 20;

/// The two kinds of column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ColumnKind {
    /// Numbers (`NaN` = missing).
    Numeric,
    /// Levels given as strings.
    Categorical,
}

impl ColumnKind {
    /// `"numeric"` or `"categorical"`.
    pub fn name(&self) -> &'static str {
        match self {
            ColumnKind::Numeric => "numeric",
            ColumnKind::Categorical => "categorical",
        }
    }
}

/// The values of one column.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    /// One value per row; `NaN` is missing.
    Numeric(Vec<f64>),
    /// One level index per row ([`MISSING_CODE`] when missing) into `levels`.
    Categorical {
        /// Distinct level names.
        levels: Vec<String>,
        /// Level index of each row.
        codes: Vec<u32>,
    },
}

/// A named column of a [`Table`].
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    name: String,
    data: ColumnData,
}

/// True when a text cell stands for a missing value (rule 1 of the module documentation).
pub fn is_missing_text(cell: &str) -> bool {
    let t = cell.trim();
    t.is_empty() || MISSING_MARKERS.contains(&t)
}

/// The level name of a number when a numeric column is made categorical: integers without a
/// decimal point (`3`, not `3.0`), other values in the shortest form that reads back exactly.
pub fn number_level(v: f64) -> String {
    if v.fract() == 0.0 && v.abs() < 9.0e15 {
        format!("{}", v as i64)
    } else {
        format!("{v}")
    }
}

fn parse_number(cell: &str) -> Option<f64> {
    cell.trim().parse::<f64>().ok().filter(|v| v.is_finite())
}

fn boolean_level(cell: &str) -> Option<&'static str> {
    let t = cell.trim();
    if t.eq_ignore_ascii_case("true") {
        Some("true")
    } else if t.eq_ignore_ascii_case("false") {
        Some("false")
    } else {
        None
    }
}

impl Column {
    /// A numeric column; `NaN` marks a missing value. Infinite values are refused, naming the
    /// column and the row.
    pub fn numeric(name: impl Into<String>, values: Vec<f64>) -> Result<Self> {
        let name = name.into();
        if let Some(row) = values.iter().position(|v| v.is_infinite()) {
            return Err(Error::BadColumn {
                column: name,
                reason: format!(
                    "has the infinite value {} at row {row}; use NaN for a missing value",
                    values[row]
                ),
            });
        }
        Ok(Self {
            name,
            data: ColumnData::Numeric(values),
        })
    }

    /// A categorical column from its levels and one code per row (index into `levels`, or
    /// [`MISSING_CODE`]). Levels must be distinct and every code in range.
    pub fn categorical(
        name: impl Into<String>,
        levels: Vec<String>,
        codes: Vec<u32>,
    ) -> Result<Self> {
        let name = name.into();
        let mut seen = std::collections::HashSet::with_capacity(levels.len());
        if let Some(dup) = levels.iter().find(|l| !seen.insert(l.as_str())) {
            return Err(Error::BadColumn {
                column: name,
                reason: format!("lists the level {dup:?} twice"),
            });
        }
        if levels.len() >= MISSING_CODE as usize {
            return Err(Error::BadColumn {
                column: name,
                reason: format!("has {} levels, too many", levels.len()),
            });
        }
        if let Some(row) = codes
            .iter()
            .position(|&c| c != MISSING_CODE && c as usize >= levels.len())
        {
            return Err(Error::BadColumn {
                column: name,
                reason: format!(
                    "row {row} has level code {} but there are {} levels",
                    codes[row],
                    levels.len()
                ),
            });
        }
        Ok(Self {
            name,
            data: ColumnData::Categorical { levels, codes },
        })
    }

    /// A categorical column from one optional level name per row (`None` = missing); levels are
    /// numbered in order of first appearance. No text is treated as missing here.
    pub fn from_levels<S: AsRef<str>>(
        name: impl Into<String>,
        values: impl IntoIterator<Item = Option<S>>,
    ) -> Self {
        let mut index: HashMap<String, u32> = HashMap::new();
        let mut levels = Vec::new();
        let codes = values
            .into_iter()
            .map(|v| match v {
                None => MISSING_CODE,
                Some(s) => {
                    let s = s.as_ref();
                    if let Some(&c) = index.get(s) {
                        c
                    } else {
                        let c = levels.len() as u32;
                        index.insert(s.to_string(), c);
                        levels.push(s.to_string());
                        c
                    }
                }
            })
            .collect();
        Self {
            name: name.into(),
            data: ColumnData::Categorical { levels, codes },
        }
    }

    /// A boolean column: categorical with the levels `"false"` and `"true"` (`None` = missing).
    pub fn boolean(
        name: impl Into<String>,
        values: impl IntoIterator<Item = Option<bool>>,
    ) -> Self {
        let codes = values
            .into_iter()
            .map(|v| match v {
                None => MISSING_CODE,
                Some(false) => 0,
                Some(true) => 1,
            })
            .collect();
        Self {
            name: name.into(),
            data: ColumnData::Categorical {
                levels: vec!["false".into(), "true".into()],
                codes,
            },
        }
    }

    /// A column from text cells, typed by the inference rules of the module documentation, or
    /// by `kind` when given. Errors name the column (and the row for a cell that is not a number
    /// in a column declared numeric).
    pub fn from_text<S: AsRef<str>>(
        name: impl Into<String>,
        cells: &[Option<S>],
        kind: Option<ColumnKind>,
    ) -> Result<Self> {
        let name = name.into();
        fn present<S: AsRef<str>>(c: &Option<S>) -> Option<&str> {
            c.as_ref()
                .map(|s| s.as_ref())
                .filter(|s| !is_missing_text(s))
        }
        if kind != Some(ColumnKind::Categorical) {
            let mut values = Vec::with_capacity(cells.len());
            let mut failed = None;
            for (row, c) in cells.iter().enumerate() {
                match present(c) {
                    None => values.push(f64::NAN),
                    Some(s) => match parse_number(s) {
                        Some(v) => values.push(v),
                        None => {
                            failed = Some((row, s.to_string()));
                            break;
                        }
                    },
                }
            }
            match failed {
                None => return Self::numeric(name, values),
                Some((row, text)) if kind == Some(ColumnKind::Numeric) => {
                    return Err(Error::BadColumn {
                        column: name,
                        reason: format!(
                            "is declared numeric but row {row} holds {text:?}, which is not a number"
                        ),
                    });
                }
                Some(_) => {}
            }
        }
        let all_boolean = cells
            .iter()
            .filter_map(present)
            .all(|s| boolean_level(s).is_some());
        let col = if all_boolean && cells.iter().any(|c| present(c).is_some()) {
            Self::boolean(
                name,
                cells
                    .iter()
                    .map(|c| present(c).map(|s| boolean_level(s) == Some("true"))),
            )
        } else {
            Self::from_levels(name, cells.iter().map(|c| present(c).map(str::trim)))
        };
        if kind.is_none() {
            col.refuse_identifier()?;
        }
        Ok(col)
    }

    /// Refuses a categorical column whose present values are all distinct over at least
    /// [`IDENTIFIER_MIN_ROWS`] rows (rule 4 of the module documentation).
    pub fn refuse_identifier(&self) -> Result<()> {
        if let ColumnData::Categorical { levels, codes } = &self.data {
            let present = codes.iter().filter(|&&c| c != MISSING_CODE).count();
            if present >= IDENTIFIER_MIN_ROWS && levels.len() == present {
                return Err(Error::BadColumn {
                    column: self.name.clone(),
                    reason: format!(
                        "has {present} different text values in {present} rows, so it looks like a row \
                         identifier rather than a feature; pass it as the key column (--key) or exclude \
                         it, or declare it categorical to keep it"
                    ),
                });
            }
        }
        Ok(())
    }

    /// Column name.
    pub fn name(&self) -> &str {
        &self.name
    }
    /// Numeric or categorical.
    pub fn kind(&self) -> ColumnKind {
        match self.data {
            ColumnData::Numeric(_) => ColumnKind::Numeric,
            ColumnData::Categorical { .. } => ColumnKind::Categorical,
        }
    }
    /// The values.
    pub fn data(&self) -> &ColumnData {
        &self.data
    }
    /// Number of rows.
    pub fn len(&self) -> usize {
        match &self.data {
            ColumnData::Numeric(v) => v.len(),
            ColumnData::Categorical { codes, .. } => codes.len(),
        }
    }
    /// True when the column has no rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// True when row `i` is missing.
    pub fn is_missing(&self, i: usize) -> bool {
        match &self.data {
            ColumnData::Numeric(v) => v[i].is_nan(),
            ColumnData::Categorical { codes, .. } => codes[i] == MISSING_CODE,
        }
    }
    /// Number of missing rows.
    pub fn n_missing(&self) -> usize {
        (0..self.len()).filter(|&i| self.is_missing(i)).count()
    }
    /// The level names and per-row codes of a categorical column ([`MISSING_CODE`] marks a missing
    /// row); `None` for a numeric column.
    pub fn categories(&self) -> Option<(&[String], &[u32])> {
        match &self.data {
            ColumnData::Categorical { levels, codes } => Some((levels, codes)),
            ColumnData::Numeric(_) => None,
        }
    }
    /// The level of row `i` of a categorical column (`None` when missing or numeric).
    pub fn level(&self, i: usize) -> Option<&str> {
        match &self.data {
            ColumnData::Categorical { levels, codes } if codes[i] != MISSING_CODE => {
                Some(levels[codes[i] as usize].as_str())
            }
            _ => None,
        }
    }

    /// The same column with another name.
    pub fn renamed(mut self, name: impl Into<String>) -> Self {
        self.name = name.into();
        self
    }

    /// The column converted to `kind`: numbers become levels by [`number_level`]; levels become
    /// numbers when every level parses as a finite number (otherwise an error naming the column
    /// and the level).
    pub fn with_kind(self, kind: ColumnKind) -> Result<Self> {
        match (self.data, kind) {
            (data @ ColumnData::Numeric(_), ColumnKind::Numeric)
            | (data @ ColumnData::Categorical { .. }, ColumnKind::Categorical) => Ok(Self {
                name: self.name,
                data,
            }),
            (ColumnData::Numeric(v), ColumnKind::Categorical) => Ok(Self::from_levels(
                self.name,
                v.iter().map(|x| (!x.is_nan()).then(|| number_level(*x))),
            )),
            (ColumnData::Categorical { levels, codes }, ColumnKind::Numeric) => {
                let mut values = Vec::with_capacity(levels.len());
                for l in &levels {
                    match parse_number(l) {
                        Some(v) => values.push(v),
                        None => {
                            return Err(Error::BadColumn {
                                column: self.name,
                                reason: format!(
                                    "is declared numeric but holds the level {l:?}, which is not a number"
                                ),
                            })
                        }
                    }
                }
                Self::numeric(
                    self.name,
                    codes
                        .iter()
                        .map(|&c| {
                            if c == MISSING_CODE {
                                f64::NAN
                            } else {
                                values[c as usize]
                            }
                        })
                        .collect(),
                )
            }
        }
    }

    /// The rows with the given indices, in that order.
    pub fn select_rows(&self, idx: &[usize]) -> Self {
        let data = match &self.data {
            ColumnData::Numeric(v) => ColumnData::Numeric(idx.iter().map(|&i| v[i]).collect()),
            ColumnData::Categorical { levels, codes } => ColumnData::Categorical {
                levels: levels.clone(),
                codes: idx.iter().map(|&i| codes[i]).collect(),
            },
        };
        Self {
            name: self.name.clone(),
            data,
        }
    }
}

/// A table of named, typed columns of equal length.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    columns: Vec<Column>,
    rows: usize,
}

impl Table {
    /// A table from its columns: at least one, all of the same length, names distinct and not
    /// empty.
    pub fn new(columns: Vec<Column>) -> Result<Self> {
        let rows = columns.first().map(Column::len).unwrap_or(0);
        if columns.is_empty() {
            return Err(Error::NoFeatures {
                argument: "table".into(),
            });
        }
        let mut seen = std::collections::HashSet::new();
        for c in &columns {
            if c.name.is_empty() {
                return Err(Error::param("table", "a column has an empty name"));
            }
            if !seen.insert(c.name.as_str()) {
                return Err(Error::BadColumn {
                    column: c.name.clone(),
                    reason: "appears twice in the table".into(),
                });
            }
            if c.len() != rows {
                return Err(Error::BadColumn {
                    column: c.name.clone(),
                    reason: format!(
                        "has {} rows but column `{}` has {rows}",
                        c.len(),
                        columns[0].name
                    ),
                });
            }
        }
        Ok(Self { columns, rows })
    }

    /// A table of numeric columns from a matrix (`NaN` = missing), named by `names` or
    /// `x0, x1, ...`.
    pub fn from_matrix(x: MatrixView, names: Option<&[String]>) -> Result<Self> {
        if let Some(n) = names {
            if n.len() != x.cols() {
                return Err(Error::LengthMismatch {
                    argument: "feature_names".into(),
                    expected: x.cols(),
                    found: n.len(),
                });
            }
        }
        let columns = (0..x.cols())
            .map(|j| {
                let name = names.map_or_else(|| format!("x{j}"), |n| n[j].clone());
                Column::numeric(name, (0..x.rows()).map(|i| x.row(i)[j]).collect())
            })
            .collect::<Result<Vec<_>>>()?;
        Self::new(columns)
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.rows
    }
    /// Number of columns.
    pub fn n_columns(&self) -> usize {
        self.columns.len()
    }
    /// The columns, in order.
    pub fn columns(&self) -> &[Column] {
        &self.columns
    }
    /// Column names, in order.
    pub fn names(&self) -> Vec<&str> {
        self.columns.iter().map(|c| c.name.as_str()).collect()
    }
    /// The column called `name`.
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }
    /// Consumes into the columns.
    pub fn into_columns(self) -> Vec<Column> {
        self.columns
    }
    /// True when every column is numeric and no value is missing.
    pub fn is_plain_numeric(&self) -> bool {
        self.columns.iter().all(|c| match &c.data {
            ColumnData::Numeric(v) => v.iter().all(|x| x.is_finite()),
            ColumnData::Categorical { .. } => false,
        })
    }
    /// The rows with the given indices, in that order.
    pub fn select_rows(&self, idx: &[usize]) -> Self {
        Self {
            columns: self.columns.iter().map(|c| c.select_rows(idx)).collect(),
            rows: idx.len(),
        }
    }
}
