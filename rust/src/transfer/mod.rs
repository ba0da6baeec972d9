//! Stationary solutions by transfer matrices: the growth of a solution through
//! a potential (the Lyapunov exponent) and the transmission of a scattering
//! state, for one realization of the potential at one energy.
//!
//! Conventions, owned here:
//! - Lattice: `-J (psi[n+1] + psi[n-1]) + V[n] psi[n] = E psi[n]` (the
//!   hopping of the kinetic energy `-2 J cos(k a)`), so
//!   `psi[n+1] = ((V[n] - E) / J) psi[n] - psi[n-1]`.
//! - Continuum: `-(hbar^2 / 2m) psi'' + V psi = E psi` with `V` constant in
//!   each cell `[x_j - dx/2, x_j + dx/2)` of grid point `j`. A cell is crossed
//!   exactly: with `z = (2m/hbar^2)(E - V) dx^2` and `theta = sqrt(z)`,
//!   `(psi, dx psi')` is multiplied by `[[cos theta, sin(theta)/theta], [-z sin(theta)/theta, cos theta]]`
//!   (cosh and sinh where `z < 0`). Both entries are entire functions of `z`,
//!   summed as power series where `|z| <= 1/4` (no square root, no
//!   trigonometric call) and by `sin_cos` or `exp` beyond.
//! - The potential is used as given: the cell-averaged field of a correlated
//!   disorder has the power spectrum `sinc^2(q dx / 2)` times that of the
//!   sampled field, so at weak disorder a continuum Lyapunov exponent is
//!   biased by about `-(k dx)^2 / 3` relative to the continuum model.
//! - Growth is returned as a natural logarithm. States are rescaled by exact
//!   powers of two whenever they leave `[2^-600, 2^600]`, so any length works
//!   and the rescaling adds no rounding.
//! - Plain products and sums, not `mul_add`: without a target FMA feature
//!   `mul_add` is a library call, several times slower than the whole step.

use std::sync::atomic::{AtomicBool, Ordering};

use crate::dispersion::Dispersion;
use crate::error::{invalid, CoreError};

mod continuum;
mod lattice;
pub mod quasi1d;

/// How many cells run between two looks at the cancel flag.
const CANCEL_POLL_CELLS: usize = 1 << 16;

/// `2^600` and `2^-600`: the band a state is kept in.
const HUGE: f64 = f64::from_bits((1023 + 600) << 52);
const TINY: f64 = f64::from_bits((1023 - 600) << 52);
/// `ln(2^600)`.
const LOG_HUGE: f64 = 600.0 * std::f64::consts::LN_2;

/// The wave equation a transfer matrix solves: a dispersion on cells (or
/// sites) `dx` apart.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Medium {
    pub dispersion: Dispersion,
    pub dx: f64,
}

impl Medium {
    /// Kinetic energy `hbar^2 k^2 / (2 mass)`, cells of width `dx`.
    pub fn continuum(hbar: f64, mass: f64, dx: f64) -> Self {
        Medium {
            dispersion: Dispersion::Continuum { hbar, mass },
            dx,
        }
    }

    /// Kinetic energy `-2 hopping cos(k dx)`, sites `dx` apart (the stationary
    /// equation does not involve hbar).
    pub fn lattice(hopping: f64, dx: f64) -> Self {
        Medium {
            dispersion: Dispersion::Lattice { hopping, hbar: 1.0 },
            dx,
        }
    }

    pub fn validate(&self) -> Result<(), CoreError> {
        self.dispersion.validate()?;
        if !(self.dx.is_finite() && self.dx > 0.0) {
            return invalid(format!("dx must be finite and > 0, got {}", self.dx));
        }
        Ok(())
    }

    pub fn dx(&self) -> f64 {
        self.dx
    }

    /// The propagating wavenumber in a lead of constant potential `lead` at
    /// `energy` (per unit length), or `None` where the lead has no open channel.
    pub fn lead_wavenumber(&self, energy: f64, lead: f64) -> Option<f64> {
        self.dispersion.wavenumber(energy, lead, self.dx)
    }

    /// `lead_wavenumber`, or an error naming the energies that would do
    /// (`place` says where: "in the left lead").
    pub fn open_lead(&self, energy: f64, lead: f64, place: &str) -> Result<f64, CoreError> {
        self.lead_wavenumber(energy, lead).ok_or_else(|| {
            let band = match self.dispersion.band() {
                (low, high) if high.is_infinite() => format!("energies > {}", lead + low),
                (low, high) => format!(
                    "energies strictly inside the band ({}, {})",
                    lead + low,
                    lead + high
                ),
            };
            CoreError::InvalidInput(format!(
                "energy {energy} has no propagating wave {place} (potential {lead}): use {band}"
            ))
        })
    }
}

/// Rescale `values` by an exact power of two when the largest magnitude
/// leaves `[TINY, HUGE]`; returns the natural log of the factor removed.
#[inline(always)]
fn keep_in_range(size: f64, values: &mut [f64]) -> f64 {
    if size > HUGE {
        values.iter_mut().for_each(|v| *v *= TINY);
        LOG_HUGE
    } else if size < TINY {
        values.iter_mut().for_each(|v| *v *= HUGE);
        -LOG_HUGE
    } else {
        0.0
    }
}

#[inline(always)]
fn largest(values: &[f64]) -> f64 {
    values.iter().fold(0.0f64, |m, v| m.max(v.abs()))
}

/// Whether any `|v - center| >= limit` (or is NaN): a single pass without an
/// early exit, so that it vectorizes.
#[inline]
fn any_beyond(potential: &[f64], center: f64, limit: f64) -> bool {
    potential.iter().fold(false, |beyond, &v| {
        let distance = (v - center).abs();
        beyond | (distance >= limit) | distance.is_nan()
    })
}

fn check_finite(potential: &[f64], energy: f64) -> Result<(), CoreError> {
    if !energy.is_finite() {
        return invalid(format!("energy must be finite, got {energy}"));
    }
    if any_beyond(potential, 0.0, f64::INFINITY) {
        let j = potential.iter().position(|v| !v.is_finite()).unwrap_or(0);
        return invalid(format!(
            "potential must be finite, got {} at point {j}",
            potential[j]
        ));
    }
    Ok(())
}

fn interrupted(cancel: &AtomicBool) -> Result<(), CoreError> {
    if cancel.load(Ordering::Relaxed) {
        Err(CoreError::Interrupted)
    } else {
        Ok(())
    }
}

/// `values` kept in range by `keep_in_range`, by value (no references to the
/// loop's registers), and `log` plus the log of the factor removed.
#[inline(always)]
fn rescaled<const N: usize>(log: f64, mut values: [f64; N]) -> (f64, [f64; N]) {
    let removed = keep_in_range(largest(&values), &mut values);
    (log + removed, values)
}

/// Scale `values` by an exact power of two so that the largest magnitude lies
/// in `[1, 2)`; returns the natural log of the factor removed.
fn normalize(values: &mut [f64]) -> f64 {
    let size = largest(values);
    if size == 0.0 || !size.is_finite() {
        return 0.0;
    }
    let exponent = ((size.to_bits() >> 52) & 0x7ff) as i64 - 1023;
    if exponent.abs() > 1000 {
        // Subnormal or near the top of the range: two steps keep the factors representable.
        let half = exponent / 2;
        let factor = f64::from_bits(((1023 - half) as u64) << 52);
        values.iter_mut().for_each(|v| *v *= factor);
        return half as f64 * std::f64::consts::LN_2 + normalize(values);
    }
    let factor = f64::from_bits(((1023 - exponent) as u64) << 52);
    values.iter_mut().for_each(|v| *v *= factor);
    exponent as f64 * std::f64::consts::LN_2
}

/// `ln |v_end| / |v_start|` for the solution that vanishes just left of the
/// first cell (a hard wall), through every cell of `potential`.
///
/// Lattice: `v = (psi[n], psi[n-1])` with `psi[-1] = 0, psi[0] = 1`, after all
/// `potential.len()` sites, measured inside the clean band (`E = -2J cos q`)
/// by `|v|^2 = (psi[n] - cos q psi[n-1])^2 + (sin q psi[n-1])^2`, under which a
/// free step is a rotation (outside it by the plain norm). Continuum:
/// `v = (psi, psi' / kappa)` with `kappa = sqrt(2m|E|)/hbar` (`1/dx` at
/// `E = 0`), starting from `(0, 1)`: for `E > 0` a free cell is a rotation too.
/// Dividing by the length `potential.len() * dx` gives the Lyapunov exponent
/// of that realization: the amplitude decay rate, `gamma = 1/xi`.
pub fn log_growth(
    medium: Medium,
    potential: &[f64],
    energy: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    medium.validate()?;
    match medium.dispersion {
        // The lattice checks its input in the same pass that picks its path.
        Dispersion::Lattice { hopping, .. } => lattice::growth(hopping, potential, energy, cancel),
        Dispersion::Continuum { hbar, mass } => {
            check_finite(potential, energy)?;
            continuum::growth(hbar, mass, medium.dx, potential, energy, cancel)
        }
    }
}

/// `ln T` of the scattering state at `energy` through `potential`, with leads
/// of constant potential `potential[0]` on the left and `potential[last]` on
/// the right (the end cells or sites belong to the leads), incident from the
/// left: `T = (v_right / v_left) |t|^2` with `v` the leads' group velocities.
///
/// The transmitted wave is carried from the right lead back to the left one,
/// where the incident amplitude `A` is read off; `T = (v_right/v_left)/|A|^2`.
/// Lattice: `psi[n] = A e^{i k n} + B e^{-i k n}` for `n <= 1`, continuum
/// `psi = A e^{i k x} + B e^{-i k x}` left of cell 1.
pub fn log_transmission(
    medium: Medium,
    potential: &[f64],
    energy: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    medium.validate()?;
    check_finite(potential, energy)?;
    if potential.len() < 2 {
        return invalid("a transmission needs at least two cells (one per lead)");
    }
    let (left, right) = (potential[0], potential[potential.len() - 1]);
    let k_left = medium.open_lead(energy, left, "in the left lead")?;
    let k_right = medium.open_lead(energy, right, "in the right lead")?;
    let dx = medium.dx;
    match medium.dispersion {
        Dispersion::Lattice { hopping, .. } => {
            lattice::transmission(hopping, dx, potential, energy, k_left, k_right, cancel)
        }
        Dispersion::Continuum { hbar, mass } => {
            continuum::transmission(hbar, mass, dx, potential, energy, k_left, k_right, cancel)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn never() -> AtomicBool {
        AtomicBool::new(false)
    }

    #[test]
    fn closed_leads_and_bad_values_are_errors() {
        let medium = Medium::continuum(1.0, 1.0, 0.1);
        let potential = [0.0, 0.0, 0.0];
        assert!(log_transmission(medium, &potential, -0.1, &never()).is_err());
        assert!(log_transmission(medium, &potential, f64::NAN, &never()).is_err());
        assert!(log_growth(medium, &[0.0, f64::INFINITY], 1.0, &never()).is_err());
        let lattice = Medium::lattice(1.0, 1.0);
        assert!(log_transmission(lattice, &potential, 2.0, &never()).is_err());
        let cancelled = AtomicBool::new(true);
        assert_eq!(
            log_growth(lattice, &potential, 0.0, &cancelled),
            Err(CoreError::Interrupted)
        );
    }
}
