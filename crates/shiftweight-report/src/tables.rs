//! The full report of two typed tables (numeric and categorical columns, missing values): the
//! entry point of the command line's `report` and of the Python package's `write_report` on data
//! frames, so both give the same report for the same tables and seed.
//!
//! Tables whose columns are all numeric without gaps take exactly the path of [`full_report`]
//! (same matrix, same numbers). Otherwise the core's typed path is used throughout: the shift test
//! runs on the encoding fitted on the pooled rows ([`shiftweight::table::encode_pair`]: standardised
//! numbers with missing indicators, one-hot levels), the feature table tests each column by its
//! type ([`shiftweight::FeatureShift::run_table`]: Kolmogorov-Smirnov, chi-square, missing-rate
//! tests), the figures show each column as it is in the data (histograms of numbers, shares of
//! levels), the automatic choice is fitted through `fit_table`, and target rows with a level or a
//! missing value the source never has are named in the weights' warnings (no weighting covers
//! them). Cost: that of the test, the feature table and the fit; the report adds a pass over the
//! rows.

use crate::{
    full_report, resolve_weights, run_test, weights_into, FeatureFigure, FeaturesPart, Part,
    Report, ShiftOptions, ShiftPart, WeightSource,
};
use shiftweight::ratio::{AutoRatio, RatioEstimator};
use shiftweight::table::{encode_pair, support_gaps, Column, ColumnData, Table};
use shiftweight::{FeatureShift, MatrixView};

impl FeatureFigure {
    /// The figure of one column in source and target: histograms (or level shares, for few
    /// distinct values) of a numeric column, level shares of a categorical one, missing values
    /// left out. `None` when the two columns are of different kinds.
    pub fn from_columns(source: &Column, target: &Column) -> Option<Self> {
        if let (ColumnData::Numeric(s), ColumnData::Numeric(t)) = (source.data(), target.data()) {
            return Some(FeatureFigure::from_numbers(source.name(), s, t, false));
        }
        source.categories().and(target.categories())?;
        Some(FeatureFigure::from_levels(
            source.name(),
            &level_text(source),
            &level_text(target),
        ))
    }
}

/// The level of each row of a categorical column, `None` for a missing value.
fn level_text(c: &Column) -> Vec<Option<&str>> {
    (0..c.len()).map(|i| c.level(i)).collect()
}

/// The row-major matrix of a table whose columns are all numeric.
fn numeric_matrix(t: &Table) -> Vec<f64> {
    let cols: Vec<&[f64]> = t
        .columns()
        .iter()
        .filter_map(|c| match c.data() {
            ColumnData::Numeric(v) => Some(v.as_slice()),
            ColumnData::Categorical { .. } => None,
        })
        .collect();
    let mut out = Vec::with_capacity(t.rows() * cols.len());
    for i in 0..t.rows() {
        out.extend(cols.iter().map(|c| c[i]));
    }
    out
}

/// The full report of a source/target pair of typed tables (see the module documentation): the
/// shift test, the feature table with a figure per most shifted column, the weights (fitted
/// automatically with `seed`, from a model, or given) with their diagnostics and clipping
/// trade-off. The target's columns are found by the source's names.
pub fn full_report_table(
    command: &str,
    source: &Table,
    target: &Table,
    weights: WeightSource<'_>,
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<Report> {
    let names: Vec<String> = source.names().iter().map(|s| s.to_string()).collect();
    if source.is_plain_numeric() && target.is_plain_numeric() {
        // Same columns in the same order as the source, by name.
        let cols = names
            .iter()
            .map(|n| {
                target.column(n).cloned().ok_or_else(|| {
                    shiftweight::Error::param("target", format!("has no column `{n}`"))
                })
            })
            .collect::<shiftweight::Result<Vec<_>>>()?;
        let target = Table::new(cols)?;
        let (s, t) = (numeric_matrix(source), numeric_matrix(&target));
        let d = names.len();
        return full_report(
            command,
            MatrixView::named(&s, source.rows(), d, "source")?,
            MatrixView::named(&t, target.rows(), d, "target")?,
            &names,
            weights,
            opts,
            seed,
        );
    }
    let mut report = Report::new(command, seed);
    report.features_used = names;
    let (_, zs, zt, _) = encode_pair(source, target)?;
    let result = run_test(zs.view(), zt.view(), opts, seed)?;
    report.shift = Part::Available(ShiftPart::from_test(&result, opts.level));
    report.features = match FeatureShift::new().seed(seed).run_table(source, target) {
        Ok(t) => Part::Available(FeaturesPart::from_typed_table(&t, |r| {
            FeatureFigure::from_columns(source.column(&r.feature)?, target.column(&r.feature)?)
        })),
        Err(e) => Part::missing(format!("per-feature shift failed: {e}")),
    };
    let mut fitted = None;
    let (model, w) = resolve_weights(
        weights,
        source.rows(),
        &mut fitted,
        || AutoRatio::new().seed(seed).fit_table(source, target),
        |m| Ok(m.ratio_table(source)?.weights),
    )?;
    weights_into(&mut report, model, &w);
    if let Part::Available(wp) = &mut report.weights {
        let gaps = support_gaps(source, target)?;
        let n_target = target.rows();
        wp.warnings
            .splice(0..0, gaps.iter().map(|g| g.describe(n_target)));
        wp.uncovered = gaps
            .iter()
            .map(|g| {
                let what = match &g.level {
                    Some(l) => format!("{l:?}"),
                    None => "missing".to_string(),
                };
                format!(
                    "{} = {what}: {} of {n_target} target rows",
                    g.column, g.target_rows
                )
            })
            .collect();
    }
    Ok(report)
}
