//! Bindings of `shiftweight::label`: label shift. Each call converts arrays, runs the core with the
//! GIL released and returns the result as its JSON document (the Python layer wraps it); the
//! fitted estimate travels as that document, which `label_shift_adjust` reads back.

use crate::{detached, vector, view};
use numpy::{IntoPyArray, PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::label::{self, ClassMixTest, LabelShift, LabelShiftEstimate, LabelShiftMethod};
use shiftweight::Error;

/// Class codes from a float vector of whole numbers >= 0 (the Python layer encodes the labels).
fn codes(v: &[f64], name: &str) -> shiftweight::Result<Vec<usize>> {
    v.iter()
        .enumerate()
        .map(|(i, &y)| {
            if y.is_finite() && y >= 0.0 && y.fract() == 0.0 {
                Ok(y as usize)
            } else {
                Err(Error::param(
                    name,
                    format!("row {i} is {y}; class codes must be whole numbers >= 0"),
                ))
            }
        })
        .collect()
}

/// Estimates the target class proportions; returns the estimate's document.
#[pyfunction]
#[pyo3(signature = (source_probabilities, source_labels, target_probabilities, method, level, bootstrap, seed, max_iter, class_names))]
#[allow(clippy::too_many_arguments)]
fn label_shift_fit(
    py: Python<'_>,
    source_probabilities: PyReadonlyArray2<'_, f64>,
    source_labels: PyReadonlyArray1<'_, f64>,
    target_probabilities: PyReadonlyArray2<'_, f64>,
    method: &str,
    level: f64,
    bootstrap: usize,
    seed: u64,
    max_iter: usize,
    class_names: Option<Vec<String>>,
) -> PyResult<String> {
    let ps = view(&source_probabilities, "source_probabilities")?;
    let pt = view(&target_probabilities, "target_probabilities")?;
    let y = vector(&source_labels, "source_labels")?;
    let method = LabelShiftMethod::parse(method).map_err(crate::to_py)?;
    let mut est = LabelShift::new()
        .method(method)
        .level(level)
        .bootstrap(bootstrap)
        .seed(seed)
        .max_iter(max_iter);
    if let Some(names) = class_names {
        est = est.class_names(names);
    }
    detached(py, move || {
        let labels = codes(y, "source_labels")?;
        est.fit(ps, &labels, pt)?.to_json()
    })
}

/// Prior-adjusted probabilities p_t(y | x) of the estimate in `document`.
#[pyfunction]
fn label_shift_adjust<'py>(
    py: Python<'py>,
    document: &str,
    probabilities: PyReadonlyArray2<'py, f64>,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let p = view(&probabilities, "probabilities")?;
    let m = detached(py, move || {
        LabelShiftEstimate::from_json(document)?.adjust(p)
    })?;
    let (n, k) = (m.rows(), m.cols());
    m.into_vec().into_pyarray(py).reshape([n, k])
}

/// Predicted-class mix test; returns the result document.
#[pyfunction]
#[pyo3(signature = (source_probabilities, target_probabilities, permutations, min_expected, seed))]
fn class_mix_test(
    py: Python<'_>,
    source_probabilities: PyReadonlyArray2<'_, f64>,
    target_probabilities: PyReadonlyArray2<'_, f64>,
    permutations: usize,
    min_expected: f64,
    seed: u64,
) -> PyResult<String> {
    let ps = view(&source_probabilities, "source_probabilities")?;
    let pt = view(&target_probabilities, "target_probabilities")?;
    let test = ClassMixTest::new()
        .permutations(permutations)
        .min_expected(min_expected)
        .seed(seed);
    detached(py, move || test.run(ps, pt)?.to_json())
}

/// Row indices of a source subsample whose class mix is `proportions`.
#[pyfunction]
fn class_matched_rows<'py>(
    py: Python<'py>,
    labels: PyReadonlyArray1<'py, f64>,
    proportions: PyReadonlyArray1<'py, f64>,
    seed: u64,
) -> PyResult<Bound<'py, PyArray1<i64>>> {
    let (y, q) = (
        vector(&labels, "labels")?,
        vector(&proportions, "proportions")?,
    );
    let rows = detached(py, move || {
        label::class_matched_rows(&codes(y, "labels")?, q, seed)
    })?;
    Ok(rows
        .into_iter()
        .map(|i| i as i64)
        .collect::<Vec<i64>>()
        .into_pyarray(py))
}

/// Fold index (0..k) of each row, stratified by class (`data::stratified_kfold_assignment`).
#[pyfunction]
fn stratified_kfold_assignment<'py>(
    py: Python<'py>,
    labels: PyReadonlyArray1<'py, f64>,
    k: usize,
    seed: u64,
) -> PyResult<Bound<'py, PyArray1<i64>>> {
    let y = vector(&labels, "labels")?;
    let f = detached(py, move || {
        shiftweight::data::stratified_kfold_assignment(&codes(y, "labels")?, k, seed)
    })?;
    Ok(f.into_iter()
        .map(|v| v as i64)
        .collect::<Vec<i64>>()
        .into_pyarray(py))
}

/// Reads and checks a label-shift document; returns it re-serialised.
#[pyfunction]
fn label_shift_from_json(text: &str) -> PyResult<String> {
    LabelShiftEstimate::from_json(text)
        .and_then(|m| m.to_json())
        .map_err(crate::to_py)
}

/// Reads and checks a class-mix test document; returns it re-serialised.
#[pyfunction]
fn class_mix_test_from_json(text: &str) -> PyResult<String> {
    label::ClassMixTestResult::from_json(text)
        .and_then(|m| m.to_json())
        .map_err(crate::to_py)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(label_shift_fit, m)?)?;
    m.add_function(wrap_pyfunction!(label_shift_adjust, m)?)?;
    m.add_function(wrap_pyfunction!(class_mix_test, m)?)?;
    m.add_function(wrap_pyfunction!(class_matched_rows, m)?)?;
    m.add_function(wrap_pyfunction!(stratified_kfold_assignment, m)?)?;
    m.add_function(wrap_pyfunction!(label_shift_from_json, m)?)?;
    m.add_function(wrap_pyfunction!(class_mix_test_from_json, m)?)?;
    m.add("TELLING_APART", label::TELLING_APART)?;
    m.add("LABEL_SHIFT_CAUTION", label::LABEL_SHIFT_CAUTION)?;
    Ok(())
}
