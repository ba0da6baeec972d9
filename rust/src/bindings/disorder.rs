//! Bindings for disorder realizations (`crate::disorder`).

use std::sync::Arc;

use numpy::ndarray::{ArrayD, IxDyn};
use numpy::{IntoPyArray, PyReadonlyArray1, PyReadonlyArrayDyn};
use pyo3::prelude::*;

use super::error::to_pyerr;
use super::request::{request, tagged};
use super::run_released;
use crate::disorder::{BoxTerm, Kind, Line, Mesh, Plan, Realizer, Term};
use crate::error::{invalid, CoreError};

request! {
    /// The grid line a realization lives on.
    pub(crate) struct LineRequest("grid line") {
        points: usize,
        dx: f64,
        start: f64,
    }
}

impl LineRequest {
    pub(crate) fn line(&self) -> Line {
        Line {
            points: self.points,
            dx: self.dx,
            start: self.start,
        }
    }
}

request! {
    /// A grid of 1 to 3 axes (C order, axis 0 slowest).
    pub(crate) struct MeshRequest("grid mesh") {
        shape: Vec<usize>,
        spacing: Vec<f64>,
        start: Vec<f64>,
    }
}

impl MeshRequest {
    pub(crate) fn mesh(&self) -> Mesh {
        Mesh {
            shape: self.shape.clone(),
            spacing: self.spacing.clone(),
            start: self.start.clone(),
        }
    }
}

tagged! {
    /// One disorder term: the fields of its Python spec class, tagged by its kind.
    pub(crate) enum TermRequest("disorder term") {
        "white-noise" => WhiteNoise { strength: f64, start: f64, stop: f64 },
        "box" => Box { width: f64, start: f64, stop: f64 },
        "gaussian" => Gaussian { rms: f64, correlation_length: f64, start: f64, stop: f64 },
        "speckle" => Speckle { strength: f64, correlation_length: f64, sign: i64, start: f64, stop: f64 },
        "cauchy" => Cauchy { width: f64, start: f64, stop: f64 },
    }
}

impl TermRequest {
    pub(crate) fn term(&self) -> Result<Term, CoreError> {
        let (kind, start, stop) = match *self {
            TermRequest::WhiteNoise {
                strength,
                start,
                stop,
            } => (Kind::WhiteNoise { strength }, start, stop),
            TermRequest::Box { width, start, stop } => (Kind::Box { width }, start, stop),
            TermRequest::Cauchy { width, start, stop } => (Kind::Cauchy { width }, start, stop),
            TermRequest::Gaussian {
                rms,
                correlation_length,
                start,
                stop,
            } => (
                Kind::Gaussian {
                    rms,
                    correlation_length,
                },
                start,
                stop,
            ),
            TermRequest::Speckle {
                strength,
                correlation_length,
                sign,
                start,
                stop,
            } => (speckle(strength, correlation_length, sign)?, start, stop),
        };
        Ok(Term { kind, start, stop })
    }
}

/// A speckle's kind, the sign folded into the strength.
fn speckle(strength: f64, correlation_length: f64, sign: i64) -> Result<Kind, CoreError> {
    if sign != 1 && sign != -1 {
        return invalid(format!("speckle sign must be 1 or -1, got {sign}"));
    }
    Ok(Kind::Speckle {
        strength: sign as f64 * strength,
        correlation_length,
    })
}

tagged! {
    /// One disorder term on a mesh: as `TermRequest`, its region a box with one
    /// start and stop per axis.
    pub(crate) enum BoxTermRequest("disorder box term") {
        "white-noise" => WhiteNoise { strength: f64, start: Vec<f64>, stop: Vec<f64> },
        "box" => Box { width: f64, start: Vec<f64>, stop: Vec<f64> },
        "gaussian" => Gaussian { rms: f64, correlation_length: f64, start: Vec<f64>, stop: Vec<f64> },
        "speckle" => Speckle { strength: f64, correlation_length: f64, sign: i64, start: Vec<f64>, stop: Vec<f64> },
        "cauchy" => Cauchy { width: f64, start: Vec<f64>, stop: Vec<f64> },
    }
}

impl BoxTermRequest {
    pub(crate) fn term(&self) -> Result<BoxTerm, CoreError> {
        let (kind, start, stop) = match self {
            BoxTermRequest::WhiteNoise {
                strength,
                start,
                stop,
            } => (
                Kind::WhiteNoise {
                    strength: *strength,
                },
                start,
                stop,
            ),
            BoxTermRequest::Box { width, start, stop } => {
                (Kind::Box { width: *width }, start, stop)
            }
            BoxTermRequest::Cauchy { width, start, stop } => {
                (Kind::Cauchy { width: *width }, start, stop)
            }
            BoxTermRequest::Gaussian {
                rms,
                correlation_length,
                start,
                stop,
            } => (
                Kind::Gaussian {
                    rms: *rms,
                    correlation_length: *correlation_length,
                },
                start,
                stop,
            ),
            BoxTermRequest::Speckle {
                strength,
                correlation_length,
                sign,
                start,
                stop,
            } => (speckle(*strength, *correlation_length, *sign)?, start, stop),
        };
        Ok(BoxTerm {
            kind,
            start: start.clone(),
            stop: stop.clone(),
        })
    }
}

pub(crate) fn box_terms(requests: &[BoxTermRequest]) -> Result<Vec<BoxTerm>, CoreError> {
    requests.iter().map(BoxTermRequest::term).collect()
}

pub(crate) fn terms(requests: &[TermRequest]) -> Result<Vec<Term>, CoreError> {
    requests.iter().map(TermRequest::term).collect()
}

/// Realization `index` of `seed`: the disorder terms added to `base`.
#[pyfunction]
fn realize<'py>(
    py: Python<'py>,
    line: LineRequest,
    disorder: Vec<TermRequest>,
    base: PyReadonlyArray1<'py, f64>,
    seed: u64,
    index: u64,
) -> PyResult<Bound<'py, numpy::PyArray1<f64>>> {
    let mut potential = base.as_array().to_vec();
    let result = terms(&disorder).and_then(|terms| {
        let mut realizer = Realizer::new(line.line(), &terms)?;
        realizer.add_to(seed, index, &mut potential)
    });
    result.map_err(|error| to_pyerr(py, error))?;
    Ok(potential.into_pyarray(py))
}

/// Realization `index` of `seed` on a mesh of 1 to 3 axes: the disorder terms
/// added to `base` (an array of the mesh's shape, C order).
#[pyfunction]
fn realize_mesh<'py>(
    py: Python<'py>,
    mesh: MeshRequest,
    disorder: Vec<BoxTermRequest>,
    base: PyReadonlyArrayDyn<'py, f64>,
    seed: u64,
    index: u64,
) -> PyResult<Bound<'py, numpy::PyArrayDyn<f64>>> {
    let base = base.as_array();
    let mesh = mesh.mesh();
    if base.shape() != mesh.shape.as_slice() {
        let message = format!(
            "the base potential has shape {:?}; the mesh has shape {:?}",
            base.shape(),
            mesh.shape
        );
        return Err(to_pyerr(py, CoreError::InvalidInput(message)));
    }
    // C order whatever the base's memory layout (iter() walks it logically; slower than a copy).
    let mut potential: Vec<f64> = match base.as_slice() {
        Some(values) => values.to_vec(),
        None => base.iter().copied().collect(),
    };
    let shape = mesh.shape.clone();
    let potential = run_released(py, move || {
        let terms = box_terms(&disorder)?;
        let mut realizer = Realizer::with_plan(Arc::new(Plan::new_mesh(mesh, &terms)?));
        realizer.add_to(seed, index, &mut potential)?;
        ArrayD::from_shape_vec(IxDyn(&shape), potential)
            .map_err(|error| CoreError::Internal(format!("realization shape: {error}")))
    })?;
    Ok(potential.into_pyarray(py))
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(realize, module)?)?;
    module.add_function(wrap_pyfunction!(realize_mesh, module)?)?;
    Ok(())
}
