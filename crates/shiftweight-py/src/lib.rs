//! Python bindings of the `shiftweight` core: array conversion, GIL release and error mapping only.
//! No algorithm lives here; each file mirrors one module of the core crate.

use numpy::PyUntypedArrayMethods;
use pyo3::create_exception;
use pyo3::exceptions::{PyRuntimeError, PyValueError};
use pyo3::prelude::*;
use shiftweight::{Error, MatrixView};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};

mod conformal;
mod data;
mod demo;
mod detect;
mod diagnostics;
mod label;
mod learn;
mod metrics;
mod ratio;
mod report;
mod table;
mod weights;

create_exception!(
    _native,
    ShiftweightError,
    PyValueError,
    "Bad input to shiftweight: the message names the argument, row or column."
);
create_exception!(
    _native,
    ModelFileError,
    ShiftweightError,
    "A model file or document is malformed, of another format or of an unsupported version."
);
create_exception!(
    _native,
    UnsupportedOperationError,
    ShiftweightError,
    "The operation is not defined for this estimator (e.g. KMM weights for new rows)."
);
create_exception!(
    _native,
    NumericalError,
    PyRuntimeError,
    "A numerical routine failed (singular system, no convergence)."
);
create_exception!(
    _native,
    InternalError,
    PyRuntimeError,
    "An internal failure of shiftweight (a bug): please report it with the input that caused it."
);

/// Maps a core error to the matching Python exception.
pub(crate) fn to_py(e: Error) -> PyErr {
    match e {
        Error::ModelFile(_) => ModelFileError::new_err(e.to_string()),
        Error::Unsupported(_) => UnsupportedOperationError::new_err(e.to_string()),
        Error::Numerical { .. } => NumericalError::new_err(e.to_string()),
        _ => ShiftweightError::new_err(e.to_string()),
    }
}

/// Threads requested with `set_threads` (0 = one per core).
static THREADS: AtomicUsize = AtomicUsize::new(0);

/// The thread pool of this process: (pid, threads, pool). Rebuilt when the process id changes,
/// so a child created by `fork` after the parent used the pool gets live threads instead of
/// waiting forever on threads that were not copied by the fork.
static POOL: Mutex<Option<(u32, usize, Arc<rayon::ThreadPool>)>> = Mutex::new(None);

fn pool() -> Result<Arc<rayon::ThreadPool>, String> {
    let pid = std::process::id();
    let threads = THREADS.load(Ordering::SeqCst);
    let mut guard = POOL.lock().unwrap_or_else(|e| e.into_inner());
    if let Some((p, n, pool)) = guard.as_ref() {
        if *p == pid && *n == threads {
            return Ok(pool.clone());
        }
    }
    if let Some((p, _, old)) = guard.take() {
        if p != pid {
            // Inherited through fork: its threads do not exist here; never touch or drop it.
            std::mem::forget(old);
        }
    }
    let mut builder = rayon::ThreadPoolBuilder::new();
    if threads > 0 {
        builder = builder.num_threads(threads);
    }
    let pool = Arc::new(builder.build().map_err(|e| e.to_string())?);
    *guard = Some((pid, threads, pool.clone()));
    Ok(pool)
}

/// Runs `f` with the GIL released on this process's thread pool; core errors become Python
/// exceptions and a panic becomes `InternalError` (no panic ever reaches Python).
pub(crate) fn detached<T, F>(py: Python<'_>, f: F) -> PyResult<T>
where
    T: Send,
    F: FnOnce() -> shiftweight::Result<T> + Send,
{
    let pool = pool()
        .map_err(|e| InternalError::new_err(format!("could not start worker threads: {e}")))?;
    match py.detach(|| pool.install(|| catch_unwind(AssertUnwindSafe(f)))) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(to_py(e)),
        Err(payload) => {
            let msg = payload
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| payload.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_else(|| "unknown panic".into());
            Err(InternalError::new_err(format!(
                "internal error in shiftweight (please report): {msg}"
            )))
        }
    }
}

/// Views a C-contiguous float64 numpy matrix as a core matrix. The Python layer converts inputs to
/// that layout first (one documented conversion); anything else is rejected here.
pub(crate) fn view<'a>(
    arr: &'a numpy::PyReadonlyArray2<'_, f64>,
    name: &str,
) -> PyResult<MatrixView<'a>> {
    let shape = arr.shape();
    let (rows, cols) = (shape[0], shape[1]);
    let data = arr.as_slice().map_err(|_| {
        ShiftweightError::new_err(format!("`{name}` must be a C-contiguous float64 array"))
    })?;
    MatrixView::named(data, rows, cols, name).map_err(to_py)
}

/// Views a contiguous float64 vector.
pub(crate) fn vector<'a>(
    arr: &'a numpy::PyReadonlyArray1<'_, f64>,
    name: &str,
) -> PyResult<&'a [f64]> {
    arr.as_slice().map_err(|_| {
        ShiftweightError::new_err(format!("`{name}` must be a contiguous float64 vector"))
    })
}

/// Sets the number of worker threads used by later calls (0 = one per core). Results do not
/// depend on it: work is cut into fixed-size chunks and combined in a fixed order.
#[pyfunction]
fn set_threads(n: usize) -> PyResult<()> {
    THREADS.store(n, Ordering::SeqCst);
    Ok(())
}

/// The number of worker threads later calls will use.
#[pyfunction]
fn get_threads() -> PyResult<usize> {
    pool()
        .map(|p| p.current_num_threads())
        .map_err(InternalError::new_err)
}

/// Provokes an internal failure (a panic inside the core) to test that it becomes InternalError.
/// Only in builds with the `test-hooks` feature (`make develop`), never in a release wheel.
#[cfg(feature = "test-hooks")]
#[pyfunction]
fn _provoke_internal_failure(py: Python<'_>) -> PyResult<()> {
    detached(py, || -> shiftweight::Result<()> {
        panic!("deliberate test failure")
    })
}

#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    let py = m.py();
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add("ShiftweightError", py.get_type::<ShiftweightError>())?;
    m.add("ModelFileError", py.get_type::<ModelFileError>())?;
    m.add(
        "UnsupportedOperationError",
        py.get_type::<UnsupportedOperationError>(),
    )?;
    m.add("NumericalError", py.get_type::<NumericalError>())?;
    m.add("InternalError", py.get_type::<InternalError>())?;
    m.add_function(wrap_pyfunction!(set_threads, m)?)?;
    m.add_function(wrap_pyfunction!(get_threads, m)?)?;
    #[cfg(feature = "test-hooks")]
    m.add_function(wrap_pyfunction!(_provoke_internal_failure, m)?)?;
    ratio::register(m)?;
    learn::register(m)?;
    demo::register(m)?;
    data::register(m)?;
    metrics::register(m)?;
    conformal::register(m)?;
    detect::register(m)?;
    weights::register(m)?;
    diagnostics::register(m)?;
    table::register(m)?;
    label::register(m)?;
    report::register(m)?;
    Ok(())
}
