//! One realization from start to end: the split-step loop with pauses for
//! snapshots, the observables at each pause and a classical trajectory beside it.

use std::sync::atomic::AtomicBool;

use num_complex::{Complex, Complex64};

use crate::classical::{Kinetic, Landscape, Particle};
use crate::error::{invalid, CoreError};
use crate::observables::{observe, wavenumbers, Detector, Observation};
use crate::real::{narrow, Real};
use crate::stepper::{Shared, Stepper};

/// What to run, beyond the shared setup.
#[derive(Debug, Clone)]
pub struct Request {
    pub psi: Vec<Complex64>,
    pub potential: Vec<f64>,
    pub steps: usize,
    /// Step counts (increasing, each in `1 ..= steps`) at which to pause and observe.
    pub pauses: Vec<usize>,
    /// Keep the wavefunction at each pause.
    pub keep_snapshots: bool,
    pub detector: Option<Detector>,
    /// Follow a classical particle from this (position, momentum).
    pub classical: Option<(f64, f64, Kinetic)>,
}

/// What a run returns.
#[derive(Debug, Clone)]
pub struct Output {
    pub psi: Vec<Complex64>,
    pub snapshots: Vec<Vec<Complex64>>,
    /// One observation per pause.
    pub observations: Vec<Observation>,
    /// The observation at the end of the run.
    pub last: Observation,
    /// The classical particle at each pause.
    pub classical: Vec<Particle>,
}

pub fn validate_pauses(pauses: &[usize], steps: usize) -> Result<(), CoreError> {
    if pauses.windows(2).any(|w| w[0] >= w[1])
        || pauses.first() == Some(&0)
        || pauses.last() > Some(&steps)
    {
        return invalid(format!(
            "pauses must increase within 1..={steps}, got {pauses:?}"
        ));
    }
    Ok(())
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
    validate_pauses(&request.pauses, request.steps)?;
    if let Some(detector) = request.detector {
        detector.validate(n)?;
    }
    let mut stepper = Stepper::new(shared);
    stepper.prepare(&request.potential)?;
    let mut psi: Vec<Complex<T>> = request.psi.iter().map(|&z| narrow(z)).collect();
    let mut buffer = psi.clone();
    let k = wavenumbers(n, setup.dx);
    let landscape = Landscape {
        potential: &request.potential,
        start: setup.start,
        dx: setup.dx,
        left_layer_end: setup.left_layer_end,
        right_layer_start: setup.right_layer_start,
        kinetic: request
            .classical
            .map_or(Kinetic::Continuum { mass: 1.0 }, |c| c.2),
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
        observations: Vec::with_capacity(request.pauses.len()),
        last: Observation::default(),
        classical: Vec::new(),
    };
    let mut done = 0;
    for &pause in request.pauses.iter().chain(std::iter::once(&request.steps)) {
        stepper.advance(&mut psi, pause - done, cancel)?;
        if let Some(particle) = particle.as_mut() {
            let span = pause - done;
            landscape.evolve(particle, span as f64 * setup.step, span * substeps);
        }
        done = pause;
        let observation = observe(&mut stepper, &psi, &mut buffer, &k, request.detector);
        if output.observations.len() < request.pauses.len() {
            output.observations.push(observation);
            if request.keep_snapshots {
                output.snapshots.push(widen(&psi));
            }
            if let Some(particle) = particle {
                output.classical.push(particle);
            }
        }
        output.last = observation;
    }
    output.psi = widen(&psi);
    Ok(output)
}
