//! The tight-binding chain: the three-term recursion, one site at a time or
//! in interleaved segments, and the scattering state through it.

use std::sync::atomic::AtomicBool;

use super::{
    any_beyond, check_finite, interrupted, keep_in_range, largest, normalize, rescaled,
    CANCEL_POLL_CELLS, HUGE, TINY,
};
use crate::error::CoreError;

/// `ln |v_end|` from `(psi[0], psi[-1]) = (1, 0)` (see `log_growth`): interleaved
/// segments where the chain is long and every `|V - E|/J` moderate, one
/// checked site at a time otherwise.
pub(super) fn growth(
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

#[allow(clippy::too_many_arguments)]
/// `ln T` through the chain (see `log_transmission`), given the leads' wavenumbers.
pub(super) fn transmission(
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

#[cfg(test)]
mod tests {
    use super::*;

    fn never() -> AtomicBool {
        AtomicBool::new(false)
    }

    use crate::transfer::{log_growth, log_transmission, Medium};

    #[test]
    fn lattice_single_impurity() {
        // One site of potential u in a clean chain: T = 1 / (1 + (u / (2 J sin k))^2),
        // from matching psi on both sides of the impurity (E = -2 J cos k).
        let (hopping, u) = (1.0, 0.7);
        let mut potential = vec![0.0; 20];
        potential[10] = u;
        for k in [0.3f64, 1.0, 2.5] {
            let energy = -2.0 * hopping * k.cos();
            let medium = Medium::lattice(hopping, 1.0);
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
        let medium = Medium::lattice(1.0, 1.0);
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
        let medium = Medium::lattice(1.0, 1.0);
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
        let medium = Medium::lattice(1.0, 1.0);
        let energy = 3.0;
        let lambda = 0.5 * (energy + (energy * energy - 4.0f64).sqrt());
        let n = 1_000_000;
        let growth = log_growth(medium, &vec![0.0; n], energy, &never()).unwrap();
        // psi[n] = (lambda^(n+1) - lambda^-(n+1)) / (lambda - 1/lambda), psi[-1] = 0.
        let exact = (n as f64 + 1.0) * lambda.ln() + (1.0 + lambda.powi(-2)).sqrt().ln()
            - (lambda - 1.0 / lambda).ln();
        assert!((growth - exact).abs() < 1e-9 * exact, "{growth} vs {exact}");
    }
}
