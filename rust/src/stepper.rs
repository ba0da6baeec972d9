//! The split-step loop: plans and phase tables built once, no allocation per step.
//!
//! Conventions: `psi` holds the wavefunction at the grid points (C order on a
//! 2D or 3D grid, axis 0 slowest), normalized so that `sum |psi|^2 dV = 1`. The forward FFT is unnormalized (rustfft); the
//! kinetic factors carry the `1/N` of the inverse. A potential factor of
//! fraction `f` multiplies by `exp(-i (V + g|psi|^2) f h / hbar) exp(-W f_abs h / hbar)`;
//! a kinetic factor multiplies `FFT(psi)` by `exp(-i T(k) f h / hbar)`.

use std::sync::atomic::{AtomicBool, Ordering};

use num_complex::{Complex, Complex64};

use crate::drive::{Realized, RealizedKick, Strength};
use crate::error::{invalid, CoreError};
use crate::ndfft::{Transforms, MAX_AXES};
use crate::real::{density, narrow, Real};
use crate::splitting::{Schedule, Splitting};

/// How many steps run between two looks at the cancel flag.
const CANCEL_POLL_STEPS: usize = 16;

/// Everything about a run that does not change between realizations.
#[derive(Debug, Clone)]
pub struct Setup {
    /// All the grid's points (the product of `shape`).
    pub points: usize,
    /// The volume element: the spacing in 1D, the product of `spacing` beyond.
    pub dx: f64,
    /// Position of the first grid point along axis 0.
    pub start: f64,
    /// Points, spacing and first position along each axis (one entry in 1D).
    pub shape: Vec<usize>,
    pub spacing: Vec<f64>,
    pub origin: Vec<f64>,
    pub hbar: f64,
    /// Kinetic energy at each wavenumber, in FFT order.
    pub kinetic: Vec<f64>,
    /// Absorbing potential `W >= 0` at each point (all zero without absorbers).
    pub absorption: Vec<f64>,
    /// Points `0 .. left_layer_end` form the left absorbing layer (the layer
    /// on the low face of axis 0, all its transverse points).
    pub left_layer_end: usize,
    /// Points `right_layer_start .. points` form the right absorbing layer.
    pub right_layer_start: usize,
    /// The cubic coefficient `g` of `g |psi|^2`.
    pub nonlinearity: f64,
    pub step: f64,
    pub splitting: Splitting,
}

impl Setup {
    pub fn validate(&self) -> Result<(), CoreError> {
        let n = self.points;
        if n < 2 {
            return invalid(format!("points must be >= 2, got {n}"));
        }
        let axes = self.shape.len();
        if !(1..=MAX_AXES).contains(&axes)
            || self.spacing.len() != axes
            || self.origin.len() != axes
            || self.shape.iter().product::<usize>() != n
            || self.shape.contains(&0)
        {
            return invalid(format!(
                "grid shape {:?}, spacing {:?} and origin {:?} must have 1 to {MAX_AXES} axes \
                 of the same length, with {n} points in all",
                self.shape, self.spacing, self.origin
            ));
        }
        if self
            .spacing
            .iter()
            .chain(&self.origin)
            .any(|v| !v.is_finite())
            || self.spacing.iter().any(|&d| d <= 0.0)
        {
            return invalid(format!(
                "grid spacing {:?} must be finite and > 0, origin {:?} finite",
                self.spacing, self.origin
            ));
        }
        if self.kinetic.len() != n || self.absorption.len() != n {
            return invalid(format!(
                "kinetic ({}) and absorption ({}) tables must have the grid's {n} points",
                self.kinetic.len(),
                self.absorption.len()
            ));
        }
        if self.left_layer_end > self.right_layer_start || self.right_layer_start > n {
            return invalid(format!(
                "absorbing layers [0, {}) and [{}, {n}) overlap or leave the grid",
                self.left_layer_end, self.right_layer_start
            ));
        }
        for (name, value) in [("dx", self.dx), ("hbar", self.hbar), ("step", self.step)] {
            if !(value.is_finite() && value > 0.0) {
                return invalid(format!("{name} must be finite and > 0, got {value}"));
            }
        }
        if !self.nonlinearity.is_finite() || !self.start.is_finite() {
            return invalid("nonlinearity and start must be finite");
        }
        if self
            .kinetic
            .iter()
            .chain(&self.absorption)
            .any(|v| !v.is_finite())
        {
            return invalid("kinetic and absorption tables must be finite");
        }
        if self.absorption.iter().any(|&w| w < 0.0) {
            return invalid("absorption must be >= 0 everywhere");
        }
        Ok(())
    }
}

/// Tables that depend only on the setup (not on the realization's potential).
pub struct Shared<T: Real> {
    pub setup: Setup,
    pub transforms: Transforms<T>,
    pub schedule: Schedule,
    /// `exp(-i T(k) f h / hbar) / N` for each distinct kinetic fraction, in the
    /// transforms' step layout.
    kinetic_factors: Vec<Vec<Complex<T>>>,
    /// Absorbing points outside the two layers of axis 0 (the layers on the
    /// other faces of a 2D/3D box), in increasing order.
    sides: Vec<usize>,
}

impl<T: Real> Shared<T> {
    pub fn new(setup: Setup) -> Result<Self, CoreError> {
        setup.validate()?;
        let schedule = Schedule::new(&setup.splitting);
        let transforms = Transforms::new(&setup.shape);
        let kinetic_factors = kinetic_factors(&setup, &schedule.kinetic_fractions, &setup.kinetic)
            .iter()
            .map(|table| transforms.step_layout(table))
            .collect();
        let sides = (setup.left_layer_end..setup.right_layer_start)
            .filter(|&j| setup.absorption[j] > 0.0)
            .collect();
        Ok(Shared {
            setup,
            transforms,
            schedule,
            kinetic_factors,
            sides,
        })
    }
}

/// Potential factors for one realization, one table per distinct fraction.
struct PotentialFactors<T: Real> {
    phase: Vec<Vec<Complex<T>>>,
    /// `1 - exp(-2 W f_abs h / hbar)` at the layer points (left layer then right).
    loss: Vec<Vec<f64>>,
    /// `-g f h / hbar` per table: the nonlinear phase per unit density.
    nonlinear_angle: Vec<T>,
    /// Tables that leave `psi` unchanged (no potential, layer or nonlinearity): skipped.
    identity: Vec<bool>,
}

/// A kick at steps `first, first + every, ...`: `exp(-i V / hbar)` tabulated once, or, when its
/// strength is modulated, `-V / hbar` with the strength evaluated at each kick's time.
#[derive(Clone)]
enum KickFactor<T: Real> {
    Fixed {
        factor: Vec<Complex<T>>,
        first: usize,
        every: usize,
    },
    Modulated {
        angle: Vec<f64>,
        strength: Strength,
        first: usize,
        every: usize,
    },
}

impl<T: Real> KickFactor<T> {
    fn new(kick: &RealizedKick, hbar: f64) -> Self {
        let (first, every) = (kick.first, kick.every);
        match kick.strength {
            None => KickFactor::Fixed {
                factor: kick
                    .values
                    .iter()
                    .map(|&v| narrow(Complex64::from_polar(1.0, -v / hbar)))
                    .collect(),
                first,
                every,
            },
            Some(strength) => KickFactor::Modulated {
                angle: kick.values.iter().map(|&v| -v / hbar).collect(),
                strength,
                first,
                every,
            },
        }
    }
}

/// The time-dependent terms of the current realization (`crate::drive`).
#[derive(Clone)]
struct Driven<T: Real> {
    kicks: Vec<KickFactor<T>>,
    terms: Vec<(Vec<f64>, Strength)>,
    /// The main run's step index and time at this stepper's first step.
    origin: (usize, f64),
    /// The time of potential factor `i` in a step, as a fraction of the step.
    stage_times: Vec<f64>,
    /// Per term, `-(h / hbar) sum fraction e(t)` of the factor being applied.
    coefficients: Vec<f64>,
}

impl<T: Real> Driven<T> {
    /// Multiply by `exp(i sum_j c_j V_j)` for the factor made of `parts`
    /// (fraction of the step, main-run step it belongs to, time).
    fn apply(&mut self, psi: &mut [Complex<T>], parts: &[(f64, usize, f64)], scale: f64) {
        if self.terms.is_empty() {
            return;
        }
        for (c, (_, strength)) in self.coefficients.iter_mut().zip(&self.terms) {
            *c = -scale
                * parts
                    .iter()
                    .map(|&(fraction, member, time)| fraction * strength.at(member, time))
                    .sum::<f64>();
        }
        if self.coefficients.iter().all(|&c| c == 0.0) {
            return;
        }
        for (j, z) in psi.iter_mut().enumerate() {
            let angle: f64 = self
                .coefficients
                .iter()
                .zip(&self.terms)
                .map(|(&c, (values, _))| c * values[j])
                .sum();
            *z = *z * narrow::<T>(Complex64::from_polar(1.0, angle));
        }
    }

    /// The kicks due at main-run step `member`, which starts at `time`.
    fn kick(&self, psi: &mut [Complex<T>], member: usize, time: f64) {
        let due =
            |first: usize, every: usize| member >= first && (member - first).is_multiple_of(every);
        for kick in &self.kicks {
            match kick {
                KickFactor::Fixed {
                    factor,
                    first,
                    every,
                } => {
                    if due(*first, *every) {
                        T::multiply(psi, factor);
                    }
                }
                KickFactor::Modulated {
                    angle,
                    strength,
                    first,
                    every,
                } => {
                    if due(*first, *every) {
                        let e = strength.at(member, time);
                        for (z, &a) in psi.iter_mut().zip(angle) {
                            *z = *z * narrow::<T>(Complex64::from_polar(1.0, e * a));
                        }
                    }
                }
            }
        }
    }
}

/// The twisted boundary: the kinetic table at `k + shift` and its factors.
#[derive(Clone)]
struct Twist<T: Real> {
    shift: f64,
    table: Vec<f64>,
    factors: Vec<Vec<Complex<T>>>,
}

fn kinetic_factors<T: Real>(
    setup: &Setup,
    fractions: &[f64],
    table: &[f64],
) -> Vec<Vec<Complex<T>>> {
    let scale = 1.0 / setup.points as f64;
    fractions
        .iter()
        .map(|&fraction| {
            let angle = -fraction * setup.step / setup.hbar;
            table
                .iter()
                .map(|&energy| narrow(Complex64::from_polar(scale, angle * energy)))
                .collect()
        })
        .collect()
}

/// Probability removed by each absorbing layer so far.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Absorbed {
    pub left: f64,
    pub right: f64,
    /// By the layers on the faces across axis 0 (2D and 3D boxes absorbing on every face).
    pub sides: f64,
}

/// One thread's propagator: its buffers and the current realization's tables.
pub struct Stepper<'a, T: Real> {
    shared: &'a Shared<T>,
    factors: PotentialFactors<T>,
    scratch: Vec<Complex<T>>,
    /// The wavefunction in k space during a kinetic factor.
    spectrum: Vec<Complex<T>>,
    pub absorbed: Absorbed,
    /// Real potential of the current realization (for the energy).
    potential: Vec<f64>,
    /// Time-dependent terms and the twist of the current realization, if any.
    driven: Option<Driven<T>>,
    twist: Option<Twist<T>>,
    /// Whole steps taken since `prepare`.
    done: usize,
}

impl<'a, T: Real> Stepper<'a, T> {
    pub fn new(shared: &'a Shared<T>) -> Self {
        let tables = shared.schedule.potential_fractions.len();
        let n = shared.setup.points;
        let layer_points =
            shared.setup.left_layer_end + (n - shared.setup.right_layer_start) + shared.sides.len();
        Stepper {
            shared,
            factors: PotentialFactors {
                phase: vec![vec![Complex::new(T::one(), T::zero()); n]; tables],
                loss: vec![vec![0.0; layer_points]; tables],
                nonlinear_angle: vec![T::zero(); tables],
                identity: vec![false; tables],
            },
            scratch: vec![Complex::new(T::zero(), T::zero()); shared.transforms.scratch_len()],
            spectrum: vec![Complex::new(T::zero(), T::zero()); n],
            absorbed: Absorbed::default(),
            potential: vec![0.0; n],
            driven: None,
            twist: None,
            done: 0,
        }
    }

    /// The shared tables, borrowed for as long as the stepper's own borrow.
    pub fn shared(&self) -> &'a Shared<T> {
        self.shared
    }

    /// Build the potential factors for a realization's real potential `V` and
    /// reset the absorbed probability.
    pub fn prepare(&mut self, potential: &[f64]) -> Result<(), CoreError> {
        let setup = &self.shared.setup;
        if potential.len() != setup.points {
            return invalid(format!(
                "potential has {} values; the grid has {}",
                potential.len(),
                setup.points
            ));
        }
        if let Some(bad) = potential.iter().position(|v| !v.is_finite()) {
            return invalid(format!(
                "potential is not finite at point {bad}: {}",
                potential[bad]
            ));
        }
        self.potential.copy_from_slice(potential);
        let layers = layer_indices(setup, &self.shared.sides);
        for (table, &(fraction, absorbing)) in
            self.shared.schedule.potential_fractions.iter().enumerate()
        {
            let phase_angle = -fraction * setup.step / setup.hbar;
            let decay = -absorbing * setup.step / setup.hbar;
            for ((factor, &v), &w) in self.factors.phase[table]
                .iter_mut()
                .zip(potential)
                .zip(&setup.absorption)
            {
                *factor = narrow(Complex64::from_polar((decay * w).exp(), phase_angle * v));
            }
            for (loss, j) in self.factors.loss[table].iter_mut().zip(layers.clone()) {
                *loss = -(2.0 * decay * setup.absorption[j]).exp_m1();
            }
            self.factors.nonlinear_angle[table] = T::of(setup.nonlinearity * phase_angle);
            let one = Complex::new(T::one(), T::zero());
            self.factors.identity[table] = self.factors.nonlinear_angle[table] == T::zero()
                && self.factors.loss[table].iter().all(|&l| l == 0.0)
                && self.factors.phase[table].iter().all(|&f| f == one);
        }
        self.absorbed = Absorbed::default();
        self.driven = None;
        self.twist = None;
        self.done = 0;
        Ok(())
    }

    /// Add a realization's time-dependent terms and twist (after `prepare`):
    /// its first step is the main run's step 0 at time 0.
    pub fn set_drive(&mut self, realized: &Realized) -> Result<(), CoreError> {
        let setup = &self.shared.setup;
        let n = setup.points;
        let sizes_fit = realized.kicks.iter().all(|kick| kick.values.len() == n)
            && realized.terms.iter().all(|(v, _)| v.len() == n)
            && realized.twist.as_ref().is_none_or(|(_, _, t)| t.len() == n);
        if !sizes_fit {
            return invalid(format!(
                "time-dependent profiles must have the grid's {n} points"
            ));
        }
        if realized.twist.is_some() && setup.shape.len() > 1 {
            return invalid("a twisted boundary needs a 1D grid");
        }
        if !realized.kicks.is_empty() || !realized.terms.is_empty() {
            let hbar = setup.hbar;
            let kinetic = &setup.splitting.kinetic;
            let stage_times = (0..=kinetic.len())
                .map(|i| kinetic[..i].iter().sum())
                .collect();
            self.driven = Some(Driven {
                kicks: realized
                    .kicks
                    .iter()
                    .map(|kick| KickFactor::new(kick, hbar))
                    .collect(),
                terms: realized.terms.clone(),
                origin: (0, 0.0),
                stage_times,
                coefficients: vec![0.0; realized.terms.len()],
            });
        }
        self.twist = realized.twist.as_ref().map(|(_, shift, table)| Twist {
            shift: *shift,
            table: table.clone(),
            factors: kinetic_factors(setup, &self.shared.schedule.kinetic_fractions, table),
        });
        Ok(())
    }

    /// Take over `main`'s time-dependent terms and twist (after `prepare`),
    /// starting where `main` is paused: a side stepper that reaches a time
    /// between `main`'s step boundaries in one shorter step.
    pub fn inherit(&mut self, main: &Stepper<'_, T>) {
        if let Some(driven) = &main.driven {
            let mut driven = driven.clone();
            driven.origin = (
                driven.origin.0 + main.done,
                driven.origin.1 + main.done as f64 * main.shared.setup.step,
            );
            self.driven = Some(driven);
        }
        let setup = &self.shared.setup;
        self.twist = main.twist.as_ref().map(|twist| Twist {
            shift: twist.shift,
            table: twist.table.clone(),
            factors: kinetic_factors(setup, &self.shared.schedule.kinetic_fractions, &twist.table),
        });
    }

    /// The kinetic energy at each wavenumber (FFT order), twisted if the run is.
    pub fn kinetic_table(&self) -> &[f64] {
        match &self.twist {
            Some(twist) => &twist.table,
            None => &self.shared.setup.kinetic,
        }
    }

    /// `2 pi beta / L`: what the twist adds to the grid's wavenumbers (0 without).
    pub fn wavenumber_shift(&self) -> f64 {
        self.twist.as_ref().map_or(0.0, |twist| twist.shift)
    }

    fn apply_potential(&mut self, psi: &mut [Complex<T>], table: usize) {
        let setup = &self.shared.setup;
        let loss = &self.factors.loss[table];
        let left_end = setup.left_layer_end;
        let right_start = setup.right_layer_start;
        if !loss.is_empty() {
            // Probability leaves only through the layers; summing it here, in
            // f64 and before the factor is applied, makes the accounting exact.
            let (left_loss, rest) = loss.split_at(left_end);
            let (right_loss, side_loss) = rest.split_at(setup.points - right_start);
            let left: f64 = psi[..left_end]
                .iter()
                .zip(left_loss)
                .map(|(&z, &l)| density(z) * l)
                .sum();
            let right: f64 = psi[right_start..]
                .iter()
                .zip(right_loss)
                .map(|(&z, &l)| density(z) * l)
                .sum();
            self.absorbed.left += left * setup.dx;
            self.absorbed.right += right * setup.dx;
            if !side_loss.is_empty() {
                let sides: f64 = self
                    .shared
                    .sides
                    .iter()
                    .zip(side_loss)
                    .map(|(&j, &l)| density(psi[j]) * l)
                    .sum();
                self.absorbed.sides += sides * setup.dx;
            }
        }
        if self.factors.identity[table] {
            return;
        }
        let phase = &self.factors.phase[table];
        let angle = self.factors.nonlinear_angle[table];
        if angle == T::zero() {
            T::multiply(psi, phase);
        } else {
            // |psi| is constant under the real potential, so the nonlinear
            // phase is exact (inside absorbing layers, |psi| at the start of the
            // factor is used).
            for (z, &f) in psi.iter_mut().zip(phase) {
                let rho = z.norm_sqr();
                *z = *z * f * Complex::from_polar(T::one(), angle * rho);
            }
        }
    }

    fn apply_kinetic(&mut self, psi: &mut [Complex<T>], table: usize) {
        // Out of place there and back: rustfft's in-place transforms of these
        // sizes go through a copy, which this saves. In 2D/3D the spectrum
        // stays in the step layout, where the factors are, and the last axis is
        // transformed, multiplied and transformed back one row at a time.
        let factors = match &self.twist {
            Some(twist) => &twist.factors[table],
            None => &self.shared.kinetic_factors[table],
        };
        self.shared
            .transforms
            .kinetic(psi, &mut self.spectrum, factors, &mut self.scratch);
    }

    /// Advance `steps` whole steps from a paused state (every factor applied)
    /// to a paused state, merging the potential factors between steps.
    pub fn advance(
        &mut self,
        psi: &mut [Complex<T>],
        steps: usize,
        cancel: &AtomicBool,
    ) -> Result<(), CoreError> {
        self.advance_probed(psi, steps, cancel, None)
    }

    /// As `advance`, and push `psi` at each of `points` after every step onto
    /// `record` (interleaved). The values are taken before the potential factor
    /// that closes the step, which is exact where the potential vanishes (the
    /// detector's free side).
    pub fn advance_probed(
        &mut self,
        psi: &mut [Complex<T>],
        steps: usize,
        cancel: &AtomicBool,
        mut probe: Option<(&[usize], &mut Vec<Complex64>)>,
    ) -> Result<(), CoreError> {
        if let Some((points, _)) = &probe {
            if points.iter().any(|&point| point >= psi.len()) {
                return invalid(format!("probe points {points:?} lie outside the grid"));
            }
        }
        if psi.len() != self.shared.setup.points {
            return invalid(format!(
                "psi has {} values; the grid has {}",
                psi.len(),
                self.shared.setup.points
            ));
        }
        if steps == 0 {
            return Ok(());
        }
        let schedule = &self.shared.schedule;
        let (first, merged, closing) =
            (schedule.before_stage[0], schedule.merged, schedule.closing);
        let stages = schedule.kinetic_stage.len();
        let setup = &self.shared.setup;
        let (h, scale) = (setup.step, setup.step / setup.hbar);
        let a = &setup.splitting.potential;
        let mut pending = first;
        for step in 0..steps {
            for stage in 0..stages {
                let potential = if stage == 0 {
                    pending
                } else {
                    self.shared.schedule.before_stage[stage]
                };
                self.apply_potential(psi, potential);
                if let Some(driven) = self.driven.as_mut() {
                    let member = driven.origin.0 + self.done;
                    let start = driven.origin.1 + self.done as f64 * h;
                    if stage == 0 {
                        if step == 0 {
                            driven.apply(psi, &[(a[0], member, start)], scale);
                        } else {
                            let parts = [(a[stages], member - 1, start), (a[0], member, start)];
                            driven.apply(psi, &parts, scale);
                        }
                        driven.kick(psi, member, start);
                    } else {
                        let time = start + driven.stage_times[stage] * h;
                        driven.apply(psi, &[(a[stage], member, time)], scale);
                    }
                }
                self.apply_kinetic(psi, self.shared.schedule.kinetic_stage[stage]);
            }
            self.done += 1;
            if let Some((points, record)) = probe.as_mut() {
                for &point in points.iter() {
                    let z = psi[point];
                    record.push(Complex64::new(z.re.wide(), z.im.wide()));
                }
            }
            pending = merged;
            if step % CANCEL_POLL_STEPS == CANCEL_POLL_STEPS - 1 && cancel.load(Ordering::Relaxed) {
                return Err(CoreError::Interrupted);
            }
        }
        self.apply_potential(psi, closing);
        if let Some(driven) = self.driven.as_mut() {
            let member = driven.origin.0 + self.done - 1;
            let end = driven.origin.1 + self.done as f64 * h;
            driven.apply(psi, &[(a[stages], member, end)], scale);
        }
        Ok(())
    }

    /// The real potential of the current realization.
    pub fn potential(&self) -> &[f64] {
        &self.potential
    }

    /// Forward FFT of `psi` into `out` (unnormalized, C order), using this
    /// stepper's buffers.
    pub fn transform(&mut self, psi: &[Complex<T>], out: &mut [Complex<T>]) {
        self.shared
            .transforms
            .forward_natural(psi, out, &mut self.spectrum, &mut self.scratch);
    }
}

fn layer_indices<'s>(
    setup: &Setup,
    sides: &'s [usize],
) -> impl Iterator<Item = usize> + Clone + 's {
    (0..setup.left_layer_end)
        .chain(setup.right_layer_start..setup.points)
        .chain(sides.iter().copied())
}

/// A free particle (hbar = m = 1) in a periodic box [-20, 20) of `points` points, no
/// absorber: the fixture of the core's unit tests.
#[cfg(test)]
pub(crate) fn free_setup(points: usize, step: f64) -> Setup {
    let dx = 40.0 / points as f64;
    let free = crate::dispersion::Dispersion::Continuum {
        hbar: 1.0,
        mass: 1.0,
    };
    Setup {
        points,
        dx,
        start: -20.0,
        shape: vec![points],
        spacing: vec![dx],
        origin: vec![-20.0],
        hbar: 1.0,
        kinetic: free.kinetic_table(points, dx),
        absorption: vec![0.0; points],
        left_layer_end: 0,
        right_layer_start: points,
        nonlinearity: 0.0,
        step,
        splitting: Splitting::strang(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn assert_send_sync<T: Send + Sync>() {}

    #[test]
    fn shared_tables_are_send_and_sync() {
        assert_send_sync::<Shared<f64>>();
        assert_send_sync::<Shared<f32>>();
    }

    #[test]
    fn free_propagation_keeps_the_norm() {
        let shared = Shared::<f64>::new(free_setup(64, 0.01)).unwrap();
        let mut stepper = Stepper::new(&shared);
        stepper.prepare(&[0.0; 64]).unwrap();
        let dx = shared.setup.dx;
        let mut psi: Vec<Complex64> = (0..64)
            .map(|j| {
                let x = -20.0 + j as f64 * dx;
                Complex64::from_polar((-x * x / 4.0).exp(), x)
            })
            .collect();
        let norm0: f64 = psi.iter().map(|z| z.norm_sqr()).sum();
        stepper
            .advance(&mut psi, 100, &AtomicBool::new(false))
            .unwrap();
        let norm1: f64 = psi.iter().map(|z| z.norm_sqr()).sum();
        assert!((norm1 / norm0 - 1.0).abs() < 1e-13, "{norm0} {norm1}");
    }

    #[test]
    fn cancel_flag_interrupts() {
        let shared = Shared::<f64>::new(free_setup(64, 0.01)).unwrap();
        let mut stepper = Stepper::new(&shared);
        stepper.prepare(&[0.0; 64]).unwrap();
        let mut psi = vec![Complex64::new(1.0, 0.0); 64];
        let result = stepper.advance(&mut psi, 1000, &AtomicBool::new(true));
        assert_eq!(result, Err(CoreError::Interrupted));
    }

    #[test]
    fn wrong_sizes_are_errors_not_panics() {
        let shared = Shared::<f64>::new(free_setup(64, 0.01)).unwrap();
        let mut stepper = Stepper::new(&shared);
        assert!(stepper.prepare(&[0.0; 63]).is_err());
        assert!(stepper.prepare(&[f64::NAN; 64]).is_err());
        stepper.prepare(&[0.0; 64]).unwrap();
        let mut psi = vec![Complex64::new(1.0, 0.0); 65];
        assert!(stepper
            .advance(&mut psi, 1, &AtomicBool::new(false))
            .is_err());
        let mut bad = free_setup(64, 0.01);
        bad.kinetic.pop();
        assert!(Shared::<f64>::new(bad).is_err());
    }
}

#[cfg(test)]
mod drive_tests {
    use super::*;
    use crate::drive::{Realized, RealizedKick};

    fn packet(setup: &Setup) -> Vec<Complex64> {
        (0..setup.points)
            .map(|j| {
                let x = setup.start + j as f64 * setup.dx;
                Complex64::from_polar((-x * x / 8.0).exp(), 0.7 * x)
            })
            .collect()
    }

    /// Five steps of dt = 0.1 with kicks of `profile` at steps 0, 2, 4 (times 0, 0.2, 0.4) and the
    /// given strength, against the map applied by hand (free steps are exact): the largest gap.
    fn kicks_against_by_hand(
        strength: Option<Strength>,
        by_hand_strength: impl Fn(f64) -> f64,
    ) -> f64 {
        let setup = free_setup(64, 0.1);
        let shared = Shared::<f64>::new(setup.clone()).unwrap();
        let never = AtomicBool::new(false);
        let profile: Vec<f64> = (0..64).map(|j| (j as f64 * 0.3).sin()).collect();
        let mut kicked = Stepper::new(&shared);
        kicked.prepare(&[0.0; 64]).unwrap();
        kicked
            .set_drive(&Realized {
                kicks: vec![RealizedKick {
                    values: profile.clone(),
                    first: 0,
                    every: 2,
                    strength,
                }],
                ..Realized::default()
            })
            .unwrap();
        let mut psi = packet(&setup);
        // Two calls: a kick falls on the second call's first step, as after a pause.
        kicked.advance(&mut psi, 3, &never).unwrap();
        kicked.advance(&mut psi, 2, &never).unwrap();
        let mut free = Stepper::new(&shared);
        free.prepare(&[0.0; 64]).unwrap();
        let mut by_hand = packet(&setup);
        for (kick, steps) in [(0, 2), (2, 2), (4, 1)] {
            let e = by_hand_strength(kick as f64 * 0.1);
            for (z, &v) in by_hand.iter_mut().zip(&profile) {
                *z *= Complex64::from_polar(1.0, -e * v);
            }
            free.advance(&mut by_hand, steps, &never).unwrap();
        }
        psi.iter()
            .zip(&by_hand)
            .map(|(a, b)| (a - b).norm())
            .fold(0.0, f64::max)
    }

    #[test]
    fn a_kick_every_two_steps_is_the_map_applied_by_hand() {
        let gap = kicks_against_by_hand(None, |_| 1.0);
        assert!(gap < 1e-12, "{gap}");
    }

    #[test]
    fn a_modulated_kick_scales_each_kick_by_its_strength_then() {
        // Strength 1 + 0.6 cos(3 t + 0.5) at each kick's time.
        let strength = Strength::Modulated {
            depth: 0.6,
            frequency: 3.0,
            phase: 0.5,
        };
        let gap = kicks_against_by_hand(Some(strength), |t| 1.0 + 0.6 * (3.0 * t + 0.5).cos());
        assert!(gap < 1e-13, "{gap}");
    }

    #[test]
    fn a_twist_shifts_the_momentum_by_two_pi_beta_over_the_length() {
        let setup = free_setup(64, 0.1);
        let shared = Shared::<f64>::new(setup.clone()).unwrap();
        let mut stepper = Stepper::new(&shared);
        stepper.prepare(&[0.0; 64]).unwrap();
        let length = 64.0 * setup.dx;
        let shift = 2.0 * std::f64::consts::PI * 0.25 / length;
        let table = crate::observables::wavenumbers(64, setup.dx)
            .into_iter()
            .map(|k| 0.5 * (k + shift) * (k + shift))
            .collect();
        stepper
            .set_drive(&Realized {
                twist: Some((0.25, shift, table)),
                ..Realized::default()
            })
            .unwrap();
        assert_eq!(stepper.wavenumber_shift(), shift);
        // A plane wave of the periodic part: its phase turns at E = (k + shift)^2 / 2.
        let k = 2.0 * std::f64::consts::PI * 3.0 / length;
        let mut psi: Vec<Complex64> = (0..64)
            .map(|j| Complex64::from_polar(1.0, k * (setup.start + j as f64 * setup.dx)))
            .collect();
        let before = psi[5];
        stepper
            .advance(&mut psi, 10, &AtomicBool::new(false))
            .unwrap();
        let turned = (psi[5] / before).arg();
        let expected = -0.5 * (k + shift) * (k + shift) * 1.0;
        let wrapped = (turned - expected + std::f64::consts::PI)
            .rem_euclid(2.0 * std::f64::consts::PI)
            - std::f64::consts::PI;
        assert!(wrapped.abs() < 1e-12, "{turned} {expected}");
    }
}
