//! Bindings of `shiftweight::demo`.

use numpy::PyArray2;
use numpy::{PyArray1, PyArrayMethods};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use shiftweight::table::{ColumnData, Table, MISSING_CODE};

fn matrix<'py>(py: Python<'py>, m: &shiftweight::Matrix) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let flat = PyArray1::from_slice(py, m.as_slice());
    flat.reshape([m.rows(), m.cols()])
}

/// The columns of a typed table as a list of `(name, values)` for numeric columns (float64, NaN =
/// missing) and `(name, (levels, codes))` for categorical ones (int64 codes, -1 = missing).
fn columns<'py>(py: Python<'py>, t: &Table) -> PyResult<Bound<'py, PyList>> {
    let out = PyList::empty(py);
    for c in t.columns() {
        match c.data() {
            ColumnData::Numeric(v) => out.append((c.name(), PyArray1::from_slice(py, v)))?,
            ColumnData::Categorical { levels, codes } => {
                let codes: Vec<i64> = codes
                    .iter()
                    .map(|&k| if k == MISSING_CODE { -1 } else { k as i64 })
                    .collect();
                out.append((c.name(), (levels.clone(), PyArray1::from_vec(py, codes))))?
            }
        }
    }
    Ok(out)
}

/// The invented electricity scenario as a dict of numpy arrays, with the typed tables' columns
/// under `source_columns` and `target_columns`.
#[pyfunction]
#[pyo3(signature = (n_source=2000, n_target=1000, seed=0))]
fn demo_electricity(
    py: Python<'_>,
    n_source: usize,
    n_target: usize,
    seed: u64,
) -> PyResult<Bound<'_, PyDict>> {
    let d = py.detach(|| shiftweight::demo::electricity(n_source, n_target, seed));
    let out = PyDict::new(py);
    out.set_item("feature_names", d.feature_names)?;
    out.set_item("source", matrix(py, &d.source)?)?;
    out.set_item("y_source", PyArray1::from_vec(py, d.y_source))?;
    out.set_item("target", matrix(py, &d.target)?)?;
    out.set_item("y_target", PyArray1::from_vec(py, d.y_target))?;
    out.set_item("source_columns", columns(py, &d.source_table)?)?;
    out.set_item("target_columns", columns(py, &d.target_table)?)?;
    Ok(out)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(demo_electricity, m)?)?;
    Ok(())
}
