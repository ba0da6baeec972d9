//! The kinetic energy: one model of the dispersion `E(k)`, shared by the
//! transfer matrices (`transfer::Medium`) and the classical particles
//! (`classical::Landscape`).
//!
//! - Continuum: `E = hbar^2 k^2 / (2 mass)`.
//! - Lattice (tight binding, sites `dx` apart): `E = -2 hopping cos(k dx)`,
//!   the band `[-2 hopping, 2 hopping]`.
//!
//! A particle of momentum `p` has `k = p / hbar` and moves at the group
//! velocity `dE/dp`.

use crate::error::{invalid, CoreError};

#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Dispersion {
    Continuum { hbar: f64, mass: f64 },
    Lattice { hopping: f64, hbar: f64 },
}

impl Dispersion {
    /// Every parameter finite and > 0.
    pub fn validate(&self) -> Result<(), CoreError> {
        let values: [(&str, f64); 2] = match *self {
            Dispersion::Continuum { hbar, mass } => [("hbar", hbar), ("mass", mass)],
            Dispersion::Lattice { hopping, hbar } => [("hopping", hopping), ("hbar", hbar)],
        };
        for (name, value) in values {
            if !(value.is_finite() && value > 0.0) {
                return invalid(format!("{name} must be finite and > 0, got {value}"));
            }
        }
        Ok(())
    }

    pub fn hbar(&self) -> f64 {
        match *self {
            Dispersion::Continuum { hbar, .. } | Dispersion::Lattice { hbar, .. } => hbar,
        }
    }

    /// `E` at momentum `p` (wavenumber `p / hbar`) on a grid of spacing `dx`.
    #[inline]
    pub fn energy(&self, momentum: f64, dx: f64) -> f64 {
        match *self {
            Dispersion::Continuum { mass, .. } => momentum * momentum / (2.0 * mass),
            Dispersion::Lattice { hopping, hbar } => -2.0 * hopping * (momentum * dx / hbar).cos(),
        }
    }

    /// The group velocity `dE/dp` at momentum `p`.
    #[inline]
    pub fn velocity(&self, momentum: f64, dx: f64) -> f64 {
        match *self {
            Dispersion::Continuum { mass, .. } => momentum / mass,
            Dispersion::Lattice { hopping, hbar } => {
                2.0 * hopping * dx / hbar * (momentum * dx / hbar).sin()
            }
        }
    }

    /// The largest speed with kinetic energy at most `kinetic` (any speed of
    /// the band on a lattice).
    pub fn top_speed(&self, kinetic: f64, dx: f64) -> f64 {
        match *self {
            Dispersion::Continuum { mass, .. } => (2.0 * kinetic.max(0.0) / mass).sqrt(),
            Dispersion::Lattice { hopping, hbar } => 2.0 * hopping * dx / hbar,
        }
    }

    /// `E` at wavenumber `k` (the stepper's table; `energy` takes the momentum).
    #[inline]
    pub fn at_wavenumber(&self, k: f64, dx: f64) -> f64 {
        match *self {
            Dispersion::Continuum { hbar, mass } => hbar * hbar * (k * k) / (2.0 * mass),
            Dispersion::Lattice { hopping, .. } => -2.0 * hopping * (k * dx).cos(),
        }
    }

    /// `E(k)` at the grid's FFT wavenumbers (`observables::wavenumbers`): the
    /// split-step kinetic table.
    pub fn kinetic_table(&self, points: usize, dx: f64) -> Vec<f64> {
        crate::observables::wavenumbers(points, dx)
            .into_iter()
            .map(|k| self.at_wavenumber(k, dx))
            .collect()
    }

    /// `E(k) = sum_a E_a(k_a)` on a 2D/3D grid (C order), each axis's term at
    /// its FFT wavenumbers: the square/cubic lattice's band is `d` times wider.
    /// One axis gives `kinetic_table` itself.
    pub fn kinetic_table_nd(&self, shape: &[usize], spacing: &[f64]) -> Vec<f64> {
        let mut table = vec![0.0];
        for (&points, &dx) in shape.iter().zip(spacing) {
            let axis = self.kinetic_table(points, dx);
            table = table
                .iter()
                .flat_map(|&outer| axis.iter().map(move |&inner| outer + inner))
                .collect();
        }
        table
    }

    /// The kinetic energies `(lowest, highest)` of the band (`highest` infinite in the continuum).
    pub fn band(&self) -> (f64, f64) {
        match *self {
            Dispersion::Continuum { .. } => (0.0, f64::INFINITY),
            Dispersion::Lattice { hopping, .. } => (-2.0 * hopping, 2.0 * hopping),
        }
    }

    /// The propagating wavenumber `k >= 0` (per unit length) at `energy` over a
    /// constant potential `floor`, or `None` where `energy - floor` is not
    /// strictly inside the band.
    pub fn wavenumber(&self, energy: f64, floor: f64, dx: f64) -> Option<f64> {
        match *self {
            Dispersion::Continuum { hbar, mass } => {
                let kinetic = energy - floor;
                (kinetic > 0.0).then(|| (2.0 * mass * kinetic).sqrt() / hbar)
            }
            Dispersion::Lattice { hopping, .. } => {
                let cosine = (floor - energy) / (2.0 * hopping);
                (cosine.abs() < 1.0).then(|| cosine.acos() / dx)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MODELS: [Dispersion; 2] = [
        Dispersion::Continuum {
            hbar: 1.3,
            mass: 0.7,
        },
        Dispersion::Lattice {
            hopping: 0.8,
            hbar: 1.1,
        },
    ];

    #[test]
    fn velocity_is_the_derivative_of_energy() {
        for model in MODELS {
            for p in [-2.0, -0.3, 0.0, 0.4, 1.7] {
                let h = 1e-6;
                let slope = (model.energy(p + h, 0.5) - model.energy(p - h, 0.5)) / (2.0 * h);
                assert!(
                    (slope - model.velocity(p, 0.5)).abs() < 1e-8,
                    "{model:?} p = {p}"
                );
                assert!(
                    model.velocity(p, 0.5).abs()
                        <= model.top_speed(model.energy(p, 0.5), 0.5) + 1e-12
                );
            }
        }
    }

    #[test]
    fn wavenumbers_invert_the_energy() {
        for model in MODELS {
            let (dx, floor) = (0.5, 0.2);
            for k in [0.3, 1.0, 2.5] {
                let energy = floor + model.energy(k * model.hbar(), dx);
                let found = model.wavenumber(energy, floor, dx).unwrap();
                assert!((found - k).abs() < 1e-12, "{model:?}: {found} vs {k}");
            }
            let (low, _) = model.band();
            assert_eq!(model.wavenumber(floor + low, floor, dx), None);
            let table = model.kinetic_table(8, dx);
            let k = crate::observables::wavenumbers(8, dx);
            for (energy, k) in table.iter().zip(k) {
                let expected = model.energy(k * model.hbar(), dx);
                assert!((energy - expected).abs() < 1e-14 * expected.abs().max(1.0));
            }
        }
        assert!(Dispersion::Lattice {
            hopping: 0.0,
            hbar: 1.0
        }
        .validate()
        .is_err());
        assert!(Dispersion::Continuum {
            hbar: 1.0,
            mass: f64::NAN
        }
        .validate()
        .is_err());
    }
}
