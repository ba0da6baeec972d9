//! Ground states of `H = T + V + g |psi|^2` (Gross–Pitaevskii when `g != 0`),
//! normalized so that `sum psi^2 dx = 1`.
//!
//! Two stages:
//!
//! 1. Imaginary-time split step with renormalization:
//!    `psi <- N[e^{-W s/2} F^-1 e^{-T s} F e^{-W s/2} psi]`, `W = V + g psi^2`
//!    taken at the start of each half step, `s = dtau / hbar`. It is the
//!    global method (it cannot land on an excited state from a positive
//!    start), but its fixed point is off the true state by O(s) (the
//!    nonlinear half steps are not symmetric), so it only brings the state
//!    into the basin of
//! 2. a Newton polish: solve `P (T + V + 3 g psi^2 - mu) P delta = -r` on the
//!    tangent space `P = 1 - psi psi^T` by conjugate gradients preconditioned
//!    with `(T - T_min + alpha)^-1` (diagonal in k space), then
//!    `psi <- (psi + delta) / ||psi + delta||`.
//!
//! Every stage measures the residual `r = H psi - mu psi`, `mu = <psi, H psi>`,
//! with the exact discretized `H` (kinetic part by FFT with the model's
//! dispersion), and the run stops when `||r|| <= tolerance * scale`, where
//! `scale = <T - T_min> + <V - V_min> + |g| sum psi^4 dx` is the state's
//! energy above the floor of the spectrum (independent of units and of a
//! constant offset of `V`).
//!
//! The ground state is real and positive (the kinetic tables are even in k,
//! the lattice hopping is negative), so everything is done on real vectors:
//! the caller starts from a nonnegative guess.

use std::sync::atomic::{AtomicBool, Ordering};

use num_complex::Complex64;

use crate::error::{invalid, CoreError};
use crate::ndfft::Transforms;

/// Imaginary-time steps between two residual checks.
const CHECK_STEPS: usize = 16;
/// The imaginary step is `STEP_FRACTION / scale` times the current step factor (halved on stalls).
const STEP_FRACTION: f64 = 0.1;
/// A residual that changes by less than this fraction over a check has stalled.
const STALL: f64 = 0.01;
/// Relative residual below which the Newton polish starts.
const SWITCH: f64 = 1e-2;
/// Relative residual below which a stalled imaginary-time run tries the polish.
const BASIN: f64 = 0.1;
/// Newton iterations per polish, and polishes per run.
const NEWTON_ITERATIONS: usize = 30;
const POLISHES: usize = 8;
/// Conjugate-gradient iterations per Newton step.
const CG_ITERATIONS: usize = 1000;
/// Backtracking halvings of a Newton step before the polish gives up.
const BACKTRACKS: usize = 6;
/// A residual within this many rounding floors has reached what f64 can represent.
const FLOOR_MARGIN: f64 = 100.0;
/// How many conjugate-gradient iterations run between two looks at the cancel flag.
const CANCEL_POLL_CG: usize = 16;

/// What defines the problem.
#[derive(Debug, Clone)]
pub struct Problem {
    /// The volume element (the spacing in 1D).
    pub dx: f64,
    /// Points per axis (one entry in 1D; C order on a 2D/3D grid).
    pub shape: Vec<usize>,
    pub hbar: f64,
    /// Kinetic energy at each wavenumber, in FFT order (even in k).
    pub kinetic: Vec<f64>,
    /// Real potential at each point.
    pub potential: Vec<f64>,
    /// The coefficient `g` of `g |psi|^2`.
    pub nonlinearity: f64,
}

/// When to stop.
#[derive(Debug, Clone, Copy)]
pub struct Settings {
    /// Stop when `||H psi - mu psi|| <= tolerance * scale`.
    pub tolerance: f64,
    /// Most imaginary-time steps.
    pub max_steps: usize,
}

/// Why a run ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stop {
    /// The residual reached the tolerance.
    Converged,
    /// `max_steps` imaginary-time steps ran without reaching it.
    StepCap,
    /// The polish stalled within `FLOOR_MARGIN` of the rounding floor, above the tolerance.
    Floor,
}

/// The outcome, converged or not (then it is how far the run got).
#[derive(Debug, Clone)]
pub struct Outcome {
    /// The state, `sum psi^2 dx = 1`, positive.
    pub psi: Vec<f64>,
    /// `E = <T + V> + (g/2) sum psi^4 dx`.
    pub energy: f64,
    /// `mu = <T + V> + g sum psi^4 dx`.
    pub chemical_potential: f64,
    /// `||H psi - mu psi||` (absolute, energy units).
    pub residual: f64,
    /// The state's energy scale the tolerance is relative to.
    pub scale: f64,
    /// `||r||` below which f64 cannot go on this grid (about `eps * rms(T - T_min)`).
    pub floor: f64,
    pub steps: usize,
    /// The last imaginary step `dtau` (time units).
    pub imaginary_step: f64,
    pub newton_iterations: usize,
    pub cg_iterations: usize,
    pub polishes: usize,
    pub stop: Stop,
}

impl Problem {
    pub fn validate(&self, initial: &[f64], settings: &Settings) -> Result<(), CoreError> {
        let n = self.kinetic.len();
        if n < 2 {
            return invalid(format!("points must be >= 2, got {n}"));
        }
        if !(1..=crate::ndfft::MAX_AXES).contains(&self.shape.len())
            || self.shape.contains(&0)
            || self.shape.iter().product::<usize>() != n
        {
            return invalid(format!(
                "grid shape {:?} must have 1 to 3 axes holding the {n} points",
                self.shape
            ));
        }
        if self.potential.len() != n || initial.len() != n {
            return invalid(format!(
                "potential ({}) and initial state ({}) must have the grid's {n} points",
                self.potential.len(),
                initial.len()
            ));
        }
        for (name, value) in [("dx", self.dx), ("hbar", self.hbar)] {
            if !(value.is_finite() && value > 0.0) {
                return invalid(format!("{name} must be finite and > 0, got {value}"));
            }
        }
        if !self.nonlinearity.is_finite() {
            return invalid(format!(
                "nonlinearity must be finite, got {}",
                self.nonlinearity
            ));
        }
        if let Some(bad) = self
            .kinetic
            .iter()
            .chain(&self.potential)
            .position(|v| !v.is_finite())
        {
            return invalid(format!(
                "kinetic and potential tables must be finite (value {bad} is not)"
            ));
        }
        if initial.iter().any(|&v| !(v.is_finite() && v >= 0.0)) {
            return invalid("the initial state must be finite and >= 0 everywhere");
        }
        if !initial.iter().any(|&v| v > 0.0) {
            return invalid("the initial state is zero everywhere");
        }
        let tolerance = settings.tolerance;
        if !(tolerance.is_finite() && tolerance > 0.0 && tolerance < 1.0) {
            return invalid(format!("tolerance must lie in (0, 1), got {tolerance}"));
        }
        if settings.max_steps == 0 {
            return invalid("max_steps must be >= 1");
        }
        Ok(())
    }
}

/// The residual and energies of a state.
#[derive(Debug, Clone, Copy)]
struct Measure {
    mu: f64,
    energy: f64,
    residual: f64,
    scale: f64,
}

impl Measure {
    fn relative(&self) -> f64 {
        self.residual / self.scale
    }
}

/// The FFT plans, the shifted tables and the buffers.
struct Work<'a> {
    problem: &'a Problem,
    plans: Transforms<f64>,
    complex: Vec<Complex64>,
    spectrum: Vec<Complex64>,
    scratch: Vec<Complex64>,
    kinetic_min: f64,
    potential_min: f64,
    /// `H psi` and `r` of the last measure.
    h_psi: Vec<f64>,
    r: Vec<f64>,
    ffts: usize,
}

impl<'a> Work<'a> {
    fn new(problem: &'a Problem) -> Self {
        let n = problem.kinetic.len();
        let plans = Transforms::<f64>::new(&problem.shape);
        let zero = Complex64::new(0.0, 0.0);
        let scratch = vec![zero; plans.scratch_len()];
        let min = |v: &[f64]| v.iter().copied().fold(f64::INFINITY, f64::min);
        Work {
            problem,
            plans,
            complex: vec![zero; n],
            spectrum: vec![zero; n],
            scratch,
            kinetic_min: min(&problem.kinetic),
            potential_min: min(&problem.potential),
            h_psi: vec![0.0; n],
            r: vec![0.0; n],
            ffts: 0,
        }
    }

    fn dx(&self) -> f64 {
        self.problem.dx
    }

    fn inner(&self, a: &[f64], b: &[f64]) -> f64 {
        a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>() * self.dx()
    }

    /// `out = F^-1 (table F f)`, `table` even in k and already divided by N.
    fn filter(&mut self, f: &[f64], table: &[f64], out: &mut [f64]) {
        for (z, &v) in self.complex.iter_mut().zip(f) {
            *z = Complex64::new(v, 0.0);
        }
        self.plans.filter(
            &mut self.complex,
            &mut self.spectrum,
            table,
            &mut self.scratch,
        );
        for (o, z) in out.iter_mut().zip(&self.complex) {
            *o = z.re;
        }
        self.ffts += 2;
    }

    /// `H psi`, `mu`, `r`, `E` and the scale of a normalized `psi` (kept in `h_psi`, `r`).
    fn measure(&mut self, psi: &[f64], kinetic_over_n: &[f64]) -> Measure {
        let mut h_psi = std::mem::take(&mut self.h_psi);
        self.filter(psi, kinetic_over_n, &mut h_psi);
        let g = self.problem.nonlinearity;
        let dx = self.dx();
        let (mut kinetic, mut potential, mut quartic) = (0.0, 0.0, 0.0);
        for ((h, &p), &v) in h_psi.iter_mut().zip(psi).zip(&self.problem.potential) {
            let rho = p * p;
            kinetic += p * *h;
            potential += rho * v;
            quartic += rho * rho;
            *h += (v + g * rho) * p;
        }
        let (kinetic, potential, quartic) = (kinetic * dx, potential * dx, quartic * dx);
        let mu = kinetic + potential + g * quartic;
        let mut squares = 0.0;
        for ((r, &h), &p) in self.r.iter_mut().zip(&h_psi).zip(psi) {
            *r = h - mu * p;
            squares += *r * *r;
        }
        self.h_psi = h_psi;
        Measure {
            mu,
            energy: kinetic + potential + 0.5 * g * quartic,
            residual: (squares * dx).sqrt(),
            scale: (kinetic - self.kinetic_min)
                + (potential - self.potential_min)
                + g.abs() * quartic,
        }
    }

    fn normalize(&self, psi: &mut [f64]) {
        let norm = self.inner(psi, psi).sqrt();
        for p in psi.iter_mut() {
            *p /= norm;
        }
    }

    /// `psi *= exp(-(V + g psi^2 - c) s)` with `c` the smallest exponent (no overflow).
    fn potential_factor(&self, psi: &mut [f64], s: f64) {
        let g = self.problem.nonlinearity;
        let exponent = |p: f64, v: f64| v + g * p * p;
        let floor = psi
            .iter()
            .zip(&self.problem.potential)
            .map(|(&p, &v)| exponent(p, v))
            .fold(f64::INFINITY, f64::min);
        for (p, &v) in psi.iter_mut().zip(&self.problem.potential) {
            *p *= (-(exponent(*p, v) - floor) * s).exp();
        }
    }
}

/// Rounding floor of the residual: FFT rounding (relative `eps`) amplified by the kinetic table.
fn rounding_floor(kinetic: &[f64], kinetic_min: f64) -> f64 {
    let mean_square = kinetic
        .iter()
        .map(|t| (t - kinetic_min).powi(2))
        .sum::<f64>()
        / kinetic.len() as f64;
    f64::EPSILON * mean_square.sqrt()
}

/// The ground state from the nonnegative `initial` (see the module's notes).
pub fn ground_state(
    problem: &Problem,
    initial: &[f64],
    settings: &Settings,
    cancel: &AtomicBool,
) -> Result<Outcome, CoreError> {
    problem.validate(initial, settings)?;
    let n = problem.kinetic.len();
    let mut work = Work::new(problem);
    let kinetic_over_n: Vec<f64> = problem.kinetic.iter().map(|t| t / n as f64).collect();
    let floor = rounding_floor(&problem.kinetic, work.kinetic_min);
    let tolerance = settings.tolerance;

    let mut psi = initial.to_vec();
    work.normalize(&mut psi);
    let mut measure = work.measure(&psi, &kinetic_over_n);
    let mut run = Run {
        steps: 0,
        s: 0.0,
        newton_iterations: 0,
        cg_iterations: 0,
        polishes: 0,
    };
    let mut factor = 1.0;
    let mut previous = f64::INFINITY;
    let mut step_table = vec![0.0; n];
    let mut buffer = vec![0.0; n];
    loop {
        let relative = measure.relative();
        if relative <= tolerance {
            return Ok(run.outcome(problem, psi, measure, floor, Stop::Converged));
        }
        let stalled = (relative / previous - 1.0).abs() < STALL;
        previous = relative;
        if (relative <= SWITCH || (stalled && relative <= BASIN)) && run.polishes < POLISHES {
            run.polishes += 1;
            let polish = polish(
                &mut work,
                &psi,
                measure,
                &kinetic_over_n,
                tolerance,
                floor,
                cancel,
            )?;
            run.newton_iterations += polish.iterations;
            run.cg_iterations += polish.cg;
            match polish.end {
                PolishEnd::Converged => {
                    return Ok(run.outcome(
                        problem,
                        polish.psi,
                        polish.measure,
                        floor,
                        Stop::Converged,
                    ))
                }
                PolishEnd::Floor => {
                    return Ok(run.outcome(problem, polish.psi, polish.measure, floor, Stop::Floor))
                }
                // Not yet in the basin: imaginary time goes on from its own state, towards the
                // fixed point of a smaller step.
                PolishEnd::Failed => {
                    factor *= 0.5;
                    previous = f64::INFINITY;
                }
            }
        } else if stalled {
            // At the fixed point of this step: only a smaller one gets closer.
            factor *= 0.5;
        }
        if run.steps >= settings.max_steps {
            return Ok(run.outcome(problem, psi, measure, floor, Stop::StepCap));
        }
        // The step follows the state's energy scale, so a start far above the ground state does
        // not leave a needlessly short step once the state has relaxed.
        let s = factor * STEP_FRACTION / measure.scale.max(f64::MIN_POSITIVE);
        if s != run.s {
            run.s = s;
            for (e, &t) in step_table.iter_mut().zip(&problem.kinetic) {
                *e = (-(t - work.kinetic_min) * s).exp() / n as f64;
            }
        }
        let batch = CHECK_STEPS.min(settings.max_steps - run.steps);
        for _ in 0..batch {
            work.potential_factor(&mut psi, 0.5 * s);
            work.filter(&psi, &step_table, &mut buffer);
            std::mem::swap(&mut psi, &mut buffer);
            work.potential_factor(&mut psi, 0.5 * s);
            work.normalize(&mut psi);
        }
        run.steps += batch;
        if cancel.load(Ordering::Relaxed) {
            return Err(CoreError::Interrupted);
        }
        if psi.iter().any(|p| !p.is_finite()) {
            return Err(CoreError::Internal(
                "the imaginary-time state stopped being finite".into(),
            ));
        }
        measure = work.measure(&psi, &kinetic_over_n);
    }
}

/// The counters of a run.
struct Run {
    steps: usize,
    /// The current imaginary step over hbar.
    s: f64,
    newton_iterations: usize,
    cg_iterations: usize,
    polishes: usize,
}

impl Run {
    fn outcome(
        &self,
        problem: &Problem,
        psi: Vec<f64>,
        measure: Measure,
        floor: f64,
        stop: Stop,
    ) -> Outcome {
        Outcome {
            psi,
            energy: measure.energy,
            chemical_potential: measure.mu,
            residual: measure.residual,
            scale: measure.scale,
            floor,
            steps: self.steps,
            imaginary_step: self.s * problem.hbar,
            newton_iterations: self.newton_iterations,
            cg_iterations: self.cg_iterations,
            polishes: self.polishes,
            stop,
        }
    }
}

enum PolishEnd {
    Converged,
    Floor,
    Failed,
}

struct Polish {
    psi: Vec<f64>,
    measure: Measure,
    iterations: usize,
    cg: usize,
    end: PolishEnd,
}

/// Newton iterations from `start` (with its `measure`), each solved by projected, preconditioned CG.
fn polish(
    work: &mut Work<'_>,
    start: &[f64],
    start_measure: Measure,
    kinetic_over_n: &[f64],
    tolerance: f64,
    floor: f64,
    cancel: &AtomicBool,
) -> Result<Polish, CoreError> {
    let n = start.len();
    let g = work.problem.nonlinearity;
    let mut psi = start.to_vec();
    let mut measure = start_measure;
    let mut r = work.r.clone();
    let (mut delta, mut res, mut z, mut p, mut q, mut m_psi, mut trial) = (
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
        vec![0.0; n],
    );
    let mut preconditioner = vec![0.0; n];
    let mut diagonal = vec![0.0; n];
    let mut cg_total = 0;
    let mut slow = 0;
    // Every way out of the loop ends here: converged, at the rounding floor, or not (yet) in
    // the basin, judged on the last accepted state.
    let mut iterations = NEWTON_ITERATIONS;
    for iteration in 0..NEWTON_ITERATIONS {
        let relative = measure.relative();
        if relative <= tolerance {
            iterations = iteration;
            break;
        }
        let alpha = measure.scale;
        for (m, &t) in preconditioner.iter_mut().zip(&work.problem.kinetic) {
            *m = 1.0 / ((t - work.kinetic_min + alpha) * n as f64);
        }
        for ((d, &v), &x) in diagonal.iter_mut().zip(&work.problem.potential).zip(&psi) {
            *d = v + 3.0 * g * x * x - measure.mu;
        }
        work.filter(&psi, &preconditioner, &mut m_psi);
        let psi_m_psi = work.inner(&psi, &m_psi);
        // Inexact Newton: solve to eta, enough for quadratic convergence and no more than the
        // tolerance needs.
        let eta = (relative.sqrt().min(0.1))
            .max(0.1 * tolerance / relative)
            .min(0.5);
        delta.iter_mut().for_each(|d| *d = 0.0);
        for (s, &x) in res.iter_mut().zip(&r) {
            *s = -x;
        }
        let along = work.inner(&psi, &res);
        for (s, &x) in res.iter_mut().zip(&psi) {
            *s -= along * x;
        }
        let start_norm = work.inner(&res, &res).sqrt();
        project_preconditioned(work, &res, &preconditioner, &psi, &m_psi, psi_m_psi, &mut z);
        p.copy_from_slice(&z);
        let mut rz = work.inner(&res, &z);
        for inner in 0..CG_ITERATIONS {
            // q = P (T + diag) p, p already orthogonal to psi.
            work.filter(&p, kinetic_over_n, &mut q);
            for ((qv, &d), &pv) in q.iter_mut().zip(&diagonal).zip(&p) {
                *qv += d * pv;
            }
            let along = work.inner(&psi, &q);
            for (qv, &x) in q.iter_mut().zip(&psi) {
                *qv -= along * x;
            }
            let curvature = work.inner(&p, &q);
            if curvature.is_nan() || curvature <= 0.0 {
                // Not near a minimum: the Jacobian is indefinite on the tangent space.
                break;
            }
            let step = rz / curvature;
            for ((d, s), (&pv, &qv)) in delta.iter_mut().zip(res.iter_mut()).zip(p.iter().zip(&q)) {
                *d += step * pv;
                *s -= step * qv;
            }
            cg_total += 1;
            if work.inner(&res, &res).sqrt() <= eta * start_norm {
                break;
            }
            if inner % CANCEL_POLL_CG == CANCEL_POLL_CG - 1 && cancel.load(Ordering::Relaxed) {
                return Err(CoreError::Interrupted);
            }
            project_preconditioned(work, &res, &preconditioner, &psi, &m_psi, psi_m_psi, &mut z);
            let next = work.inner(&res, &z);
            let beta = next / rz;
            rz = next;
            for (pv, &zv) in p.iter_mut().zip(&z) {
                *pv = zv + beta * *pv;
            }
        }
        if cancel.load(Ordering::Relaxed) {
            return Err(CoreError::Interrupted);
        }
        if delta.iter().all(|&d| d == 0.0) {
            iterations = iteration;
            break;
        }
        // Backtrack on the residual.
        let mut length = 1.0;
        let mut accepted = None;
        for _ in 0..BACKTRACKS {
            for ((t, &x), &d) in trial.iter_mut().zip(&psi).zip(&delta) {
                *t = x + length * d;
            }
            work.normalize(&mut trial);
            let candidate = work.measure(&trial, kinetic_over_n);
            if candidate.residual.is_finite() && candidate.residual < measure.residual {
                accepted = Some(candidate);
                break;
            }
            length *= 0.5;
        }
        let Some(candidate) = accepted else {
            iterations = iteration;
            break;
        };
        // Quadratic convergence more than halves the residual; twice less in a row is a stall.
        slow = if candidate.residual > 0.5 * measure.residual {
            slow + 1
        } else {
            0
        };
        std::mem::swap(&mut psi, &mut trial);
        r.copy_from_slice(&work.r);
        measure = candidate;
        if slow >= 2 {
            iterations = iteration + 1;
            break;
        }
    }
    let end = if measure.relative() <= tolerance {
        PolishEnd::Converged
    } else if measure.residual <= FLOOR_MARGIN * floor {
        PolishEnd::Floor
    } else {
        PolishEnd::Failed
    };
    Ok(Polish {
        psi,
        measure,
        iterations,
        cg: cg_total,
        end,
    })
}

/// `z = M w - M psi <psi, M w> / <psi, M psi>`: the preconditioned vector, orthogonal to `psi`.
fn project_preconditioned(
    work: &mut Work<'_>,
    w: &[f64],
    preconditioner: &[f64],
    psi: &[f64],
    m_psi: &[f64],
    psi_m_psi: f64,
    z: &mut [f64],
) {
    work.filter(w, preconditioner, z);
    let along = work.inner(psi, z) / psi_m_psi;
    for (zv, &m) in z.iter_mut().zip(m_psi) {
        *zv -= along * m;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dispersion::Dispersion;

    /// `points` points on [-10, 10), hbar = m = 1, harmonic trap of frequency `omega`.
    fn trap(points: usize, omega: f64, nonlinearity: f64) -> Problem {
        let dx = 20.0 / points as f64;
        let free = Dispersion::Continuum {
            hbar: 1.0,
            mass: 1.0,
        };
        Problem {
            dx,
            shape: vec![points],
            hbar: 1.0,
            kinetic: free.kinetic_table(points, dx),
            potential: (0..points)
                .map(|j| {
                    let x = -10.0 + j as f64 * dx;
                    0.5 * omega * omega * x * x
                })
                .collect(),
            nonlinearity,
        }
    }

    fn settings(tolerance: f64) -> Settings {
        Settings {
            tolerance,
            max_steps: 100_000,
        }
    }

    #[test]
    fn harmonic_ground_state_is_the_gaussian() {
        let problem = trap(256, 1.0, 0.0);
        let flat = vec![1.0; 256];
        let out = ground_state(&problem, &flat, &settings(1e-10), &AtomicBool::new(false)).unwrap();
        assert_eq!(out.stop, Stop::Converged);
        assert!((out.energy - 0.5).abs() < 1e-10, "{}", out.energy);
        assert!((out.chemical_potential - 0.5).abs() < 1e-10);
        assert!(out.residual <= 1e-10 * out.scale);
        // pi^(-1/4) exp(-x^2/2) at the grid points.
        for (j, &p) in out.psi.iter().enumerate() {
            let x = -10.0 + j as f64 * problem.dx;
            let exact = std::f64::consts::PI.powf(-0.25) * (-0.5 * x * x).exp();
            assert!((p - exact).abs() < 1e-9, "{j}: {p} vs {exact}");
        }
    }

    #[test]
    fn repulsive_state_satisfies_its_equation_and_virial_theorem() {
        let g = 20.0;
        let problem = trap(512, 1.0, g);
        let out = ground_state(
            &problem,
            &vec![1.0; 512],
            &settings(1e-10),
            &AtomicBool::new(false),
        )
        .unwrap();
        assert_eq!(out.stop, Stop::Converged);
        // 1D virial theorem of the GP energy (scaling x -> lambda x): 2<T> - 2<V> + E_int = 0.
        let dx = problem.dx;
        let quartic: f64 = out.psi.iter().map(|p| p.powi(4)).sum::<f64>() * dx;
        let potential: f64 = out
            .psi
            .iter()
            .zip(&problem.potential)
            .map(|(p, v)| p * p * v)
            .sum::<f64>()
            * dx;
        let kinetic = out.energy - potential - 0.5 * g * quartic;
        let virial = 2.0 * kinetic - 2.0 * potential + 0.5 * g * quartic;
        assert!(virial.abs() < 1e-9, "virial {virial}");
        assert!((out.chemical_potential - out.energy - 0.5 * g * quartic).abs() < 1e-12);
        // Positive, to the accuracy the tolerance asks (the Newton step leaves 1e-13 in the far tails).
        assert!(out.psi.iter().all(|&p| p >= -1e-11));
    }

    #[test]
    fn step_cap_reports_how_far_it_got() {
        let problem = trap(256, 1.0, 0.0);
        let capped = Settings {
            tolerance: 1e-10,
            max_steps: 16,
        };
        let out =
            ground_state(&problem, &vec![1.0; 256], &capped, &AtomicBool::new(false)).unwrap();
        assert_eq!(out.stop, Stop::StepCap);
        assert_eq!(out.steps, 16);
        assert!(out.residual > 1e-10 * out.scale && out.residual.is_finite());
    }

    #[test]
    fn cancel_and_bad_input_are_errors_not_panics() {
        let problem = trap(256, 1.0, 0.0);
        let flat = vec![1.0; 256];
        let cancelled = ground_state(&problem, &flat, &settings(1e-10), &AtomicBool::new(true));
        assert_eq!(cancelled.unwrap_err(), CoreError::Interrupted);
        let no = AtomicBool::new(false);
        assert!(ground_state(&problem, &flat[..255], &settings(1e-10), &no).is_err());
        assert!(ground_state(&problem, &vec![0.0; 256], &settings(1e-10), &no).is_err());
        assert!(ground_state(&problem, &vec![-1.0; 256], &settings(1e-10), &no).is_err());
        assert!(ground_state(&problem, &flat, &settings(0.0), &no).is_err());
        assert!(ground_state(&problem, &flat, &settings(f64::NAN), &no).is_err());
        let mut bad = problem.clone();
        bad.potential[3] = f64::INFINITY;
        assert!(ground_state(&bad, &flat, &settings(1e-10), &no).is_err());
    }
}
