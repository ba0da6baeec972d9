//! Bindings for disorder realizations (`crate::disorder`).

use numpy::{IntoPyArray, PyReadonlyArray1};
use pyo3::prelude::*;

use super::error::to_pyerr;
use super::request::{request, tagged};
use crate::disorder::{Kind, Line, Realizer, Term};
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
            } => {
                if sign != 1 && sign != -1 {
                    return invalid(format!("speckle sign must be 1 or -1, got {sign}"));
                }
                let strength = sign as f64 * strength;
                let kind = Kind::Speckle {
                    strength,
                    correlation_length,
                };
                (kind, start, stop)
            }
        };
        Ok(Term { kind, start, stop })
    }
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

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(realize, module)?)?;
    Ok(())
}
