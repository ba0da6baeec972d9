//! Many classical particles in one realization's potential: the classical
//! counterpart of a quantum packet, sampled from the packet's Wigner
//! distribution and moved like the single-run particle of `classical`
//! (exactly, cell by cell, in the continuum; by the leapfrog on the lattice).
//!
//! For the minimum-uncertainty Gaussian packet of rms width `s` the Wigner
//! function is a product of Gaussians: `x ~ N(x0, s^2)`, `p ~ N(hbar k0, (hbar/2s)^2)`,
//! independent. Particle `j` draws from its own counter-based stream keyed by
//! `(seed, CLASSICAL_PURPOSE + index, j)`, so the sample does not depend on
//! threads or chunking. All particles share one sub-step, short enough for
//! the fastest of them (see `Landscape::substeps`).

use std::sync::atomic::{AtomicBool, Ordering};

use rayon::prelude::*;

use crate::classical::{Landscape, Particle};
use crate::error::{invalid, CoreError};
use crate::propagate::{validate_pauses, Pause};
use crate::random::{Stream, CLASSICAL_PURPOSE};

/// Steps between two looks at the cancel flag.
const CANCEL_POLL_STEPS: usize = 256;

/// Particles per parallel task (not part of any result: each particle has its own stream).
const PARTICLES_PER_TASK: usize = 256;

/// The phase-space Gaussian the particles are drawn from, and the run.
#[derive(Debug, Clone, PartialEq)]
pub struct ClassicalSpec {
    pub center: f64,
    pub position_spread: f64,
    pub momentum: f64,
    pub momentum_spread: f64,
    pub particles: usize,
    pub seed: u64,
    pub index: u64,
    pub step: f64,
    pub steps: usize,
    /// Times (increasing, within the run) at which the particles are recorded.
    pub pauses: Vec<Pause>,
}

/// Final phase-space points, those at each pause, and the binned positions.
#[derive(Debug, Clone, PartialEq)]
pub struct ClassicalOutput {
    pub particles: Vec<Particle>,
    /// `particles x pauses`, particle-major: each particle at each pause.
    pub trail: Vec<Particle>,
    /// `pauses x points`: particles nearest each grid point and not absorbed.
    pub counts: Vec<u64>,
    pub substeps: usize,
}

fn draw(spec: &ClassicalSpec, j: usize) -> Particle {
    let mut stream = Stream::new(
        spec.seed,
        CLASSICAL_PURPOSE.wrapping_add(spec.index),
        j as u64,
    );
    Particle {
        position: spec.center + spec.position_spread * stream.normal(),
        momentum: spec.momentum + spec.momentum_spread * stream.normal(),
        absorbed: 0,
    }
}

/// Run the particles of `spec` through `landscape`.
pub fn run_particles(
    landscape: &Landscape<'_>,
    spec: &ClassicalSpec,
    cancel: &AtomicBool,
) -> Result<ClassicalOutput, CoreError> {
    let points = landscape.potential.len();
    if points < 2 {
        return invalid(format!("the landscape needs >= 2 points, got {points}"));
    }
    if let Some(j) = landscape.potential.iter().position(|v| !v.is_finite()) {
        return invalid(format!(
            "potential must be finite, got {} at point {j}",
            landscape.potential[j]
        ));
    }
    for (name, value) in [
        ("center", spec.center),
        ("momentum", spec.momentum),
        ("position spread", spec.position_spread),
        ("momentum spread", spec.momentum_spread),
    ] {
        if !value.is_finite() {
            return invalid(format!("{name} must be finite, got {value}"));
        }
    }
    if !(spec.step.is_finite() && spec.step > 0.0) {
        return invalid(format!("step must be finite and > 0, got {}", spec.step));
    }
    if spec.particles == 0 {
        return invalid("particles must be >= 1");
    }
    validate_pauses(&spec.pauses, spec.steps, spec.step)?;

    let mut particles: Vec<Particle> = (0..spec.particles)
        .into_par_iter()
        .map(|j| draw(spec, j))
        .collect();
    let fastest = particles
        .iter()
        .copied()
        .max_by(|a, b| landscape.energy(a).total_cmp(&landscape.energy(b)))
        .ok_or_else(|| CoreError::Internal("no particle drawn".into()))?;
    let substeps = landscape.substeps(&fastest, spec.step);
    let snapshots = spec.pauses.len();
    let start = landscape.start;
    let dx = landscape.dx;

    let mut trail = vec![
        Particle {
            position: 0.0,
            momentum: 0.0,
            absorbed: 0,
        };
        spec.particles * snapshots.max(1)
    ];
    // Integer counts: summed per rayon split and then across splits, which is
    // exact in any grouping, so the histogram does not depend on threads.
    let empty = || vec![0u64; snapshots * points];
    let counts = particles
        .par_chunks_mut(PARTICLES_PER_TASK)
        .zip(trail.par_chunks_mut(PARTICLES_PER_TASK * snapshots.max(1)))
        .try_fold(empty, |mut counts, (chunk, seen)| {
            let mut done = 0;
            let ends = spec.pauses.iter().map(|p| p.steps).chain([spec.steps]);
            for (s, pause) in ends.enumerate() {
                // Slices of steps between looks at the cancel flag; a particle
                // takes the same sub-steps however its run is sliced.
                while done < pause {
                    if cancel.load(Ordering::Relaxed) {
                        return Err(CoreError::Interrupted);
                    }
                    let slice = CANCEL_POLL_STEPS.min(pause - done);
                    for particle in chunk.iter_mut() {
                        landscape.evolve(particle, slice as f64 * spec.step, slice * substeps);
                    }
                    done += slice;
                }
                if s < snapshots {
                    let offset = spec.pauses[s].offset;
                    let row = &mut counts[s * points..(s + 1) * points];
                    for (j, particle) in chunk.iter().enumerate() {
                        // Between step boundaries: a copy moved on by the offset.
                        let mut now = *particle;
                        if offset > 0.0 {
                            landscape.evolve(&mut now, offset, substeps);
                        }
                        seen[j * snapshots + s] = now;
                        if now.absorbed == 0 {
                            let bin = ((now.position - start) / dx).round() as i64;
                            row[bin.rem_euclid(points as i64) as usize] += 1;
                        }
                    }
                }
            }
            Ok(counts)
        })
        .try_reduce(empty, |mut total, part| {
            total.iter_mut().zip(part).for_each(|(t, p)| *t += p);
            Ok(total)
        })?;
    trail.truncate(spec.particles * snapshots);
    Ok(ClassicalOutput {
        particles,
        trail,
        counts,
        substeps,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dispersion::Dispersion;

    fn spec(particles: usize, momentum: f64) -> ClassicalSpec {
        ClassicalSpec {
            center: -30.0,
            position_spread: 2.0,
            momentum,
            momentum_spread: 0.02,
            particles,
            seed: 3,
            index: 0,
            step: 0.1,
            steps: 600,
            pauses: vec![Pause::at(300), Pause::at(600)],
        }
    }

    #[test]
    fn a_wall_reflects_slow_particles_and_passes_fast_ones() {
        let points = 1024;
        let dx = 0.1;
        let potential: Vec<f64> = (0..points)
            .map(|j| {
                let x = -51.2 + j as f64 * dx;
                0.5 * (-x * x / 2.0).exp()
            })
            .collect();
        let landscape = Landscape {
            potential: &potential,
            start: -51.2,
            dx,
            left_layer_end: 0,
            right_layer_start: points,
            dispersion: Dispersion::Continuum {
                hbar: 1.0,
                mass: 1.0,
            },
        };
        let never = AtomicBool::new(false);
        // Barrier top 0.5: p = 0.8 (E = 0.32) turns back, p = 1.2 (E = 0.72) passes.
        for (momentum, passes) in [(0.8, false), (1.2, true)] {
            let out = run_particles(&landscape, &spec(500, momentum), &never).unwrap();
            let beyond = out.particles.iter().filter(|p| p.position > 0.0).count();
            assert_eq!(beyond, if passes { 500 } else { 0 }, "p = {momentum}");
            let total: u64 = out.counts[..points].iter().sum();
            assert_eq!(total, 500);
            // The last pause is the end of the run; the first is half way.
            for (j, particle) in out.particles.iter().enumerate() {
                assert_eq!(out.trail[2 * j + 1], *particle);
                assert!(out.trail[2 * j].position < particle.position || !passes);
            }
        }
    }

    #[test]
    fn particles_do_not_depend_on_threads_and_follow_the_wigner_distribution() {
        let potential = vec![0.0; 256];
        let landscape = Landscape {
            potential: &potential,
            start: -128.0,
            dx: 1.0,
            left_layer_end: 0,
            right_layer_start: 256,
            dispersion: Dispersion::Continuum {
                hbar: 1.0,
                mass: 1.0,
            },
        };
        let never = AtomicBool::new(false);
        let mut free = spec(20_000, 0.0);
        free.steps = 1;
        free.pauses = vec![];
        free.step = 1e-9;
        let run = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| run_particles(&landscape, &free, &never).unwrap())
        };
        let out = run(1);
        assert_eq!(out, run(2));
        let n = out.particles.len() as f64;
        let mean = out.particles.iter().map(|p| p.position).sum::<f64>() / n;
        let var = out
            .particles
            .iter()
            .map(|p| (p.position - mean).powi(2))
            .sum::<f64>()
            / n;
        // Sampling errors: 2/sqrt(n) for the mean, 4 sqrt(2/n) for the variance.
        assert!((mean + 30.0).abs() < 5.0 * 2.0 / n.sqrt(), "{mean}");
        assert!((var - 4.0).abs() < 5.0 * 4.0 * (2.0 / n).sqrt(), "{var}");
    }
}
