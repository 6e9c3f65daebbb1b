//! Bindings of `shiftweight::ratio`: the fitted model class and one fit function per estimator.

use crate::{detached, to_py, vector, view, ShiftweightError};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use shiftweight::ratio::auto::UniformRatio;
use shiftweight::ratio::{FittedRatio, RatioEstimator};
use shiftweight::{
    AutoRatio, ClassifierRatio, KLRatio, KernelMeanMatching, KliepCv, LeastSquaresRatio,
};
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
        if !s.labels.is_empty() {
            d.set_item("labels", s.labels.clone())?;
        }
        if let Some(c) = &s.candidate {
            d.set_item("candidate", c)?;
        }
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
    /// How the ratio is computed at new rows, as a JSON object (form name and its parameters).
    fn form_json(&self) -> PyResult<String> {
        serde_json::to_string(&self.inner.form)
            .map_err(|e| ShiftweightError::new_err(format!("could not serialise the form: {e}")))
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
#[pyo3(signature = (source, target, sigma, n_basis, folds, seed, cv, sigma_multiples, tol, max_iter, se_margin, feature_names=None))]
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
    se_margin: f64,
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
        .max_iter(max_iter)
        .se_margin(se_margin);
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// Fits KMM. See `shiftweight.KernelMeanMatching` for the parameters.
#[pyfunction]
#[pyo3(signature = (source, target, sigma, bound, eps, block_rows, seed, ridge, sigma_multiples, ridge_grid, feature_names=None))]
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
    ridge: Option<f64>,
    sigma_multiples: Vec<f64>,
    ridge_grid: Vec<f64>,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = KernelMeanMatching::new()
        .sigma(sigma)
        .bound(bound)
        .eps(eps)
        .block_rows(block_rows)
        .seed(seed)
        .ridge(ridge)
        .sigma_multiples(sigma_multiples)
        .ridge_grid(ridge_grid);
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<RatioModel>()?;
    m.add_function(wrap_pyfunction!(fit_least_squares, m)?)?;
    m.add_function(wrap_pyfunction!(fit_kliep, m)?)?;
    m.add_function(wrap_pyfunction!(fit_kmm, m)?)?;
    register_more(m)
}

/// Builds the probabilistic-classifier estimator (shared by `fit_classifier` and `fit_auto`).
#[allow(clippy::too_many_arguments)]
fn classifier(
    l2: Option<f64>,
    features: &str,
    n_fourier: usize,
    fourier_sigma: Option<f64>,
    folds: usize,
    seed: u64,
    l2_grid: Vec<f64>,
) -> PyResult<ClassifierRatio> {
    let f = shiftweight::ratio::Features::parse(features).map_err(to_py)?;
    Ok(ClassifierRatio::new()
        .l2(l2)
        .features(f)
        .n_fourier(n_fourier)
        .fourier_sigma(fourier_sigma)
        .folds(folds)
        .seed(seed)
        .l2_grid(l2_grid))
}

/// Fits the probabilistic-classifier ratio. See `shiftweight.ClassifierRatio` for the parameters.
#[pyfunction]
#[pyo3(signature = (source, target, l2, features, n_fourier, fourier_sigma, folds, seed, l2_grid, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_classifier(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    l2: Option<f64>,
    features: &str,
    n_fourier: usize,
    fourier_sigma: Option<f64>,
    folds: usize,
    seed: u64,
    l2_grid: Vec<f64>,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = classifier(l2, features, n_fourier, fourier_sigma, folds, seed, l2_grid)?;
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// Reads a required entry of a candidate's parameter dict.
fn arg<'py, T: FromPyObjectOwned<'py>>(
    p: &Bound<'py, PyDict>,
    kind: &str,
    key: &str,
) -> PyResult<T> {
    match p.get_item(key)? {
        Some(v) => v.extract::<T>().map_err(|e| {
            let e: PyErr = e.into();
            ShiftweightError::new_err(format!(
                "candidate of kind {kind:?}: parameter `{key}` has the wrong type ({e})"
            ))
        }),
        None => Err(ShiftweightError::new_err(format!(
            "candidate of kind {kind:?} lacks parameter `{key}`"
        ))),
    }
}

/// Turns a candidate description (estimator kind and the parameters of its fit function) into a
/// core estimator. Conversion only: each kind maps to the same builder as its fit function.
fn candidate(kind: &str, p: &Bound<'_, PyDict>) -> PyResult<Box<dyn RatioEstimator + Send + Sync>> {
    Ok(match kind {
        "least_squares" => Box::new(
            LeastSquaresRatio::new()
                .sigma(arg(p, kind, "sigma")?)
                .lam(arg(p, kind, "lam")?)
                .n_basis(arg(p, kind, "n_basis")?)
                .alpha(arg(p, kind, "alpha")?)
                .seed(arg(p, kind, "seed")?)
                .sigma_multiples(arg(p, kind, "sigma_multiples")?)
                .lambda_grid(arg(p, kind, "lambda_grid")?)
                .max_cv_rows(arg(p, kind, "max_cv_rows")?),
        ),
        "classifier" => Box::new(classifier(
            arg(p, kind, "l2")?,
            &arg::<String>(p, kind, "features")?,
            arg(p, kind, "n_fourier")?,
            arg(p, kind, "fourier_sigma")?,
            arg(p, kind, "folds")?,
            arg(p, kind, "seed")?,
            arg(p, kind, "l2_grid")?,
        )?),
        "kliep" => Box::new(
            KLRatio::new()
                .sigma(arg(p, kind, "sigma")?)
                .n_basis(arg(p, kind, "n_basis")?)
                .folds(arg(p, kind, "folds")?)
                .seed(arg(p, kind, "seed")?)
                .cv(KliepCv::from_name(&arg::<String>(p, kind, "cv")?).map_err(to_py)?)
                .sigma_multiples(arg(p, kind, "sigma_multiples")?)
                .tol(arg(p, kind, "tol")?)
                .max_iter(arg(p, kind, "max_iter")?)
                .se_margin(arg(p, kind, "se_margin")?),
        ),
        "uniform" => Box::new(UniformRatio),
        other => {
            return Err(ShiftweightError::new_err(format!(
                "estimator kind {other:?} cannot be a candidate of AutoRatio (it must score held-out rows)"
            )))
        }
    })
}

/// Fits AutoRatio. `candidates`: None for the defaults, else a list of (name, kind, params).
#[pyfunction]
#[pyo3(signature = (source, target, candidates, folds, seed, se_margin, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_auto(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    candidates: Option<Vec<(String, String, Bound<'_, PyDict>)>>,
    folds: usize,
    seed: u64,
    se_margin: f64,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let mut est = AutoRatio::new()
        .folds(folds)
        .seed(seed)
        .se_margin(se_margin);
    if let Some(list) = candidates {
        est = est.without_defaults();
        for (name, kind, p) in &list {
            est = est.boxed_candidate(name, candidate(kind, p)?);
        }
    }
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// Weights from out-of-fold probabilities: returns (weights, number of clipped rows).
#[pyfunction]
fn weights_from_probabilities<'py>(
    py: Python<'py>,
    p_target: PyReadonlyArray1<'py, f64>,
    n_source: usize,
    n_target: usize,
    clip: f64,
) -> PyResult<(Bound<'py, PyArray1<f64>>, usize)> {
    let p = vector(&p_target, "p_target")?;
    let r = detached(py, move || {
        shiftweight::ratio_from_probabilities(p, n_source, n_target, clip)
    })?;
    Ok((r.weights.into_pyarray(py), r.n_clipped))
}

fn register_more(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(fit_classifier, m)?)?;
    m.add_function(wrap_pyfunction!(fit_auto, m)?)?;
    m.add_function(wrap_pyfunction!(weights_from_probabilities, m)?)?;
    Ok(())
}
