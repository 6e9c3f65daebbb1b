//! Support gaps a table shows directly: target rows whose value in some column never occurs in
//! the source (a level the source lacks, or a missing value in a column the source always fills).
//!
//! Such rows have p_source = 0 along that column, so the ratio p_target / p_source is unbounded
//! there and no weighting of the source rows can represent them: the gap is a failure of support,
//! not a small weight. O(n) per column with a hash set of the source levels.

use super::{Table, MISSING_CODE};
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::HashSet;

/// Target rows with a value in `column` that the source never has.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SupportGap {
    /// The column.
    pub column: String,
    /// The level absent from the source, or `None` for a missing value when the source has no
    /// missing value in that column.
    pub level: Option<String>,
    /// Target rows holding it.
    pub target_rows: usize,
    /// The first such target row (0-based).
    pub first_row: usize,
}

impl SupportGap {
    /// One plain-language sentence naming the column, the value and the row count.
    pub fn describe(&self, n_target: usize) -> String {
        let what = match &self.level {
            Some(l) => format!("level {l:?}"),
            None => "a missing value".to_string(),
        };
        format!(
            "{} of {n_target} target rows have {what} in column `{}`, which the source never has \
             (first at target row {}): no weighting can cover them.",
            self.target_rows, self.column, self.first_row
        )
    }
}

/// The support gaps of `target` against `source`, column by column in the source's order
/// (columns found by name; a column missing from the target is an error naming it), levels in
/// order of first appearance in the target, the missing value last. Numeric columns can only
/// show a missing-value gap; a column typed differently in the two tables is compared by level
/// after converting the target column to the source's type where possible.
pub fn support_gaps(source: &Table, target: &Table) -> Result<Vec<SupportGap>> {
    let mut gaps = Vec::new();
    for s in source.columns() {
        let t = target
            .column(s.name())
            .ok_or_else(|| Error::MissingColumn {
                argument: "target".into(),
                column: s.name().to_string(),
            })?;
        let t = if t.kind() == s.kind() {
            std::borrow::Cow::Borrowed(t)
        } else {
            std::borrow::Cow::Owned(t.clone().with_kind(s.kind())?)
        };
        if let (Some((ls, cs)), Some((lt, ct))) = (s.categories(), t.categories()) {
            let mut used = vec![false; ls.len()];
            for &c in cs.iter().filter(|&&c| c != MISSING_CODE) {
                used[c as usize] = true;
            }
            let present: HashSet<&str> = ls
                .iter()
                .zip(&used)
                .filter(|(_, u)| **u)
                .map(|(l, _)| l.as_str())
                .collect();
            let mut per_level: Vec<(usize, usize)> = vec![(0, 0); lt.len()];
            let mut order = Vec::new();
            for (i, &c) in ct.iter().enumerate() {
                if c == MISSING_CODE || present.contains(lt[c as usize].as_str()) {
                    continue;
                }
                let e = &mut per_level[c as usize];
                if e.0 == 0 {
                    e.1 = i;
                    order.push(c as usize);
                }
                e.0 += 1;
            }
            for k in order {
                gaps.push(SupportGap {
                    column: s.name().to_string(),
                    level: Some(lt[k].clone()),
                    target_rows: per_level[k].0,
                    first_row: per_level[k].1,
                });
            }
        }
        if s.n_missing() == 0 {
            let mut first = None;
            let mut rows = 0;
            for i in (0..t.len()).filter(|&i| t.is_missing(i)) {
                first.get_or_insert(i);
                rows += 1;
            }
            if let Some(first_row) = first {
                gaps.push(SupportGap {
                    column: s.name().to_string(),
                    level: None,
                    target_rows: rows,
                    first_row,
                });
            }
        }
    }
    Ok(gaps)
}

/// Number of distinct target rows with at least one support gap.
pub fn rows_with_gaps(source: &Table, target: &Table) -> Result<usize> {
    let gaps = support_gaps(source, target)?;
    if gaps.is_empty() {
        return Ok(0);
    }
    let mut hit = vec![false; target.rows()];
    for s in source.columns() {
        let t = target.column(s.name()).expect("checked by support_gaps");
        let t = if t.kind() == s.kind() {
            std::borrow::Cow::Borrowed(t)
        } else {
            std::borrow::Cow::Owned(t.clone().with_kind(s.kind())?)
        };
        let gap_levels: HashSet<&str> = gaps
            .iter()
            .filter(|g| g.column == s.name())
            .filter_map(|g| g.level.as_deref())
            .collect();
        let missing_gap = gaps
            .iter()
            .any(|g| g.column == s.name() && g.level.is_none());
        for (i, h) in hit.iter_mut().enumerate() {
            if (missing_gap && t.is_missing(i))
                || t.level(i).is_some_and(|l| gap_levels.contains(l))
            {
                *h = true;
            }
        }
    }
    Ok(hit.iter().filter(|h| **h).count())
}
