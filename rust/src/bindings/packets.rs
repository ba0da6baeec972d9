//! Bindings for the initial states of an ensemble (`crate::packets`).

use pyo3::prelude::*;

use super::error::to_pyerr;
use super::request::{tagged, ComplexRows, ComplexVector};
use crate::error::CoreError;
use crate::packets::{Draw, PacketSource};

tagged! {
    /// How one packet parameter is chosen per realization.
    pub(crate) enum DrawRequest("packet parameter") {
        "fixed" => Fixed { value: f64 },
        "uniform" => Uniform { low: f64, high: f64 },
        "normal" => Normal { mean: f64, std: f64 },
    }
}

impl DrawRequest {
    pub(crate) fn draw(&self) -> Draw {
        match *self {
            DrawRequest::Fixed { value } => Draw::Fixed(value),
            DrawRequest::Uniform { low, high } => Draw::Uniform(low, high),
            DrawRequest::Normal { mean, std } => Draw::Normal(mean, std),
        }
    }
}

tagged! {
    /// The initial states: one wavefunction, drawn Gaussian packets, or a list used in turn.
    pub(crate) enum PacketsRequest("packets") {
        "fixed" => Fixed { values: ComplexVector },
        "list" => List { values: ComplexRows },
        "gaussian" => Gaussian { center: DrawRequest, wavenumber: DrawRequest, width: DrawRequest },
    }
}

impl PacketsRequest {
    pub(crate) fn into_source(self) -> PacketSource {
        match self {
            PacketsRequest::Fixed { values } => PacketSource::Fixed(values.0),
            PacketsRequest::List { values } => PacketSource::List(values.0),
            PacketsRequest::Gaussian {
                center,
                wavenumber,
                width,
            } => PacketSource::Gaussian {
                center: center.draw(),
                wavenumber: wavenumber.draw(),
                width: width.draw(),
            },
        }
    }
}

/// The drawn (centre, wavenumber, width) of realization `index`, for single runs.
#[pyfunction]
fn draw_packet(
    py: Python<'_>,
    packets: PacketsRequest,
    seed: u64,
    index: u64,
) -> PyResult<(f64, f64, f64)> {
    packets
        .into_source()
        .parameters(seed, index)
        .ok_or_else(|| {
            to_pyerr(
                py,
                CoreError::InvalidInput("draw_packet needs a gaussian packet source".into()),
            )
        })
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add_function(wrap_pyfunction!(draw_packet, module)?)?;
    Ok(())
}
