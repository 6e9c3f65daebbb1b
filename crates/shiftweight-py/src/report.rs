//! Bindings of `shiftweight_report`: the full HTML report of a source/target pair, written through
//! the same call as the command line's `shiftweight report`, so both give the same report for the
//! same inputs and seed.

use crate::table::PyTable;
use crate::{detached, vector, view};
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::label::{ClassMixTestResult, LabelShiftEstimate};
use shiftweight::{Error, FittedRatio};
use shiftweight_report::label::LabelShiftPart;
use shiftweight_report::{
    full_report, full_report_table, InputFacts, Report, ShiftOptions, TestKind, WeightSource,
};
use std::io::Write as _;
use std::path::{Path, PathBuf};

/// Writes `text` to `dest` through a temporary file in the same folder and a rename, so a failure
/// never leaves a half-written report.
fn write_atomic(dest: &Path, text: &str, argument: &str) -> shiftweight::Result<()> {
    let fail = |what: &str, e: std::io::Error| {
        Error::param(argument, format!("cannot {what} `{}`: {e}", dest.display()))
    };
    let dir = match dest.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = dest
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "report".into());
    let tmp = dir.join(format!(".{name}.{}.tmp", std::process::id()));
    let result = std::fs::File::create(&tmp)
        .and_then(|mut f| {
            f.write_all(text.as_bytes())?;
            f.sync_all()
        })
        .and_then(|_| std::fs::rename(&tmp, dest));
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(fail("write", e));
    }
    Ok(())
}

/// The shift-test options of a report; `test` is "classifier" or "mmd".
fn shift_options(test: &str, permutations: usize, level: f64) -> PyResult<ShiftOptions> {
    let test = match test {
        "classifier" => TestKind::Classifier,
        "mmd" => TestKind::Mmd,
        other => {
            return Err(crate::to_py(Error::param(
                "test",
                format!("must be \"classifier\" or \"mmd\", got {other:?}"),
            )))
        }
    };
    Ok(ShiftOptions {
        test,
        permutations,
        level,
    })
}

/// Where the weights come from: the model read from `model_json`, the given weights, or the
/// automatic choice.
fn weight_source<'a>(model: &'a Option<FittedRatio>, w: Option<&'a [f64]>) -> WeightSource<'a> {
    match (model, w) {
        (Some(m), _) => WeightSource::Model(m),
        (None, Some(w)) => WeightSource::Given(w),
        (None, None) => WeightSource::Automatic,
    }
}

/// Adds the inputs of Python data to `r`, writes the HTML (and JSON) atomically and returns the
/// summary paragraph.
fn finish(
    mut r: Report,
    rows: (usize, usize),
    path: &Path,
    json_path: Option<&Path>,
) -> shiftweight::Result<String> {
    r.inputs = [("source", rows.0), ("target", rows.1)]
        .iter()
        .map(|(role, n)| InputFacts {
            role: role.to_string(),
            path: "data from Python".into(),
            rows: *n,
            rows_dropped: 0,
        })
        .collect();
    write_atomic(path, &r.to_html(), "path")?;
    if let Some(j) = json_path {
        write_atomic(j, &r.to_json(), "json_path")?;
    }
    Ok(r.summary())
}

/// Builds the full report of two numeric matrices and writes it (HTML to `path`, JSON to
/// `json_path` when given); returns the summary paragraph.
#[pyfunction]
#[pyo3(signature = (source, target, feature_names, path, model_json, weights, seed, test, permutations, level, json_path, label_shift_json=None, mix_test_json=None))]
#[allow(clippy::too_many_arguments)]
fn write_report(
    py: Python<'_>,
    source: PyReadonlyArray2<'_, f64>,
    target: PyReadonlyArray2<'_, f64>,
    feature_names: Vec<String>,
    path: PathBuf,
    model_json: Option<String>,
    weights: Option<PyReadonlyArray1<'_, f64>>,
    seed: u64,
    test: &str,
    permutations: usize,
    level: f64,
    json_path: Option<PathBuf>,
    label_shift_json: Option<String>,
    mix_test_json: Option<String>,
) -> PyResult<String> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let w = match &weights {
        Some(a) => Some(vector(a, "weights")?),
        None => None,
    };
    let opts = shift_options(test, permutations, level)?;
    detached(py, move || {
        let model = model_json
            .as_deref()
            .map(FittedRatio::from_json)
            .transpose()?;
        let mut r = full_report(
            "report",
            s,
            t,
            &feature_names,
            weight_source(&model, w),
            &opts,
            seed,
        )?;
        r.label_shift = label_part(label_shift_json.as_deref(), mix_test_json.as_deref())?;
        finish(r, (s.rows(), t.rows()), &path, json_path.as_deref())
    })
}

/// As [`write_report`] for two typed tables (numeric and categorical columns, missing values),
/// through the same call as the command line's `shiftweight report`.
#[pyfunction]
#[pyo3(signature = (source, target, path, model_json, weights, seed, test, permutations, level, json_path, label_shift_json=None, mix_test_json=None))]
#[allow(clippy::too_many_arguments)]
fn write_report_table(
    py: Python<'_>,
    source: &PyTable,
    target: &PyTable,
    path: PathBuf,
    model_json: Option<String>,
    weights: Option<PyReadonlyArray1<'_, f64>>,
    seed: u64,
    test: &str,
    permutations: usize,
    level: f64,
    json_path: Option<PathBuf>,
    label_shift_json: Option<String>,
    mix_test_json: Option<String>,
) -> PyResult<String> {
    let (s, t) = (source.inner.clone(), target.inner.clone());
    let w = match &weights {
        Some(a) => Some(vector(a, "weights")?),
        None => None,
    };
    let opts = shift_options(test, permutations, level)?;
    detached(py, move || {
        let model = model_json
            .as_deref()
            .map(FittedRatio::from_json)
            .transpose()?;
        let mut r = full_report_table("report", &s, &t, weight_source(&model, w), &opts, seed)?;
        r.label_shift = label_part(label_shift_json.as_deref(), mix_test_json.as_deref())?;
        finish(r, (s.rows(), t.rows()), &path, json_path.as_deref())
    })
}

/// The label-shift section from the estimate's document and, optionally, the mix test's.
fn label_part(
    estimate: Option<&str>,
    mix_test: Option<&str>,
) -> shiftweight::Result<Option<LabelShiftPart>> {
    let Some(e) = estimate else {
        return Ok(None);
    };
    let est = LabelShiftEstimate::from_json(e)?;
    let test = mix_test.map(ClassMixTestResult::from_json).transpose()?;
    Ok(Some(LabelShiftPart::new(&est, test.as_ref())))
}

/// Writes the report page of a label-shift estimate alone (its section, no covariate-shift
/// sections), as the command line's `class-mix --report`; returns the summary paragraph.
#[pyfunction]
#[pyo3(signature = (label_shift_json, mix_test_json, path, json_path))]
fn write_label_shift_report(
    py: Python<'_>,
    label_shift_json: String,
    mix_test_json: Option<String>,
    path: PathBuf,
    json_path: Option<PathBuf>,
) -> PyResult<String> {
    detached(py, move || {
        let seed = LabelShiftEstimate::from_json(&label_shift_json)?.seed;
        let mut r = Report::new("label-shift", seed);
        r.label_shift = label_part(Some(&label_shift_json), mix_test_json.as_deref())?;
        if let Some(l) = &r.label_shift {
            r.features_used = l.rows.iter().map(|row| row.class.clone()).collect();
        }
        write_atomic(&path, &r.to_html(), "path")?;
        if let Some(j) = &json_path {
            write_atomic(j, &r.to_json(), "json_path")?;
        }
        Ok(r.summary())
    })
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(write_report, m)?)?;
    m.add_function(wrap_pyfunction!(write_label_shift_report, m)?)?;
    m.add_function(wrap_pyfunction!(write_report_table, m)?)?;
    Ok(())
}
