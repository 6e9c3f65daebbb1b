//! Bindings of `shiftweight::diagnostics`: ESS, Pareto k, diagnosis, clipping trade-off, overlap.
//! Results cross into Python as JSON documents (the Python layer wraps them in classes).

use crate::{detached, to_py, vector, ShiftweightError};
use numpy::PyReadonlyArray1;
use pyo3::prelude::*;
use shiftweight::diagnostics::{self as core, Diagnosis, Groups};

fn json(v: Result<String, serde_json::Error>) -> PyResult<String> {
    v.map_err(|e| ShiftweightError::new_err(format!("could not serialise the result: {e}")))
}

/// Kish effective sample size.
#[pyfunction]
fn effective_sample_size(py: Python<'_>, w: PyReadonlyArray1<'_, f64>) -> PyResult<f64> {
    let wv = vector(&w, "weights")?;
    detached(py, move || core::effective_sample_size(wv))
}

/// An effective sample size in words by the one rule of reports and messages
/// (`shiftweight::diagnostics::ess_words`): whole rows and their share of `n`.
#[pyfunction]
fn ess_words(ess: f64, n: usize, rows: &str) -> String {
    core::ess_words(ess, n, rows)
}

/// Pareto k of the upper tail, as the JSON of the tail fit.
#[pyfunction]
fn pareto_k(py: Python<'_>, w: PyReadonlyArray1<'_, f64>) -> PyResult<String> {
    let wv = vector(&w, "weights")?;
    json(serde_json::to_string(&detached(py, move || {
        core::pareto_k(wv)
    })?))
}

/// Full diagnosis as a `shiftweight.weight-diagnosis` document. `codes` (one per row, in
/// 0..len(names)) and `names` give optional row groups.
#[pyfunction]
#[pyo3(signature = (w, codes=None, names=None))]
fn diagnose(
    py: Python<'_>,
    w: PyReadonlyArray1<'_, f64>,
    codes: Option<PyReadonlyArray1<'_, i64>>,
    names: Option<Vec<String>>,
) -> PyResult<String> {
    let wv = vector(&w, "weights")?;
    let codes: Option<Vec<usize>> = match &codes {
        Some(c) => {
            let s = c.as_slice().map_err(|_| {
                ShiftweightError::new_err("`groups` codes must be a contiguous int64 vector")
            })?;
            Some(
                s.iter()
                    .enumerate()
                    .map(|(i, v)| {
                        usize::try_from(*v).map_err(|_| {
                            ShiftweightError::new_err(format!(
                                "`groups` code at row {i} is negative"
                            ))
                        })
                    })
                    .collect::<PyResult<_>>()?,
            )
        }
        None => None,
    };
    let names = names.unwrap_or_default();
    let d = detached(py, || {
        let groups = codes.as_deref().map(|c| Groups {
            codes: c,
            names: &names,
        });
        core::diagnose(wv, groups)
    })?;
    d.to_json().map_err(to_py)
}

/// Checks and re-emits a diagnosis document (rejects other formats and versions).
#[pyfunction]
fn diagnosis_from_json(text: &str) -> PyResult<String> {
    Diagnosis::from_json(text)
        .and_then(|d| d.to_json())
        .map_err(to_py)
}

/// Clipping trade-off table as a `shiftweight.clip-tradeoff` document.
#[pyfunction]
#[pyo3(signature = (w, quantiles=None))]
fn clip_tradeoff(
    py: Python<'_>,
    w: PyReadonlyArray1<'_, f64>,
    quantiles: Option<Vec<f64>>,
) -> PyResult<String> {
    let wv = vector(&w, "weights")?;
    detached(py, move || {
        core::clip_tradeoff(wv, quantiles.as_deref())?.to_json()
    })
}

/// The least clipping reaching an ESS fraction, as the JSON of one trade-off row.
#[pyfunction]
fn clip_for_ess(
    py: Python<'_>,
    w: PyReadonlyArray1<'_, f64>,
    ess_fraction: f64,
) -> PyResult<String> {
    let wv = vector(&w, "weights")?;
    json(serde_json::to_string(&detached(py, move || {
        core::clip_for_ess(wv, ess_fraction)
    })?))
}

/// Support-overlap check from ratios at the target rows (`shiftweight.overlap-report`).
#[pyfunction]
fn check_overlap(
    py: Python<'_>,
    target_ratios: PyReadonlyArray1<'_, f64>,
    limit: f64,
    tolerance: f64,
) -> PyResult<String> {
    let r = vector(&target_ratios, "target_ratios")?;
    detached(py, move || {
        core::check_overlap(r, limit, tolerance)?.to_json()
    })
}

/// Support-overlap check from classifier probabilities p(target | x) at the target rows.
#[pyfunction]
fn check_overlap_probabilities(
    py: Python<'_>,
    probabilities: PyReadonlyArray1<'_, f64>,
    n_source: usize,
    n_target: usize,
    limit: f64,
    tolerance: f64,
) -> PyResult<String> {
    let p = vector(&probabilities, "probabilities")?;
    detached(py, move || {
        core::check_overlap_probabilities(p, n_source, n_target, limit, tolerance)?.to_json()
    })
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(effective_sample_size, m)?)?;
    m.add_function(wrap_pyfunction!(ess_words, m)?)?;
    m.add_function(wrap_pyfunction!(pareto_k, m)?)?;
    m.add_function(wrap_pyfunction!(diagnose, m)?)?;
    m.add_function(wrap_pyfunction!(diagnosis_from_json, m)?)?;
    m.add_function(wrap_pyfunction!(clip_tradeoff, m)?)?;
    m.add_function(wrap_pyfunction!(clip_for_ess, m)?)?;
    m.add_function(wrap_pyfunction!(check_overlap, m)?)?;
    m.add_function(wrap_pyfunction!(check_overlap_probabilities, m)?)?;
    Ok(())
}
