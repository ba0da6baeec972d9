//! Bindings for single runs (`crate::propagate`) and the run setup they share
//! with ensembles (`crate::stepper::Setup`).

use std::sync::atomic::AtomicBool;

use num_complex::Complex64;
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::dispersion::ModelRequest;
use super::drive::DriveRequest;
use super::error::to_pyerr;
use super::request::request;
use super::{run_detached, table};
use crate::drive::Realized;
use crate::error::CoreError;
use crate::ndfft::MAX_AXES;
use crate::observables::{Detector, Observation};
use crate::propagate::{propagate, Output, Pause, Request};
use crate::real::Real;
use crate::splitting::Splitting;
use crate::stepper::{Setup, Shared};

request! {
    /// The grid, model, step and absorbing layers of a run.
    pub(crate) struct SetupRequest("setup") {
        points: usize,
        dx: f64,
        start: f64,
        /// Points, spacing and first position per axis (one entry in 1D).
        shape: Vec<usize>,
        spacing: Vec<f64>,
        origin: Vec<f64>,
        model: ModelRequest,
        nonlinearity: f64,
        step: f64,
        splitting: String,
        left_layer_end: usize,
        right_layer_start: usize,
    }
}

impl SetupRequest {
    /// The stepper's setup, its kinetic table from the model (`Dispersion::kinetic_table`).
    pub(crate) fn setup(self, absorption: Vec<f64>) -> Result<Setup, CoreError> {
        let kinetic = if self.shape.len() == 1 {
            self.model
                .medium(self.dx)?
                .dispersion
                .kinetic_table(self.points, self.dx)
        } else {
            // Each axis's spacing checked against the model (a lattice's sites).
            for &dx in &self.spacing {
                self.model.medium(dx)?;
            }
            self.model
                .dispersion()?
                .kinetic_table_nd(&self.shape, &self.spacing)
        };
        if kinetic.len() != self.points {
            return Err(CoreError::InvalidInput(format!(
                "grid shape {:?} does not hold its {} points",
                self.shape, self.points
            )));
        }
        Ok(Setup {
            points: self.points,
            dx: self.dx,
            start: self.start,
            shape: self.shape,
            spacing: self.spacing,
            origin: self.origin,
            hbar: self.model.hbar(),
            kinetic,
            absorption,
            left_layer_end: self.left_layer_end,
            right_layer_start: self.right_layer_start,
            nonlinearity: self.nonlinearity,
            step: self.step,
            splitting: Splitting::named(&self.splitting)?,
        })
    }
}

/// Pauses from their whole steps and the offsets past them (the same length).
pub(crate) fn pauses(steps: &[usize], offsets: &[f64]) -> Result<Vec<Pause>, CoreError> {
    if steps.len() != offsets.len() {
        return Err(CoreError::InvalidInput(format!(
            "{} pauses but {} offsets",
            steps.len(),
            offsets.len()
        )));
    }
    Ok(steps
        .iter()
        .zip(offsets)
        .map(|(&steps, &offset)| Pause { steps, offset })
        .collect())
}

/// The detector `(left_end, right_start)`: grid points left of and right of it.
pub(crate) fn detector(bounds: Option<(usize, usize)>) -> Option<Detector> {
    bounds.map(|(left_end, right_start)| Detector {
        left_end,
        right_start,
    })
}

request! {
    /// Where the classical particle of a single run starts.
    pub(crate) struct ClassicalStart("classical start") {
        position: f64,
        momentum: f64,
    }
}

request! {
    /// The steps, pauses and outputs of a single run.
    pub(crate) struct RunRequest("run") {
        steps: usize,
        pauses: Vec<usize>,
        /// Time past each pause's whole steps, `0 <= offset < step`.
        offsets: Vec<f64>,
        keep_snapshots: bool,
        detector: Option<(usize, usize)>,
        classical: Option<ClassicalStart>,
        precision: Precision,
    }
}

/// The floating-point type a run computes in.
#[derive(Clone, Copy)]
pub(crate) enum Precision {
    Double,
    Single,
}

impl<'a, 'py> FromPyObject<'a, 'py> for Precision {
    type Error = PyErr;

    fn extract(object: Borrowed<'a, 'py, PyAny>) -> PyResult<Self> {
        let name: String = object.extract()?;
        match name.as_str() {
            "double" => Ok(Precision::Double),
            "single" => Ok(Precision::Single),
            other => Err(to_pyerr(
                object.py(),
                CoreError::InvalidInput(format!(
                    "precision {other:?}: use \"double\" or \"single\""
                )),
            )),
        }
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

/// One array per quantity, one entry per observation; the per-axis moments are
/// `observations x axes` tables on a 2D/3D grid.
pub(crate) fn observations_dict<'py>(
    py: Python<'py>,
    observations: &[Observation],
    axes: usize,
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
    let per_axis = |name: &str, f: fn(&Observation) -> [f64; MAX_AXES]| -> PyResult<()> {
        if axes == 1 {
            let values: Vec<f64> = observations.iter().map(|o| f(o)[0]).collect();
            dict.set_item(name, values.into_pyarray(py))
        } else {
            let values = observations.iter().flat_map(|o| f(o)[..axes].to_vec());
            dict.set_item(name, table(py, values.collect(), observations.len(), axes)?)
        }
    };
    per_axis("position", |o| o.position)?;
    per_axis("position_squared", |o| o.position_squared)?;
    per_axis("momentum", |o| o.momentum)?;
    per_axis("momentum_squared", |o| o.momentum_squared)?;
    dict.set_item("absorbed_sides", column(|o| o.absorbed.sides))?;
    dict.set_item("energy", column(|o| o.energy))?;
    dict.set_item("participation", column(|o| o.participation))?;
    dict.set_item("reflection", column(|o| o.reflection))?;
    dict.set_item("transmission", column(|o| o.transmission))?;
    Ok(dict)
}

/// Propagate one wavefunction; see `mottle.propagate` for the conventions.
/// `drive`: the time-dependent terms and twist, with the (seed, index) of the
/// realization they are drawn for.
#[pyfunction]
#[pyo3(signature = (setup, run, absorption, potential, psi, drive=None))]
fn propagate_one<'py>(
    py: Python<'py>,
    setup: SetupRequest,
    run: RunRequest,
    absorption: PyReadonlyArray1<'py, f64>,
    potential: PyReadonlyArray1<'py, f64>,
    psi: PyReadonlyArray1<'py, Complex64>,
    drive: Option<(DriveRequest, u64, u64)>,
) -> PyResult<Bound<'py, PyDict>> {
    // Copies: another Python thread could write these buffers while we run detached.
    let absorption = absorption.as_array().to_vec();
    let potential = potential.as_array().to_vec();
    let psi = psi.as_array().to_vec();
    // Axis 0 (the line in 1D): its spacing, first position and the points at each of its positions.
    // (Unchecked yet: `Setup::validate` refuses a shape that does not hold the points.)
    let dx = setup.spacing.first().copied().unwrap_or(setup.dx);
    let start = setup.origin.first().copied().unwrap_or(setup.start);
    let transverse = setup.points / setup.shape.first().copied().unwrap_or(1).max(1);
    let prepared = (|| {
        let classical = match &run.classical {
            Some(start) => Some((start.position, start.momentum, setup.model.kinetic(dx)?)),
            None => None,
        };
        let realized = match drive {
            Some((drive, seed, index)) => drive
                .drive(setup.model.kinetic(dx)?, setup.points)?
                .realize(setup.points, dx, start, transverse, seed, index),
            None => Realized::default(),
        };
        let setup = setup.setup(absorption)?;
        let request = Request {
            drive: realized,
            psi,
            potential,
            steps: run.steps,
            pauses: pauses(&run.pauses, &run.offsets)?,
            keep_snapshots: run.keep_snapshots,
            detector: detector(run.detector),
            classical,
        };
        Ok::<_, CoreError>((setup, request))
    })();
    let (setup, request) = prepared.map_err(|error| to_pyerr(py, error))?;
    let axes = setup.shape.len();
    let precision = run.precision;
    let output = run_detached(py, move |cancel| match precision {
        Precision::Double => run_in::<f64>(setup, request, cancel),
        Precision::Single => run_in::<f32>(setup, request, cancel),
    })?;

    let points = output.psi.len();
    let dict = PyDict::new(py);
    dict.set_item("psi", output.psi.into_pyarray(py))?;
    dict.set_item("quasimomentum", output.quasimomentum)?;
    let snapshot_count = output.snapshots.len();
    let flat: Vec<Complex64> = output.snapshots.into_iter().flatten().collect();
    dict.set_item("snapshots", table(py, flat, snapshot_count, points)?)?;
    let momentum: Vec<f64> = output.momentum_densities.into_iter().flatten().collect();
    dict.set_item(
        "momentum_density",
        table(py, momentum, snapshot_count, points)?,
    )?;
    dict.set_item(
        "observations",
        observations_dict(py, &output.observations, axes)?,
    )?;
    dict.set_item(
        "last",
        observations_dict(py, std::slice::from_ref(&output.last), axes)?,
    )?;
    let positions: Vec<f64> = output.classical.iter().map(|p| p.position).collect();
    let momenta: Vec<f64> = output.classical.iter().map(|p| p.momentum).collect();
    let absorbed: Vec<i8> = output.classical.iter().map(|p| p.absorbed).collect();
    dict.set_item("classical_position", PyArray1::from_vec(py, positions))?;
    dict.set_item("classical_momentum", PyArray1::from_vec(py, momenta))?;
    dict.set_item("classical_absorbed", PyArray1::from_vec(py, absorbed))?;
    Ok(dict)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(propagate_one, module)?)?;
    Ok(())
}
