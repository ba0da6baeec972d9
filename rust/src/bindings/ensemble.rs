//! Bindings for disorder realizations and ensembles.

use num_complex::Complex64;
use numpy::{IntoPyArray, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::{PyDict, PyList};

use super::{build_setup, in_pool, run_detached, table, to_pyerr, LineConfig, SetupConfig};
use crate::disorder::{Kind, Realizer, Term};
use crate::ensemble::{run_chunks, Chunk, Spec, CHUNK, DENSITY_FLOOR};
use crate::error::CoreError;
use crate::observables::Detector;
use crate::packets::{Draw, PacketSource};
use crate::real::Real;
use crate::spectrum::Spectrum;
use crate::stepper::Shared;

/// One disorder term as the Python specs describe it (`Disorder.config()`).
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
pub(crate) struct TermConfig {
    kind: String,
    start: f64,
    stop: f64,
    #[pyo3(default)]
    strength: f64,
    #[pyo3(default)]
    width: f64,
    #[pyo3(default)]
    correlation_length: f64,
}

impl TermConfig {
    fn term(&self) -> Result<Term, CoreError> {
        let kind = match self.kind.as_str() {
            "white-noise" => Kind::WhiteNoise {
                strength: self.strength,
            },
            "box" => Kind::Box { width: self.width },
            "gaussian" => Kind::Gaussian {
                rms: self.strength,
                correlation_length: self.correlation_length,
            },
            "speckle" => Kind::Speckle {
                strength: self.strength,
                correlation_length: self.correlation_length,
            },
            other => {
                return Err(CoreError::InvalidInput(format!(
                    "disorder kind {other:?}: use white-noise, box, gaussian or speckle"
                )))
            }
        };
        Ok(Term {
            kind,
            start: self.start,
            stop: self.stop,
        })
    }
}

pub(crate) fn terms(configs: &[TermConfig]) -> Result<Vec<Term>, CoreError> {
    configs.iter().map(TermConfig::term).collect()
}

/// Realization `index` of `seed`: the disorder terms added to `base`.
#[pyfunction]
fn realize<'py>(
    py: Python<'py>,
    line: LineConfig,
    disorder: Vec<TermConfig>,
    base: PyReadonlyArray1<'py, f64>,
    seed: u64,
    index: u64,
) -> PyResult<Bound<'py, numpy::PyArray1<f64>>> {
    let mut potential = base.as_array().to_vec();
    let grid = line.line();
    let result = terms(&disorder).and_then(|terms| {
        let mut realizer = Realizer::new(grid, &terms)?;
        realizer.add_to(seed, index, &mut potential)
    });
    result.map_err(|error| to_pyerr(py, error))?;
    Ok(potential.into_pyarray(py))
}

fn draw(value: (String, f64, f64)) -> Result<Draw, CoreError> {
    match value.0.as_str() {
        "fixed" => Ok(Draw::Fixed(value.1)),
        "uniform" => Ok(Draw::Uniform(value.1, value.2)),
        "normal" => Ok(Draw::Normal(value.1, value.2)),
        other => Err(CoreError::InvalidInput(format!(
            "draw {other:?}: use fixed, uniform or normal"
        ))),
    }
}

/// The initial states, read from `{"kind": "fixed"|"gaussian"|"list", ...}`.
fn packet_source(config: &Bound<'_, PyDict>) -> PyResult<Result<PacketSource, CoreError>> {
    let kind: String = config
        .get_item("kind")?
        .map(|v| v.extract())
        .transpose()?
        .unwrap_or_default();
    Ok(match kind.as_str() {
        "fixed" => {
            let values: PyReadonlyArray1<'_, Complex64> =
                config.as_any().get_item("values")?.extract()?;
            Ok(PacketSource::Fixed(values.as_array().to_vec()))
        }
        "list" => {
            let values: PyReadonlyArray2<'_, Complex64> =
                config.as_any().get_item("values")?.extract()?;
            Ok(PacketSource::List(
                values
                    .as_array()
                    .outer_iter()
                    .map(|row| row.to_vec())
                    .collect(),
            ))
        }
        "gaussian" => {
            let get = |name: &str| -> PyResult<(String, f64, f64)> {
                config.as_any().get_item(name)?.extract()
            };
            let (center, wavenumber, width) = (get("center")?, get("wavenumber")?, get("width")?);
            (|| {
                Ok(PacketSource::Gaussian {
                    center: draw(center)?,
                    wavenumber: draw(wavenumber)?,
                    width: draw(width)?,
                })
            })()
        }
        other => Err(CoreError::InvalidInput(format!(
            "packet kind {other:?}: use fixed, gaussian or list"
        ))),
    })
}

/// The drawn (centre, wavenumber, width) of realization `index`, for single runs.
#[pyfunction]
fn draw_packet(
    py: Python<'_>,
    packets: &Bound<'_, PyDict>,
    seed: u64,
    index: u64,
) -> PyResult<(f64, f64, f64)> {
    let source = packet_source(packets)?.map_err(|error| to_pyerr(py, error))?;
    source.parameters(seed, index).ok_or_else(|| {
        to_pyerr(
            py,
            CoreError::InvalidInput("draw_packet needs a gaussian packet source".into()),
        )
    })
}

type SpectrumConfig = (
    [usize; 2],
    [f64; 2],
    Vec<usize>,
    Vec<f64>,
    Vec<f64>,
    Vec<f64>,
);

#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct EnsembleConfig {
    steps: usize,
    pauses: Vec<usize>,
    detector: Option<(usize, usize)>,
    seed: u64,
    start: usize,
    count: usize,
    threads: usize,
    precision: String,
    /// (probe points, their positions, modes, wavenumbers, energies, velocities)
    spectrum: Option<SpectrumConfig>,
}

fn run_in<T: Real>(
    setup: crate::stepper::Setup,
    spec: &Spec,
    config: &EnsembleConfig,
    cancel: &std::sync::atomic::AtomicBool,
) -> Result<Vec<Chunk>, CoreError> {
    let shared = Shared::<T>::new(setup)?;
    in_pool(config.threads, || {
        run_chunks(&shared, spec, config.start, config.count, cancel)
    })
}

fn chunk_dict<'py>(
    py: Python<'py>,
    chunk: Chunk,
    snapshots: usize,
    points: usize,
    modes: usize,
) -> PyResult<Bound<'py, PyDict>> {
    let dict = PyDict::new(py);
    dict.set_item("start", chunk.start)?;
    dict.set_item("count", chunk.count)?;
    for (name, values) in [
        ("transmission", chunk.transmission),
        ("reflection", chunk.reflection),
        ("norm", chunk.norm),
        ("absorbed_left", chunk.absorbed_left),
        ("absorbed_right", chunk.absorbed_right),
    ] {
        dict.set_item(name, values.into_pyarray(py))?;
    }
    for (name, values, rows, columns) in [
        ("position", chunk.position, chunk.count, snapshots),
        (
            "position_squared",
            chunk.position_squared,
            chunk.count,
            snapshots,
        ),
        ("participation", chunk.participation, chunk.count, snapshots),
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
    ] {
        dict.set_item(name, table(py, values, rows, columns)?)?;
    }
    Ok(dict)
}

/// Run realizations `start .. start+count` of an ensemble; returns one dict per chunk, in order.
#[pyfunction]
#[allow(clippy::too_many_arguments)]
fn ensemble_chunks<'py>(
    py: Python<'py>,
    setup: SetupConfig,
    run: EnsembleConfig,
    kinetic: PyReadonlyArray1<'py, f64>,
    absorption: PyReadonlyArray1<'py, f64>,
    static_potential: PyReadonlyArray1<'py, f64>,
    disorder: Vec<TermConfig>,
    packets: &Bound<'py, PyDict>,
) -> PyResult<Bound<'py, PyList>> {
    let kinetic = kinetic.as_array().to_vec();
    let absorption = absorption.as_array().to_vec();
    let static_potential = static_potential.as_array().to_vec();
    let points = setup.points;
    let packets = packet_source(packets)?;
    let prepared = (|| {
        let setup = build_setup(setup, kinetic, absorption)?;
        let spec = Spec {
            static_potential,
            disorder: terms(&disorder)?,
            packets: packets?,
            steps: run.steps,
            pauses: run.pauses.clone(),
            detector: run.detector.map(|(left_end, right_start)| Detector {
                left_end,
                right_start,
            }),
            seed: run.seed,
            spectrum: run.spectrum.clone().map(
                |(probes, positions, modes, wavenumbers, energies, velocities)| Spectrum {
                    probes,
                    positions,
                    modes,
                    wavenumbers,
                    energies,
                    velocities,
                },
            ),
        };
        if run.threads == 0 {
            return Err(CoreError::InvalidInput("threads must be >= 1".into()));
        }
        Ok((setup, spec))
    })();
    let (setup, spec) = prepared.map_err(|error| to_pyerr(py, error))?;
    let snapshots = spec.pauses.len();
    let modes = spec
        .spectrum
        .as_ref()
        .map_or(0, |spectrum| spectrum.modes.len());
    let chunks = run_detached(py, |cancel| match run.precision.as_str() {
        "double" => run_in::<f64>(setup, &spec, &run, cancel),
        "single" => run_in::<f32>(setup, &spec, &run, cancel),
        other => Err(CoreError::InvalidInput(format!(
            "precision {other:?}: use \"double\" or \"single\""
        ))),
    })?;
    let list = PyList::empty(py);
    for chunk in chunks {
        list.append(chunk_dict(py, chunk, snapshots, points, modes)?)?;
    }
    Ok(list)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(realize, module)?)?;
    module.add_function(wrap_pyfunction!(draw_packet, module)?)?;
    module.add_function(wrap_pyfunction!(ensemble_chunks, module)?)?;
    module.add("CHUNK", CHUNK)?;
    module.add("DENSITY_FLOOR", DENSITY_FLOOR)?;
    Ok(())
}
