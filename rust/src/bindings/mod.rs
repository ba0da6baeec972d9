//! The thin PyO3 layer, one file per core module: reads the typed requests
//! Python sends (`request`), releases the GIL, maps errors onto mottle's
//! exception classes (`error`) and honours Ctrl-C. No numerics here.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use numpy::ndarray::Array2;
use numpy::IntoPyArray;
use pyo3::prelude::*;

use crate::error::CoreError;
use error::to_pyerr;

mod classical;
mod disorder;
mod dispersion;
mod drive;
mod ensemble;
mod error;
mod ground;
mod localization;
mod packets;
mod propagate;
mod quasi1d;
mod request;
mod spectrum;

/// How long the waiting thread sleeps between looks for Ctrl-C.
const SIGNAL_POLL: Duration = Duration::from_millis(20);

/// Run `work` on its own thread with the GIL released; between short waits
/// check for signals and raise the cancel flag on Ctrl-C. Panics become errors.
pub(crate) fn run_detached<R, F>(py: Python<'_>, work: F) -> PyResult<R>
where
    R: Send,
    F: FnOnce(&AtomicBool) -> Result<R, CoreError> + Send,
{
    let cancel = AtomicBool::new(false);
    let finished = AtomicBool::new(false);
    let outcome = std::thread::scope(|scope| {
        let worker = scope.spawn(|| {
            let result = catch_unwind(AssertUnwindSafe(|| work(&cancel)));
            finished.store(true, Ordering::Release);
            result
        });
        let mut signal = Ok(());
        while !finished.load(Ordering::Acquire) {
            py.detach(|| {
                let mut waited = Duration::ZERO;
                while waited < SIGNAL_POLL && !finished.load(Ordering::Acquire) {
                    std::thread::sleep(Duration::from_millis(1));
                    waited += Duration::from_millis(1);
                }
            });
            if signal.is_ok() {
                signal = py.check_signals();
                if signal.is_err() {
                    cancel.store(true, Ordering::Relaxed);
                }
            }
        }
        let joined = py.detach(|| worker.join());
        (signal, joined)
    });
    let (signal, joined) = outcome;
    signal?;
    let result = match joined {
        Ok(Ok(result)) => result,
        Ok(Err(panic)) | Err(panic) => Err(CoreError::Internal(panic_message(&panic))),
    };
    result.map_err(|error| to_pyerr(py, error))
}

/// Run a short `work` with the GIL released on this thread (no Ctrl-C
/// polling: `run_detached`'s waits cost about a millisecond a call). Panics
/// become errors.
pub(crate) fn run_released<R, F>(py: Python<'_>, work: F) -> PyResult<R>
where
    R: Send,
    F: FnOnce() -> Result<R, CoreError> + Send,
{
    let result = py.detach(|| catch_unwind(AssertUnwindSafe(work)));
    let result = result.unwrap_or_else(|panic| Err(CoreError::Internal(panic_message(&panic))));
    result.map_err(|error| to_pyerr(py, error))
}

fn panic_message(panic: &Box<dyn std::any::Any + Send>) -> String {
    panic
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| panic.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "a worker panicked".to_string())
}

/// Run `work` on a rayon pool of `threads` threads (sized per call: the
/// caller, e.g. a Dask task, knows how many cores it may use).
pub(crate) fn in_pool<R: Send>(
    threads: usize,
    work: impl FnOnce() -> Result<R, CoreError> + Send,
) -> Result<R, CoreError> {
    if threads == 0 {
        return Err(CoreError::InvalidInput("threads must be >= 1".into()));
    }
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|error| CoreError::Internal(format!("cannot start {threads} threads: {error}")))?
        .install(work)
}

/// A row-major buffer as a 2-D numpy array, without a copy.
pub(crate) fn table<'py, T: numpy::Element>(
    py: Python<'py>,
    values: Vec<T>,
    rows: usize,
    columns: usize,
) -> PyResult<Bound<'py, numpy::PyArray2<T>>> {
    let array = Array2::from_shape_vec((rows, columns), values)
        .map_err(|error| to_pyerr(py, CoreError::Internal(error.to_string())))?;
    Ok(array.into_pyarray(py))
}

#[pymodule(gil_used = true)]
#[pyo3(name = "_core")]
fn core_module(module: &Bound<'_, PyModule>) -> PyResult<()> {
    error::register(module)?;
    propagate::register(module)?;
    disorder::register(module)?;
    packets::register(module)?;
    ensemble::register(module)?;
    localization::register(module)?;
    quasi1d::register(module)?;
    classical::register(module)?;
    ground::register(module)?;
    module.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
