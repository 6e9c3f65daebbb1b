//! The "Which features moved, and how" section: one row per feature in words (type, test,
//! direction of the move) and source-vs-target figures of the most shifted ones (histograms on
//! shared bins, or shares of levels). O(n log n) per drawn feature.

use crate::format::num;
use crate::{svg, FEATURE_BINS, FEATURE_FIGURES, MAX_LEVELS};
use serde::Serialize;
use shiftweight::detect::{FeatureKind, FeatureShiftTable};
use shiftweight::MatrixView;

/// Per-feature shift.
#[derive(Debug, Clone, Serialize)]
pub struct FeatureRow {
    /// Feature name.
    pub feature: String,
    /// `numeric` or `categorical`.
    pub kind: String,
    /// The test in words (`Kolmogorov-Smirnov` or `chi-square`).
    pub test: String,
    /// Its statistic (KS distance D, or chi-square).
    pub statistic: f64,
    /// Unadjusted p-value.
    pub p_value: f64,
    /// Benjamini-Hochberg adjusted p-value.
    pub p_adjusted: f64,
    /// Direction of the move in words.
    pub direction: String,
    /// Standardised mean difference (target - source) / pooled sd.
    pub smd: Option<f64>,
    /// Wasserstein-1 distance / pooled sd.
    pub wasserstein_sd: Option<f64>,
    /// Drop of the classifier's AUC when the feature is permuted.
    pub auc_drop: f64,
}

/// Source and target distributions of one feature.
#[derive(Debug, Clone, Serialize)]
pub struct FeatureFigure {
    /// Feature name.
    pub feature: String,
    /// Numeric: shares per bin over [lo, hi]; categorical: shares per level.
    pub kind: String,
    /// Lower end of the bins (numeric).
    pub lo: f64,
    /// Upper end of the bins (numeric).
    pub hi: f64,
    /// Level names (categorical).
    pub levels: Vec<String>,
    /// Source shares.
    pub source: Vec<f64>,
    /// Target shares.
    pub target: Vec<f64>,
}

impl FeatureFigure {
    /// The figure of a numeric column: shares per level when `as_levels` or when it has at
    /// most [`MAX_LEVELS`] distinct values, else shares per bin of [`FEATURE_BINS`] shared bins.
    /// Missing values (NaN) are left out. O(n log n) in the rows.
    pub fn from_numbers(feature: &str, source: &[f64], target: &[f64], as_levels: bool) -> Self {
        let s: Vec<f64> = source.iter().copied().filter(|x| !x.is_nan()).collect();
        let g: Vec<f64> = target.iter().copied().filter(|x| !x.is_nan()).collect();
        let mut levels: Vec<f64> = s.iter().chain(&g).copied().collect();
        levels.sort_by(f64::total_cmp);
        levels.dedup();
        if as_levels || levels.len() <= MAX_LEVELS {
            let labels = levels.iter().map(|l| num(*l)).collect();
            FeatureFigure::of_levels(feature, &levels, labels, &s, &g)
        } else {
            let (lo, hi, hs, ht) = svg::shared_bins(&s, &g, FEATURE_BINS).unwrap_or((
                f64::NAN,
                f64::NAN,
                Vec::new(),
                Vec::new(),
            ));
            FeatureFigure {
                feature: feature.into(),
                kind: "numeric".into(),
                lo,
                hi,
                levels: Vec::new(),
                source: hs,
                target: ht,
            }
        }
    }

    /// The figure of a text column: the share of each level among the present values of each
    /// side (`None` is a missing value, left out), levels in order of first appearance.
    pub fn from_levels(feature: &str, source: &[Option<&str>], target: &[Option<&str>]) -> Self {
        let mut levels: Vec<&str> = Vec::new();
        for l in source.iter().chain(target).flatten() {
            if !levels.contains(l) {
                levels.push(l);
            }
        }
        let (s, g): (Vec<&str>, Vec<&str>) = (
            source.iter().flatten().copied().collect(),
            target.iter().flatten().copied().collect(),
        );
        let labels = levels.iter().map(|l| l.to_string()).collect();
        FeatureFigure::of_levels(feature, &levels, labels, &s, &g)
    }

    /// The level figure shared by [`FeatureFigure::from_numbers`] and
    /// [`FeatureFigure::from_levels`]: the share of each of `levels` (printed as `labels`) among
    /// the present values of each side. O(levels x rows).
    fn of_levels<T: PartialEq>(
        feature: &str,
        levels: &[T],
        labels: Vec<String>,
        source: &[T],
        target: &[T],
    ) -> Self {
        let share = |v: &[T]| -> Vec<f64> {
            levels
                .iter()
                .map(|l| v.iter().filter(|x| *x == l).count() as f64 / v.len().max(1) as f64)
                .collect()
        };
        FeatureFigure {
            feature: feature.into(),
            kind: "categorical".into(),
            lo: f64::NAN,
            hi: f64::NAN,
            levels: labels,
            source: share(source),
            target: share(target),
        }
    }
}

/// The per-feature section.
#[derive(Debug, Clone, Serialize)]
pub struct FeaturesPart {
    /// One row per feature, most shifted first.
    pub rows: Vec<FeatureRow>,
    /// Distributions of the most shifted features ([`FEATURE_FIGURES`] at most), same order.
    pub figures: Vec<FeatureFigure>,
}

fn column(m: &MatrixView, j: usize) -> Vec<f64> {
    (0..m.rows()).map(|i| m.row(i)[j]).collect()
}

/// One row of the feature table in words: type, test and the direction of the move.
fn feature_row(r: &shiftweight::detect::FeatureShiftRow) -> FeatureRow {
    let pct = |x: Option<f64>| x.map_or("n/a".to_string(), |v| format!("{:.1}%", 100.0 * v));
    let direction = match r.kind {
        FeatureKind::MissingRate => format!(
            "missing in {} of the source, {} of the target",
            pct(r.missing_source),
            pct(r.missing_target)
        ),
        FeatureKind::Categorical => match &r.top_level {
            Some(level) => format!(
                "largest change in level {level:?}: {} of the source, {} of the target",
                pct(r.top_level_source),
                pct(r.top_level_target)
            ),
            // Numbers used as levels: their mean says which way the levels moved.
            None => match r.smd {
                Some(s) if s.abs() < 0.05 => "about the same mean level".to_string(),
                Some(s) if s > 0.0 => "higher levels in the target".to_string(),
                Some(_) => "lower levels in the target".to_string(),
                None => "see the level shares".to_string(),
            },
        },
        FeatureKind::Continuous => match r.smd {
            Some(s) if s.abs() < 0.05 => "about the same centre".to_string(),
            Some(s) if s > 0.0 => "higher in the target".to_string(),
            Some(_) => "lower in the target".to_string(),
            None => "constant in both".to_string(),
        },
    };
    FeatureRow {
        feature: r.feature.clone(),
        kind: match r.kind {
            FeatureKind::Categorical => "categorical",
            FeatureKind::Continuous => "numeric",
            FeatureKind::MissingRate => "missing values",
        }
        .into(),
        test: match r.kind {
            FeatureKind::MissingRate => "two-proportion z-test".into(),
            _ if r.test == "ks" => "Kolmogorov-Smirnov".into(),
            _ => "chi-square".into(),
        },
        statistic: r.statistic,
        p_value: r.p_value,
        p_adjusted: r.p_adjusted,
        direction,
        smd: r.smd,
        wasserstein_sd: r.wasserstein_sd,
        auc_drop: r.auc_drop,
    }
}

impl FeaturesPart {
    /// The section from a feature-shift table of typed columns (text levels, gaps), with the
    /// figures the caller draws from its columns ([`FeatureFigure::from_numbers`],
    /// [`FeatureFigure::from_levels`]): `figure` is asked for the most shifted rows that are not
    /// missing-value rows, [`FEATURE_FIGURES`] at most.
    pub fn from_typed_table(
        t: &FeatureShiftTable,
        figure: impl Fn(&shiftweight::detect::FeatureShiftRow) -> Option<FeatureFigure>,
    ) -> Self {
        FeaturesPart {
            rows: t.rows.iter().map(feature_row).collect(),
            figures: t
                .rows
                .iter()
                .filter(|r| r.kind != FeatureKind::MissingRate)
                .filter_map(figure)
                .take(FEATURE_FIGURES)
                .collect(),
        }
    }

    /// The section from a feature-shift table and the rows it was computed on.
    pub fn from_table(t: &FeatureShiftTable, source: &MatrixView, target: &MatrixView) -> Self {
        let rows = t.rows.iter().map(feature_row).collect();
        let figures = t
            .rows
            .iter()
            .take(FEATURE_FIGURES)
            .map(|r| {
                let (s, g) = (column(source, r.index), column(target, r.index));
                FeatureFigure::from_numbers(&r.feature, &s, &g, r.kind == FeatureKind::Categorical)
            })
            .collect();
        FeaturesPart { rows, figures }
    }
}
