//! Bindings for the energy-resolved transmission of an ensemble (`crate::spectrum`).

use super::request::request;
use crate::spectrum::Spectrum;

request! {
    /// Where and at which modes the transmitted wave is recorded.
    pub(crate) struct SpectrumRequest("spectrum") {
        /// Two grid points on the free side past the detector.
        probes: [usize; 2],
        positions: [f64; 2],
        /// Indices into the FFT-ordered wavenumbers.
        modes: Vec<usize>,
        wavenumbers: Vec<f64>,
        energies: Vec<f64>,
        velocities: Vec<f64>,
    }
}

impl SpectrumRequest {
    pub(crate) fn spectrum(self) -> Spectrum {
        Spectrum {
            probes: self.probes,
            positions: self.positions,
            modes: self.modes,
            wavenumbers: self.wavenumbers,
            energies: self.energies,
            velocities: self.velocities,
        }
    }
}
