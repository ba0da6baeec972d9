//! Bindings for ensembles of runs (`crate::ensemble`).

use std::sync::atomic::AtomicBool;

use numpy::{IntoPyArray, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};

use super::disorder::{box_terms, terms, BoxTermRequest, MeshRequest, TermRequest};
use super::drive::DriveRequest;
use super::error::to_pyerr;
use super::packets::PacketsRequest;
use super::propagate::{detector, pauses as pauses_of, Precision, SetupRequest};
use super::request::request;
use super::spectrum::SpectrumRequest;
use super::{in_pool, run_detached, table};
use crate::ensemble::{run_chunks, Chunk, Spec, CHUNK, DENSITY_FLOOR};
use crate::error::CoreError;
use crate::real::Real;
use crate::stepper::{Setup, Shared};

request! {
    /// The steps, realizations and outputs of an ensemble's share of work.
    pub(crate) struct EnsembleRequest("ensemble run") {
        steps: usize,
        pauses: Vec<usize>,
        /// Time past each pause's whole steps, `0 <= offset < step`.
        offsets: Vec<f64>,
        detector: Option<(usize, usize)>,
        seed: u64,
        start: usize,
        count: usize,
        threads: usize,
        precision: Precision,
        spectrum: Option<SpectrumRequest>,
    }
}

fn run_in<T: Real>(
    setup: Setup,
    spec: &Spec,
    run: (usize, usize, usize),
    cancel: &AtomicBool,
) -> Result<Vec<Chunk>, CoreError> {
    let (start, count, threads) = run;
    let shared = Shared::<T>::new(setup)?;
    in_pool(threads, || run_chunks(&shared, spec, start, count, cancel))
}

fn chunk_dict<'py>(
    py: Python<'py>,
    chunk: Chunk,
    snapshots: usize,
    points: usize,
    modes: usize,
    axes: usize,
) -> PyResult<Bound<'py, PyDict>> {
    // The moments per axis: `count x (snapshots x axes)`, axis fastest.
    let moments = snapshots * axes;
    let dict = PyDict::new(py);
    dict.set_item("start", chunk.start)?;
    dict.set_item("count", chunk.count)?;
    for (name, values) in [
        ("transmission", chunk.transmission),
        ("reflection", chunk.reflection),
        ("norm", chunk.norm),
        ("absorbed_left", chunk.absorbed_left),
        ("absorbed_right", chunk.absorbed_right),
        ("absorbed_sides", chunk.absorbed_sides),
        ("quasimomentum", chunk.quasimomentum),
    ] {
        dict.set_item(name, values.into_pyarray(py))?;
    }
    for (name, values, rows, columns) in [
        ("position", chunk.position, chunk.count, moments),
        (
            "position_squared",
            chunk.position_squared,
            chunk.count,
            moments,
        ),
        ("participation", chunk.participation, chunk.count, snapshots),
        ("mean_momentum", chunk.mean_momentum, chunk.count, moments),
        (
            "momentum_squared",
            chunk.momentum_squared,
            chunk.count,
            moments,
        ),
        ("density", chunk.density, snapshots, points),
        ("density_squared", chunk.density_squared, snapshots, points),
        ("log_density", chunk.log_density, snapshots, points),
        (
            "log_density_squared",
            chunk.log_density_squared,
            snapshots,
            points,
        ),
        ("momentum", chunk.momentum, snapshots, points),
        ("spectrum", chunk.spectrum, chunk.count, modes),
        (
            "spectrum_settling",
            chunk.spectrum_settling,
            chunk.count,
            2 * modes,
        ),
    ] {
        dict.set_item(name, table(py, values, rows, columns)?)?;
    }
    Ok(dict)
}

/// Run realizations `start .. start+count` of an ensemble; returns one dict per chunk, in order.
/// `drive`: the time-dependent terms and twist, drawn per realization; `mesh`: on a 2D/3D grid,
/// the mesh and the disorder terms drawn on it (`disorder` then empty).
#[pyfunction]
#[pyo3(signature = (setup, run, absorption, static_potential, disorder, packets, drive=None, mesh=None))]
#[allow(clippy::too_many_arguments)]
fn ensemble_chunks<'py>(
    py: Python<'py>,
    setup: SetupRequest,
    run: EnsembleRequest,
    absorption: PyReadonlyArray1<'py, f64>,
    static_potential: PyReadonlyArray1<'py, f64>,
    disorder: Vec<TermRequest>,
    packets: PacketsRequest,
    drive: Option<DriveRequest>,
    mesh: Option<(MeshRequest, Vec<BoxTermRequest>)>,
) -> PyResult<Bound<'py, PyList>> {
    let absorption = absorption.as_array().to_vec();
    let static_potential = static_potential.as_array().to_vec();
    let points = setup.points;
    let EnsembleRequest {
        steps,
        pauses,
        offsets,
        detector: bounds,
        seed,
        start,
        count,
        threads,
        precision,
        spectrum,
    } = run;
    let prepared = (|| {
        if threads == 0 {
            return Err(CoreError::InvalidInput("threads must be >= 1".into()));
        }
        let dispersion = setup.model.kinetic(setup.dx)?;
        let drive = match drive {
            Some(drive) => drive.drive(dispersion, setup.points)?,
            None => crate::drive::Drive::default(),
        };
        let setup = setup.setup(absorption)?;
        let spec = Spec {
            drive,
            static_potential,
            disorder: terms(&disorder)?,
            mesh_disorder: match &mesh {
                Some((mesh, requests)) => Some((mesh.mesh(), box_terms(requests)?)),
                None => None,
            },
            packets: packets.into_source(),
            steps,
            pauses: pauses_of(&pauses, &offsets)?,
            detector: detector(bounds),
            seed,
            spectrum: spectrum.map(SpectrumRequest::spectrum),
        };
        Ok((setup, spec))
    })();
    let (setup, spec) = prepared.map_err(|error| to_pyerr(py, error))?;
    let axes = setup.shape.len();
    let snapshots = spec.pauses.len();
    let modes = spec
        .spectrum
        .as_ref()
        .map_or(0, |spectrum| spectrum.modes.len());
    let work = (start, count, threads);
    let chunks = run_detached(py, |cancel| match precision {
        Precision::Double => run_in::<f64>(setup, &spec, work, cancel),
        Precision::Single => run_in::<f32>(setup, &spec, work, cancel),
    })?;
    let list = PyList::empty(py);
    for chunk in chunks {
        list.append(chunk_dict(py, chunk, snapshots, points, modes, axes)?)?;
    }
    Ok(list)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(ensemble_chunks, module)?)?;
    module.add("CHUNK", CHUNK)?;
    module.add("DENSITY_FLOOR", DENSITY_FLOOR)?;
    Ok(())
}
