//! Expectation values and detector probabilities of a wavefunction on the grid.
//!
//! Expectation values are of the probability still in the box, normalized by
//! it: `<x> = sum x |psi|^2 dx / norm`. Momentum and kinetic energy come from
//! the FFT, with Parseval's `sum |phi_k|^2 = N sum |psi_j|^2`. On a 2D/3D grid
//! the moments are per axis, and the detector's two sides are the slabs of
//! axis 0 (contiguous in C order).

use num_complex::Complex;

use crate::error::{invalid, CoreError};
use crate::ndfft::MAX_AXES;
use crate::real::{density, Real};
use crate::stepper::{Absorbed, Setup, Stepper};

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
    /// `<x_a>`, `<x_a^2>`, `<p_a>`, `<p_a^2>` per axis `a` (unused axes 0).
    pub position: [f64; MAX_AXES],
    pub position_squared: [f64; MAX_AXES],
    pub momentum: [f64; MAX_AXES],
    /// `<p^2>` (with a twist, at the momenta `hbar (k + 2 pi beta / L)`).
    pub momentum_squared: [f64; MAX_AXES],
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

/// The wavenumbers of each axis of the grid, in FFT order.
pub fn axis_wavenumbers(setup: &Setup) -> Vec<Vec<f64>> {
    setup
        .shape
        .iter()
        .zip(&setup.spacing)
        .map(|(&points, &dx)| wavenumbers(points, dx))
        .collect()
}

/// What turns `|FFT(psi)|^2` into the momentum density `n(k)` with
/// `sum n(k) d^dk = sum |psi|^2 dV`: `dV^2 / (2 pi)^d`.
pub fn momentum_scale(setup: &Setup) -> f64 {
    let two_pi = 2.0 * std::f64::consts::PI;
    let mut scale = setup.dx * setup.dx / two_pi;
    for _ in 1..setup.shape.len() {
        scale /= two_pi;
    }
    scale
}

/// The momentum density `|phi(k)|^2` of a Fourier transform `transform`
/// (unnormalized, FFT order per axis), scaled by `momentum_scale`.
pub fn momentum_density<T: Real>(transform: &[Complex<T>], scale: f64) -> Vec<f64> {
    transform.iter().map(|&z| density(z) * scale).collect()
}

/// The multi-index of consecutive flat indices in C order.
struct Counter<'a> {
    shape: &'a [usize],
    index: [usize; MAX_AXES],
}

impl<'a> Counter<'a> {
    fn new(shape: &'a [usize]) -> Self {
        Counter {
            shape,
            index: [0; MAX_AXES],
        }
    }

    fn advance(&mut self) {
        for a in (0..self.shape.len()).rev() {
            self.index[a] += 1;
            if self.index[a] < self.shape[a] {
                return;
            }
            self.index[a] = 0;
        }
    }
}

/// Measure `psi`; `buffer` (the grid's size) receives its Fourier transform
/// (C order); `wavenumbers` are the axes' own (`axis_wavenumbers`).
pub fn observe<T: Real>(
    stepper: &mut Stepper<'_, T>,
    psi: &[Complex<T>],
    buffer: &mut [Complex<T>],
    wavenumbers: &[Vec<f64>],
    detector: Option<Detector>,
) -> Observation {
    let setup = &stepper.shared().setup;
    let axes = setup.shape.len();
    let (mut norm, mut potential, mut quartic) = (0.0, 0.0, 0.0);
    let (mut first, mut second) = ([0.0; MAX_AXES], [0.0; MAX_AXES]);
    let mut counter = Counter::new(&setup.shape);
    for (&z, &v) in psi.iter().zip(stepper.potential()) {
        let rho = density(z);
        norm += rho;
        for a in 0..axes {
            let x = setup.origin[a] + counter.index[a] as f64 * setup.spacing[a];
            first[a] += rho * x;
            second[a] += rho * x * x;
        }
        potential += rho * v;
        quartic += rho * rho;
        counter.advance();
    }
    stepper.transform(psi, buffer);
    let (mut spectral, mut kinetic) = (0.0, 0.0);
    let (mut momentum, mut squared) = ([0.0; MAX_AXES], [0.0; MAX_AXES]);
    let shift = stepper.wavenumber_shift();
    let mut counter = Counter::new(&setup.shape);
    for (&z, &energy) in buffer.iter().zip(stepper.kinetic_table()) {
        let weight = density(z);
        spectral += weight;
        for a in 0..axes {
            // Only a 1D grid is twisted.
            let k = wavenumbers[a][counter.index[a]] + shift;
            momentum[a] += weight * k;
            squared[a] += weight * k * k;
        }
        kinetic += weight * energy;
        counter.advance();
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
    let hbar = setup.hbar;
    Observation {
        norm: norm * setup.dx,
        absorbed: stepper.absorbed,
        position: first.map(|f| f / norm),
        position_squared: second.map(|s| s / norm),
        momentum: momentum.map(|m| hbar * m / spectral),
        momentum_squared: squared.map(|s| hbar * hbar * s / spectral),
        energy,
        participation: quartic * setup.dx / ((norm * setup.dx) * (norm * setup.dx)),
        reflection,
        transmission,
    }
}
