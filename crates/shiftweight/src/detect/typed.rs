//! Which columns of a typed table moved ([`FeatureShift::run_table`]).
//!
//! For every column of the source table (found in the target by name):
//! - a **numeric** column is tested on its present values exactly as a matrix column is (see
//!   [`super::FeatureShift`]: Kolmogorov-Smirnov, or chi-square for few distinct values), with the
//!   same effect sizes (standardised mean difference and Wasserstein distance);
//! - a **categorical** column is tested by the chi-square test of homogeneity of the 2 x k table
//!   of level counts among present values (Pearson 1900; Yates' correction when k = 2, as
//!   scipy.stats.chi2_contingency). Levels whose smaller expected count,
//!   min(m, n) N_l / N, is below 5 are pooled into one cell first (common practice: the
//!   chi-square approximation needs expected counts of about 5); `pooled_levels` says how many.
//!   Effect sizes: the total variation distance 1/2 sum_l |q_l - p_l| between the level shares of
//!   the present values (before pooling), and the level whose share changed most with both shares;
//! - when either table has a missing value in the column, a second row tests the **missing
//!   rate**: the two-proportion z-test with pooled variance, z = (r_t - r_s) /
//!   sqrt(r (1 - r) (1/m + 1/n)), two-sided normal p-value (Wald's test of two binomial
//!   proportions; equal to the square root of the uncorrected 2 x 2 chi-square statistic).
//!
//! All p-values of all rows are adjusted together by Benjamini-Hochberg (1995). The AUC drop of a
//! row permutes together every encoded column it covers ([`crate::table::TableEncoding`]): all
//! level columns of a categorical column, the standardised value of a numeric one, and the
//! missing indicator or missing level for a missing-rate row.

use super::features::{small_expected_note, sort_most_shifted, FeatureKind, FeatureShiftRow};
use super::stats::{benjamini_hochberg, chi_square_two_rows, normal_sf, KS_EXACT_MAX_N};
use super::{FeatureShift, FeatureShiftTable};
use crate::data::validate_pair;
use crate::error::Result;
use crate::table::{encode_pair, ColumnData, ColumnEncoding, Table, MISSING_CODE};
use std::collections::{BTreeMap, HashMap};

/// Result of the two-proportion z-test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TwoProportions {
    /// z = (r_t - r_s) / sqrt(r (1 - r) (1/m + 1/n)); 0 when the pooled rate is 0 or 1.
    pub z: f64,
    /// Two-sided p-value 2 (1 - Phi(|z|)).
    pub p_value: f64,
}

/// Two-proportion z-test of `k_source` events in `m` rows against `k_target` in `n` rows, with
/// the pooled variance (see the module documentation). O(1).
pub fn two_proportion_test(k_source: usize, m: usize, k_target: usize, n: usize) -> TwoProportions {
    let (m_f, n_f) = (m as f64, n as f64);
    let r = (k_source + k_target) as f64 / (m_f + n_f);
    let se = (r * (1.0 - r) * (1.0 / m_f + 1.0 / n_f)).sqrt();
    if !(se > 0.0) {
        return TwoProportions {
            z: 0.0,
            p_value: 1.0,
        };
    }
    let z = (k_target as f64 / n_f - k_source as f64 / m_f) / se;
    TwoProportions {
        z,
        p_value: (2.0 * normal_sf(z.abs())).min(1.0),
    }
}

/// Level counts of the present values of a categorical column, by level name.
fn level_counts<'a>(levels: &'a [String], codes: &[u32]) -> HashMap<&'a str, usize> {
    let mut per_code = vec![0usize; levels.len()];
    for &c in codes.iter().filter(|&&c| c != MISSING_CODE) {
        per_code[c as usize] += 1;
    }
    levels
        .iter()
        .zip(per_code)
        .filter(|(_, k)| *k > 0)
        .map(|(l, k)| (l.as_str(), k))
        .collect()
}

impl FeatureShift {
    /// Analyses every column of typed tables `source` and `target` (see the module
    /// documentation of [`crate::detect`] and of this method's module): one row per column, plus
    /// one missing-rate row per column with any missing value, most-shifted first. Rows are
    /// indexed by the column's position in `source`; a missing-rate row is named
    /// `"<column> (missing)"`.
    pub fn run_table(&self, source: &Table, target: &Table) -> Result<FeatureShiftTable> {
        self.check()?;
        let (enc, zs, zt, _) = encode_pair(source, target)?;
        validate_pair(&zs.view(), &zt.view(), 2)?;
        let (ns, nt) = (source.rows(), target.rows());
        let mut rows = Vec::new();
        let mut groups: Vec<Vec<usize>> = Vec::new();
        let mut small_expected = BTreeMap::new();
        let mut notes = Vec::new();
        let mut offset = 0;
        for (ci, ce) in enc.columns.iter().enumerate() {
            let name = ce.name().to_string();
            let s = crate::table::aligned(ce.kind(), source, &name, "source")?;
            let t = crate::table::aligned(ce.kind(), target, &name, "target")?;
            let width = ce.width();
            let (value_cols, missing_col) = match ce {
                ColumnEncoding::Numeric {
                    missing_indicator, ..
                } => (vec![offset], missing_indicator.then_some(offset + 1)),
                ColumnEncoding::Categorical { missing_level, .. } => {
                    let k = width - usize::from(*missing_level);
                    (
                        (offset..offset + k).collect(),
                        missing_level.then_some(offset + k),
                    )
                }
            };
            match (s.data(), t.data()) {
                (ColumnData::Numeric(a), ColumnData::Numeric(b)) => {
                    let a: Vec<f64> = a.iter().copied().filter(|v| !v.is_nan()).collect();
                    let b: Vec<f64> = b.iter().copied().filter(|v| !v.is_nan()).collect();
                    if a.is_empty() || b.is_empty() {
                        notes.push(format!(
                            "column `{name}` has no present value in {}: only its missing rate is tested",
                            if a.is_empty() { "the source" } else { "the target" }
                        ));
                    } else {
                        let (row, e) = self.numeric_row(a, b, ci, name.clone())?;
                        if let Some(e) = e {
                            small_expected.insert(ci, e);
                        }
                        rows.push(row);
                        groups.push(value_cols);
                    }
                }
                (
                    ColumnData::Categorical {
                        levels: la,
                        codes: ca,
                    },
                    ColumnData::Categorical {
                        levels: lb,
                        codes: cb,
                    },
                ) => {
                    let (pa, pb) = (level_counts(la, ca), level_counts(lb, cb));
                    let (m, n) = (pa.values().sum::<usize>(), pb.values().sum::<usize>());
                    if m == 0 || n == 0 {
                        notes.push(format!(
                            "column `{name}` has no present value in {}: only its missing rate is tested",
                            if m == 0 { "the source" } else { "the target" }
                        ));
                    } else {
                        let mut all: Vec<&str> = pa.keys().chain(pb.keys()).copied().collect();
                        all.sort_unstable();
                        all.dedup();
                        let total = (m + n) as f64;
                        let (mut cs, mut ct) = (Vec::new(), Vec::new());
                        let (mut other_s, mut other_t, mut pooled) = (0.0, 0.0, 0usize);
                        let (mut tv, mut top, mut top_diff) = (0.0, (all[0], 0.0, 0.0), -1.0);
                        for l in &all {
                            let (a, b) = (
                                *pa.get(l).unwrap_or(&0) as f64,
                                *pb.get(l).unwrap_or(&0) as f64,
                            );
                            let (p, q) = (a / m as f64, b / n as f64);
                            tv += 0.5 * (q - p).abs();
                            if (q - p).abs() > top_diff {
                                top_diff = (q - p).abs();
                                top = (l, p, q);
                            }
                            if (m.min(n) as f64) * (a + b) / total < 5.0 {
                                other_s += a;
                                other_t += b;
                                pooled += 1;
                            } else {
                                cs.push(a);
                                ct.push(b);
                            }
                        }
                        if pooled > 0 {
                            cs.push(other_s);
                            ct.push(other_t);
                        }
                        let c = chi_square_two_rows(&cs, &ct)?;
                        small_expected.insert(ci, c.min_expected);
                        rows.push(FeatureShiftRow {
                            feature: name.clone(),
                            index: ci,
                            kind: FeatureKind::Categorical,
                            test: "chi_square".into(),
                            statistic: c.statistic,
                            p_value: c.p_value,
                            p_adjusted: c.p_value,
                            dof: Some(c.dof),
                            n_distinct: all.len(),
                            tv_distance: Some(tv),
                            top_level: Some(top.0.to_string()),
                            top_level_source: Some(top.1),
                            top_level_target: Some(top.2),
                            pooled_levels: Some(pooled),
                            ..FeatureShiftRow::blank()
                        });
                        groups.push(value_cols);
                    }
                }
                _ => unreachable!("both columns were aligned to the encoding's type"),
            }
            let (ks, kt) = (s.n_missing(), t.n_missing());
            if ks + kt > 0 {
                let r = two_proportion_test(ks, ns, kt, nt);
                rows.push(FeatureShiftRow {
                    feature: format!("{name} (missing)"),
                    index: ci,
                    kind: FeatureKind::MissingRate,
                    test: "two_proportion".into(),
                    statistic: r.z,
                    p_value: r.p_value,
                    p_adjusted: r.p_value,
                    n_distinct: 2,
                    missing_source: Some(ks as f64 / ns as f64),
                    missing_target: Some(kt as f64 / nt as f64),
                    ..FeatureShiftRow::blank()
                });
                groups.push(missing_col.into_iter().collect());
            }
            offset += width;
        }
        let adj = benjamini_hochberg(&rows.iter().map(|r| r.p_value).collect::<Vec<_>>());
        for (r, a) in rows.iter_mut().zip(adj) {
            r.p_adjusted = a;
        }
        let (classifier_auc, drops) = self.importance(zs.view(), zt.view(), &groups, &mut notes)?;
        for (r, d) in rows.iter_mut().zip(drops) {
            r.auc_drop = d;
        }
        sort_most_shifted(&mut rows);
        if ns.max(nt) > KS_EXACT_MAX_N && rows.iter().any(|r| r.kind == FeatureKind::Continuous) {
            notes.push(format!(
                "more than {KS_EXACT_MAX_N} rows in a sample: Kolmogorov-Smirnov p-values are asymptotic"
            ));
        }
        small_expected_note(&rows, &small_expected, &mut notes);
        if rows.iter().any(|r| r.pooled_levels.is_some_and(|k| k > 0)) {
            notes.push(
                "levels with an expected count below 5 were pooled into one cell of their chi-square table \
                 (common practice)"
                    .into(),
            );
        }
        Ok(FeatureShiftTable {
            rows,
            classifier_auc,
            n_source: ns,
            n_target: nt,
            seed: self.seed,
            notes,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::table::Column;
    use rand::Rng;

    #[test]
    fn two_proportion_z_squared_is_the_uncorrected_chi_square() {
        // 10 of 100 against 25 of 100. Textbook identity (e.g. Agresti 2013, Categorical Data
        // Analysis, sec. 3.1): z^2 equals Pearson's statistic of the 2 x 2 table without Yates'
        // correction, computed here by hand from observed and expected counts.
        let r = two_proportion_test(10, 100, 25, 100);
        let obs = [10.0, 90.0, 25.0, 75.0];
        let exp = [17.5, 82.5, 17.5, 82.5];
        let chi2: f64 = obs
            .iter()
            .zip(&exp)
            .map(|(o, e)| (o - e) * (o - e) / e)
            .sum();
        assert!((r.z * r.z - chi2).abs() < 1e-12, "{} vs {chi2}", r.z * r.z);
        assert!(r.z > 0.0);
        // Chi-square with 1 dof: P(X > z^2) = 2 (1 - Phi(|z|)).
        let sf = statrs::distribution::ContinuousCDF::sf(
            &statrs::distribution::ChiSquared::new(1.0).unwrap(),
            chi2,
        );
        assert!((r.p_value - sf).abs() < 1e-12);
        assert_eq!(two_proportion_test(0, 10, 0, 20).p_value, 1.0);
    }

    fn table(n: usize, shift: bool, seed: u64) -> Table {
        let mut r = crate::random::rng(seed);
        let heating: Vec<Option<&str>> = (0..n)
            .map(|_| {
                let u: f64 = r.random();
                let cut = if shift { (0.2, 0.5) } else { (0.5, 0.8) };
                Some(if u < cut.0 {
                    "gas"
                } else if u < cut.1 {
                    "oil"
                } else {
                    "heat_pump"
                })
            })
            .collect();
        let temp: Vec<f64> = (0..n).map(|_| r.random::<f64>()).collect();
        let miss = if shift { 0.3 } else { 0.05 };
        let area: Vec<f64> = (0..n)
            .map(|_| {
                if r.random::<f64>() < miss {
                    f64::NAN
                } else {
                    r.random::<f64>()
                }
            })
            .collect();
        Table::new(vec![
            Column::numeric("temp", temp).unwrap(),
            Column::from_levels("heating", heating),
            Column::numeric("area", area).unwrap(),
        ])
        .unwrap()
    }

    #[test]
    fn typed_columns_and_missing_rates_are_ranked() {
        let (s, t) = (table(300, false, 1), table(300, true, 2));
        let tab = FeatureShift::new()
            .folds(3)
            .repeats(2)
            .run_table(&s, &t)
            .unwrap();
        let names: Vec<&str> = tab.rows.iter().map(|r| r.feature.as_str()).collect();
        assert_eq!(names.len(), 4, "{names:?}");
        // The two changed things lead; the unchanged numeric values trail.
        let top2: std::collections::HashSet<&str> = names[..2].iter().copied().collect();
        assert!(
            top2.contains("heating") && top2.contains("area (missing)"),
            "{names:?}"
        );
        let h = tab.rows.iter().find(|r| r.feature == "heating").unwrap();
        assert_eq!(h.kind, FeatureKind::Categorical);
        assert_eq!(h.dof, Some(2));
        // Level shares moved by 0.3 each for gas and heat_pump: TV distance 0.3 in expectation.
        assert!((h.tv_distance.unwrap() - 0.3).abs() < 0.1, "{h:?}");
        assert!(h.p_adjusted < 1e-6);
        let m = tab
            .rows
            .iter()
            .find(|r| r.feature == "area (missing)")
            .unwrap();
        assert_eq!(m.kind, FeatureKind::MissingRate);
        assert!(m.missing_target.unwrap() > m.missing_source.unwrap());
        assert!(tab.rows.iter().all(|r| r.p_adjusted >= r.p_value));
        let back = FeatureShiftTable::from_json(&tab.to_json().unwrap()).unwrap();
        assert_eq!(back, tab);
    }

    #[test]
    fn sparse_levels_are_pooled() {
        let mut lv: Vec<Option<String>> = (0..200).map(|i| Some(format!("L{}", i % 2))).collect();
        lv[0] = Some("rare1".into());
        lv[1] = Some("rare2".into());
        let s = Table::new(vec![Column::from_levels("c", lv.clone())]).unwrap();
        let t = Table::new(vec![Column::from_levels("c", lv[2..].to_vec())]).unwrap();
        let tab = FeatureShift::new()
            .folds(2)
            .repeats(1)
            .run_table(&s, &t)
            .unwrap();
        let r = &tab.rows[0];
        assert_eq!(r.pooled_levels, Some(2));
        assert_eq!(r.dof, Some(2));
    }
}
