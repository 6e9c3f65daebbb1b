//! Bindings of `shiftweight::learn`: weighted logistic and ridge regression, on matrices and on
//! typed tables (conversion only; the encoding lives in the core).

use crate::table::PyTable;
use crate::{detached, to_py, vector, view};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::learn::{
    LinearKind, LinearModel as CoreLinear, TablePredictions, WeightedLogistic, WeightedRidge,
};
use std::sync::Arc;

/// Values at the rows of a table with the unseen values as (column, level or None, rows,
/// first_row).
type TableOut<'py> = (
    Bound<'py, PyArray1<f64>>,
    Vec<(String, Option<String>, usize, usize)>,
);

fn table_out(py: Python<'_>, p: TablePredictions) -> TableOut<'_> {
    let unseen = p
        .unseen
        .into_iter()
        .map(|u| (u.column, u.level, u.rows, u.first_row))
        .collect();
    (p.values.into_pyarray(py), unseen)
}

/// A fitted weighted linear model (logistic or ridge).
#[pyclass(module = "shiftweight._native", frozen, name = "LinearModel")]
pub struct LinearModel {
    inner: Arc<CoreLinear>,
}

impl LinearModel {
    fn wrap(inner: CoreLinear) -> Self {
        Self {
            inner: Arc::new(inner),
        }
    }
}

#[pymethods]
impl LinearModel {
    #[getter]
    fn coef<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        PyArray1::from_slice(py, &self.inner.coef)
    }
    #[getter]
    fn intercept(&self) -> f64 {
        self.inner.intercept
    }
    #[getter]
    fn kind(&self) -> &'static str {
        match self.inner.kind {
            LinearKind::Logistic => "logistic",
            LinearKind::Ridge => "ridge",
        }
    }
    #[getter]
    fn l2(&self) -> f64 {
        self.inner.l2
    }
    #[getter]
    fn n_iter(&self) -> usize {
        self.inner.n_iter
    }
    /// Encoded column names of a model fitted on a table, else None.
    #[getter]
    fn feature_names(&self) -> Option<Vec<String>> {
        self.inner.feature_names()
    }
    /// The table columns a model fitted on a table reads, as (name, type), else None.
    #[getter]
    fn schema(&self) -> Option<Vec<(String, &'static str)>> {
        self.inner.schema().map(|s| {
            s.into_iter()
                .map(|(n, k)| (n.to_string(), k.name()))
                .collect()
        })
    }
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings.clone()
    }
    fn decision_function_table<'py>(
        &self,
        py: Python<'py>,
        x: &PyTable,
    ) -> PyResult<TableOut<'py>> {
        let (m, t) = (self.inner.clone(), x.inner.clone());
        Ok(table_out(
            py,
            detached(py, move || m.decision_function_table(&t))?,
        ))
    }
    fn predict_table<'py>(&self, py: Python<'py>, x: &PyTable) -> PyResult<TableOut<'py>> {
        let (m, t) = (self.inner.clone(), x.inner.clone());
        Ok(table_out(py, detached(py, move || m.predict_table(&t))?))
    }
    fn predict_proba_table<'py>(&self, py: Python<'py>, x: &PyTable) -> PyResult<TableOut<'py>> {
        let (m, t) = (self.inner.clone(), x.inner.clone());
        Ok(table_out(
            py,
            detached(py, move || m.predict_proba_table(&t))?,
        ))
    }
    fn decision_function<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xv = view(&x, "X")?;
        Ok(detached(py, || self.inner.decision_function(xv))?.into_pyarray(py))
    }
    fn predict<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xv = view(&x, "X")?;
        Ok(detached(py, || self.inner.predict(xv))?.into_pyarray(py))
    }
    fn predict_proba<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xv = view(&x, "X")?;
        Ok(detached(py, || self.inner.predict_proba(xv))?.into_pyarray(py))
    }
    fn to_json(&self) -> PyResult<String> {
        self.inner.to_json().map_err(to_py)
    }
    #[staticmethod]
    fn from_json(text: &str) -> PyResult<Self> {
        CoreLinear::from_json(text).map(Self::wrap).map_err(to_py)
    }
    fn __reduce__(slf: &Bound<'_, Self>) -> PyResult<(Py<PyAny>, (String,))> {
        let f = slf
            .py()
            .get_type::<LinearModel>()
            .getattr("from_json")?
            .unbind();
        Ok((f, (slf.get().inner.to_json().map_err(to_py)?,)))
    }
}

/// Fits importance-weighted binary logistic regression (labels 0/1).
#[pyfunction]
#[pyo3(signature = (x, y, sample_weight, l2, max_iter))]
fn fit_weighted_logistic(
    py: Python<'_>,
    x: PyReadonlyArray2<'_, f64>,
    y: PyReadonlyArray1<'_, f64>,
    sample_weight: Option<PyReadonlyArray1<'_, f64>>,
    l2: f64,
    max_iter: usize,
) -> PyResult<LinearModel> {
    let xv = view(&x, "X")?;
    let yv = vector(&y, "y")?;
    let wv = match &sample_weight {
        Some(w) => Some(vector(w, "sample_weight")?),
        None => None,
    };
    let est = WeightedLogistic::new().l2(l2).max_iter(max_iter);
    detached(py, move || est.fit(xv, yv, wv)).map(LinearModel::wrap)
}

/// Fits importance-weighted ridge regression.
#[pyfunction]
#[pyo3(signature = (x, y, sample_weight, l2))]
fn fit_weighted_ridge(
    py: Python<'_>,
    x: PyReadonlyArray2<'_, f64>,
    y: PyReadonlyArray1<'_, f64>,
    sample_weight: Option<PyReadonlyArray1<'_, f64>>,
    l2: f64,
) -> PyResult<LinearModel> {
    let xv = view(&x, "X")?;
    let yv = vector(&y, "y")?;
    let wv = match &sample_weight {
        Some(w) => Some(vector(w, "sample_weight")?),
        None => None,
    };
    let est = WeightedRidge::new().l2(l2);
    detached(py, move || est.fit(xv, yv, wv)).map(LinearModel::wrap)
}

/// Fits importance-weighted binary logistic regression (labels 0/1) on a typed table.
#[pyfunction]
#[pyo3(signature = (x, y, sample_weight, l2, max_iter))]
fn fit_weighted_logistic_table(
    py: Python<'_>,
    x: &PyTable,
    y: PyReadonlyArray1<'_, f64>,
    sample_weight: Option<PyReadonlyArray1<'_, f64>>,
    l2: f64,
    max_iter: usize,
) -> PyResult<LinearModel> {
    let t = x.inner.clone();
    let yv = vector(&y, "y")?;
    let wv = match &sample_weight {
        Some(w) => Some(vector(w, "sample_weight")?),
        None => None,
    };
    let est = WeightedLogistic::new().l2(l2).max_iter(max_iter);
    detached(py, move || est.fit_table(&t, yv, wv)).map(LinearModel::wrap)
}

/// Fits importance-weighted ridge regression on a typed table.
#[pyfunction]
#[pyo3(signature = (x, y, sample_weight, l2))]
fn fit_weighted_ridge_table(
    py: Python<'_>,
    x: &PyTable,
    y: PyReadonlyArray1<'_, f64>,
    sample_weight: Option<PyReadonlyArray1<'_, f64>>,
    l2: f64,
) -> PyResult<LinearModel> {
    let t = x.inner.clone();
    let yv = vector(&y, "y")?;
    let wv = match &sample_weight {
        Some(w) => Some(vector(w, "sample_weight")?),
        None => None,
    };
    let est = WeightedRidge::new().l2(l2);
    detached(py, move || est.fit_table(&t, yv, wv)).map(LinearModel::wrap)
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<LinearModel>()?;
    m.add_function(wrap_pyfunction!(fit_weighted_logistic, m)?)?;
    m.add_function(wrap_pyfunction!(fit_weighted_ridge, m)?)?;
    m.add_function(wrap_pyfunction!(fit_weighted_logistic_table, m)?)?;
    m.add_function(wrap_pyfunction!(fit_weighted_ridge_table, m)?)?;
    Ok(())
}
