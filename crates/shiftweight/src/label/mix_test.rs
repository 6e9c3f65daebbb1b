//! Does the predicted-class mix differ between source and target? The black-box shift test of
//! Rabanser, Guennemann & Lipton (2019, "Failing loudly: an empirical study of methods for
//! detecting dataset shift", NeurIPS), on hard predictions: the 2 x K table of predicted-class
//! counts (held-out source rows, target rows) is tested for homogeneity.
//!
//! p-value: Pearson's chi-square with K' - 1 degrees of freedom (K' the classes predicted at least
//! once; Yates's correction when K' = 2, as scipy.stats.chi2_contingency), valid when every
//! expected count is at least `min_expected` (default 5, Cochran 1954 - common practice);
//! otherwise a permutation test of the same statistic: the pooled predicted classes are shuffled
//! B times and p = (1 + #{X2_b >= X2}) / (1 + B), exact under the null for any counts. O(B n).
//!
//! Under the null the source and target predictions are draws from one distribution: the
//! classifier must be fixed (not trained on the rows tested) - use out-of-fold source
//! probabilities, as for the estimate.
//!
//! [`class_matched_rows`] picks a source subsample with a given class mix, for a covariate shift
//! test of what remains once the class mix is accounted for.

use super::{check_probabilities, predicted_classes, CLASS_MIX_TEST_FORMAT};
use crate::data::MatrixView;
use crate::detect::chi_square_two_rows;
use crate::error::{Error, Result};
use crate::model;
use crate::random::rng;
use rand::seq::SliceRandom;
use serde::{Deserialize, Serialize};

const TAG_PERM: u64 = 0x6d69_785f_7065_726d;
const TAG_MATCH: u64 = 0x6d69_785f_6d61_7463;

/// Guidance printed with every class-mix test result.
pub const TELLING_APART: &str = "A change in the predicted-class mix is what label shift \
produces, but a covariate shift within classes produces it too. To tell them apart: estimate the \
target class mix, then test for a covariate shift between the target and a source subsample \
matched to that mix; if the signal vanishes, a change of class mix explains the shift (label \
shift), if it stays, the inputs changed within classes (covariate or concept shift). With a small \
labelled target sample, compare each class's inputs between source and target: under label shift \
they do not differ.";

/// How the p-value of a [`ClassMixTestResult`] was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MixPValueMethod {
    /// Asymptotic chi-square distribution.
    ChiSquare,
    /// Permutation of the pooled predicted classes (small expected counts).
    Permutation,
}

/// Configuration of the predicted-class mix test. See the module docs.
#[derive(Debug, Clone, PartialEq)]
pub struct ClassMixTest {
    /// Permutations when expected counts are small (>= 1; default 2,000).
    pub permutations: usize,
    /// Smallest expected count for the chi-square p-value (> 0; default 5).
    pub min_expected: f64,
    /// Seed of the permutations (default 0).
    pub seed: u64,
}

impl Default for ClassMixTest {
    fn default() -> Self {
        Self {
            permutations: 2_000,
            min_expected: 5.0,
            seed: 0,
        }
    }
}

/// Outcome of the predicted-class mix test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassMixTestResult {
    /// Pearson's chi-square statistic of the 2 x K' table.
    pub statistic: f64,
    /// The p-value.
    pub p_value: f64,
    /// How the p-value was obtained.
    pub p_value_method: MixPValueMethod,
    /// Degrees of freedom (K' - 1).
    pub dof: usize,
    /// Smallest expected count of the table.
    pub min_expected: f64,
    /// Permutations used (0 for the chi-square p-value).
    pub permutations: usize,
    /// Source rows predicted as each class.
    pub source_counts: Vec<usize>,
    /// Target rows predicted as each class.
    pub target_counts: Vec<usize>,
    /// Seed of the permutations.
    pub seed: u64,
    /// How to read the result.
    pub notes: Vec<String>,
}

impl ClassMixTestResult {
    /// JSON document `{"format": "shiftweight.class-mix-test", "version": 1, "model": {...}}`.
    pub fn to_json(&self) -> Result<String> {
        model::to_json_tagged(CLASS_MIX_TEST_FORMAT, self)
    }
    /// Reads a document written by [`ClassMixTestResult::to_json`].
    pub fn from_json(text: &str) -> Result<Self> {
        model::from_json_tagged(CLASS_MIX_TEST_FORMAT, text)
    }
}

impl ClassMixTest {
    /// Defaults: 2,000 permutations when an expected count is below 5, seed 0.
    pub fn new() -> Self {
        Self::default()
    }
    /// Permutations of the small-count p-value (>= 1).
    pub fn permutations(mut self, b: usize) -> Self {
        self.permutations = b;
        self
    }
    /// Smallest expected count for the chi-square p-value (> 0).
    pub fn min_expected(mut self, m: f64) -> Self {
        self.min_expected = m;
        self
    }
    /// Seed of the permutations.
    pub fn seed(mut self, seed: u64) -> Self {
        self.seed = seed;
        self
    }

    /// Tests whether the predicted-class mix of `target_probabilities` differs from that of
    /// `source_probabilities` (held-out source rows), both n x K class probabilities.
    pub fn run(
        &self,
        source_probabilities: MatrixView,
        target_probabilities: MatrixView,
    ) -> Result<ClassMixTestResult> {
        if self.permutations == 0 {
            return Err(Error::param("permutations", "must be at least 1"));
        }
        if !(self.min_expected > 0.0 && self.min_expected.is_finite()) {
            return Err(Error::param(
                "min_expected",
                format!("must be a positive number, got {}", self.min_expected),
            ));
        }
        let ps = check_probabilities(source_probabilities, "source_probabilities", None)?;
        let k = ps.cols();
        let pt = check_probabilities(target_probabilities, "target_probabilities", Some(k))?;
        let (ys, yt) = (predicted_classes(&ps), predicted_classes(&pt));
        let mut source_counts = vec![0usize; k];
        let mut target_counts = vec![0usize; k];
        ys.iter().for_each(|&c| source_counts[c] += 1);
        yt.iter().for_each(|&c| target_counts[c] += 1);
        // Columns of classes predicted at least once, and each row's column in that table.
        let kept: Vec<usize> = (0..k)
            .filter(|&c| source_counts[c] + target_counts[c] > 0)
            .collect();
        let mut column = vec![usize::MAX; k];
        for (pos, &c) in kept.iter().enumerate() {
            column[c] = pos;
        }
        let table = |labels: &[usize], n_s: usize| -> (Vec<f64>, Vec<f64>) {
            let mut a = vec![0.0; kept.len()];
            let mut b = vec![0.0; kept.len()];
            for (i, &c) in labels.iter().enumerate() {
                if i < n_s {
                    a[c] += 1.0;
                } else {
                    b[c] += 1.0;
                }
            }
            (a, b)
        };
        let mut pooled: Vec<usize> = ys.iter().chain(&yt).map(|&c| column[c]).collect();
        let n_s = ys.len();
        let (a, b) = table(&pooled, n_s);
        let chi = chi_square_two_rows(&a, &b)?;
        let (p_value, method, permutations) =
            if chi.dof == 0 || chi.min_expected >= self.min_expected {
                (chi.p_value, MixPValueMethod::ChiSquare, 0)
            } else {
                let mut r = rng(self.seed ^ TAG_PERM);
                let mut exceed = 0usize;
                // Relative slack so that permutations giving the same table as the observed one count
                // as "at least as extreme" despite rounding.
                let bar = chi.statistic - 1e-12 * chi.statistic.abs();
                for _ in 0..self.permutations {
                    pooled.shuffle(&mut r);
                    let (a, b) = table(&pooled, n_s);
                    if chi_square_two_rows(&a, &b)?.statistic >= bar {
                        exceed += 1;
                    }
                }
                (
                    (1 + exceed) as f64 / (1 + self.permutations) as f64,
                    MixPValueMethod::Permutation,
                    self.permutations,
                )
            };
        let mut notes = vec![TELLING_APART.to_string()];
        if method == MixPValueMethod::Permutation {
            notes.push(format!(
                "an expected count is {:.3} (below {}), so the p-value is a permutation p-value",
                chi.min_expected, self.min_expected
            ));
        }
        Ok(ClassMixTestResult {
            statistic: chi.statistic,
            p_value,
            p_value_method: method,
            dof: chi.dof,
            min_expected: chi.min_expected,
            permutations,
            source_counts,
            target_counts,
            seed: self.seed,
            notes,
        })
    }
}

/// Indices (sorted) of a source subsample whose class mix is `proportions`: the largest N with
/// N q_j <= n_j for every class, and floor(N q_j) rows of class j drawn without replacement
/// (seeded). A covariate shift test between these rows and the target then asks whether the
/// target differs by more than its class mix. O(n).
pub fn class_matched_rows(labels: &[usize], proportions: &[f64], seed: u64) -> Result<Vec<usize>> {
    let k = proportions.len();
    if k < 2 {
        return Err(Error::param(
            "proportions",
            format!("needs one share per class (at least 2), got {k}"),
        ));
    }
    if let Some(j) = proportions
        .iter()
        .position(|v| !(v.is_finite() && *v >= 0.0))
    {
        return Err(Error::param(
            "proportions",
            format!(
                "entry {j} is {}; shares must be finite and >= 0",
                proportions[j]
            ),
        ));
    }
    let total: f64 = proportions.iter().sum();
    if (total - 1.0).abs() > super::ROW_SUM_TOLERANCE {
        return Err(Error::param(
            "proportions",
            format!("the shares sum to {total}, not 1"),
        ));
    }
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); k];
    for (i, &y) in labels.iter().enumerate() {
        if y >= k {
            return Err(Error::param(
                "labels",
                format!("row {i} has class {y} but there are {k} shares"),
            ));
        }
        by_class[y].push(i);
    }
    let mut n_max = f64::INFINITY;
    for j in 0..k {
        if proportions[j] > 0.0 {
            if by_class[j].is_empty() {
                return Err(Error::param(
                    "labels",
                    format!("class {j} has share {} but no source row", proportions[j]),
                ));
            }
            n_max = n_max.min(by_class[j].len() as f64 / proportions[j]);
        }
    }
    let mut r = rng(seed ^ TAG_MATCH);
    let mut out = Vec::new();
    for j in 0..k {
        let m = ((n_max * proportions[j]) + 1e-9).floor() as usize;
        let rows = &mut by_class[j];
        rows.shuffle(&mut r);
        out.extend_from_slice(&rows[..m.min(rows.len())]);
    }
    if out.len() < 2 {
        return Err(Error::TooFewRows {
            argument: "labels".into(),
            found: out.len(),
            required: 2,
        });
    }
    out.sort_unstable();
    Ok(out)
}
