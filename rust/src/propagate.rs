//! One realization from start to end: the split-step loop with pauses for
//! snapshots, the observables at each pause and a classical trajectory beside it.
//!
//! A run keeps one step throughout (the time-resolved spectrum needs it). A
//! snapshot between two step boundaries is taken on a copy advanced from the
//! boundary before it by one shorter step of the remaining time, so every
//! snapshot is at its exact time and the run itself goes on unchanged.

use std::sync::atomic::AtomicBool;

use num_complex::{Complex, Complex64};

use crate::classical::{Landscape, Particle};
use crate::dispersion::Dispersion;
use crate::drive::Realized;
use crate::error::{invalid, CoreError};
use crate::observables::{
    axis_wavenumbers, momentum_density, momentum_scale, observe, Detector, Observation,
};
use crate::real::{narrow, Real};
use crate::stepper::{Setup, Shared, Stepper};

/// When a run pauses to observe: after `steps` whole steps and then `offset`
/// more time (`0 <= offset < step`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pause {
    pub steps: usize,
    pub offset: f64,
}

impl Pause {
    /// A pause on a step boundary.
    pub fn at(steps: usize) -> Self {
        Pause { steps, offset: 0.0 }
    }
}

/// What to run, beyond the shared setup.
#[derive(Debug, Clone)]
pub struct Request {
    pub psi: Vec<Complex64>,
    pub potential: Vec<f64>,
    pub steps: usize,
    /// Times (increasing, within the run) at which to pause and observe.
    pub pauses: Vec<Pause>,
    /// Keep the wavefunction and its momentum density at each pause.
    pub keep_snapshots: bool,
    pub detector: Option<Detector>,
    /// Follow a classical particle from this (position, momentum).
    pub classical: Option<(f64, f64, Dispersion)>,
    /// The time-dependent terms and twist of this realization.
    pub drive: Realized,
}

/// What a run returns.
#[derive(Debug, Clone)]
pub struct Output {
    pub psi: Vec<Complex64>,
    pub snapshots: Vec<Vec<Complex64>>,
    /// `|phi(k)|^2` at each pause (FFT order), with `sum n(k) dk = norm`.
    pub momentum_densities: Vec<Vec<f64>>,
    /// One observation per pause.
    pub observations: Vec<Observation>,
    /// The observation at the end of the run.
    pub last: Observation,
    /// The classical particle at each pause.
    pub classical: Vec<Particle>,
    /// The quasimomentum `beta` of the run (0 without a twist).
    pub quasimomentum: f64,
}

/// Pauses must increase strictly in time and lie in `(0, steps x step]`.
pub fn validate_pauses(pauses: &[Pause], steps: usize, step: f64) -> Result<(), CoreError> {
    let time = |p: &Pause| (p.steps, p.offset);
    let bad_offset = pauses
        .iter()
        .any(|p| !(p.offset.is_finite() && p.offset >= 0.0 && p.offset < step));
    let beyond = pauses
        .iter()
        .any(|p| p.steps > steps || (p.steps == steps && p.offset > 0.0));
    let first_is_start = pauses
        .first()
        .is_some_and(|p| p.steps == 0 && p.offset == 0.0);
    if bad_offset
        || beyond
        || first_is_start
        || pauses.windows(2).any(|w| time(&w[0]) >= time(&w[1]))
    {
        return invalid(format!(
            "pauses must increase within (0, {steps} steps], each offset in [0, step = {step}), \
             got {pauses:?}"
        ));
    }
    Ok(())
}

/// The steppers that reach pauses between step boundaries: one shared table
/// set per distinct offset, built once for the run.
pub struct Offsets<T: Real> {
    tables: Vec<(f64, Shared<T>)>,
}

impl<T: Real> Offsets<T> {
    pub fn new(setup: &Setup, pauses: &[Pause]) -> Result<Self, CoreError> {
        let mut tables: Vec<(f64, Shared<T>)> = Vec::new();
        for pause in pauses {
            if pause.offset > 0.0 && !tables.iter().any(|(o, _)| *o == pause.offset) {
                let short = Setup {
                    step: pause.offset,
                    ..setup.clone()
                };
                tables.push((pause.offset, Shared::new(short)?));
            }
        }
        Ok(Offsets { tables })
    }

    /// Observe `psi` (paused at `pause.steps` whole steps of `main`) at the
    /// pause's exact time. On return `copy` holds the wavefunction at that time
    /// and `buffer` its Fourier transform.
    #[allow(clippy::too_many_arguments)]
    pub fn observe(
        &self,
        main: &mut Stepper<'_, T>,
        psi: &[Complex<T>],
        pause: Pause,
        copy: &mut [Complex<T>],
        buffer: &mut [Complex<T>],
        k: &[Vec<f64>],
        detector: Option<Detector>,
        cancel: &AtomicBool,
    ) -> Result<Observation, CoreError> {
        copy.copy_from_slice(psi);
        if pause.offset == 0.0 {
            return Ok(observe(main, copy, buffer, k, detector));
        }
        let shared = self
            .tables
            .iter()
            .find(|(o, _)| *o == pause.offset)
            .map(|(_, shared)| shared)
            .ok_or_else(|| CoreError::Internal(format!("no tables for offset {}", pause.offset)))?;
        let mut side = Stepper::new(shared);
        side.prepare(main.potential())?;
        side.inherit(main);
        side.absorbed = main.absorbed;
        side.advance(copy, 1, cancel)?;
        Ok(observe(&mut side, copy, buffer, k, detector))
    }
}

/// Propagate one wavefunction in working precision `T`.
pub fn propagate<T: Real>(
    shared: &Shared<T>,
    request: &Request,
    cancel: &AtomicBool,
) -> Result<Output, CoreError> {
    let setup = &shared.setup;
    let n = setup.points;
    if request.psi.len() != n {
        return invalid(format!(
            "psi has {} values; the grid has {n}",
            request.psi.len()
        ));
    }
    if request
        .psi
        .iter()
        .any(|z| !(z.re.is_finite() && z.im.is_finite()))
    {
        return invalid("psi must be finite everywhere");
    }
    validate_pauses(&request.pauses, request.steps, setup.step)?;
    if let Some(detector) = request.detector {
        detector.validate(n)?;
    }
    let offsets = Offsets::<T>::new(setup, &request.pauses)?;
    let mut stepper = Stepper::new(shared);
    stepper.prepare(&request.potential)?;
    stepper.set_drive(&request.drive)?;
    let mut psi: Vec<Complex<T>> = request.psi.iter().map(|&z| narrow(z)).collect();
    let mut buffer = psi.clone();
    let mut copy = psi.clone();
    let k = axis_wavenumbers(setup);
    let landscape = Landscape {
        potential: &request.potential,
        start: setup.start,
        dx: setup.dx,
        left_layer_end: setup.left_layer_end,
        right_layer_start: setup.right_layer_start,
        dispersion: request.classical.map_or(
            Dispersion::Continuum {
                hbar: 1.0,
                mass: 1.0,
            },
            |c| c.2,
        ),
    };
    let mut particle = request.classical.map(|(position, momentum, _)| Particle {
        position,
        momentum,
        absorbed: 0,
    });
    let substeps = particle
        .as_ref()
        .map_or(1, |p| landscape.substeps(p, setup.step));
    let widen = |psi: &[Complex<T>]| {
        psi.iter()
            .map(|z| Complex64::new(z.re.wide(), z.im.wide()))
            .collect()
    };

    let mut output = Output {
        psi: Vec::new(),
        snapshots: Vec::new(),
        momentum_densities: Vec::new(),
        observations: Vec::with_capacity(request.pauses.len()),
        last: Observation::default(),
        classical: Vec::new(),
        quasimomentum: request.drive.twist.as_ref().map_or(0.0, |twist| twist.0),
    };
    let mut done = 0;
    for &pause in &request.pauses {
        let span = pause.steps - done;
        stepper.advance(&mut psi, span, cancel)?;
        if let Some(particle) = particle.as_mut() {
            landscape.evolve(particle, span as f64 * setup.step, span * substeps);
        }
        done = pause.steps;
        let observation = offsets.observe(
            &mut stepper,
            &psi,
            pause,
            &mut copy,
            &mut buffer,
            &k,
            request.detector,
            cancel,
        )?;
        output.observations.push(observation);
        if request.keep_snapshots {
            output.snapshots.push(widen(&copy));
            output
                .momentum_densities
                .push(momentum_density(&buffer, momentum_scale(setup)));
        }
        if let Some(mut particle) = particle {
            if pause.offset > 0.0 {
                landscape.evolve(&mut particle, pause.offset, substeps);
            }
            output.classical.push(particle);
        }
    }
    stepper.advance(&mut psi, request.steps - done, cancel)?;
    output.last = observe(&mut stepper, &psi, &mut buffer, &k, request.detector);
    output.psi = widen(&psi);
    Ok(output)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stepper::free_setup;

    fn packet(setup: &Setup) -> Vec<Complex64> {
        let raw: Vec<Complex64> = (0..setup.points)
            .map(|j| {
                let x = setup.start + j as f64 * setup.dx;
                Complex64::from_polar((-x * x / 4.0).exp(), 1.5 * x)
            })
            .collect();
        let norm: f64 = raw.iter().map(|z| z.norm_sqr()).sum::<f64>() * setup.dx;
        raw.iter().map(|z| z / norm.sqrt()).collect()
    }

    fn request(setup: &Setup, steps: usize, pauses: Vec<Pause>) -> Request {
        Request {
            psi: packet(setup),
            potential: vec![0.0; setup.points],
            steps,
            pauses,
            keep_snapshots: true,
            detector: None,
            classical: Some((
                0.0,
                1.5,
                Dispersion::Continuum {
                    hbar: 1.0,
                    mass: 1.0,
                },
            )),
            drive: Realized::default(),
        }
    }

    #[test]
    fn a_pause_between_boundaries_is_at_its_exact_time() {
        // Free motion is exact in the split-step scheme (no potential): the
        // packet at t = 0.35 must be the same whether reached in steps of 0.1
        // (3 steps and an offset of 0.05) or of 0.05 (7 steps).
        let never = AtomicBool::new(false);
        let coarse = free_setup(256, 0.1);
        let fine = free_setup(256, 0.05);
        let shared_coarse = Shared::<f64>::new(coarse.clone()).unwrap();
        let shared_fine = Shared::<f64>::new(fine.clone()).unwrap();
        let pause = Pause {
            steps: 3,
            offset: 0.05,
        };
        let a = propagate(&shared_coarse, &request(&coarse, 5, vec![pause]), &never).unwrap();
        let b = propagate(
            &shared_fine,
            &request(&fine, 10, vec![Pause::at(7)]),
            &never,
        )
        .unwrap();
        let gap = a.snapshots[0]
            .iter()
            .zip(&b.snapshots[0])
            .map(|(u, v)| (u - v).norm())
            .fold(0.0, f64::max);
        assert!(gap < 1e-12, "{gap}");
        let moved = (a.observations[0].position[0] - 1.5 * 0.35).abs();
        assert!(moved < 1e-9, "{moved}");
        // The classical particle is at the same time too.
        assert!((a.classical[0].position - 1.5 * 0.35).abs() < 1e-12);
        // ... and the run itself went on in steps of 0.1 to t = 0.5.
        let c = propagate(&shared_fine, &request(&fine, 10, vec![]), &never).unwrap();
        let end = a
            .psi
            .iter()
            .zip(&c.psi)
            .map(|(u, v)| (u - v).norm())
            .fold(0.0, f64::max);
        assert!(end < 1e-12, "{end}");
    }

    #[test]
    fn momentum_density_integrates_to_the_norm_and_participation_is_a_gaussians() {
        let never = AtomicBool::new(false);
        let setup = free_setup(256, 0.1);
        let shared = Shared::<f64>::new(setup.clone()).unwrap();
        let out = propagate(&shared, &request(&setup, 2, vec![Pause::at(1)]), &never).unwrap();
        let dk = 2.0 * std::f64::consts::PI / (setup.points as f64 * setup.dx);
        let total: f64 = out.momentum_densities[0].iter().sum::<f64>() * dk;
        assert!((total - 1.0).abs() < 1e-12, "{total}");
        // |psi|^2 of rms width s: sum |psi|^4 dx = 1 / (2 sqrt(pi) s); here s = 1 at t ~ 0.
        let width_now = (1.0f64 + (0.1f64 / 2.0).powi(2)).sqrt();
        let expected = 1.0 / (2.0 * std::f64::consts::PI.sqrt() * width_now);
        let participation = out.observations[0].participation;
        assert!(
            (participation / expected - 1.0).abs() < 1e-9,
            "{participation} {expected}"
        );
    }

    #[test]
    fn pauses_out_of_order_or_offsets_too_long_are_refused() {
        for pauses in [
            vec![Pause::at(2), Pause::at(2)],
            vec![Pause {
                steps: 1,
                offset: 0.1,
            }],
            vec![Pause {
                steps: 5,
                offset: 0.01,
            }],
            vec![Pause::at(0)],
        ] {
            assert!(validate_pauses(&pauses, 5, 0.1).is_err(), "{pauses:?}");
        }
        assert!(validate_pauses(
            &[
                Pause {
                    steps: 0,
                    offset: 0.02
                },
                Pause {
                    steps: 0,
                    offset: 0.07
                },
                Pause::at(5)
            ],
            5,
            0.1
        )
        .is_ok());
    }
}
