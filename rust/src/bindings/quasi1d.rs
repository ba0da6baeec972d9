//! Bindings for the quasi-1D transfer matrices of strips and bars
//! (`crate::transfer::quasi1d`).

use numpy::ndarray::Array3;
use numpy::{IntoPyArray, PyArray2, PyArray3};
use pyo3::prelude::*;

use super::error::to_pyerr;
use super::localization::RealizationsRequest;
use super::request::request;
use super::{in_pool, run_detached, table};
use crate::error::CoreError;
use crate::transfer::quasi1d::{bar_disorder, bar_exponents, Bar};

request! {
    /// A strip (2D) or bar (3D) of the Anderson model with box disorder, at one energy.
    pub(crate) struct BarRequest("bar") {
        dimensions: usize,
        width: usize,
        slices: usize,
        hopping: f64,
        disorder_width: f64,
        energy: f64,
        qr_interval: usize,
        blocks: usize,
    }
}

impl BarRequest {
    fn bar(&self, seed: u64) -> Bar {
        Bar {
            dimensions: self.dimensions,
            width: self.width,
            slices: self.slices,
            hopping: self.hopping,
            disorder_width: self.disorder_width,
            energy: self.energy,
            qr_interval: self.qr_interval,
            blocks: self.blocks,
            seed,
        }
    }
}

/// The Lyapunov exponents (per site) of each realization, per block of
/// slices: an array `(count, blocks, channels)`, largest first along the last axis.
#[pyfunction]
fn bar_exponents_of<'py>(
    py: Python<'py>,
    bar: BarRequest,
    realizations: RealizationsRequest,
) -> PyResult<Bound<'py, PyArray3<f64>>> {
    let spec = bar.bar(realizations.seed);
    spec.validate().map_err(|error| to_pyerr(py, error))?;
    let (start, count) = (realizations.start, realizations.count);
    let values = run_detached(py, |cancel| {
        in_pool(realizations.threads, || {
            bar_exponents(&spec, start, count, cancel)
        })
    })?;
    let array = Array3::from_shape_vec((count, spec.blocks, spec.channels()), values)
        .map_err(|error| to_pyerr(py, CoreError::Internal(error.to_string())))?;
    Ok(array.into_pyarray(py))
}

/// The on-site energies of realization `index`: `(slices, channels)`.
#[pyfunction]
fn bar_disorder_of<'py>(
    py: Python<'py>,
    bar: BarRequest,
    seed: u64,
    index: u64,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let spec = bar.bar(seed);
    let values = bar_disorder(&spec, index).map_err(|error| to_pyerr(py, error))?;
    table(py, values, spec.slices, spec.channels())
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(bar_exponents_of, module)?)?;
    module.add_function(wrap_pyfunction!(bar_disorder_of, module)?)?;
    Ok(())
}
