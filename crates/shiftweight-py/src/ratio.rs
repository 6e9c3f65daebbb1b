//! Bindings of `shiftweight::ratio`: the fitted model class and one fit function per estimator.

use crate::{detached, to_py, vector, view, ShiftweightError};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};
use shiftweight::ratio::auto::UniformRatio;
use shiftweight::ratio::{Features, FittedRatio, RatioEstimator, SelectionScore};
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
    /// w(x) before the cap the automatic choice applies (the same as `ratio` without one).
    fn raw_ratio<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray2<'py, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xv = view(&x, "X")?;
        let m = self.inner.clone();
        let out = detached(py, move || m.raw_ratio(xv))?;
        Ok(out.into_pyarray(py))
    }
    /// The cap applied on top of the estimate as (scale, upper, mass), or None: the weight is
    /// mass * min(scale * w, upper), mass the mean of the raw source weights.
    #[getter]
    fn cap(&self) -> Option<(f64, f64, f64)> {
        self.inner.cap.map(|c| (c.scale, c.upper, c.mass))
    }
    /// The automatic choice in plain words (None for a model not from the automatic choice).
    fn decision_summary(&self) -> Option<String> {
        shiftweight::ratio::decision_summary(&self.inner)
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

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<RatioModel>()?;
    m.add_function(wrap_pyfunction!(fit_ratio, m)?)?;
    m.add_function(wrap_pyfunction!(estimator_defaults, m)?)?;
    register_more(m)
}

/// Reads entry `key` of an estimator's parameter dict, naming the parameter when it is missing or
/// of the wrong type.
fn arg<'py, T: FromPyObjectOwned<'py>>(
    p: &Bound<'py, PyDict>,
    kind: &str,
    key: &str,
) -> PyResult<T> {
    match p.get_item(key)? {
        Some(v) => v.extract::<T>().map_err(|e| {
            let e: PyErr = e.into();
            ShiftweightError::new_err(format!(
                "estimator {kind:?}: parameter `{key}` has the wrong type ({e})"
            ))
        }),
        None => Err(ShiftweightError::new_err(format!(
            "estimator {kind:?} lacks parameter `{key}`"
        ))),
    }
}

/// The one conversion from a Python estimator's parameters (its `_native_params()`: every field of
/// the core configuration, by name) to the core estimator, used by `fit_ratio` and by AutoRatio's
/// candidates. Each configuration is written as a struct literal, so a field added to a core
/// estimator fails to compile here until it is passed through.
fn estimator(kind: &str, p: &Bound<'_, PyDict>) -> PyResult<Box<dyn RatioEstimator + Send + Sync>> {
    Ok(match kind {
        "least_squares" => Box::new(LeastSquaresRatio {
            sigma: arg(p, kind, "sigma")?,
            lam: arg(p, kind, "lam")?,
            n_basis: arg(p, kind, "n_basis")?,
            alpha: arg(p, kind, "alpha")?,
            seed: arg(p, kind, "seed")?,
            sigma_multiples: arg(p, kind, "sigma_multiples")?,
            lambda_grid: arg(p, kind, "lambda_grid")?,
            max_cv_rows: arg(p, kind, "max_cv_rows")?,
        }),
        "kliep" => Box::new(KLRatio {
            sigma: arg(p, kind, "sigma")?,
            n_basis: arg(p, kind, "n_basis")?,
            folds: arg(p, kind, "folds")?,
            seed: arg(p, kind, "seed")?,
            cv: KliepCv::from_name(&arg::<String>(p, kind, "cv")?).map_err(to_py)?,
            sigma_multiples: arg(p, kind, "sigma_multiples")?,
            tol: arg(p, kind, "tol")?,
            max_iter: arg(p, kind, "max_iter")?,
            se_margin: arg(p, kind, "se_margin")?,
        }),
        "kmm" => Box::new(KernelMeanMatching {
            sigma: arg(p, kind, "sigma")?,
            bound: arg(p, kind, "bound")?,
            eps: arg(p, kind, "eps")?,
            block_rows: arg(p, kind, "block_rows")?,
            seed: arg(p, kind, "seed")?,
            ridge: arg(p, kind, "ridge")?,
            sigma_multiples: arg(p, kind, "sigma_multiples")?,
            ridge_grid: arg(p, kind, "ridge_grid")?,
        }),
        "classifier" => Box::new(ClassifierRatio {
            l2: arg(p, kind, "l2")?,
            features: Features::parse(&arg::<String>(p, kind, "features")?).map_err(to_py)?,
            n_fourier: arg(p, kind, "n_fourier")?,
            fourier_sigma: arg(p, kind, "fourier_sigma")?,
            folds: arg(p, kind, "folds")?,
            seed: arg(p, kind, "seed")?,
            l2_grid: arg(p, kind, "l2_grid")?,
        }),
        "uniform" => Box::new(UniformRatio),
        other => {
            return Err(ShiftweightError::new_err(format!(
                "unknown estimator kind {other:?}"
            )))
        }
    })
}

/// Fits the estimator of `kind` ("least_squares", "kliep", "kmm" or "classifier") with the
/// parameters `params` (see the Python class of each kind for their meaning).
#[pyfunction]
#[pyo3(signature = (source, target, kind, params, feature_names=None))]
fn fit_ratio(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    kind: &str,
    params: Bound<'_, PyDict>,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let est = estimator(kind, &params)?;
    detached(py, move || est.fit(s, t)).map(|m| RatioModel::wrap(with_names(m, feature_names)))
}

/// The default configuration of every estimator (see `shiftweight::ratio::estimator_defaults`),
/// as a dict of dicts.
#[pyfunction]
fn estimator_defaults(py: Python<'_>) -> PyResult<Bound<'_, PyAny>> {
    let text = shiftweight::ratio::estimator_defaults().to_string();
    py.import("json")?.call_method1("loads", (text,))
}

/// AutoRatio's candidate of `kind`: any estimator that scores held-out rows (not KMM).
fn candidate(kind: &str, p: &Bound<'_, PyDict>) -> PyResult<Box<dyn RatioEstimator + Send + Sync>> {
    if kind == "kmm" {
        return Err(ShiftweightError::new_err(format!(
            "estimator kind {kind:?} cannot be a candidate of AutoRatio (it must score held-out rows)"
        )));
    }
    estimator(kind, p)
}

/// Fits AutoRatio. `candidates`: None for the defaults, else a list of (name, kind, params).
#[pyfunction]
#[pyo3(signature = (source, target, candidates, folds, seed, se_margin, score, prefer_stable, tail_k, max_rows, feature_names=None))]
#[allow(clippy::too_many_arguments)]
fn fit_auto(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    candidates: Option<Vec<(String, String, Bound<'_, PyDict>)>>,
    folds: usize,
    seed: u64,
    se_margin: f64,
    score: &str,
    prefer_stable: bool,
    tail_k: f64,
    max_rows: usize,
    feature_names: Option<Vec<String>>,
) -> PyResult<RatioModel> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let mut est = AutoRatio::new()
        .folds(folds)
        .seed(seed)
        .se_margin(se_margin)
        .score(SelectionScore::from_name(score).map_err(to_py)?)
        .prefer_stable(prefer_stable)
        .tail_k(tail_k)
        .max_rows(max_rows);
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
    m.add_function(wrap_pyfunction!(fit_auto, m)?)?;
    m.add_function(wrap_pyfunction!(weights_from_probabilities, m)?)?;
    Ok(())
}
