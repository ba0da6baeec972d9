//! Bindings for transfer matrices: Lyapunov exponents and stationary
//! transmission (`crate::localization`).

use numpy::{PyArray2, PyReadonlyArray1};
use pyo3::prelude::*;

use super::disorder::{terms, LineRequest, TermRequest};
use super::dispersion::ModelRequest;
use super::error::to_pyerr;
use super::request::request;
use super::{in_pool, run_detached, table};
use crate::disorder::Term;
use crate::error::CoreError;
use crate::localization::{log_transmissions, lyapunov_exponents, Sample};
use crate::transfer::Medium;

request! {
    /// Which realizations, on how many threads.
    pub(crate) struct RealizationsRequest("realizations") {
        seed: u64,
        start: usize,
        count: usize,
        threads: usize,
    }
}

/// The disorder terms and the wave equation, validated.
fn inputs(
    py: Python<'_>,
    disorder: &[TermRequest],
    model: &ModelRequest,
    dx: f64,
) -> PyResult<(Vec<Term>, Medium)> {
    let prepared = (|| Ok::<_, CoreError>((terms(disorder)?, model.medium(dx)?)))();
    prepared.map_err(|error| to_pyerr(py, error))
}

/// Lyapunov exponents (per unit length) over points `region` of each
/// realization and energy: an array `(count, energies)`.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn lyapunov_exponents_of<'py>(
    py: Python<'py>,
    line: LineRequest,
    disorder: Vec<TermRequest>,
    static_potential: PyReadonlyArray1<'py, f64>,
    model: ModelRequest,
    region: (usize, usize),
    energies: Vec<f64>,
    realizations: RealizationsRequest,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    // A copy: another Python thread could write the buffer while we run detached.
    let statics = static_potential.as_array().to_vec();
    let (terms, medium) = inputs(py, &disorder, &model, line.dx)?;
    let sample = Sample {
        line: line.line(),
        static_potential: &statics,
        disorder: &terms,
        seed: realizations.seed,
    };
    let (start, count) = (realizations.start, realizations.count);
    let values = run_detached(py, |cancel| {
        in_pool(realizations.threads, || {
            lyapunov_exponents(
                &sample,
                medium,
                region.0..region.1,
                &energies,
                start,
                count,
                cancel,
            )
        })
    })?;
    table(py, values, count, energies.len())
}

/// `ln T` of each realization and energy through the points `region` of the
/// potential (its first and last points are the leads): `(count, energies)`.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn log_transmissions_of<'py>(
    py: Python<'py>,
    line: LineRequest,
    disorder: Vec<TermRequest>,
    static_potential: PyReadonlyArray1<'py, f64>,
    model: ModelRequest,
    region: (usize, usize),
    energies: Vec<f64>,
    realizations: RealizationsRequest,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let statics = static_potential.as_array().to_vec();
    let (terms, medium) = inputs(py, &disorder, &model, line.dx)?;
    let sample = Sample {
        line: line.line(),
        static_potential: &statics,
        disorder: &terms,
        seed: realizations.seed,
    };
    let (start, count) = (realizations.start, realizations.count);
    let values = run_detached(py, |cancel| {
        in_pool(realizations.threads, || {
            log_transmissions(
                &sample,
                medium,
                region.0..region.1,
                &energies,
                start,
                count,
                cancel,
            )
        })
    })?;
    table(py, values, count, energies.len())
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(lyapunov_exponents_of, module)?)?;
    module.add_function(wrap_pyfunction!(log_transmissions_of, module)?)?;
    Ok(())
}
