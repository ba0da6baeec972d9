//! Bindings for the time-dependent terms and the twisted boundary (`crate::drive`).

use numpy::PyReadonlyArray1;
use pyo3::prelude::*;

use super::packets::DrawRequest;
use super::request::{request, tagged};
use crate::dispersion::Dispersion;
use crate::drive::{Drive, Envelope, Kick, Modulation, Profile, Term};
use crate::error::CoreError;

/// A 1-D real array, copied (another Python thread could write it while we run detached).
pub(crate) struct RealVector(pub(crate) Vec<f64>);

impl<'a, 'py> FromPyObject<'a, 'py> for RealVector {
    type Error = PyErr;

    fn extract(object: Borrowed<'a, 'py, PyAny>) -> PyResult<Self> {
        let array: PyReadonlyArray1<'py, f64> = object.extract()?;
        Ok(RealVector(array.as_array().to_vec()))
    }
}

tagged! {
    /// A time-dependent term's shape in space.
    pub(crate) enum ProfileRequest("profile") {
        "table" => Table { values: RealVector },
        "cosine" => Cosine { amplitude: f64, wavenumber: f64, phase: DrawRequest },
    }
}

impl ProfileRequest {
    fn profile(self) -> Profile {
        match self {
            ProfileRequest::Table { values } => Profile::Table(values.0),
            ProfileRequest::Cosine {
                amplitude,
                wavenumber,
                phase,
            } => Profile::Cosine {
                amplitude,
                wavenumber,
                phase: phase.draw(),
            },
        }
    }
}

request! {
    /// Kicks at the step boundaries `first, first + every, ...`.
    pub(crate) struct KickRequest("kick") {
        profile: ProfileRequest,
        first: usize,
        every: usize,
        modulation: Option<ModulationRequest>,
    }
}

request! {
    /// A kick's strength `1 + depth cos(frequency t_n + phase)` at its time `t_n`.
    pub(crate) struct ModulationRequest("kick modulation") {
        depth: f64,
        frequency: f64,
        phase: DrawRequest,
    }
}

tagged! {
    /// A term `e(t) V(x)` evaluated at each potential factor's time.
    pub(crate) enum TimeTermRequest("time-dependent term") {
        "modulated" => Modulated { profile: ProfileRequest, depth: f64, frequency: f64, phase: DrawRequest },
        "switched" => Switched { profile: ProfileRequest, on: usize, off: Option<usize> },
    }
}

request! {
    /// Every time-dependent part of a run and the quasimomentum (None: periodic).
    pub(crate) struct DriveRequest("drive") {
        kicks: Vec<KickRequest>,
        terms: Vec<TimeTermRequest>,
        quasimomentum: Option<DrawRequest>,
    }
}

impl DriveRequest {
    /// The core's drive; `dispersion` is the one the twist shifts.
    pub(crate) fn drive(self, dispersion: Dispersion, points: usize) -> Result<Drive, CoreError> {
        let drive = Drive {
            kicks: self
                .kicks
                .into_iter()
                .map(|kick| Kick {
                    profile: kick.profile.profile(),
                    first: kick.first,
                    every: kick.every,
                    modulation: kick.modulation.map(|m| Modulation {
                        depth: m.depth,
                        frequency: m.frequency,
                        phase: m.phase.draw(),
                    }),
                })
                .collect(),
            terms: self
                .terms
                .into_iter()
                .map(|term| match term {
                    TimeTermRequest::Modulated {
                        profile,
                        depth,
                        frequency,
                        phase,
                    } => Term {
                        profile: profile.profile(),
                        envelope: Envelope::Modulated(Modulation {
                            depth,
                            frequency,
                            phase: phase.draw(),
                        }),
                    },
                    TimeTermRequest::Switched { profile, on, off } => Term {
                        profile: profile.profile(),
                        envelope: Envelope::Switched { on, off },
                    },
                })
                .collect(),
            twist: self.quasimomentum.map(|draw| (draw.draw(), dispersion)),
        };
        drive.validate(points)?;
        Ok(drive)
    }
}
