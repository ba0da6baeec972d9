//! The thin PyO3 layer: converts types, releases the GIL, maps errors and
//! honours Ctrl-C. No numerics here.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use num_complex::Complex64;
use numpy::ndarray::Array2;
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1};
use pyo3::exceptions::PyKeyboardInterrupt;
use pyo3::prelude::*;
use pyo3::types::PyDict;

use crate::classical::Kinetic;
use crate::error::CoreError;
use crate::observables::{Detector, Observation};
use crate::propagate::{propagate, Output, Request};
use crate::real::Real;
use crate::splitting::Splitting;
use crate::stepper::{Setup, Shared};

mod ensemble;
mod localization;

/// How long the waiting thread sleeps between looks for Ctrl-C.
const SIGNAL_POLL: Duration = Duration::from_millis(20);

/// `CoreError` as a Python exception: input errors become mottle's
/// `InvalidParameterError` (a `ValueError`), interruption `KeyboardInterrupt`.
pub(crate) fn to_pyerr(py: Python<'_>, error: CoreError) -> PyErr {
    let class_name = match &error {
        CoreError::InvalidInput(_) => "InvalidParameterError",
        CoreError::Interrupted => return PyKeyboardInterrupt::new_err("interrupted"),
        CoreError::Internal(_) => "MottleError",
    };
    match py
        .import("mottle.errors")
        .and_then(|module| module.getattr(class_name))
    {
        Ok(class) => PyErr::from_type(
            class.cast_into().expect("an exception class"),
            error.to_string(),
        ),
        Err(import_error) => import_error,
    }
}

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

/// The grid line a realization lives on, read from `{"points", "dx", "start"}`.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
pub(crate) struct LineConfig {
    points: usize,
    dx: f64,
    start: f64,
}

impl LineConfig {
    pub(crate) fn line(&self) -> crate::disorder::Line {
        crate::disorder::Line {
            points: self.points,
            dx: self.dx,
            start: self.start,
        }
    }
}

/// The scalar part of a run's configuration, read from a dict.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
pub(crate) struct SetupConfig {
    points: usize,
    dx: f64,
    start: f64,
    hbar: f64,
    nonlinearity: f64,
    step: f64,
    splitting: String,
    left_layer_end: usize,
    right_layer_start: usize,
}

#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct RunConfig {
    steps: usize,
    pauses: Vec<usize>,
    keep_snapshots: bool,
    detector: Option<(usize, usize)>,
    /// (position, momentum, model, mass, hopping)
    classical: Option<(f64, f64, String, f64, f64)>,
    precision: String,
}

pub(crate) fn build_setup(
    config: SetupConfig,
    kinetic: Vec<f64>,
    absorption: Vec<f64>,
) -> Result<Setup, CoreError> {
    Ok(Setup {
        points: config.points,
        dx: config.dx,
        start: config.start,
        hbar: config.hbar,
        kinetic,
        absorption,
        left_layer_end: config.left_layer_end,
        right_layer_start: config.right_layer_start,
        nonlinearity: config.nonlinearity,
        step: config.step,
        splitting: Splitting::named(&config.splitting)?,
    })
}

fn classical_kinetic(
    model: &str,
    mass: f64,
    hopping: f64,
    dx: f64,
    hbar: f64,
) -> Result<Kinetic, CoreError> {
    match model {
        "continuum" => Ok(Kinetic::Continuum { mass }),
        "lattice" => Ok(Kinetic::Lattice {
            hopping,
            spacing: dx,
            hbar,
        }),
        other => Err(CoreError::InvalidInput(format!(
            "model {other:?}: use \"continuum\" or \"lattice\""
        ))),
    }
}

fn run_in<T: Real>(
    setup: Setup,
    request: Request,
    cancel: &AtomicBool,
) -> Result<Output, CoreError> {
    let shared = Shared::<T>::new(setup)?;
    propagate(&shared, &request, cancel)
}

pub(crate) fn observations_dict<'py>(
    py: Python<'py>,
    observations: &[Observation],
) -> PyResult<Bound<'py, PyDict>> {
    let dict = PyDict::new(py);
    let column = |f: fn(&Observation) -> f64| {
        observations
            .iter()
            .map(f)
            .collect::<Vec<f64>>()
            .into_pyarray(py)
    };
    dict.set_item("norm", column(|o| o.norm))?;
    dict.set_item("absorbed_left", column(|o| o.absorbed.left))?;
    dict.set_item("absorbed_right", column(|o| o.absorbed.right))?;
    dict.set_item("position", column(|o| o.position))?;
    dict.set_item("position_squared", column(|o| o.position_squared))?;
    dict.set_item("momentum", column(|o| o.momentum))?;
    dict.set_item("energy", column(|o| o.energy))?;
    dict.set_item("reflection", column(|o| o.reflection))?;
    dict.set_item("transmission", column(|o| o.transmission))?;
    Ok(dict)
}

/// Propagate one wavefunction; see `mottle.propagate` for the conventions.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn propagate_one<'py>(
    py: Python<'py>,
    setup: SetupConfig,
    run: RunConfig,
    kinetic: PyReadonlyArray1<'py, f64>,
    absorption: PyReadonlyArray1<'py, f64>,
    potential: PyReadonlyArray1<'py, f64>,
    psi: PyReadonlyArray1<'py, Complex64>,
) -> PyResult<Bound<'py, PyDict>> {
    // Copies: another Python thread could write these buffers while we run detached.
    let kinetic = kinetic.as_array().to_vec();
    let absorption = absorption.as_array().to_vec();
    let potential = potential.as_array().to_vec();
    let psi = psi.as_array().to_vec();
    let (dx, hbar) = (setup.dx, setup.hbar);
    let prepared = (|| {
        let setup = build_setup(setup, kinetic, absorption)?;
        let classical = match &run.classical {
            Some((x, p, model, mass, hopping)) => {
                Some((*x, *p, classical_kinetic(model, *mass, *hopping, dx, hbar)?))
            }
            None => None,
        };
        let request = Request {
            psi,
            potential,
            steps: run.steps,
            pauses: run.pauses.clone(),
            keep_snapshots: run.keep_snapshots,
            detector: run.detector.map(|(left_end, right_start)| Detector {
                left_end,
                right_start,
            }),
            classical,
        };
        Ok::<_, CoreError>((setup, request))
    })();
    let (setup, request) = prepared.map_err(|error| to_pyerr(py, error))?;
    let precision = run.precision.clone();
    let output = run_detached(py, move |cancel| match precision.as_str() {
        "double" => run_in::<f64>(setup, request, cancel),
        "single" => run_in::<f32>(setup, request, cancel),
        other => Err(CoreError::InvalidInput(format!(
            "precision {other:?}: use \"double\" or \"single\""
        ))),
    })?;

    let points = output.psi.len();
    let dict = PyDict::new(py);
    dict.set_item("psi", output.psi.into_pyarray(py))?;
    let snapshot_count = output.snapshots.len();
    let flat: Vec<Complex64> = output.snapshots.into_iter().flatten().collect();
    dict.set_item("snapshots", table(py, flat, snapshot_count, points)?)?;
    dict.set_item("observations", observations_dict(py, &output.observations)?)?;
    dict.set_item(
        "last",
        observations_dict(py, std::slice::from_ref(&output.last))?,
    )?;
    let positions: Vec<f64> = output.classical.iter().map(|p| p.position).collect();
    let momenta: Vec<f64> = output.classical.iter().map(|p| p.momentum).collect();
    let absorbed: Vec<i8> = output.classical.iter().map(|p| p.absorbed).collect();
    dict.set_item("classical_position", PyArray1::from_vec(py, positions))?;
    dict.set_item("classical_momentum", PyArray1::from_vec(py, momenta))?;
    dict.set_item("classical_absorbed", PyArray1::from_vec(py, absorbed))?;
    Ok(dict)
}

#[pymodule(gil_used = true)]
#[pyo3(name = "_core")]
fn core_module(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(propagate_one, module)?)?;
    ensemble::register(module)?;
    localization::register(module)?;
    module.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
