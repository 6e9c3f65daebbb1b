//! Bindings of `shiftweight::ratio`: the fitted model class and one fit function per estimator.

use crate::{detached, to_py, view};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use shiftweight::ratio::{FittedRatio, RatioEstimator};
use shiftweight::{KLRatio, KernelMeanMatching, KliepCv, LeastSquaresRatio};
use std::sync::Arc;

/// A fitted density-ratio model (immutable; safe to share between threads).
#[pyclass(module = "shiftweight._native", frozen, name = "RatioModel")]
pub struct RatioModel {
    pub(crate) inner: Arc<FittedRatio>,
}

impl RatioModel {
    pub(crate) fn wrap(m: FittedRatio) -> Self {
        Self { inner: Arc::new(m) }
    }
}

#[pymethods]
impl RatioModel {
    /// w(x) at every row of a C-contiguous float64 matrix; the GIL is released while scoring.
    fn ratio<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xv = view(&x, "X")?;
        let m = self.inner.clone();
        let out = detached(py, move || m.ratio(xv))?;
        Ok(out.into_pyarray(py))
    }
    /// Weights of the source rows used in the fit.
    #[getter]
    fn source_weights<'py>(&self, py: Python<'py>) -> Bound<'py, PyArray1<f64>> {
        PyArray1::from_slice(py, &self.inner.source_weights)
    }
    /// Estimator kind name.
    #[getter]
    fn kind(&self) -> &'static str {
        self.inner.kind.name()
    }
    /// Number of features.
    #[getter]
    fn n_features(&self) -> usize {
        self.inner.n_features()
    }
    /// Feature names recorded at fit time, if any.
    #[getter]
    fn feature_names(&self) -> Option<Vec<String>> {
        self.inner.meta.feature_names.clone()
    }
    /// Warnings raised during the fit.
    #[getter]
    fn warnings(&self) -> Vec<String> {
        self.inner.warnings.clone()
    }
    /// Selection record: {"criterion", "chosen": {...}, "table": [{params..., "score"}]}.
    #[getter]
    fn selection<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let s = &self.inner.selection;
        let d = PyDict::new(py);
        d.set_item("criterion", &s.criterion)?;
        d.set_item("chosen", s.chosen.clone())?;
        let rows = PyList::empty(py);
        for r in &s.table {
            let row = PyDict::new(py);
            for (k, v) in &r.params {
                row.set_item(k, v)?;
            }
            row.set_item("score", r.score)?;
            rows.append(row)?;
        }
        d.set_item("table", rows)?;
        Ok(d)
    }
    /// Fit metadata: row counts, features, seed, library version.
    #[getter]
    fn meta<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let m = &self.inner.meta;
        let d = PyDict::new(py);
        d.set_item("n_source", m.n_source)?;
        d.set_item("n_target", m.n_target)?;
        d.set_item("n_features", m.n_features)?;
        d.set_item("seed", m.seed)?;
        d.set_item("library_version", &m.library_version)?;
        d.set_item("feature_names", m.feature_names.clone())?;
        Ok(d)
    }
    /// The versioned JSON model document.
    fn to_json(&self) -> PyResult<String> {
        self.inner.to_json().map_err(to_py)
    }
    /// Loads a model document (format and version checked).
    #[staticmethod]
    fn from_json(py: Python<'_>, text: String) -> PyResult<Self> {
        detached(py, move || FittedRatio::from_json(&text)).map(Self::wrap)
    }
    fn __reduce__(slf: &Bound<'_, Self>) -> PyResult<(Py<PyAny>, (String,))> {
        let py = slf.py();
        let f = py.get_type::<RatioModel>().getattr("from_json")?.unbind();
        Ok((f, (slf.get().inner.to_json().map_err(to_py)?,)))
    }
    fn __repr__(&self) -> String {
        format!(
            "RatioModel(kind={:?}, n_features={}, n_source={}, n_target={})",
            self.inner.kind.name(),
            self.inner.n_features(),
            self.inner.meta.n_source,
            self.inner.meta.n_target
        )
    }
}

/// Records feature names in a fitted model.
pub(crate) fn with_names(mut m: FittedRatio, names: Option<Vec<String>>) -> FittedRatio {
    m.meta.feature_names = names;
    m
}

/// Fits uLSIF / RuLSIF. See `shiftweight.LeastSquaresRatio` for the parameters.
#[pyfunction]
#[pyo3(signature = (source, target, sigma, lam, n_basis, alpha, seed, sigma_multiples, lambda_grid, max_cv_rows, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_least_squares(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    sigma: Option<f64>,
    lam: Option<f64>,
    n_basis: usize,
    alpha: f64,
    seed: u64,
    sigma_multiples: Vec<f64>,
    lambda_grid: Vec<f64>,
    max_cv_rows: usize,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = LeastSquaresRatio::new()
        .sigma(sigma)
        .lam(lam)
        .n_basis(n_basis)
        .alpha(alpha)
        .seed(seed)
        .sigma_multiples(sigma_multiples)
        .lambda_grid(lambda_grid)
        .max_cv_rows(max_cv_rows);
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// Fits KLIEP. See `shiftweight.KLRatio` for the parameters.
#[pyfunction]
#[pyo3(signature = (source, target, sigma, n_basis, folds, seed, cv, sigma_multiples, tol, max_iter, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_kliep(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    sigma: Option<f64>,
    n_basis: usize,
    folds: usize,
    seed: u64,
    cv: String,
    sigma_multiples: Vec<f64>,
    tol: f64,
    max_iter: usize,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = KLRatio::new()
        .sigma(sigma)
        .n_basis(n_basis)
        .folds(folds)
        .seed(seed)
        .cv(KliepCv::from_name(&cv).map_err(to_py)?)
        .sigma_multiples(sigma_multiples)
        .tol(tol)
        .max_iter(max_iter);
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// Fits KMM. See `shiftweight.KernelMeanMatching` for the parameters.
#[pyfunction]
#[pyo3(signature = (source, target, sigma, bound, eps, block_rows, seed, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_kmm(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    sigma: Option<f64>,
    bound: f64,
    eps: Option<f64>,
    block_rows: usize,
    seed: u64,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = KernelMeanMatching::new().sigma(sigma).bound(bound).eps(eps).block_rows(block_rows).seed(seed);
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<RatioModel>()?;
    m.add_function(wrap_pyfunction!(fit_least_squares, m)?)?;
    m.add_function(wrap_pyfunction!(fit_kliep, m)?)?;
    m.add_function(wrap_pyfunction!(fit_kmm, m)?)?;
    Ok(())
}
