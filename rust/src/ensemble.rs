//! Many realizations at once: rayon over fixed chunks of realizations, each
//! chunk summed in index order, chunks returned in order.
//!
//! Reproducibility: a chunk's sums depend only on the realizations it holds
//! (fixed size `CHUNK`, fixed start), and the caller folds chunks in index
//! order, so aggregates are bitwise the same for any number of threads, tasks
//! or workers. Memory per chunk in flight: five `snapshots x points` arrays.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use num_complex::{Complex, Complex64};
use rayon::prelude::*;

use crate::disorder::{BoxTerm, Line, Mesh, Plan, Realizer, Term};
use crate::drive::Drive;
use crate::error::{invalid, CoreError};
use crate::observables::{axis_wavenumbers, momentum_scale, observe, Detector};
use crate::packets::PacketSource;
use crate::propagate::{validate_pauses, Offsets, Pause};
use crate::real::{density, narrow, Real};
use crate::spectrum::Spectrum;
use crate::stepper::{Shared, Stepper};

/// Realizations per chunk: part of the reproducibility contract.
pub const CHUNK: usize = 16;

/// Densities below this are floored before the logarithm (ln = -690.8).
pub const DENSITY_FLOOR: f64 = 1e-300;

/// What every realization of an ensemble shares.
#[derive(Debug, Clone)]
pub struct Spec {
    pub static_potential: Vec<f64>,
    pub disorder: Vec<Term>,
    /// On a 2D/3D grid the disorder is drawn on its mesh (and `disorder` is empty).
    pub mesh_disorder: Option<(Mesh, Vec<BoxTerm>)>,
    pub packets: PacketSource,
    pub steps: usize,
    pub pauses: Vec<Pause>,
    pub detector: Option<Detector>,
    pub seed: u64,
    /// Resolve the transmission in energy at these modes.
    pub spectrum: Option<Spectrum>,
    /// Time-dependent terms and the twisted boundary (drawn per realization).
    pub drive: Drive,
}

/// One chunk's per-realization samples and summed profiles.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Chunk {
    pub start: usize,
    pub count: usize,
    pub transmission: Vec<f64>,
    pub reflection: Vec<f64>,
    pub norm: Vec<f64>,
    pub absorbed_left: Vec<f64>,
    pub absorbed_right: Vec<f64>,
    /// By the layers on the faces across axis 0 (2D/3D boxes absorbing on every face).
    pub absorbed_sides: Vec<f64>,
    /// The quasimomentum `beta` of each realization (0 without a twist).
    pub quasimomentum: Vec<f64>,
    /// `count x snapshots x axes`, realization-major.
    pub position: Vec<f64>,
    pub position_squared: Vec<f64>,
    /// `<p>` and `<p^2>`, `count x snapshots x axes`, realization-major.
    pub mean_momentum: Vec<f64>,
    pub momentum_squared: Vec<f64>,
    /// Inverse participation ratio `sum |psi|^4 dx / (sum |psi|^2 dx)^2`.
    pub participation: Vec<f64>,
    /// Sums over the chunk, `snapshots x points`.
    pub density: Vec<f64>,
    pub density_squared: Vec<f64>,
    pub log_density: Vec<f64>,
    pub log_density_squared: Vec<f64>,
    /// Momentum density `|phi(k)|^2` (FFT order) with `sum n(k) dk = norm`.
    pub momentum: Vec<f64>,
    /// `T(k)` per realization and mode, `count x modes`, realization-major.
    pub spectrum: Vec<f64>,
    /// `T(k)` from the first half and the first three quarters of the run,
    /// `count x 2 x modes`: whether the spectrum has settled.
    pub spectrum_settling: Vec<f64>,
}

fn line(shared_points: usize, dx: f64, start: f64) -> Line {
    Line {
        points: shared_points,
        dx,
        start,
    }
}

/// Run realizations `start .. start + count` in chunks of `CHUNK` (the first
/// chunk starts at `start`, which must be a multiple of `CHUNK`) on the current
/// rayon pool.
pub fn run_chunks<T: Real>(
    shared: &Shared<T>,
    spec: &Spec,
    start: usize,
    count: usize,
    cancel: &AtomicBool,
) -> Result<Vec<Chunk>, CoreError> {
    let setup = &shared.setup;
    if !start.is_multiple_of(CHUNK) {
        return invalid(format!(
            "start {start} must be a multiple of the chunk size {CHUNK}"
        ));
    }
    if spec.static_potential.len() != setup.points {
        return invalid(format!(
            "static potential has {} values; the grid has {}",
            spec.static_potential.len(),
            setup.points
        ));
    }
    validate_pauses(&spec.pauses, spec.steps, setup.step)?;
    if setup.shape.len() > 1 {
        let drawn = matches!(spec.packets, crate::packets::PacketSource::Gaussian { .. });
        if drawn
            || spec.spectrum.is_some()
            || spec.drive.twist.is_some()
            || !spec.disorder.is_empty()
        {
            return invalid(format!(
                "on a {}D grid an ensemble takes fixed or listed packets, no spectrum, no \
                 twisted boundary, and its disorder on the grid's mesh",
                setup.shape.len()
            ));
        }
    }
    spec.packets.validate(setup.points)?;
    spec.drive.validate(setup.points)?;
    if let Some(detector) = spec.detector {
        detector.validate(setup.points)?;
    }
    if let Some(spectrum) = &spec.spectrum {
        let n = setup.points;
        let consistent = spectrum.modes.len() == spectrum.energies.len()
            && spectrum.modes.len() == spectrum.velocities.len();
        let consistent = consistent && spectrum.wavenumbers.len() == spectrum.modes.len();
        if spectrum.probes.iter().any(|&p| p >= n)
            || spectrum.modes.iter().any(|&m| m >= n)
            || !consistent
        {
            return invalid(format!(
                "spectrum probe or modes do not fit the grid of {n} points"
            ));
        }
        if spectrum
            .velocities
            .iter()
            .any(|&v| !(v.is_finite() && v > 0.0))
        {
            return invalid("spectrum modes must move right (velocity > 0)");
        }
    }
    let grid = line(setup.points, setup.dx, setup.start);
    // Fail on bad disorder before any thread starts; one plan for every chunk.
    let plan = Arc::new(match &spec.mesh_disorder {
        Some((mesh, terms)) => Plan::new_mesh(mesh.clone(), terms)?,
        None => Plan::new(grid, &spec.disorder)?,
    });
    if plan.size() != setup.points {
        return invalid(format!(
            "the disorder's mesh has {} points; the grid has {}",
            plan.size(),
            setup.points
        ));
    }
    let offsets = Offsets::<T>::new(setup, &spec.pauses)?;
    let starts: Vec<usize> = (start..start + count).step_by(CHUNK).collect();
    starts
        .into_par_iter()
        .map(|first| {
            let size = CHUNK.min(start + count - first);
            run_chunk(shared, &offsets, spec, &plan, first, size, cancel)
        })
        .collect()
}

fn run_chunk<T: Real>(
    shared: &Shared<T>,
    offsets: &Offsets<T>,
    spec: &Spec,
    plan: &Arc<Plan>,
    first: usize,
    count: usize,
    cancel: &AtomicBool,
) -> Result<Chunk, CoreError> {
    let grid = plan.line();
    let n = grid.points;
    let snapshots = spec.pauses.len();
    let profile = snapshots * n;
    let mut chunk = Chunk {
        start: first,
        count,
        density: vec![0.0; profile],
        density_squared: vec![0.0; profile],
        log_density: vec![0.0; profile],
        log_density_squared: vec![0.0; profile],
        momentum: vec![0.0; profile],
        ..Chunk::default()
    };
    let mut realizer = Realizer::with_plan(plan.clone());
    let mut stepper = Stepper::new(shared);
    let mut potential = vec![0.0; n];
    let mut initial = vec![Complex64::new(0.0, 0.0); n];
    let mut psi = vec![Complex::new(T::zero(), T::zero()); n];
    let mut buffer = psi.clone();
    let mut copy = psi.clone();
    let k = axis_wavenumbers(&shared.setup);
    let scale = momentum_scale(&shared.setup);
    let axes = shared.setup.shape.len();
    // Axis 0's spacing and first position, and the points at each of its positions.
    let axis0 = (shared.setup.spacing[0], shared.setup.origin[0]);
    let transverse = n / shared.setup.shape[0];
    let mut record: Vec<Complex64> = Vec::with_capacity(if spec.spectrum.is_some() {
        2 * (spec.steps + 1)
    } else {
        0
    });
    let mut initial_transform =
        vec![Complex64::new(0.0, 0.0); if spec.spectrum.is_some() { n } else { 0 }];
    for index in first..first + count {
        if cancel.load(Ordering::Relaxed) {
            return Err(CoreError::Interrupted);
        }
        potential.copy_from_slice(&spec.static_potential);
        realizer.add_to(spec.seed, index as u64, &mut potential)?;
        stepper.prepare(&potential)?;
        let drive = spec
            .drive
            .realize(n, axis0.0, axis0.1, transverse, spec.seed, index as u64);
        stepper.set_drive(&drive)?;
        chunk
            .quasimomentum
            .push(drive.twist.as_ref().map_or(0.0, |twist| twist.0));
        spec.packets
            .fill(grid, spec.seed, index as u64, &mut initial)?;
        psi.iter_mut()
            .zip(&initial)
            .for_each(|(z, &w)| *z = narrow(w));
        if let Some(spectrum) = &spec.spectrum {
            record.clear();
            record.extend(spectrum.probes.iter().map(|&point| initial[point]));
            stepper.transform(&psi, &mut buffer);
            for (w, z) in initial_transform.iter_mut().zip(&buffer) {
                *w = Complex64::new(z.re.wide(), z.im.wide());
            }
        }
        let probe = spec.spectrum.as_ref().map(|spectrum| spectrum.probes);
        let mut done = 0;
        for (s, &pause) in spec.pauses.iter().enumerate() {
            let probed = probe.as_ref().map(|points| (&points[..], &mut record));
            stepper.advance_probed(&mut psi, pause.steps - done, cancel, probed)?;
            done = pause.steps;
            let observation = offsets.observe(
                &mut stepper,
                &psi,
                pause,
                &mut copy,
                &mut buffer,
                &k,
                spec.detector,
                cancel,
            )?;
            chunk.position.extend(&observation.position[..axes]);
            chunk
                .position_squared
                .extend(&observation.position_squared[..axes]);
            chunk.mean_momentum.extend(&observation.momentum[..axes]);
            chunk
                .momentum_squared
                .extend(&observation.momentum_squared[..axes]);
            let row = s * n..(s + 1) * n;
            for ((((&z, d), d2), l), l2) in copy
                .iter()
                .zip(&mut chunk.density[row.clone()])
                .zip(&mut chunk.density_squared[row.clone()])
                .zip(&mut chunk.log_density[row.clone()])
                .zip(&mut chunk.log_density_squared[row.clone()])
            {
                let rho = density(z);
                let log = rho.max(DENSITY_FLOOR).ln();
                *d += rho;
                *d2 += rho * rho;
                *l += log;
                *l2 += log * log;
            }
            chunk.participation.push(observation.participation);
            for (&z, m) in buffer.iter().zip(&mut chunk.momentum[row]) {
                *m += density(z) * scale;
            }
        }
        let probed = probe.as_ref().map(|points| (&points[..], &mut record));
        stepper.advance_probed(&mut psi, spec.steps - done, cancel, probed)?;
        if let Some(spectrum) = &spec.spectrum {
            let setup = &shared.setup;
            let samples = record.len() / 2;
            let cuts = [samples / 2, 3 * samples / 4, samples];
            let mut values = spectrum.transmission_at(
                &record,
                &initial_transform,
                setup.step,
                setup.hbar,
                grid.dx,
                &cuts,
            );
            chunk.spectrum.extend(values.pop().unwrap_or_default());
            values
                .into_iter()
                .for_each(|early| chunk.spectrum_settling.extend(early));
        }
        let last = observe(&mut stepper, &psi, &mut buffer, &k, spec.detector);
        chunk.transmission.push(last.transmission);
        chunk.reflection.push(last.reflection);
        chunk.norm.push(last.norm);
        chunk.absorbed_left.push(last.absorbed.left);
        chunk.absorbed_right.push(last.absorbed.right);
        chunk.absorbed_sides.push(last.absorbed.sides);
    }
    Ok(chunk)
}
