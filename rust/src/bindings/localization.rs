//! Bindings for transfer matrices (Lyapunov exponents, stationary
//! transmission) and classical particle ensembles.

use numpy::{PyArray1, PyArray2, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::ensemble::{terms, TermConfig};
use super::{in_pool, run_detached, table, to_pyerr, LineConfig};
use crate::classical::{Kinetic, Landscape};
use crate::classical_ensemble::{run_particles, ClassicalSpec};
use crate::disorder::Term;
use crate::error::CoreError;
use crate::localization::{log_transmissions, lyapunov_exponents, Sample};
use crate::transfer::Medium;

/// The wave equation, read from `{"model", "hbar", "mass", "hopping", "dx"}`.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct MediumConfig {
    model: String,
    hbar: f64,
    #[pyo3(default)]
    mass: f64,
    #[pyo3(default)]
    hopping: f64,
    dx: f64,
}

impl MediumConfig {
    fn medium(&self) -> Result<Medium, CoreError> {
        let medium = match self.model.as_str() {
            "continuum" => Medium::Continuum {
                hbar: self.hbar,
                mass: self.mass,
                dx: self.dx,
            },
            "lattice" => Medium::Lattice {
                hopping: self.hopping,
                dx: self.dx,
            },
            other => {
                return Err(CoreError::InvalidInput(format!(
                    "model {other:?}: use \"continuum\" or \"lattice\""
                )))
            }
        };
        medium.validate()?;
        Ok(medium)
    }

    fn kinetic(&self) -> Result<Kinetic, CoreError> {
        Ok(match self.medium()? {
            Medium::Continuum { mass, .. } => Kinetic::Continuum { mass },
            Medium::Lattice { hopping, dx } => Kinetic::Lattice {
                hopping,
                spacing: dx,
                hbar: self.hbar,
            },
        })
    }
}

/// Which realizations, on how many threads.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct RealizationsConfig {
    seed: u64,
    start: usize,
    count: usize,
    threads: usize,
}

/// The disorder terms and the wave equation, validated.
fn inputs(
    py: Python<'_>,
    disorder: &[TermConfig],
    medium: &MediumConfig,
) -> PyResult<(Vec<Term>, Medium)> {
    let prepared = (|| Ok::<_, CoreError>((terms(disorder)?, medium.medium()?)))();
    prepared.map_err(|error| to_pyerr(py, error))
}

/// Lyapunov exponents (per unit length) over points `region` of each
/// realization and energy: an array `(count, energies)`.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn lyapunov_exponents_of<'py>(
    py: Python<'py>,
    line: LineConfig,
    disorder: Vec<TermConfig>,
    static_potential: PyReadonlyArray1<'py, f64>,
    medium: MediumConfig,
    region: (usize, usize),
    energies: Vec<f64>,
    realizations: RealizationsConfig,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    // A copy: another Python thread could write the buffer while we run detached.
    let statics = static_potential.as_array().to_vec();
    let (terms, medium) = inputs(py, &disorder, &medium)?;
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

/// `ln T` of each realization and energy through the whole potential: `(count, energies)`.
#[pyfunction]
fn log_transmissions_of<'py>(
    py: Python<'py>,
    line: LineConfig,
    disorder: Vec<TermConfig>,
    static_potential: PyReadonlyArray1<'py, f64>,
    medium: MediumConfig,
    energies: Vec<f64>,
    realizations: RealizationsConfig,
) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let statics = static_potential.as_array().to_vec();
    let (terms, medium) = inputs(py, &disorder, &medium)?;
    let sample = Sample {
        line: line.line(),
        static_potential: &statics,
        disorder: &terms,
        seed: realizations.seed,
    };
    let (start, count) = (realizations.start, realizations.count);
    let values = run_detached(py, |cancel| {
        in_pool(realizations.threads, || {
            log_transmissions(&sample, medium, &energies, start, count, cancel)
        })
    })?;
    table(py, values, count, energies.len())
}

/// The particles and run of a classical ensemble.
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct ClassicalConfig {
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
    start: f64,
    left_layer_end: usize,
    right_layer_start: usize,
    threads: usize,
}

/// Classical particles drawn from a packet's Wigner distribution, moved in `potential`.
#[pyfunction]
fn classical_particles<'py>(
    py: Python<'py>,
    config: ClassicalConfig,
    medium: MediumConfig,
    potential: PyReadonlyArray1<'py, f64>,
) -> PyResult<Bound<'py, PyDict>> {
    let potential = potential.as_array().to_vec();
    let kinetic = medium.kinetic().map_err(|error| to_pyerr(py, error))?;
    let points = potential.len();
    if config.left_layer_end > config.right_layer_start || config.right_layer_start > points {
        return Err(to_pyerr(
            py,
            CoreError::InvalidInput(format!(
                "absorbing layers [0, {}) and [{}, {points}) overlap or leave the grid",
                config.left_layer_end, config.right_layer_start
            )),
        ));
    }
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
        pauses: config.pauses.clone(),
    };
    let dx = medium.dx;
    let output = run_detached(py, |cancel| {
        let landscape = Landscape {
            potential: &potential,
            start: config.start,
            dx,
            left_layer_end: config.left_layer_end,
            right_layer_start: config.right_layer_start,
            kinetic,
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
    dict.set_item("substeps", output.substeps)?;
    Ok(dict)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(lyapunov_exponents_of, module)?)?;
    module.add_function(wrap_pyfunction!(log_transmissions_of, module)?)?;
    module.add_function(wrap_pyfunction!(classical_particles, module)?)?;
    Ok(())
}
