//! Bindings for classical particle ensembles (`crate::classical_ensemble`).

use numpy::{PyArray1, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::disorder::LineRequest;
use super::dispersion::ModelRequest;
use super::error::to_pyerr;
use super::propagate::pauses;
use super::request::request;
use super::{in_pool, run_detached, table};
use crate::classical::Landscape;
use crate::classical_ensemble::{run_particles, ClassicalSpec};
use crate::error::CoreError;

request! {
    /// The particles and run of a classical ensemble.
    pub(crate) struct ParticlesRequest("classical particles") {
        center: f64,
        position_spread: f64,
        momentum: f64,
        momentum_spread: f64,
        particles: usize,
        seed: u64,
        index: u64,
        step: f64,
        steps: usize,
        pauses: Vec<usize>,
        /// Time past each pause's whole steps, `0 <= offset < step`.
        offsets: Vec<f64>,
        left_layer_end: usize,
        right_layer_start: usize,
        threads: usize,
    }
}

/// Classical particles drawn from a packet's Wigner distribution, moved in `potential`.
#[pyfunction]
fn classical_particles<'py>(
    py: Python<'py>,
    line: LineRequest,
    model: ModelRequest,
    config: ParticlesRequest,
    potential: PyReadonlyArray1<'py, f64>,
) -> PyResult<Bound<'py, PyDict>> {
    let potential = potential.as_array().to_vec();
    let points = potential.len();
    let checked = (|| {
        if points != line.points {
            return Err(CoreError::InvalidInput(format!(
                "potential has {points} points; the grid has {}",
                line.points
            )));
        }
        if config.left_layer_end > config.right_layer_start || config.right_layer_start > points {
            return Err(CoreError::InvalidInput(format!(
                "absorbing layers [0, {}) and [{}, {points}) overlap or leave the grid",
                config.left_layer_end, config.right_layer_start
            )));
        }
        model.kinetic(line.dx)
    })();
    let kinetic = checked.map_err(|error| to_pyerr(py, error))?;
    let pauses = pauses(&config.pauses, &config.offsets).map_err(|error| to_pyerr(py, error))?;
    let spec = ClassicalSpec {
        center: config.center,
        position_spread: config.position_spread,
        momentum: config.momentum,
        momentum_spread: config.momentum_spread,
        particles: config.particles,
        seed: config.seed,
        index: config.index,
        step: config.step,
        steps: config.steps,
        pauses,
    };
    let output = run_detached(py, |cancel| {
        let landscape = Landscape {
            potential: &potential,
            start: line.start,
            dx: line.dx,
            left_layer_end: config.left_layer_end,
            right_layer_start: config.right_layer_start,
            dispersion: kinetic,
        };
        in_pool(config.threads, || run_particles(&landscape, &spec, cancel))
    })?;
    let dict = PyDict::new(py);
    let positions: Vec<f64> = output.particles.iter().map(|p| p.position).collect();
    let momenta: Vec<f64> = output.particles.iter().map(|p| p.momentum).collect();
    let absorbed: Vec<i8> = output.particles.iter().map(|p| p.absorbed).collect();
    dict.set_item("position", PyArray1::from_vec(py, positions))?;
    dict.set_item("momentum", PyArray1::from_vec(py, momenta))?;
    dict.set_item("absorbed", PyArray1::from_vec(py, absorbed))?;
    dict.set_item(
        "counts",
        table(py, output.counts, spec.pauses.len(), points)?,
    )?;
    let snapshots = spec.pauses.len();
    let column = |f: fn(&crate::classical::Particle) -> f64| -> Vec<f64> {
        output.trail.iter().map(f).collect()
    };
    dict.set_item(
        "trail_position",
        table(py, column(|p| p.position), config.particles, snapshots)?,
    )?;
    dict.set_item(
        "trail_momentum",
        table(py, column(|p| p.momentum), config.particles, snapshots)?,
    )?;
    let absorbed: Vec<i8> = output.trail.iter().map(|p| p.absorbed).collect();
    dict.set_item(
        "trail_absorbed",
        table(py, absorbed, config.particles, snapshots)?,
    )?;
    dict.set_item("substeps", output.substeps)?;
    Ok(dict)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(classical_particles, module)?)?;
    Ok(())
}
