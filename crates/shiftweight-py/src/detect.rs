//! Bindings of `shiftweight::detect`: each call converts arrays, runs the core with the GIL released
//! and returns the result as its JSON document (the Python layer wraps it in a result object).

use crate::{detached, vector, view};
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::detect::{self, ClassifierShiftTest, FeatureShift, MmdShiftTest};

/// Classifier two-sample test; returns the result document.
#[pyfunction]
#[pyo3(signature = (source, target, permutations, seed, folds, l2, max_permutation_rows))]
#[allow(clippy::too_many_arguments)]
fn shift_test_classifier(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    permutations: usize,
    seed: u64,
    folds: usize,
    l2: f64,
    max_permutation_rows: usize,
) -> PyResult<String> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let test = ClassifierShiftTest::new()
        .permutations(permutations)
        .seed(seed)
        .folds(folds)
        .l2(l2)
        .max_permutation_rows(max_permutation_rows);
    detached(py, move || test.run(s, t)?.to_json())
}

/// MMD two-sample test; returns the result document.
#[pyfunction]
#[pyo3(signature = (source, target, permutations, seed, sigma, max_kernel_rows, block_size))]
#[allow(clippy::too_many_arguments)]
fn shift_test_mmd(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    permutations: usize,
    seed: u64,
    sigma: Option<f64>,
    max_kernel_rows: usize,
    block_size: Option<usize>,
) -> PyResult<String> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let test = MmdShiftTest::new()
        .permutations(permutations)
        .seed(seed)
        .sigma(sigma)
        .max_kernel_rows(max_kernel_rows)
        .block_size(block_size);
    detached(py, move || test.run(s, t)?.to_json())
}

/// Per-feature shift table; returns the table document.
#[pyfunction]
#[pyo3(signature = (source, target, feature_names, max_categories, folds, l2, repeats, max_importance_rows, seed))]
#[allow(clippy::too_many_arguments)]
fn feature_shift(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    feature_names: Option<Vec<String>>,
    max_categories: usize,
    folds: usize,
    l2: f64,
    repeats: usize,
    max_importance_rows: usize,
    seed: u64,
) -> PyResult<String> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let fs = FeatureShift::new()
        .max_categories(max_categories)
        .folds(folds)
        .l2(l2)
        .repeats(repeats)
        .max_importance_rows(max_importance_rows)
        .seed(seed);
    detached(py, move || {
        fs.run(s, t, feature_names.as_deref())?.to_json()
    })
}

/// AUC of `pos` against `neg` scores with its DeLong interval: (auc, u, std_error, ci_low, ci_high).
#[pyfunction]
fn auc_summary(
    py: Python<'_>,
    pos: PyReadonlyArray1<'_, f64>,
    neg: PyReadonlyArray1<'_, f64>,
) -> PyResult<(f64, f64, f64, f64, f64)> {
    let (p, n) = (vector(&pos, "pos")?, vector(&neg, "neg")?);
    let s = detached(py, move || detect::auc_summary(p, n))?;
    Ok((s.auc, s.u, s.std_error, s.ci_low, s.ci_high))
}

/// One-sided Mann-Whitney test (pos greater): (U, p) by the normal approximation.
#[pyfunction]
fn mann_whitney_greater(
    py: Python<'_>,
    pos: PyReadonlyArray1<'_, f64>,
    neg: PyReadonlyArray1<'_, f64>,
) -> PyResult<(f64, f64)> {
    let (p, n) = (vector(&pos, "pos")?, vector(&neg, "neg")?);
    detached(py, move || detect::mann_whitney_greater(p, n))
}

/// Two-sample KS test: (D, p, mode) with mode "auto", "exact" or "asymptotic".
#[pyfunction]
fn ks_two_sample(
    py: Python<'_>,
    a: PyReadonlyArray1<'_, f64>,
    b: PyReadonlyArray1<'_, f64>,
    mode: &str,
) -> PyResult<(f64, f64, String)> {
    let (x, y) = (vector(&a, "a")?, vector(&b, "b")?);
    let mode = match mode {
        "auto" => None,
        "exact" => Some(detect::KsMode::Exact),
        "asymptotic" => Some(detect::KsMode::Asymptotic),
        other => {
            return Err(crate::to_py(shiftweight::Error::param(
                "mode",
                format!("must be \"auto\", \"exact\" or \"asymptotic\", got {other:?}"),
            )))
        }
    };
    let r = detached(py, move || match mode {
        None => detect::ks_two_sample(x, y),
        Some(m) => detect::ks_two_sample_with(x, y, m),
    })?;
    let name = match r.mode {
        detect::KsMode::Exact => "exact",
        detect::KsMode::Asymptotic => "asymptotic",
    };
    Ok((r.statistic, r.p_value, name.to_string()))
}

/// P(D_n >= x) of the one-sample two-sided Kolmogorov-Smirnov statistic with n observations.
#[pyfunction]
fn kolmogorov_sf(n: u64, x: f64) -> f64 {
    detect::kolmogorov_sf(n, x)
}

/// Chi-square test of a 2 x k table given by its two rows: (statistic, p, dof).
#[pyfunction]
fn chi_square_two_rows(
    py: Python<'_>,
    source_counts: PyReadonlyArray1<'_, f64>,
    target_counts: PyReadonlyArray1<'_, f64>,
) -> PyResult<(f64, f64, usize)> {
    let (a, b) = (
        vector(&source_counts, "source_counts")?,
        vector(&target_counts, "target_counts")?,
    );
    let r = detached(py, move || detect::chi_square_two_rows(a, b))?;
    Ok((r.statistic, r.p_value, r.dof))
}

/// Benjamini-Hochberg adjusted p-values, in input order.
#[pyfunction]
fn benjamini_hochberg(py: Python<'_>, p: PyReadonlyArray1<'_, f64>) -> PyResult<Vec<f64>> {
    let v = vector(&p, "p")?;
    detached(py, move || Ok(detect::benjamini_hochberg(v)))
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(shift_test_classifier, m)?)?;
    m.add_function(wrap_pyfunction!(shift_test_mmd, m)?)?;
    m.add_function(wrap_pyfunction!(feature_shift, m)?)?;
    m.add_function(wrap_pyfunction!(auc_summary, m)?)?;
    m.add_function(wrap_pyfunction!(mann_whitney_greater, m)?)?;
    m.add_function(wrap_pyfunction!(ks_two_sample, m)?)?;
    m.add_function(wrap_pyfunction!(kolmogorov_sf, m)?)?;
    m.add_function(wrap_pyfunction!(chi_square_two_rows, m)?)?;
    m.add_function(wrap_pyfunction!(benjamini_hochberg, m)?)?;
    Ok(())
}
