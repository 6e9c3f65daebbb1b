//! Bindings of `shiftweight::weights`: stabilisation.

use crate::{detached, vector, ShiftweightError};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1};
use pyo3::prelude::*;
use shiftweight::weights::{stabilize as core_stabilize, StabilizeOptions};

/// Stabilises weights; returns the weights and the JSON record of what was done.
#[pyfunction]
#[pyo3(signature = (w, lower, upper, upper_quantile, truncate, power, smooth, normalize))]
#[allow(clippy::too_many_arguments)]
fn stabilize<'py>(
    py: Python<'py>,
    w: PyReadonlyArray1<'py, f64>,
    lower: Option<f64>,
    upper: Option<f64>,
    upper_quantile: Option<f64>,
    truncate: bool,
    power: f64,
    smooth: bool,
    normalize: bool,
) -> PyResult<(Bound<'py, PyArray1<f64>>, String)> {
    let wv = vector(&w, "weights")?;
    let options = StabilizeOptions {
        lower,
        upper,
        upper_quantile,
        truncate,
        power,
        smooth,
        normalize,
    };
    let out = detached(py, move || core_stabilize(wv, &options))?;
    let report = serde_json::to_string(&out.report)
        .map_err(|e| ShiftweightError::new_err(format!("could not serialise the report: {e}")))?;
    Ok((out.weights.into_pyarray(py), report))
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(stabilize, m)?)?;
    Ok(())
}
