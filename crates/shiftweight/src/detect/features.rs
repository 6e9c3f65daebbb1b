//! Which features moved: one two-sample test per feature, effect sizes, multiple-testing
//! adjustment and permutation importance in the classifier test.
//!
//! For every column j of the source (m rows) and target (n rows):
//! - a test suited to its kind. A column with at most `max_categories` distinct pooled values (and
//!   at most half as many distinct values as pooled rows) is *categorical*: chi-square test of
//!   homogeneity on the 2 x k table of counts (Pearson 1900; Yates' correction when k = 2, as
//!   scipy.stats.chi2_contingency). Otherwise it is *continuous*: the two-sample
//!   Kolmogorov-Smirnov test (exact p-value up to 10,000 rows per sample, asymptotic above, as
//!   scipy.stats.ks_2samp with method="auto"). O((m + n) log(m + n)) per column (exact KS:
//!   O(m n)).
//! - effect sizes in standard units: the standardised mean difference
//!   (mean_t - mean_s) / s_pooled (Cohen's d) and the Wasserstein-1 distance between the two
//!   empirical distributions divided by s_pooled, with s_pooled^2 = ((m-1) s_s^2 + (n-1) s_t^2) /
//!   (m + n - 2).
//! - p-values adjusted by the Benjamini-Hochberg (1995) step-up procedure over the columns.
//! - the drop in the AUC of the cross-fitted classifier of the classifier two-sample test
//!   (Lopez-Paz & Oquab 2017) when the column is permuted within each fold (averaged over
//!   `repeats` seeded permutations; the permutation importance of Breiman 2001, "Random forests",
//!   Machine Learning 45). The classifier is linear, so a permuted column changes the scores by
//!   coef_j (z_pi(i)j - z_ij): O(n) per repeat plus the AUC's sort. Above `max_importance_rows`
//!   pooled rows a seeded subsample is used for this part only.
//!
//! Rows are sorted most-shifted first: by raw p-value, ties (frequent when p-values underflow at
//! large n) broken by the larger standardised Wasserstein distance.

use super::classifier::cross_fit;
use super::stats::{
    auc_summary, benjamini_hochberg, chi_square_two_rows, ks_sorted, pooled_sd,
    wasserstein1_sorted, KsMode, KS_EXACT_MAX_N,
};
use super::{pooled_standardized, FEATURE_SHIFT_FORMAT};
use crate::data::{kfold_assignment, validate_pair, MatrixView};
use crate::error::{Error, Result};
use crate::model;
use crate::random::rng;
use rand::seq::index::sample;
use rand::seq::SliceRandom;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

const TAG_FOLDS: u64 = 0x6673_685f_666f_6c64;
const TAG_PERM: u64 = 0x6673_685f_7065_726d;
const TAG_SUB: u64 = 0x6673_685f_7375_6273;

/// How a column was treated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FeatureKind {
    /// Many distinct values: Kolmogorov-Smirnov test.
    Continuous,
    /// Few distinct values, or a categorical table column: chi-square test on counts.
    Categorical,
    /// The share of missing values of a table column: two-proportion z-test.
    MissingRate,
}

/// One feature's shift summary.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FeatureShiftRow {
    /// Feature name (the column index as text when no names were given).
    pub feature: String,
    /// Column index in the input.
    pub index: usize,
    /// How the column was treated.
    pub kind: FeatureKind,
    /// `ks` or `chi_square`.
    pub test: String,
    /// KS distance D, or the chi-square statistic.
    pub statistic: f64,
    /// Unadjusted p-value of the test.
    pub p_value: f64,
    /// Benjamini-Hochberg adjusted p-value.
    pub p_adjusted: f64,
    /// Exact or asymptotic KS p-value (`None` for chi-square).
    pub ks_mode: Option<KsMode>,
    /// Degrees of freedom of the chi-square test (`None` for KS).
    pub dof: Option<usize>,
    /// Distinct values in the pooled column.
    pub n_distinct: usize,
    /// (mean_target - mean_source) / pooled sd; `None` when the pooled sd is 0.
    pub smd: Option<f64>,
    /// Wasserstein-1 distance / pooled sd; `None` when the pooled sd is 0.
    pub wasserstein_sd: Option<f64>,
    /// AUC of the classifier minus its AUC with this column permuted.
    pub auc_drop: f64,
    /// Categorical table columns: total variation distance between the level frequencies of
    /// the present values, 1/2 sum_l |q_l - p_l|.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tv_distance: Option<f64>,
    /// Categorical table columns: the level whose share changed most.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub top_level: Option<String>,
    /// Its share among the present source values.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub top_level_source: Option<f64>,
    /// Its share among the present target values.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub top_level_target: Option<f64>,
    /// Categorical table columns: sparse levels pooled into one cell of the chi-square table.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pooled_levels: Option<usize>,
    /// Missing-rate rows: share of missing values in the source.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub missing_source: Option<f64>,
    /// Missing-rate rows: share of missing values in the target.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub missing_target: Option<f64>,
}

impl FeatureShiftRow {
    pub(super) fn blank() -> Self {
        Self {
            feature: String::new(),
            index: 0,
            kind: FeatureKind::Continuous,
            test: String::new(),
            statistic: 0.0,
            p_value: 1.0,
            p_adjusted: 1.0,
            ks_mode: None,
            dof: None,
            n_distinct: 0,
            smd: None,
            wasserstein_sd: None,
            auc_drop: 0.0,
            tv_distance: None,
            top_level: None,
            top_level_source: None,
            top_level_target: None,
            pooled_levels: None,
            missing_source: None,
            missing_target: None,
        }
    }

    /// The effect size used to order rows of equal p-value: the standardised Wasserstein
    /// distance, the total variation distance, or the change in missing rate.
    fn effect(&self) -> f64 {
        self.wasserstein_sd
            .or(self.tv_distance)
            .or(match (self.missing_source, self.missing_target) {
                (Some(a), Some(b)) => Some((b - a).abs()),
                _ => None,
            })
            .unwrap_or(0.0)
    }
}

/// Per-feature shift summaries, most-shifted first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FeatureShiftTable {
    /// One row per feature, sorted most-shifted first.
    pub rows: Vec<FeatureShiftRow>,
    /// Out-of-fold AUC of the classifier before any column is permuted.
    pub classifier_auc: f64,
    /// Source rows.
    pub n_source: usize,
    /// Target rows.
    pub n_target: usize,
    /// Seed of every random step.
    pub seed: u64,
    /// Notes (approximations used, small expected counts).
    pub notes: Vec<String>,
}

impl FeatureShiftTable {
    /// JSON document `{"format": "shiftweight.feature-shift", "version": 1, "model": {...}}`.
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(FEATURE_SHIFT_FORMAT, self)
    }
    /// Reads a document written by [`FeatureShiftTable::to_json`].
    pub fn from_json(text: &str) -> Result<Self> {
        model::from_json_tagged(FEATURE_SHIFT_FORMAT, text)
    }
}

/// Configuration of the per-feature analysis. See the module docs.
#[derive(Debug, Clone, PartialEq)]
pub struct FeatureShift {
    /// Columns with at most this many distinct values are categorical (default 10).
    pub max_categories: usize,
    /// Folds of the classifier for the permutation importance (>= 2; default 5).
    pub folds: usize,
    /// Logistic penalty (>= 0; default 1.0).
    pub l2: f64,
    /// Permutations per column for the AUC drop (>= 1; default 5).
    pub repeats: usize,
    /// Largest pooled row count used for the AUC drop (default 50,000; a seeded subsample above).
    pub max_importance_rows: usize,
    /// Seed of folds, permutations and subsample (default 0).
    pub seed: u64,
}

impl Default for FeatureShift {
    fn default() -> Self {
        Self {
            max_categories: 10,
            folds: 5,
            l2: 1.0,
            repeats: 5,
            max_importance_rows: 50_000,
            seed: 0,
        }
    }
}

impl FeatureShift {
    /// Defaults: up to 10 categories, 5 folds, l2 = 1, 5 repeats, 50,000 rows for the AUC drop.
    pub fn new() -> Self {
        Self::default()
    }
    /// Categorical threshold on distinct values.
    pub fn max_categories(mut self, k: usize) -> Self {
        self.max_categories = k;
        self
    }
    /// Classifier folds (>= 2).
    pub fn folds(mut self, k: usize) -> Self {
        self.folds = k;
        self
    }
    /// Logistic penalty (>= 0).
    pub fn l2(mut self, l2: f64) -> Self {
        self.l2 = l2;
        self
    }
    /// Permutations per column (>= 1).
    pub fn repeats(mut self, r: usize) -> Self {
        self.repeats = r;
        self
    }
    /// Row cap for the AUC drop.
    pub fn max_importance_rows(mut self, n: usize) -> Self {
        self.max_importance_rows = n;
        self
    }
    /// Seed of every random step.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Analyses every column of `source` against `target`. `names` (one per column) label the
    /// rows; without them the column index is used.
    pub fn run(
        &self,
        source: MatrixView,
        target: MatrixView,
        names: Option<&[String]>,
    ) -> Result<FeatureShiftTable> {
        self.check()?;
        validate_pair(&source, &target, 2)?;
        let d = source.cols();
        if let Some(nm) = names {
            if nm.len() != d {
                return Err(Error::LengthMismatch {
                    argument: "feature_names".into(),
                    expected: d,
                    found: nm.len(),
                });
            }
        }
        let (ns, nt) = (source.rows(), target.rows());
        let per_column: Vec<Result<(FeatureShiftRow, Option<f64>)>> = (0..d)
            .into_par_iter()
            .map(|j| {
                self.column(
                    source,
                    target,
                    j,
                    names
                        .map(|nm| nm[j].clone())
                        .unwrap_or_else(|| j.to_string()),
                )
            })
            .collect();
        let mut rows = Vec::with_capacity(d);
        let mut small_expected = std::collections::BTreeMap::new();
        for c in per_column {
            let (row, min_expected) = c?;
            if let Some(e) = min_expected {
                small_expected.insert(row.index, e);
            }
            rows.push(row);
        }
        let adj = benjamini_hochberg(&rows.iter().map(|r| r.p_value).collect::<Vec<_>>());
        for (r, a) in rows.iter_mut().zip(adj) {
            r.p_adjusted = a;
        }
        let mut notes = Vec::new();
        let groups: Vec<Vec<usize>> = (0..d).map(|j| vec![j]).collect();
        let (classifier_auc, drops) = self.importance(source, target, &groups, &mut notes)?;
        for r in rows.iter_mut() {
            r.auc_drop = drops[r.index];
        }
        sort_most_shifted(&mut rows);
        if ns.max(nt) > KS_EXACT_MAX_N && rows.iter().any(|r| r.kind == FeatureKind::Continuous) {
            notes.push(format!(
                "more than {KS_EXACT_MAX_N} rows in a sample: Kolmogorov-Smirnov p-values are asymptotic"
            ));
        }
        small_expected_note(&rows, &small_expected, &mut notes);
        Ok(FeatureShiftTable {
            rows,
            classifier_auc,
            n_source: ns,
            n_target: nt,
            seed: self.seed,
            notes,
        })
    }

    /// Checks the options.
    pub(super) fn check(&self) -> Result<()> {
        crate::data::check_folds(self.folds)?;
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(Error::param(
                "l2",
                format!("must be finite and >= 0, got {}", self.l2),
            ));
        }
        if self.repeats == 0 {
            return Err(Error::param("repeats", "must be at least 1"));
        }
        Ok(())
    }

    fn column(
        &self,
        source: MatrixView,
        target: MatrixView,
        j: usize,
        name: String,
    ) -> Result<(FeatureShiftRow, Option<f64>)> {
        let a: Vec<f64> = (0..source.rows()).map(|i| source.row(i)[j]).collect();
        let b: Vec<f64> = (0..target.rows()).map(|i| target.row(i)[j]).collect();
        self.numeric_row(a, b, j, name)
    }

    /// The test and effect sizes of one numeric column from its values in each sample (no
    /// missing values), as described in the module documentation.
    pub(super) fn numeric_row(
        &self,
        mut a: Vec<f64>,
        mut b: Vec<f64>,
        j: usize,
        name: String,
    ) -> Result<(FeatureShiftRow, Option<f64>)> {
        a.sort_unstable_by(f64::total_cmp);
        b.sort_unstable_by(f64::total_cmp);
        // Distinct pooled values and their counts in each sample.
        let (mut values_a, mut values_b) = (Vec::new(), Vec::new());
        let (mut i, mut k) = (0usize, 0usize);
        while i < a.len() || k < b.len() {
            let v = match (a.get(i), b.get(k)) {
                (Some(x), Some(y)) => x.min(*y),
                (Some(x), None) => *x,
                (None, Some(y)) => *y,
                (None, None) => break,
            };
            let (i0, k0) = (i, k);
            while i < a.len() && a[i] == v {
                i += 1;
            }
            while k < b.len() && b[k] == v {
                k += 1;
            }
            values_a.push((i - i0) as f64);
            values_b.push((k - k0) as f64);
        }
        let n_distinct = values_a.len();
        let categorical = n_distinct <= self.max_categories && 2 * n_distinct <= a.len() + b.len();
        let sd = pooled_sd(&a, &b);
        let (smd, wasserstein_sd) = if sd > 0.0 {
            let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
            (
                Some((mean(&b) - mean(&a)) / sd),
                Some(wasserstein1_sorted(&a, &b) / sd),
            )
        } else {
            (None, None)
        };
        let row = |kind, test: &str, statistic, p_value, ks_mode, dof| FeatureShiftRow {
            feature: name.clone(),
            index: j,
            kind,
            test: test.into(),
            statistic,
            p_value,
            p_adjusted: p_value,
            ks_mode,
            dof,
            n_distinct,
            smd,
            wasserstein_sd,
            auc_drop: 0.0,
            ..FeatureShiftRow::blank()
        };
        if categorical {
            let c = chi_square_two_rows(&values_a, &values_b)?;
            let dof = Some(c.dof);
            Ok((
                row(
                    FeatureKind::Categorical,
                    "chi_square",
                    c.statistic,
                    c.p_value,
                    None,
                    dof,
                ),
                Some(c.min_expected),
            ))
        } else {
            let mode = if a.len().max(b.len()) <= KS_EXACT_MAX_N {
                KsMode::Exact
            } else {
                KsMode::Asymptotic
            };
            let r = ks_sorted(&a, &b, mode)?;
            Ok((
                row(
                    FeatureKind::Continuous,
                    "ks",
                    r.statistic,
                    r.p_value,
                    Some(r.mode),
                    None,
                ),
                None,
            ))
        }
    }

    /// Out-of-fold AUC of the linear classifier and, per group of columns, the mean AUC drop
    /// when the columns of that group are permuted together (one permutation of the rows) within
    /// each fold.
    pub(super) fn importance(
        &self,
        source: MatrixView,
        target: MatrixView,
        groups: &[Vec<usize>],
        notes: &mut Vec<String>,
    ) -> Result<(f64, Vec<f64>)> {
        let (z_all, y_all) = pooled_standardized(source, target);
        let n_all = z_all.rows();
        let (z, y) = if n_all > self.max_importance_rows {
            let mut idx = sample(
                &mut rng(self.seed ^ TAG_SUB),
                n_all,
                self.max_importance_rows,
            )
            .into_vec();
            idx.sort_unstable();
            notes.push(format!(
                "AUC drops computed on a seeded subsample of {} of the {n_all} pooled rows",
                self.max_importance_rows
            ));
            (
                z_all.view().select_rows(&idx),
                idx.iter().map(|&i| y_all[i]).collect::<Vec<f64>>(),
            )
        } else {
            (z_all, y_all)
        };
        let n = z.rows();
        if n < self.folds {
            return Err(Error::TooFewRows {
                argument: "source and target together".into(),
                found: n,
                required: self.folds,
            });
        }
        let fold = kfold_assignment(n, self.folds, self.seed ^ TAG_FOLDS)?;
        let (scores, models) = cross_fit(z.view(), &y, &fold, self.folds, self.l2)?;
        let split = |s: &[f64]| -> (Vec<f64>, Vec<f64>) {
            let pos = s
                .iter()
                .zip(&y)
                .filter(|(_, l)| **l == 1.0)
                .map(|(v, _)| *v)
                .collect();
            let neg = s
                .iter()
                .zip(&y)
                .filter(|(_, l)| **l == 0.0)
                .map(|(v, _)| *v)
                .collect();
            (pos, neg)
        };
        let (pos, neg) = split(&scores);
        let base = auc_summary(&pos, &neg)?.auc;
        let fold_rows: Vec<Vec<usize>> = (0..self.folds)
            .map(|f| (0..n).filter(|&i| fold[i] == f).collect())
            .collect();
        let zv = z.view();
        let drops: Vec<Result<f64>> = groups
            .par_iter()
            .enumerate()
            .map(|(g, cols)| {
                let mut r =
                    rng(self.seed ^ TAG_PERM ^ (g as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15));
                let mut total = 0.0;
                for _ in 0..self.repeats {
                    let mut s = scores.clone();
                    for (f, rows) in fold_rows.iter().enumerate() {
                        let Some(m) = &models[f] else { continue };
                        let mut perm = rows.clone();
                        perm.shuffle(&mut r);
                        for (&i, &p) in rows.iter().zip(&perm) {
                            for &j in cols {
                                s[i] += m.coef[j] * (zv.row(p)[j] - zv.row(i)[j]);
                            }
                        }
                    }
                    let (pp, nn) = split(&s);
                    total += base - auc_summary(&pp, &nn)?.auc;
                }
                Ok(total / self.repeats as f64)
            })
            .collect();
        Ok((base, drops.into_iter().collect::<Result<Vec<f64>>>()?))
    }
}

/// The note on chi-square tables with expected counts below 5 (common practice: the
/// approximation is rough there).
pub(super) fn small_expected_note(
    rows: &[FeatureShiftRow],
    small_expected: &std::collections::BTreeMap<usize, f64>,
    notes: &mut Vec<String>,
) {
    let small: Vec<&str> = rows
        .iter()
        .filter(|r| r.kind == FeatureKind::Categorical)
        .filter(|r| small_expected.get(&r.index).is_some_and(|e| *e < 5.0))
        .map(|r| r.feature.as_str())
        .collect();
    if !small.is_empty() {
        notes.push(format!(
            "expected counts below 5 in the chi-square tables of {small:?}: their p-values are rough \
             (common practice: merge rare categories)"
        ));
    }
}

/// Sorts rows most-shifted first: by raw p-value, ties broken by the larger effect size, then
/// by column index and kind.
pub(super) fn sort_most_shifted(rows: &mut [FeatureShiftRow]) {
    rows.sort_by(|a, b| {
        a.p_value
            .total_cmp(&b.p_value)
            .then(b.effect().total_cmp(&a.effect()))
            .then(a.index.cmp(&b.index))
            .then((a.kind == FeatureKind::MissingRate).cmp(&(b.kind == FeatureKind::MissingRate)))
    });
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand_distr::{Distribution, StandardNormal};

    #[test]
    fn shifted_feature_first_and_binary_column_is_categorical() {
        let (n, d) = (300, 3);
        let mut r = rng(11);
        let mut make = |shift: f64| -> Vec<f64> {
            (0..n * d)
                .map(|k| {
                    let v: f64 = StandardNormal.sample(&mut r);
                    match k % d {
                        1 => v + shift,
                        2 => f64::from(v > 0.0),
                        _ => v,
                    }
                })
                .collect()
        };
        let s = make(0.0);
        let t = make(0.6);
        let names: Vec<String> = ["a", "b", "c"].iter().map(|v| v.to_string()).collect();
        let tab = FeatureShift::new()
            .run(
                MatrixView::new(&s, n, d).unwrap(),
                MatrixView::new(&t, n, d).unwrap(),
                Some(&names),
            )
            .unwrap();
        assert_eq!(tab.rows[0].feature, "b");
        assert!(tab.rows[0].auc_drop > 0.05);
        let c = tab.rows.iter().find(|r| r.feature == "c").unwrap();
        assert_eq!(c.kind, FeatureKind::Categorical);
        assert_eq!(c.dof, Some(1));
        assert_eq!(
            FeatureShiftTable::from_json(&tab.to_json().unwrap()).unwrap(),
            tab
        );
    }
}
