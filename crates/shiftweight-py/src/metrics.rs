//! Bindings of `shiftweight::metrics`: per-row losses, IWCV aggregation, the weighted-versus-
//! unweighted comparison and weighted metric intervals. Results come back as plain dicts.

use crate::{detached, vector, view, ShiftweightError};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::PyDict;
use shiftweight::metrics::{self, CrossValidated, IntervalMethod, Metric, WeightedMean};

fn folds(arr: &PyReadonlyArray1<'_, i64>) -> PyResult<Vec<usize>> {
    let s = arr
        .as_slice()
        .map_err(|_| ShiftweightError::new_err("`fold` must be a contiguous int64 vector"))?;
    s.iter()
        .enumerate()
        .map(|(i, &f)| {
            usize::try_from(f).map_err(|_| {
                ShiftweightError::new_err(format!("`fold` entry {i} is negative ({f})"))
            })
        })
        .collect()
}

fn mean_dict<'py>(py: Python<'py>, m: &WeightedMean) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("estimate", m.estimate)?;
    d.set_item("std_error", m.std_error)?;
    d.set_item("ess", m.ess)?;
    d.set_item("n", m.n)?;
    d.set_item("total_weight", m.total_weight)?;
    Ok(d)
}

fn cv_dict<'py>(py: Python<'py>, cv: &CrossValidated) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("estimate", cv.estimate)?;
    d.set_item("std_error", cv.std_error)?;
    d.set_item("unweighted_estimate", cv.unweighted_estimate)?;
    d.set_item("unweighted_std_error", cv.unweighted_std_error)?;
    let folds: Vec<Bound<'py, PyDict>> = cv
        .per_fold
        .iter()
        .map(|m| mean_dict(py, m))
        .collect::<PyResult<_>>()?;
    d.set_item("per_fold", folds)?;
    d.set_item("per_fold_unweighted", cv.per_fold_unweighted.clone())?;
    Ok(d)
}

/// Per-row values of a named metric (see `shiftweight::metrics::Metric::row_values`).
#[pyfunction]
fn metric_row_values<'py>(
    py: Python<'py>,
    metric: &str,
    y_true: PyReadonlyArray1<'py, f64>,
    y_pred: PyReadonlyArray2<'py, f64>,
) -> PyResult<Bound<'py, PyArray1<f64>>> {
    let yt = vector(&y_true, "y_true")?;
    let yp = view(&y_pred, "y_pred")?;
    let metric = metric.to_string();
    Ok(detached(py, move || Metric::from_name(&metric)?.row_values(yt, yp))?.into_pyarray(py))
}

/// (greater_is_better, needs_probabilities) of a named metric.
#[pyfunction]
fn metric_properties(metric: &str) -> PyResult<(bool, bool)> {
    let m = Metric::from_name(metric).map_err(crate::to_py)?;
    Ok((m.greater_is_better(), m.needs_probabilities()))
}

/// Cross-validated weighted estimate from held-out values, weights and fold indices.
#[pyfunction]
fn cross_validated<'py>(
    py: Python<'py>,
    values: PyReadonlyArray1<'py, f64>,
    weights: PyReadonlyArray1<'py, f64>,
    fold: PyReadonlyArray1<'py, i64>,
    n_folds: usize,
) -> PyResult<Bound<'py, PyDict>> {
    let v = vector(&values, "values")?;
    let w = vector(&weights, "weights")?;
    let f = folds(&fold)?;
    let cv = detached(py, move || metrics::cross_validated(v, w, &f, n_folds))?;
    cv_dict(py, &cv)
}

/// Mean of per-fold values and its standard error.
#[pyfunction]
fn fold_average(per_fold: Vec<f64>) -> PyResult<(f64, f64)> {
    metrics::fold_average(&per_fold).map_err(crate::to_py)
}

/// Paired comparison of weighted and unweighted training on the same held-out rows.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn compare_weighting<'py>(
    py: Python<'py>,
    with_weights: PyReadonlyArray1<'py, f64>,
    without_weights: PyReadonlyArray1<'py, f64>,
    weights: PyReadonlyArray1<'py, f64>,
    fold: PyReadonlyArray1<'py, i64>,
    n_folds: usize,
    greater_is_better: bool,
    z: f64,
) -> PyResult<Bound<'py, PyDict>> {
    let a = vector(&with_weights, "with_weights")?;
    let b = vector(&without_weights, "without_weights")?;
    let w = vector(&weights, "weights")?;
    let f = folds(&fold)?;
    let c = detached(py, move || {
        metrics::compare_weighting(a, b, w, &f, n_folds, greater_is_better, z)
    })?;
    let d = PyDict::new(py);
    d.set_item("weighted", cv_dict(py, &c.weighted)?)?;
    d.set_item("unweighted", cv_dict(py, &c.unweighted)?)?;
    d.set_item("difference", c.difference)?;
    d.set_item("difference_std_error", c.difference_std_error)?;
    d.set_item("verdict", c.verdict.name())?;
    Ok(d)
}

/// The comparison from per-fold values only: (difference, std_error, verdict).
#[pyfunction]
fn compare_weighting_per_fold(
    with_weights: Vec<f64>,
    without_weights: Vec<f64>,
    greater_is_better: bool,
    z: f64,
) -> PyResult<(f64, f64, &'static str)> {
    let (m, se, v) =
        metrics::compare_weighting_per_fold(&with_weights, &without_weights, greater_is_better, z)
            .map_err(crate::to_py)?;
    Ok((m, se, v.name()))
}

/// Weighted mean of per-row values with a confidence interval ("normal" or "bootstrap").
#[pyfunction]
#[pyo3(signature = (values, weights, confidence, method, n_boot, seed))]
fn metric_interval<'py>(
    py: Python<'py>,
    values: PyReadonlyArray1<'py, f64>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    confidence: f64,
    method: &str,
    n_boot: usize,
    seed: u64,
) -> PyResult<Bound<'py, PyDict>> {
    let v = vector(&values, "values")?;
    let w = match &weights {
        Some(w) => Some(vector(w, "weights")?),
        None => None,
    };
    let method = match method {
        "normal" => IntervalMethod::Normal,
        "bootstrap" => IntervalMethod::Bootstrap,
        other => {
            return Err(ShiftweightError::new_err(format!(
                "invalid value for `method`: {other:?}; use \"normal\" or \"bootstrap\""
            )))
        }
    };
    let r = detached(py, move || {
        metrics::metric_interval(v, w, confidence, method, n_boot, seed)
    })?;
    let d = mean_dict(py, &r.summary)?;
    d.set_item("lower", r.lower)?;
    d.set_item("upper", r.upper)?;
    d.set_item("confidence", r.confidence)?;
    Ok(d)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(metric_row_values, m)?)?;
    m.add_function(wrap_pyfunction!(metric_properties, m)?)?;
    m.add_function(wrap_pyfunction!(cross_validated, m)?)?;
    m.add_function(wrap_pyfunction!(fold_average, m)?)?;
    m.add_function(wrap_pyfunction!(compare_weighting, m)?)?;
    m.add_function(wrap_pyfunction!(compare_weighting_per_fold, m)?)?;
    m.add_function(wrap_pyfunction!(metric_interval, m)?)?;
    Ok(())
}
