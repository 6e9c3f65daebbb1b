//! Bindings of `shiftweight::table`: building a core table from column specs prepared by the
//! Python layer (conversion only), the pooled encoding, scoring tables by column name, support
//! gaps and the per-column shift table.

use crate::ratio::RatioModel;
use crate::{detached, to_py, ShiftweightError};
use numpy::{IntoPyArray, PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyTuple;
use shiftweight::detect::FeatureShift;
use shiftweight::table::{self, Column, ColumnKind, Table, TableEncoding, MISSING_CODE};
use std::sync::Arc;

/// A typed table (immutable).
#[pyclass(module = "shiftweight._native", frozen, name = "Table")]
pub struct PyTable {
    pub(crate) inner: Arc<Table>,
}

fn kind_of(k: Option<&str>, name: &str) -> PyResult<Option<ColumnKind>> {
    match k {
        None => Ok(None),
        Some("numeric") => Ok(Some(ColumnKind::Numeric)),
        Some("categorical") => Ok(Some(ColumnKind::Categorical)),
        Some(o) => Err(ShiftweightError::new_err(format!(
            "column `{name}`: unknown type {o:?} (numeric or categorical)"
        ))),
    }
}

/// One column from its spec `(name, tag, payload, kind)`: tag `numeric` (float64 vector, NaN
/// missing), `text` (list of str or None), `bool` (list of bool or None), `categorical`
/// ((levels, int64 codes with -1 missing)); `kind` is None or a type override.
fn column(spec: &Bound<'_, PyTuple>) -> PyResult<Column> {
    let name: String = spec.get_item(0)?.extract()?;
    let tag: String = spec.get_item(1)?.extract()?;
    let payload = spec.get_item(2)?;
    let kind: Option<String> = spec.get_item(3)?.extract()?;
    let kind = kind_of(kind.as_deref(), &name)?;
    let col = match tag.as_str() {
        "numeric" => {
            let v: PyReadonlyArray1<'_, f64> = payload.extract()?;
            let data = v.as_slice().map_err(|_| {
                ShiftweightError::new_err(format!("column `{name}`: values must be contiguous"))
            })?;
            Column::numeric(name.clone(), data.to_vec()).map_err(to_py)?
        }
        "text" => {
            let cells: Vec<Option<String>> = payload.extract()?;
            return Column::from_text(name, &cells, kind).map_err(to_py);
        }
        "bool" => {
            let cells: Vec<Option<bool>> = payload.extract()?;
            Column::boolean(name.clone(), cells)
        }
        "categorical" => {
            let (levels, codes): (Vec<String>, PyReadonlyArray1<'_, i64>) = payload.extract()?;
            let codes: Vec<u32> = codes
                .as_slice()
                .map_err(|_| {
                    ShiftweightError::new_err(format!("column `{name}`: codes must be contiguous"))
                })?
                .iter()
                .map(|&c| {
                    if c < 0 {
                        MISSING_CODE
                    } else {
                        u32::try_from(c).unwrap_or(u32::MAX - 1)
                    }
                })
                .collect();
            Column::categorical(name.clone(), levels, codes).map_err(to_py)?
        }
        other => {
            return Err(ShiftweightError::new_err(format!(
                "column `{name}`: unknown column tag {other:?}"
            )))
        }
    };
    match kind {
        Some(k) => col.with_kind(k).map_err(to_py),
        None => Ok(col),
    }
}

#[pymethods]
impl PyTable {
    /// Builds a table from column specs (see the module documentation).
    #[new]
    fn new(columns: Vec<Bound<'_, PyTuple>>) -> PyResult<Self> {
        let cols = columns.iter().map(column).collect::<PyResult<Vec<_>>>()?;
        Ok(Self {
            inner: Arc::new(Table::new(cols).map_err(to_py)?),
        })
    }
    /// Column names.
    #[getter]
    fn names(&self) -> Vec<String> {
        self.inner.names().iter().map(|s| s.to_string()).collect()
    }
    /// Column types, `numeric` or `categorical`.
    #[getter]
    fn kinds(&self) -> Vec<&'static str> {
        self.inner
            .columns()
            .iter()
            .map(|c| c.kind().name())
            .collect()
    }
    /// Number of rows.
    #[getter]
    fn rows(&self) -> usize {
        self.inner.rows()
    }
}

/// Fits the encoding on the pooled rows and encodes both tables:
/// (encoded source, encoded target, encoding JSON, encoded column names, warnings).
#[pyfunction]
#[allow(clippy::type_complexity)]
fn encode_pair<'py>(
    py: Python<'py>,
    source: &PyTable,
    target: &PyTable,
) -> PyResult<(
    Bound<'py, PyArray2<f64>>,
    Bound<'py, PyArray2<f64>>,
    String,
    Vec<String>,
    Vec<String>,
)> {
    let (s, t) = (source.inner.clone(), target.inner.clone());
    let (enc, zs, zt, warnings) = detached(py, move || table::encode_pair(&s, &t))?;
    let json = serde_json::to_string(&enc)
        .map_err(|e| ShiftweightError::new_err(format!("could not serialise the encoding: {e}")))?;
    let to2 = |m: shiftweight::Matrix| {
        let (r, c) = (m.rows(), m.cols());
        m.into_vec().into_pyarray(py).reshape([r, c])
    };
    let names = enc.feature_names();
    Ok((to2(zs)?, to2(zt)?, json, names, warnings))
}

/// The model fitted on encoded matrices, with the encoding (JSON from `encode_pair`) stored in
/// it, its encoded column names as feature names and the encoding's warnings first.
#[pyfunction]
fn attach_encoding(
    model: &RatioModel,
    encoding: &str,
    warnings: Vec<String>,
) -> PyResult<RatioModel> {
    let enc: TableEncoding = serde_json::from_str(encoding)
        .map_err(|e| ShiftweightError::new_err(format!("malformed encoding: {e}")))?;
    let mut m = (*model.inner).clone();
    m.meta.feature_names = Some(enc.feature_names());
    let mut w = warnings;
    w.append(&mut m.warnings);
    m.warnings = w;
    m.encoding = Some(enc);
    // Same consistency checks as a model file.
    let checked =
        shiftweight::FittedRatio::from_json(&m.to_json().map_err(to_py)?).map_err(to_py)?;
    Ok(RatioModel::wrap(checked))
}

/// The ratio at every row of a table, by column name: (weights, unseen values as
/// (column, level or None, rows, first_row)).
#[pyfunction]
#[allow(clippy::type_complexity)]
fn ratio_table<'py>(
    py: Python<'py>,
    model: &RatioModel,
    x: &PyTable,
) -> PyResult<(
    Bound<'py, PyArray1<f64>>,
    Vec<(String, Option<String>, usize, usize)>,
)> {
    let (m, t) = (model.inner.clone(), x.inner.clone());
    let r = detached(py, move || m.ratio_table(&t))?;
    let unseen = r
        .unseen
        .into_iter()
        .map(|u| (u.column, u.level, u.rows, u.first_row))
        .collect();
    Ok((r.weights.into_pyarray(py), unseen))
}

/// The table columns a fitted model reads, as (name, type), or None for a model fitted on a
/// matrix.
#[pyfunction]
fn model_schema(model: &RatioModel) -> Option<Vec<(String, &'static str)>> {
    model.inner.encoding.as_ref().map(|e| {
        e.schema()
            .into_iter()
            .map(|(n, k)| (n.to_string(), k.name()))
            .collect()
    })
}

/// Support gaps of `target` against `source`: (list of (column, level or None, target_rows,
/// first_row), target rows touched by any gap, one sentence per gap).
#[pyfunction]
#[allow(clippy::type_complexity)]
fn support_gaps(
    py: Python<'_>,
    source: &PyTable,
    target: &PyTable,
) -> PyResult<(
    Vec<(String, Option<String>, usize, usize)>,
    usize,
    Vec<String>,
)> {
    let (s, t) = (source.inner.clone(), target.inner.clone());
    let n = t.rows();
    let (gaps, rows) = detached(py, move || {
        Ok::<_, shiftweight::Error>((table::support_gaps(&s, &t)?, table::rows_with_gaps(&s, &t)?))
    })?;
    let text = gaps.iter().map(|g| g.describe(n)).collect();
    Ok((
        gaps.into_iter()
            .map(|g| (g.column, g.level, g.target_rows, g.first_row))
            .collect(),
        rows,
        text,
    ))
}

/// The support-overlap report of `check_overlap` from the ratios at the target rows, with the
/// support gaps of the typed `target` against `source` added (JSON of the report).
#[pyfunction]
fn check_overlap_tables(
    py: Python<'_>,
    target_ratios: PyReadonlyArray1<'_, f64>,
    limit: f64,
    tolerance: f64,
    source: &PyTable,
    target: &PyTable,
) -> PyResult<String> {
    let r = crate::vector(&target_ratios, "target_ratios")?;
    let (s, t) = (source.inner.clone(), target.inner.clone());
    detached(py, move || {
        if t.rows() != r.len() {
            return Err(shiftweight::Error::LengthMismatch {
                argument: "target_ratios".into(),
                expected: t.rows(),
                found: r.len(),
            });
        }
        let report = shiftweight::diagnostics::check_overlap(r, limit, tolerance)?;
        let gaps = table::support_gaps(&s, &t)?;
        let rows = table::rows_with_gaps(&s, &t)?;
        report.with_support_gaps(gaps, rows).to_json()
    })
}

/// Per-column shift table of typed tables (JSON of `FeatureShiftTable`).
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn feature_shift_table(
    py: Python<'_>,
    source: &PyTable,
    target: &PyTable,
    max_categories: usize,
    folds: usize,
    l2: f64,
    repeats: usize,
    max_importance_rows: usize,
    seed: u64,
) -> PyResult<String> {
    let (s, t) = (source.inner.clone(), target.inner.clone());
    let fs = FeatureShift::new()
        .max_categories(max_categories)
        .folds(folds)
        .l2(l2)
        .repeats(repeats)
        .max_importance_rows(max_importance_rows)
        .seed(seed);
    detached(py, move || fs.run_table(&s, &t)?.to_json())
}

pub(crate) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyTable>()?;
    m.add_function(wrap_pyfunction!(encode_pair, m)?)?;
    m.add_function(wrap_pyfunction!(attach_encoding, m)?)?;
    m.add_function(wrap_pyfunction!(ratio_table, m)?)?;
    m.add_function(wrap_pyfunction!(model_schema, m)?)?;
    m.add_function(wrap_pyfunction!(support_gaps, m)?)?;
    m.add_function(wrap_pyfunction!(feature_shift_table, m)?)?;
    m.add_function(wrap_pyfunction!(check_overlap_tables, m)?)?;
    Ok(())
}
