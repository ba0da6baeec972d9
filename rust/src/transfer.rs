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

use crate::error::{invalid, CoreError};

/// How many cells run between two looks at the cancel flag.
const CANCEL_POLL_CELLS: usize = 1 << 16;

/// `2^600` and `2^-600`: the band a state is kept in.
const HUGE: f64 = f64::from_bits((1023 + 600) << 52);
const TINY: f64 = f64::from_bits((1023 - 600) << 52);
/// `ln(2^600)`.
const LOG_HUGE: f64 = 600.0 * std::f64::consts::LN_2;

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

/// The wave equation a transfer matrix solves.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Medium {
    /// Kinetic energy `hbar^2 k^2 / (2 mass)`, cells of width `dx`.
    Continuum { hbar: f64, mass: f64, dx: f64 },
    /// Kinetic energy `-2 hopping cos(k dx)`, sites `dx` apart.
    Lattice { hopping: f64, dx: f64 },
}

impl Medium {
    pub fn validate(&self) -> Result<(), CoreError> {
        let values: &[(&str, f64)] = match self {
            Medium::Continuum { hbar, mass, dx } => {
                &[("hbar", *hbar), ("mass", *mass), ("dx", *dx)]
            }
            Medium::Lattice { hopping, dx } => &[("hopping", *hopping), ("dx", *dx)],
        };
        for &(name, value) in values {
            if !(value.is_finite() && value > 0.0) {
                return invalid(format!("{name} must be finite and > 0, got {value}"));
            }
        }
        Ok(())
    }

    pub fn dx(&self) -> f64 {
        match *self {
            Medium::Continuum { dx, .. } | Medium::Lattice { dx, .. } => dx,
        }
    }

    /// The propagating wavenumber in a lead of constant potential `lead` at
    /// `energy` (per unit length), or `None` where the lead has no open channel.
    pub fn lead_wavenumber(&self, energy: f64, lead: f64) -> Option<f64> {
        match *self {
            Medium::Continuum { hbar, mass, .. } => {
                let kinetic = energy - lead;
                (kinetic > 0.0).then(|| (2.0 * mass * kinetic).sqrt() / hbar)
            }
            Medium::Lattice { hopping, dx } => {
                let cosine = (lead - energy) / (2.0 * hopping);
                (cosine.abs() < 1.0).then(|| cosine.acos() / dx)
            }
        }
    }
}

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
    potential
        .iter()
        .fold(false, |beyond, &v| beyond | !((v - center).abs() < limit))
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
    match medium {
        // The lattice checks its input in the same pass that picks its path.
        Medium::Lattice { hopping, .. } => lattice_growth(hopping, potential, energy, cancel),
        Medium::Continuum { hbar, mass, dx } => {
            check_finite(potential, energy)?;
            continuum_growth(hbar, mass, dx, potential, energy, cancel)
        }
    }
}

fn lattice_growth(
    hopping: f64,
    potential: &[f64],
    energy: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    let inverse = 1.0 / hopping;
    // One pass: every |V - E| / J below the interleaved bound (and finite)?
    let bounded =
        energy.is_finite() && !any_beyond(potential, energy, INTERLEAVED_MAX_FACTOR * hopping);
    let (state, log) = if potential.len() >= INTERLEAVED_MIN_SITES && bounded {
        interleaved_chain(potential, energy, inverse, cancel)?
    } else {
        check_finite(potential, energy)?;
        let mut state = [1.0, 0.0];
        let log = sequential_chain(potential, energy, inverse, &mut state, cancel)?;
        (state, log)
    };
    // Inside the clean band, E = -2J cos q, the norm under which a free step
    // is a rotation: a weak-disorder exponent then carries no O(1/L) bias
    // from the phase of the wave at the end.
    let cosine = -energy / (2.0 * hopping);
    let size = if cosine.abs() < 1.0 {
        (state[0] - cosine * state[1]).hypot((1.0 - cosine * cosine).sqrt() * state[1])
    } else {
        state[0].hypot(state[1])
    };
    Ok(log + size.ln())
}

/// `(psi[n], psi[n-1])` carried through `potential` one site at a time,
/// checked at every site; returns the log of the rescalings.
fn sequential_chain(
    potential: &[f64],
    energy: f64,
    inverse: f64,
    state: &mut [f64; 2],
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    let mut log = 0.0;
    for block in potential.chunks(CANCEL_POLL_CELLS) {
        interrupted(cancel)?;
        for &v in block {
            let next = ((v - energy) * inverse) * state[0] - state[1];
            *state = [next, state[0]];
            let size = next.abs().max(state[1].abs());
            if !(TINY..=HUGE).contains(&size) {
                log += keep_in_range(size, state);
            }
        }
    }
    Ok(log)
}

/// Chains at least this long are split into `CHAIN_SEGMENTS` interleaved segments.
const INTERLEAVED_MIN_SITES: usize = 4096;
const CHAIN_SEGMENTS: usize = 4;
/// Sites between two range checks of the interleaved segments.
const CHECK_EVERY: usize = 32;
/// While every `|V - E|/J < 4096`, a state grows or shrinks by less than
/// `4097^32 < 2^385` between checks, so it stays finite and nonzero.
const INTERLEAVED_MAX_FACTOR: f64 = 4096.0;

/// The recursion `psi[n+1] = c[n] psi[n] - psi[n-1]` is one long chain of
/// dependent multiply-subtracts, bound by their latency. Split into four
/// segments run side by side, it becomes seven independent chains: the first
/// segment carries the state from `(1, 0)`, each later one the two columns of
/// its transfer matrix, from `(1, 0)` and `(0, 1)`. The segments' products
/// are applied in order at the end (each with its own power-of-two
/// rescaling), which is the same product in another order of rounding.
fn interleaved_chain(
    potential: &[f64],
    energy: f64,
    inverse: f64,
    cancel: &AtomicBool,
) -> Result<([f64; 2], f64), CoreError> {
    let length = potential.len() / CHAIN_SEGMENTS;
    let (body, tail) = potential.split_at(length * CHAIN_SEGMENTS);
    let segment = |k: usize| &body[k * length..(k + 1) * length];
    // Segment 0: (a, b) = (psi[n], psi[n-1]). Segment k of 1..3: the current
    // values (pk, qk) and previous ones (rk, sk) of the columns started from
    // (1, 0) and (0, 1). Plain scalars, so that all of them live in registers.
    let (mut a, mut b) = (1.0, 0.0);
    let (mut p1, mut q1, mut r1, mut s1) = (1.0, 0.0, 0.0, 1.0);
    let (mut p2, mut q2, mut r2, mut s2) = (1.0, 0.0, 0.0, 1.0);
    let (mut p3, mut q3, mut r3, mut s3) = (1.0, 0.0, 0.0, 1.0);
    let mut logs = [0.0; CHAIN_SEGMENTS];
    let blocks = segment(0)
        .chunks(CHECK_EVERY)
        .zip(segment(1).chunks(CHECK_EVERY))
        .zip(segment(2).chunks(CHECK_EVERY))
        .zip(segment(3).chunks(CHECK_EVERY));
    for (count, (((b0, b1), b2), b3)) in blocks.enumerate() {
        if count % (CANCEL_POLL_CELLS / CHECK_EVERY) == 0 {
            interrupted(cancel)?;
        }
        for (((&v0, &v1), &v2), &v3) in b0.iter().zip(b1).zip(b2).zip(b3) {
            let (c0, c1, c2, c3) = (
                (v0 - energy) * inverse,
                (v1 - energy) * inverse,
                (v2 - energy) * inverse,
                (v3 - energy) * inverse,
            );
            (a, b) = (c0 * a - b, a);
            (p1, q1, r1, s1) = (c1 * p1 - r1, c1 * q1 - s1, p1, q1);
            (p2, q2, r2, s2) = (c2 * p2 - r2, c2 * q2 - s2, p2, q2);
            (p3, q3, r3, s3) = (c3 * p3 - r3, c3 * q3 - s3, p3, q3);
        }
        (logs[0], [a, b]) = rescaled(logs[0], [a, b]);
        (logs[1], [p1, q1, r1, s1]) = rescaled(logs[1], [p1, q1, r1, s1]);
        (logs[2], [p2, q2, r2, s2]) = rescaled(logs[2], [p2, q2, r2, s2]);
        (logs[3], [p3, q3, r3, s3]) = rescaled(logs[3], [p3, q3, r3, s3]);
    }
    let first = [a, b];
    let mut current = [[p1, q1], [p2, q2], [p3, q3]];
    let mut previous = [[r1, s1], [r2, s2], [r3, s3]];
    // The last few sites continue the last segment's columns.
    let last = CHAIN_SEGMENTS - 2;
    for &v in tail {
        let c = (v - energy) * inverse;
        let next = [
            c * current[last][0] - previous[last][0],
            c * current[last][1] - previous[last][1],
        ];
        previous[last] = current[last];
        current[last] = next;
    }
    let mut state = first;
    let mut log = logs[0];
    for k in 0..CHAIN_SEGMENTS - 1 {
        // Bring the state near 1 first, so that its product with the columns stays finite.
        log += normalize(&mut state);
        state = [
            state[0] * current[k][0] + state[1] * current[k][1],
            state[0] * previous[k][0] + state[1] * previous[k][1],
        ];
        log += logs[k + 1];
    }
    log += normalize(&mut state);
    Ok((state, log))
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

fn continuum_growth(
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
    let lead = |value: f64, side: &str| {
        medium.lead_wavenumber(energy, value).ok_or_else(|| {
            let band = match medium {
                Medium::Continuum { .. } => format!("energies > {value}"),
                Medium::Lattice { hopping, .. } => format!(
                    "energies strictly inside the band ({}, {})",
                    value - 2.0 * hopping,
                    value + 2.0 * hopping
                ),
            };
            CoreError::InvalidInput(format!(
                "energy {energy} has no propagating wave in the {side} lead (potential {value}): use {band}"
            ))
        })
    };
    let (k_left, k_right) = (lead(left, "left")?, lead(right, "right")?);
    match medium {
        Medium::Lattice { hopping, dx } => {
            lattice_transmission(hopping, dx, potential, energy, k_left, k_right, cancel)
        }
        Medium::Continuum { hbar, mass, dx } => {
            continuum_transmission(hbar, mass, dx, potential, energy, k_left, k_right, cancel)
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn lattice_transmission(
    hopping: f64,
    dx: f64,
    potential: &[f64],
    energy: f64,
    k_left: f64,
    k_right: f64,
    cancel: &AtomicBool,
) -> Result<f64, CoreError> {
    let (phase_left, phase_right) = (k_left * dx, k_right * dx);
    let inverse = 1.0 / hopping;
    let last = potential.len() - 1;
    // (re psi[n], im psi[n], re psi[n+1], im psi[n+1]) from n = last down to 0:
    // psi[n-1] = ((V[n] - E)/J) psi[n] - psi[n+1].
    let mut state = [1.0, 0.0, phase_right.cos(), phase_right.sin()];
    let mut log = 0.0;
    let inner = &potential[1..];
    for block in inner.rchunks(CANCEL_POLL_CELLS) {
        interrupted(cancel)?;
        for &v in block.iter().rev() {
            let c = (v - energy) * inverse;
            state = [
                c * state[0] - state[2],
                c * state[1] - state[3],
                state[0],
                state[1],
            ];
            let size = largest(&state);
            if !(TINY..=HUGE).contains(&size) {
                log += keep_in_range(size, &mut state);
            }
        }
    }
    debug_assert!(last >= 1);
    // A = (psi[1] - e^{-ik} psi[0]) / (2i sin k).
    let (cos, sin) = (phase_left.cos(), phase_left.sin());
    let (re0, im0, re1, im1) = (state[0], state[1], state[2], state[3]);
    let re = re1 - (cos * re0 + sin * im0);
    let im = im1 - (cos * im0 - sin * re0);
    let amplitude = re.hypot(im) / (2.0 * sin.abs());
    Ok((phase_right.sin() / sin).ln() - 2.0 * (amplitude.ln() + log))
}

#[allow(clippy::too_many_arguments)]
fn continuum_transmission(
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
        let medium = Medium::Continuum {
            hbar: 1.0,
            mass: 1.0,
            dx,
        };
        // Values in REFERENCES.md: 0.2368027308, 0.4199743416, 2/3, 0.8090454696, 0.9666964295.
        for energy in [0.25, 0.5, 1.0, 1.5, 3.0] {
            let t = log_transmission(medium, &potential, energy, &never())
                .unwrap()
                .exp();
            let exact = rectangular_barrier(energy);
            assert!((t - exact).abs() < 1e-12, "E = {energy}: {t} vs {exact}");
        }
    }

    #[test]
    fn lattice_single_impurity() {
        // One site of potential u in a clean chain: T = 1 / (1 + (u / (2 J sin k))^2),
        // from matching psi on both sides of the impurity (E = -2 J cos k).
        let (hopping, u) = (1.0, 0.7);
        let mut potential = vec![0.0; 20];
        potential[10] = u;
        for k in [0.3f64, 1.0, 2.5] {
            let energy = -2.0 * hopping * k.cos();
            let medium = Medium::Lattice { hopping, dx: 1.0 };
            let t = log_transmission(medium, &potential, energy, &never())
                .unwrap()
                .exp();
            let exact = 1.0 / (1.0 + (u / (2.0 * hopping * k.sin())).powi(2));
            assert!((t - exact).abs() < 1e-13, "k = {k}: {t} vs {exact}");
        }
    }

    #[test]
    fn lattice_follows_the_sign_of_the_potential() {
        // A raised plateau shifts the band up: at E = 2.5 (above the clean band)
        // the wave propagates over a plateau of height 1.5 and nothing else does.
        let mut potential = vec![1.5; 200];
        let medium = Medium::Lattice {
            hopping: 1.0,
            dx: 1.0,
        };
        let growth = log_growth(medium, &potential, 2.5, &never()).unwrap();
        assert!(growth.abs() < 2.0, "inside the shifted band: {growth}");
        let growth = log_growth(medium, &potential, -2.5, &never()).unwrap();
        assert!(growth > 100.0, "far outside it: {growth}");
        potential[0] = 0.0;
        potential[199] = 0.0;
        // Leads and plateau are nearly matched at E = 1 (group velocities 0.87 and 0.97).
        assert!(log_transmission(medium, &potential, 1.0, &never()).unwrap() > -0.2);
    }

    #[test]
    fn evanescent_growth_matches_the_decay_rate() {
        // Constant V above E: growth kappa L exactly as L grows (plus ln cosh terms).
        let medium = Medium::Continuum {
            hbar: 1.0,
            mass: 1.0,
            dx: 0.5,
        };
        let kappa = (2.0f64 * 2.0).sqrt();
        let long = log_growth(medium, &vec![2.0; 200_000], 0.0, &never()).unwrap();
        let short = log_growth(medium, &vec![2.0; 100_000], 0.0, &never()).unwrap();
        let rate = (long - short) / (100_000.0 * 0.5);
        assert!((rate - kappa).abs() < 1e-9 * kappa, "{rate} vs {kappa}");
        // Very coarse cells go through the scaled branch.
        let coarse = Medium::Continuum {
            hbar: 1.0,
            mass: 1.0,
            dx: 40.0,
        };
        let growth = log_growth(coarse, &[2.0; 1000], 0.0, &never()).unwrap();
        // At E = 0 the norm is that of (psi, dx psi'), from (0, 1):
        // psi = sinh(kappa x) / (kappa dx), dx psi' = cosh(kappa x).
        let kappa_dx = kappa * 40.0;
        let exact = kappa * 1000.0 * 40.0 - 2.0f64.ln() + 0.5 * (1.0 + kappa_dx.powi(-2)).ln();
        assert!((growth - exact).abs() < 1e-9 * exact, "{growth} vs {exact}");
    }

    #[test]
    fn interleaved_chain_agrees_with_the_sequential_one() {
        // Pseudo-random potentials (a fixed linear congruential sequence), weak and strong,
        // with lengths that leave tails of every size.
        let mut seed = 12345u64;
        let mut uniform = || {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for (width, energy, sites) in [(1.0, 0.5, 40_001), (6.0, -1.3, 40_003), (0.2, 2.7, 8_194)] {
            let potential: Vec<f64> = (0..sites).map(|_| width * (uniform() - 0.5)).collect();
            let inverse = 1.0 / 0.8;
            let (state, log) = interleaved_chain(&potential, energy, inverse, &never()).unwrap();
            let mut reference = [1.0, 0.0];
            let reference_log =
                sequential_chain(&potential, energy, inverse, &mut reference, &never()).unwrap();
            let growth = log + state[0].hypot(state[1]).ln();
            let expected = reference_log + reference[0].hypot(reference[1]).ln();
            assert!(
                (growth - expected).abs() < 1e-10 * expected.abs(),
                "{growth} vs {expected}"
            );
            // The direction of the state agrees too.
            let angle = state[1].atan2(state[0]).tan();
            let reference_angle = reference[1].atan2(reference[0]).tan();
            assert!((angle - reference_angle).abs() < 1e-8 * reference_angle.abs().max(1.0));
        }
    }

    #[test]
    fn strong_potentials_take_the_checked_path() {
        let medium = Medium::Lattice {
            hopping: 1.0,
            dx: 1.0,
        };
        let mut potential = vec![0.0; 10_000];
        potential[5000] = 1e5; // beyond the interleaved bound: one site of growth 1e5
        let growth = log_growth(medium, &potential, 3.0, &never()).unwrap();
        let lambda = 0.5 * (3.0 + 5.0f64.sqrt());
        assert!(
            (growth - (10_000.0 * lambda.ln() + 1e5f64.ln())).abs() < 2.0,
            "{growth}"
        );
    }

    #[test]
    fn lattice_growth_survives_long_chains() {
        // Outside the band with no disorder: psi grows like lambda^n with
        // lambda + 1/lambda = |E|/J.
        let medium = Medium::Lattice {
            hopping: 1.0,
            dx: 1.0,
        };
        let energy = 3.0;
        let lambda = 0.5 * (energy + (energy * energy - 4.0f64).sqrt());
        let n = 1_000_000;
        let growth = log_growth(medium, &vec![0.0; n], energy, &never()).unwrap();
        // psi[n] = (lambda^(n+1) - lambda^-(n+1)) / (lambda - 1/lambda), psi[-1] = 0.
        let exact = (n as f64 + 1.0) * lambda.ln() + (1.0 + lambda.powi(-2)).sqrt().ln()
            - (lambda - 1.0 / lambda).ln();
        assert!((growth - exact).abs() < 1e-9 * exact, "{growth} vs {exact}");
    }

    #[test]
    fn deep_tunnelling_keeps_its_logarithm() {
        // A barrier so long that T underflows: ln T still follows -2 kappa L.
        let medium = Medium::Continuum {
            hbar: 1.0,
            mass: 1.0,
            dx: 0.1,
        };
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

    #[test]
    fn closed_leads_and_bad_values_are_errors() {
        let medium = Medium::Continuum {
            hbar: 1.0,
            mass: 1.0,
            dx: 0.1,
        };
        let potential = [0.0, 0.0, 0.0];
        assert!(log_transmission(medium, &potential, -0.1, &never()).is_err());
        assert!(log_transmission(medium, &potential, f64::NAN, &never()).is_err());
        assert!(log_growth(medium, &[0.0, f64::INFINITY], 1.0, &never()).is_err());
        let lattice = Medium::Lattice {
            hopping: 1.0,
            dx: 1.0,
        };
        assert!(log_transmission(lattice, &potential, 2.0, &never()).is_err());
        let cancelled = AtomicBool::new(true);
        assert_eq!(
            log_growth(lattice, &potential, 0.0, &cancelled),
            Err(CoreError::Interrupted)
        );
    }
}
