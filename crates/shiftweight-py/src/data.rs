//! Bindings of `shiftweight::data`: the shared seeded fold assignment.

use crate::to_py;
use numpy::{IntoPyArray, PyArray1};
use pyo3::prelude::*;

/// Fold index (0..k) of each of `n` rows, in a seeded random order (`data::kfold_assignment`).
#[pyfunction]
fn kfold_assignment(
    py: Python<'_>,
    n: usize,
    k: usize,
    seed: u64,
) -> PyResult<Bound<'_, PyArray1<i64>>> {
    let f = shiftweight::data::kfold_assignment(n, k, seed).map_err(to_py)?;
    Ok(f.into_iter()
        .map(|v| v as i64)
        .collect::<Vec<i64>>()
        .into_pyarray(py))
}

/// Checks importance weights (`data::validate_weights`): length, finite, non-negative, not all zero.
#[pyfunction]
fn validate_weights(w: numpy::PyReadonlyArray1<'_, f64>, n: usize, name: &str) -> PyResult<()> {
    let v = crate::vector(&w, name)?;
    shiftweight::data::validate_weights(v, n, name).map_err(to_py)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(kfold_assignment, m)?)?;
    m.add_function(wrap_pyfunction!(validate_weights, m)?)?;
    Ok(())
}
