//! Expectation values and detector probabilities of a wavefunction on the grid.
//!
//! Expectation values are of the probability still in the box, normalized by
//! it: `<x> = sum x |psi|^2 dx / norm`. Momentum and kinetic energy come from
//! the FFT, with Parseval's `sum |phi_k|^2 = N sum |psi_j|^2`.

use num_complex::Complex;

use crate::error::{invalid, CoreError};
use crate::real::{density, Real};
use crate::stepper::{Absorbed, Stepper};

/// Where reflection and transmission are counted: points `0 .. left_end` lie
/// left of the detector's left edge, points `right_start ..` right of its right edge.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Detector {
    pub left_end: usize,
    pub right_start: usize,
}

impl Detector {
    pub fn validate(&self, points: usize) -> Result<(), CoreError> {
        if self.left_end > self.right_start || self.right_start > points {
            return invalid(format!(
                "detector {self:?} does not fit the grid of {points} points"
            ));
        }
        Ok(())
    }
}

/// What is measured at a pause of a run.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Observation {
    pub norm: f64,
    pub absorbed: Absorbed,
    pub position: f64,
    pub position_squared: f64,
    pub momentum: f64,
    /// `<p^2>` (with a twist, at the momenta `hbar (k + 2 pi beta / L)`).
    pub momentum_squared: f64,
    pub energy: f64,
    /// Inverse participation ratio `sum |psi|^4 dx / (sum |psi|^2 dx)^2` (1/length).
    pub participation: f64,
    /// `P(x < left) + absorbed_left` (NaN without a detector).
    pub reflection: f64,
    /// `P(x > right) + absorbed_right` (NaN without a detector).
    pub transmission: f64,
}

/// Wavenumbers in FFT order, `k = 2 pi fftfreq(points, dx)`.
pub fn wavenumbers(points: usize, dx: f64) -> Vec<f64> {
    let length = points as f64 * dx;
    (0..points)
        .map(|j| {
            let index = if j < points.div_ceil(2) {
                j as f64
            } else {
                j as f64 - points as f64
            };
            2.0 * std::f64::consts::PI * index / length
        })
        .collect()
}

/// The momentum density `|phi(k)|^2` of a Fourier transform `transform`
/// (unnormalized, FFT order), scaled so that `sum n(k) dk = sum |psi|^2 dx`.
pub fn momentum_density<T: Real>(transform: &[Complex<T>], dx: f64) -> Vec<f64> {
    let scale = dx * dx / (2.0 * std::f64::consts::PI);
    transform.iter().map(|&z| density(z) * scale).collect()
}

/// Measure `psi`; `buffer` (the grid's size) receives its Fourier transform.
pub fn observe<T: Real>(
    stepper: &mut Stepper<'_, T>,
    psi: &[Complex<T>],
    buffer: &mut [Complex<T>],
    wavenumbers: &[f64],
    detector: Option<Detector>,
) -> Observation {
    let setup = &stepper.shared().setup;
    let (mut norm, mut first, mut second, mut potential, mut quartic) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for (j, (&z, &v)) in psi.iter().zip(stepper.potential()).enumerate() {
        let rho = density(z);
        let x = setup.start + j as f64 * setup.dx;
        norm += rho;
        first += rho * x;
        second += rho * x * x;
        potential += rho * v;
        quartic += rho * rho;
    }
    stepper.transform(psi, buffer);
    let (mut spectral, mut momentum, mut kinetic, mut squared) = (0.0, 0.0, 0.0, 0.0);
    let shift = stepper.wavenumber_shift();
    for ((&z, &k), &energy) in buffer.iter().zip(wavenumbers).zip(stepper.kinetic_table()) {
        let weight = density(z);
        let k = k + shift;
        spectral += weight;
        momentum += weight * k;
        squared += weight * k * k;
        kinetic += weight * energy;
    }
    let (reflection, transmission) = match detector {
        Some(detector) => {
            let left: f64 = psi[..detector.left_end].iter().map(|&z| density(z)).sum();
            let right: f64 = psi[detector.right_start..]
                .iter()
                .map(|&z| density(z))
                .sum();
            (
                left * setup.dx + stepper.absorbed.left,
                right * setup.dx + stepper.absorbed.right,
            )
        }
        None => (f64::NAN, f64::NAN),
    };
    let energy = kinetic / spectral + (potential + 0.5 * setup.nonlinearity * quartic) / norm;
    Observation {
        norm: norm * setup.dx,
        absorbed: stepper.absorbed,
        position: first / norm,
        position_squared: second / norm,
        momentum: setup.hbar * momentum / spectral,
        momentum_squared: setup.hbar * setup.hbar * squared / spectral,
        energy,
        participation: quartic * setup.dx / ((norm * setup.dx) * (norm * setup.dx)),
        reflection,
        transmission,
    }
}
