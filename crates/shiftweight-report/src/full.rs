//! The full report of a source/target matrix pair and the inputs it shares with the typed-table
//! report ([`crate::full_report_table`]): where the weights come from ([`WeightSource`]), how they
//! are resolved to one weight per source row, and how they fill the estimator, weights and
//! clipping sections.

use crate::shift::shift_sections;
use crate::{weight_sections, EstimatorPart, Part, Report, ShiftOptions};
use shiftweight::ratio::{AutoRatio, RatioEstimator};
use shiftweight::{FittedRatio, MatrixView};

/// What the weights of a full report come from.
pub enum WeightSource<'a> {
    /// Fit the automatic choice ([`AutoRatio`] with the report's seed).
    Automatic,
    /// A fitted model: its weights of the source rows.
    Model(&'a FittedRatio),
    /// Weights given by the caller, one per source row.
    Given(&'a [f64]),
}

/// The full report of a source/target pair: shift test, feature table, the weights (fitted
/// automatically, from a model, or given) with their diagnostics and clipping trade-off. The
/// command line's `report` and the Python package's `write_report` both call this, so the same
/// inputs and seed give the same report.
pub fn full_report(
    command: &str,
    source: MatrixView,
    target: MatrixView,
    names: &[String],
    weights: WeightSource<'_>,
    opts: &ShiftOptions,
    seed: u64,
) -> shiftweight::Result<Report> {
    let mut report = Report::new(command, seed);
    report.features_used = names.to_vec();
    let (shift, features) = shift_sections(source, target, names, opts, seed)?;
    report.shift = Part::Available(shift);
    report.features = features;
    let mut fitted = None;
    let (model, w) = resolve_weights(
        weights,
        source.rows(),
        &mut fitted,
        || AutoRatio::new().seed(seed).fit(source, target),
        |m| m.ratio(source),
    )?;
    weights_into(&mut report, model, &w);
    Ok(report)
}

/// The model a report describes (None for given weights) and the source weights it shows.
/// `fit` runs for [`WeightSource::Automatic`], its model kept in `fitted`; `score` runs when a
/// model's stored weights are not of these `n_source` rows; given weights need one per row.
pub(crate) fn resolve_weights<'a>(
    weights: WeightSource<'a>,
    n_source: usize,
    fitted: &'a mut Option<FittedRatio>,
    fit: impl FnOnce() -> shiftweight::Result<FittedRatio>,
    score: impl FnOnce(&FittedRatio) -> shiftweight::Result<Vec<f64>>,
) -> shiftweight::Result<(Option<&'a FittedRatio>, Vec<f64>)> {
    let model: &'a FittedRatio = match weights {
        WeightSource::Given(w) => {
            if w.len() != n_source {
                return Err(shiftweight::Error::LengthMismatch {
                    argument: "weights".into(),
                    expected: n_source,
                    found: w.len(),
                });
            }
            return Ok((None, w.to_vec()));
        }
        WeightSource::Model(m) => m,
        WeightSource::Automatic => fitted.insert(fit()?),
    };
    let w = if model.source_weights.len() == n_source {
        model.source_weights.clone()
    } else {
        score(model)?
    };
    Ok((Some(model), w))
}

/// Fills the estimator, weights and clipping sections from the model (if any) and the weights.
pub(crate) fn weights_into(report: &mut Report, model: Option<&FittedRatio>, w: &[f64]) {
    report.estimator = match model {
        Some(m) => Part::Available(EstimatorPart::from_model(m)),
        None => Part::missing("the weights were given, not estimated here"),
    };
    let (wp, clip) = weight_sections(w, w, "none (as estimated or given)");
    report.weights = Part::Available(wp);
    report.clipping = clip;
}
