//! Bindings of `shiftweight::conformal`: weighted split conformal intervals and class sets.

use crate::{detached, vector, view};
use numpy::{IntoPyArray, PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::conformal;

type Intervals<'py> = (
    Bound<'py, PyArray1<f64>>,
    Bound<'py, PyArray1<f64>>,
    Bound<'py, PyArray1<f64>>,
    usize,
);

fn opt<'a>(w: &'a Option<PyReadonlyArray1<'_, f64>>, name: &str) -> PyResult<Option<&'a [f64]>> {
    match w {
        Some(w) => Ok(Some(vector(w, name)?)),
        None => Ok(None),
    }
}

/// Regression intervals: (lower, upper, threshold, n_infinite).
#[pyfunction]
#[pyo3(signature = (y_cal, pred_cal, cal_weights, pred, weights, alpha))]
fn conformal_intervals<'py>(
    py: Python<'py>,
    y_cal: PyReadonlyArray1<'py, f64>,
    pred_cal: PyReadonlyArray1<'py, f64>,
    cal_weights: Option<PyReadonlyArray1<'py, f64>>,
    pred: PyReadonlyArray1<'py, f64>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    alpha: f64,
) -> PyResult<Intervals<'py>> {
    let y = vector(&y_cal, "y_cal")?;
    let pc = vector(&pred_cal, "calibration predictions")?;
    let cw = opt(&cal_weights, "cal_weights")?;
    let p = vector(&pred, "predictions")?;
    let w = opt(&weights, "weights")?;
    let r = detached(py, move || {
        conformal::regression_intervals(y, pc, cw, p, w, alpha)
    })?;
    Ok((
        r.lower.into_pyarray(py),
        r.upper.into_pyarray(py),
        r.threshold.into_pyarray(py),
        r.n_infinite,
    ))
}

/// Class sets: (membership matrix m x k of bool, threshold, n_infinite).
#[pyfunction]
#[pyo3(signature = (proba_cal, label_cal, cal_weights, proba, weights, alpha))]
#[allow(clippy::type_complexity)]
fn conformal_sets<'py>(
    py: Python<'py>,
    proba_cal: PyReadonlyArray2<'py, f64>,
    label_cal: PyReadonlyArray1<'py, f64>,
    cal_weights: Option<PyReadonlyArray1<'py, f64>>,
    proba: PyReadonlyArray2<'py, f64>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    alpha: f64,
) -> PyResult<(Bound<'py, PyArray2<bool>>, Bound<'py, PyArray1<f64>>, usize)> {
    let pc = view(&proba_cal, "calibration probabilities")?;
    let y = vector(&label_cal, "y_cal")?;
    let cw = opt(&cal_weights, "cal_weights")?;
    let p = view(&proba, "probabilities")?;
    let w = opt(&weights, "weights")?;
    let m = p.rows();
    let r = detached(py, move || {
        conformal::classification_sets(pc, y, cw, p, w, alpha)
    })?;
    let k = r.n_classes;
    let members = r.members.into_pyarray(py).reshape([m, k])?;
    Ok((members, r.threshold.into_pyarray(py), r.n_infinite))
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(conformal_intervals, m)?)?;
    m.add_function(wrap_pyfunction!(conformal_sets, m)?)?;
    Ok(())
}
