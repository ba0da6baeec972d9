//! Continuum cells: the exact transfer matrix of a cell of constant potential,
//! summed as a power series where it is small, and the loops over cells.

use std::sync::atomic::AtomicBool;

use super::{interrupted, keep_in_range, largest, CANCEL_POLL_CELLS};
use crate::error::CoreError;

/// Where the power series of a cell's entries are used: `|z| <= 1/4`, where
/// nine terms reach full double precision (the first omitted term is below
/// `0.25^9 / 18! = 6e-22`).
const SERIES_LIMIT: f64 = 0.25;
/// Beyond this `theta` an evanescent cell's entries are scaled by `exp(-theta)`.
const EVANESCENT_SCALE_LIMIT: f64 = 20.0;

/// `1/(2n)!` and `1/(2n+1)!` for `n = 0 ..= 8`.
const COS_SERIES: [f64; 9] = [
    1.0,
    1.0 / 2.0,
    1.0 / 24.0,
    1.0 / 720.0,
    1.0 / 40_320.0,
    1.0 / 3_628_800.0,
    1.0 / 479_001_600.0,
    1.0 / 87_178_291_200.0,
    1.0 / 20_922_789_888_000.0,
];
const SINC_SERIES: [f64; 9] = [
    1.0,
    1.0 / 6.0,
    1.0 / 120.0,
    1.0 / 5_040.0,
    1.0 / 362_880.0,
    1.0 / 39_916_800.0,
    1.0 / 6_227_020_800.0,
    1.0 / 1_307_674_368_000.0,
    1.0 / 355_687_428_096_000.0,
];

/// `(cos theta, sin(theta)/theta)` for `theta^2 = z` by the power series
/// (accurate where `|z| <= SERIES_LIMIT`).
#[inline(always)]
fn series(z: f64) -> (f64, f64) {
    let w = -z;
    let mut c = COS_SERIES[8];
    let mut s = SINC_SERIES[8];
    for n in (0..8).rev() {
        c = c * w + COS_SERIES[n];
        s = s * w + SINC_SERIES[n];
    }
    (c, s)
}

/// `(cos theta, sin(theta)/theta, ln scale)` for `theta^2 = z`: the cell's
/// matrix is `exp(ln scale) [[c, s], [-z s, c]]` in `(psi, dx psi')`.
#[inline(always)]
fn cell(z: f64) -> (f64, f64, f64) {
    if z.abs() <= SERIES_LIMIT {
        let (c, s) = series(z);
        (c, s, 0.0)
    } else if z > 0.0 {
        let theta = z.sqrt();
        let (sin, cos) = theta.sin_cos();
        (cos, sin / theta, 0.0)
    } else {
        let theta = (-z).sqrt();
        if theta <= EVANESCENT_SCALE_LIMIT {
            let grow = theta.exp();
            let shrink = 1.0 / grow;
            (0.5 * (grow + shrink), 0.5 * (grow - shrink) / theta, 0.0)
        } else {
            // cosh and sinh divided by exp(theta); exp(-2 theta) < 5e-18.
            let rest = (-2.0 * theta).exp();
            (0.5 * (1.0 + rest), 0.5 * (1.0 - rest) / theta, theta)
        }
    }
}

/// Cells per block of precomputed coefficients. In a block where every
/// `|z| <= SERIES_LIMIT` a cell's matrix has norm below 1.3, so a state
/// changes by less than `1.3^64 = 2e7` over the block and one range check
/// per block suffices.
const BLOCK: usize = 64;

/// The matrices of up to `BLOCK` consecutive cells: computed apart from the
/// recurrence so that the series vectorize and overlap with it.
struct CellBlock {
    z: [f64; BLOCK],
    c: [f64; BLOCK],
    s: [f64; BLOCK],
    log: [f64; BLOCK],
    len: usize,
    /// Every cell of the block is within the series limit (and `log` is zero).
    mild: bool,
}

impl CellBlock {
    fn new() -> Self {
        CellBlock {
            z: [0.0; BLOCK],
            c: [0.0; BLOCK],
            s: [0.0; BLOCK],
            log: [0.0; BLOCK],
            len: 0,
            mild: true,
        }
    }

    /// `cells.len() <= BLOCK` potentials; `scale = 2 m dx^2 / hbar^2`.
    #[inline(always)]
    fn fill(&mut self, scale: f64, energy: f64, cells: &[f64]) {
        let n = cells.len();
        self.len = n;
        for (z, &v) in self.z[..n].iter_mut().zip(cells) {
            *z = scale * (energy - v);
        }
        for ((c, s), &z) in self.c[..n]
            .iter_mut()
            .zip(&mut self.s[..n])
            .zip(&self.z[..n])
        {
            (*c, *s) = series(z);
        }
        self.mild = self.z[..n].iter().all(|z| z.abs() <= SERIES_LIMIT);
        if !self.mild {
            for j in 0..n {
                (self.c[j], self.s[j], self.log[j]) = cell(self.z[j]);
            }
        }
    }
}

/// `ln |v_end|` from `(psi, psi'/kappa) = (0, 1)` (see `log_growth`), block by block.
pub(super) fn growth(
    hbar: f64,
    mass: f64,
    dx: f64,
    potential: &[f64],
    energy: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    let scale = 2.0 * mass * dx * dx / (hbar * hbar);
    let kappa_dx = if energy != 0.0 {
        (scale * energy.abs()).sqrt()
    } else {
        1.0
    };
    // (psi, dx psi'), starting from psi = 0, psi'/kappa = 1.
    let mut state = [0.0, kappa_dx];
    let mut log = 0.0;
    let mut cells = CellBlock::new();
    for (count, block) in potential.chunks(BLOCK).enumerate() {
        if count % (CANCEL_POLL_CELLS / BLOCK) == 0 {
            interrupted(cancel)?;
        }
        cells.fill(scale, energy, block);
        for j in 0..cells.len {
            let (c, s, z) = (cells.c[j], cells.s[j], cells.z[j]);
            state = [
                c * state[0] + s * state[1],
                (-z * s) * state[0] + c * state[1],
            ];
            if !cells.mild {
                log += cells.log[j] + keep_in_range(state[0].abs().max(state[1].abs()), &mut state);
            }
        }
        if cells.mild {
            log += keep_in_range(state[0].abs().max(state[1].abs()), &mut state);
        }
    }
    Ok(log + state[0].hypot(state[1] / kappa_dx).ln())
}

#[allow(clippy::too_many_arguments)]
/// `ln T` through the cells (see `log_transmission`), given the leads' wavenumbers.
pub(super) fn transmission(
    hbar: f64,
    mass: f64,
    dx: f64,
    potential: &[f64],
    energy: f64,
    k_left: f64,
    k_right: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    let scale = 2.0 * mass * dx * dx / (hbar * hbar);
    // (re psi, im psi, re dx psi', im dx psi') at the right end of the last
    // inner cell, where psi = e^{i k x} with the phase origin there.
    let mut state = [1.0, 0.0, 0.0, k_right * dx];
    let mut log = 0.0;
    let inner = &potential[1..potential.len() - 1];
    let mut cells = CellBlock::new();
    for (count, block) in inner.rchunks(BLOCK).enumerate() {
        if count % (CANCEL_POLL_CELLS / BLOCK) == 0 {
            interrupted(cancel)?;
        }
        cells.fill(scale, energy, block);
        for j in (0..cells.len).rev() {
            let (c, s) = (cells.c[j], cells.s[j]);
            // The inverse of [[c, s], [-z s, c]] (determinant 1).
            let zs = cells.z[j] * s;
            state = [
                c * state[0] - s * state[2],
                c * state[1] - s * state[3],
                zs * state[0] + c * state[2],
                zs * state[1] + c * state[3],
            ];
            if !cells.mild {
                log += cells.log[j] + keep_in_range(largest(&state), &mut state);
            }
        }
        if cells.mild {
            log += keep_in_range(largest(&state), &mut state);
        }
    }
    // A e^{ikx} = (psi + psi'/(ik)) / 2, and psi'/(ik) = -i (dx psi') / (k dx).
    let k_dx = k_left * dx;
    let re = 0.5 * (state[0] + state[3] / k_dx);
    let im = 0.5 * (state[1] - state[2] / k_dx);
    let amplitude = re.hypot(im);
    Ok((k_right / k_left).ln() - 2.0 * (amplitude.ln() + log))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn never() -> AtomicBool {
        AtomicBool::new(false)
    }

    use crate::transfer::{log_growth, log_transmission, Medium};

    /// Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33,
    /// hbar = m = 1, height 1, width 1.
    fn rectangular_barrier(energy: f64) -> f64 {
        let (height, width) = (1.0f64, 1.0f64);
        if energy == height {
            1.0 / (1.0 + height * width * width / 2.0)
        } else if energy < height {
            let kappa = (2.0 * (height - energy)).sqrt();
            1.0 / (1.0
                + height.powi(2) * (kappa * width).sinh().powi(2)
                    / (4.0 * energy * (height - energy)))
        } else {
            let q = (2.0 * (energy - height)).sqrt();
            1.0 / (1.0
                + height.powi(2) * (q * width).sin().powi(2) / (4.0 * energy * (energy - height)))
        }
    }

    #[test]
    fn cell_series_agree_with_the_library_functions() {
        for z in [
            1e-12,
            0.01,
            0.16,
            0.2,
            SERIES_LIMIT,
            -1e-9,
            -0.1,
            -SERIES_LIMIT,
        ] {
            let (c, s, log) = cell(z);
            let theta = z.abs().sqrt();
            let (cos, sinc) = if z > 0.0 {
                (theta.cos(), theta.sin() / theta)
            } else {
                (theta.cosh(), theta.sinh() / theta)
            };
            assert_eq!(log, 0.0);
            assert!((c - cos).abs() < 3e-16, "z = {z}: {c} vs {cos}");
            assert!((s - sinc).abs() < 3e-16, "z = {z}: {s} vs {sinc}");
        }
    }

    #[test]
    fn rectangular_barrier_transmission_is_exact_with_aligned_cells() {
        // 16 cells per unit length; the barrier fills cells 160..176 exactly.
        let dx = 1.0 / 16.0;
        let potential: Vec<f64> = (0..400)
            .map(|j| if (160..176).contains(&j) { 1.0 } else { 0.0 })
            .collect();
        let medium = Medium::continuum(1.0, 1.0, dx);
        // Values in docs/validation.md: 0.2368027308, 0.4199743416, 2/3, 0.8090454696, 0.9666964295.
        for energy in [0.25, 0.5, 1.0, 1.5, 3.0] {
            let t = log_transmission(medium, &potential, energy, &never())
                .unwrap()
                .exp();
            let exact = rectangular_barrier(energy);
            assert!((t - exact).abs() < 1e-12, "E = {energy}: {t} vs {exact}");
        }
    }

    #[test]
    fn evanescent_growth_matches_the_decay_rate() {
        // Constant V above E: growth kappa L exactly as L grows (plus ln cosh terms).
        let medium = Medium::continuum(1.0, 1.0, 0.5);
        let kappa = (2.0f64 * 2.0).sqrt();
        let long = log_growth(medium, &vec![2.0; 200_000], 0.0, &never()).unwrap();
        let short = log_growth(medium, &vec![2.0; 100_000], 0.0, &never()).unwrap();
        let rate = (long - short) / (100_000.0 * 0.5);
        assert!((rate - kappa).abs() < 1e-9 * kappa, "{rate} vs {kappa}");
        // Very coarse cells go through the scaled branch.
        let coarse = Medium::continuum(1.0, 1.0, 40.0);
        let growth = log_growth(coarse, &[2.0; 1000], 0.0, &never()).unwrap();
        // At E = 0 the norm is that of (psi, dx psi'), from (0, 1):
        // psi = sinh(kappa x) / (kappa dx), dx psi' = cosh(kappa x).
        let kappa_dx = kappa * 40.0;
        let exact = kappa * 1000.0 * 40.0 - 2.0f64.ln() + 0.5 * (1.0 + kappa_dx.powi(-2)).ln();
        assert!((growth - exact).abs() < 1e-9 * exact, "{growth} vs {exact}");
    }

    #[test]
    fn deep_tunnelling_keeps_its_logarithm() {
        // A barrier so long that T underflows: ln T still follows -2 kappa L.
        let medium = Medium::continuum(1.0, 1.0, 0.1);
        let barrier = |cells: usize| {
            let mut potential = vec![1.0; cells + 2];
            potential[0] = 0.0;
            potential[cells + 1] = 0.0;
            log_transmission(medium, &potential, 0.5, &never()).unwrap()
        };
        let kappa = 1.0f64;
        let slope = (barrier(40_000) - barrier(20_000)) / (20_000.0 * 0.1);
        assert!((slope + 2.0 * kappa).abs() < 1e-9, "{slope}");
    }
}
