//! Bindings of `shiftweight_report`: the full HTML report of a source/target pair, written through
//! the same call as the command line's `shiftweight report`, so both give the same report for the
//! same inputs and seed.

use crate::{detached, vector, view};
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use shiftweight::{Error, FittedRatio};
use shiftweight_report::{full_report, InputFacts, ShiftOptions, TestKind, WeightSource};
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

/// Builds the full report and writes it (HTML to `path`, JSON to `json_path` when given);
/// returns the summary paragraph.
#[pyfunction]
#[pyo3(signature = (source, target, feature_names, path, model_json, weights, seed, test, permutations, level, json_path))]
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
) -> PyResult<String> {
    let (s, t) = (view(&source, "source")?, view(&target, "target")?);
    let w = match &weights {
        Some(a) => Some(vector(a, "weights")?),
        None => None,
    };
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
    let opts = ShiftOptions {
        test,
        permutations,
        level,
    };
    detached(py, move || {
        let model = model_json
            .as_deref()
            .map(FittedRatio::from_json)
            .transpose()?;
        let source_of_weights = match (&model, w) {
            (Some(m), _) => WeightSource::Model(m),
            (None, Some(w)) => WeightSource::Given(w),
            (None, None) => WeightSource::Automatic,
        };
        let mut r = full_report(
            "report",
            s,
            t,
            &feature_names,
            source_of_weights,
            &opts,
            seed,
        )?;
        r.inputs = vec![
            InputFacts {
                role: "source".into(),
                path: "array from Python".into(),
                rows: s.rows(),
                rows_dropped: 0,
            },
            InputFacts {
                role: "target".into(),
                path: "array from Python".into(),
                rows: t.rows(),
                rows_dropped: 0,
            },
        ];
        write_atomic(&path, &r.to_html(), "path")?;
        if let Some(j) = &json_path {
            write_atomic(j, &r.to_json(), "json_path")?;
        }
        Ok(r.summary())
    })
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(write_report, m)?)?;
    Ok(())
}
