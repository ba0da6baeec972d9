//! Bindings for ground states (`crate::ground`).

use numpy::{IntoPyArray, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::dispersion::ModelRequest;
use super::error::to_pyerr;
use super::request::request;
use super::run_detached;
use crate::error::CoreError;
use crate::ground::{ground_state, Problem, Settings, Stop};

request! {
    /// The grid, kinetic model, nonlinearity and stopping rule of a ground-state search.
    pub(crate) struct GroundRequest("ground state") {
        points: usize,
        dx: f64,
        /// Points and spacing per axis (one entry in 1D); `dx` is then the volume element.
        shape: Vec<usize>,
        spacing: Vec<f64>,
        model: ModelRequest,
        nonlinearity: f64,
        tolerance: f64,
        max_steps: usize,
    }
}

impl GroundRequest {
    /// The problem, its kinetic table from the model (`Dispersion::kinetic_table`), and the settings.
    fn problem(&self, potential: Vec<f64>) -> Result<(Problem, Settings), CoreError> {
        let dispersion = self.model.medium(self.dx)?.dispersion;
        let kinetic = if self.shape.len() > 1 {
            for &dx in &self.spacing {
                self.model.medium(dx)?;
            }
            if self.spacing.len() != self.shape.len() {
                return Err(CoreError::InvalidInput(format!(
                    "grid shape {:?} and spacing {:?} must have the same axes",
                    self.shape, self.spacing
                )));
            }
            dispersion.kinetic_table_nd(&self.shape, &self.spacing)
        } else {
            dispersion.kinetic_table(self.points, self.dx)
        };
        let problem = Problem {
            dx: self.dx,
            shape: self.shape.clone(),
            hbar: self.model.hbar(),
            kinetic,
            potential,
            nonlinearity: self.nonlinearity,
        };
        let settings = Settings {
            tolerance: self.tolerance,
            max_steps: self.max_steps,
        };
        Ok((problem, settings))
    }
}

/// The ground state from the nonnegative `initial`; see `mottle.ground_state`.
#[pyfunction]
fn ground_state_of<'py>(
    py: Python<'py>,
    request: GroundRequest,
    potential: PyReadonlyArray1<'py, f64>,
    initial: PyReadonlyArray1<'py, f64>,
) -> PyResult<Bound<'py, PyDict>> {
    // Copies: another Python thread could write these buffers while we run detached.
    let potential = potential.as_array().to_vec();
    let initial = initial.as_array().to_vec();
    let (problem, settings) = request
        .problem(potential)
        .map_err(|error| to_pyerr(py, error))?;
    let out = run_detached(py, move |cancel| {
        ground_state(&problem, &initial, &settings, cancel)
    })?;
    let dict = PyDict::new(py);
    dict.set_item("psi", out.psi.into_pyarray(py))?;
    dict.set_item("energy", out.energy)?;
    dict.set_item("chemical_potential", out.chemical_potential)?;
    dict.set_item("residual", out.residual)?;
    dict.set_item("scale", out.scale)?;
    dict.set_item("floor", out.floor)?;
    dict.set_item("steps", out.steps)?;
    dict.set_item("imaginary_step", out.imaginary_step)?;
    dict.set_item("newton_iterations", out.newton_iterations)?;
    dict.set_item("cg_iterations", out.cg_iterations)?;
    dict.set_item("polishes", out.polishes)?;
    let stop = match out.stop {
        Stop::Converged => "converged",
        Stop::StepCap => "step-cap",
        Stop::Floor => "floor",
    };
    dict.set_item("stop", stop)?;
    Ok(dict)
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(ground_state_of, module)?)?;
    Ok(())
}
