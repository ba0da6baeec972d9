//! Time-dependent terms of the Hamiltonian and the twisted boundary.
//!
//! - A kick `V(x) sum_n delta(t - t_n)` is applied exactly, as
//!   `exp(-i V / hbar)`, at the step boundaries `first + n every` (whole steps
//!   of the main run), at the start of that step: a pause at a kick's time sees
//!   the state just before the kick, so kicks fall in `[0, duration)`. A
//!   modulated kick is `exp(-i e(t_n) V / hbar)` with `e` at the kick's time
//!   `t_n` (computed at each kick; a fixed kick's factor is tabulated once).
//! - A modulated or switched term `e(t) V(x)` joins each potential factor at
//!   that factor's own time: the clock advances with the kinetic factors, so a
//!   factor after kinetic fractions `b_0 .. b_{i-1}` is at
//!   `t + (b_0 + .. + b_{i-1}) h` (the time-dependent problem made autonomous
//!   with time as a coordinate; the splitting keeps its order). A switched
//!   term is on during the main run's steps `on .. off` (integer counts).
//! - The twisted boundary `psi(x + L) = exp(2 pi i beta) psi(x)`: the stepper
//!   evolves the periodic part `u = exp(-2 pi i beta x / L) psi`, whose kinetic
//!   factor is `T(k + 2 pi beta / L)`.
//!
//! Drawn parameters (phases, the quasimomentum) come from the stream of
//! (`seed`, `DRIVE_PURPOSE`, realization), in a fixed order: the quasimomentum,
//! then each kick's profile phase and its modulation's phase, then the terms'
//! phases, in order.

use crate::dispersion::Dispersion;
use crate::error::{invalid, CoreError};
use crate::packets::Draw;
use crate::random::{Stream, DRIVE_PURPOSE};

/// A term's shape in space.
#[derive(Debug, Clone, PartialEq)]
pub enum Profile {
    /// Values at the grid points.
    Table(Vec<f64>),
    /// `amplitude cos(wavenumber x + phase)`, the phase drawn per realization.
    Cosine {
        amplitude: f64,
        wavenumber: f64,
        phase: Draw,
    },
}

/// Kicks at the main run's step boundaries `first, first + every, ...`.
#[derive(Debug, Clone, PartialEq)]
pub struct Kick {
    pub profile: Profile,
    pub first: usize,
    pub every: usize,
    /// A kick of strength `1 + depth cos(frequency t_n + phase)` at its time `t_n` (the
    /// quasi-periodic kicked rotor), or `None`: every kick the same.
    pub modulation: Option<Modulation>,
}

/// `1 + depth cos(frequency t + phase)`, the phase drawn per realization.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Modulation {
    pub depth: f64,
    pub frequency: f64,
    pub phase: Draw,
}

/// How a term's strength `e(t)` depends on time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Envelope {
    /// `1 + depth cos(frequency t + phase)`.
    Modulated(Modulation),
    /// 1 during the main run's steps `on .. off` (`off = None`: never off), else 0.
    Switched { on: usize, off: Option<usize> },
}

#[derive(Debug, Clone, PartialEq)]
pub struct Term {
    pub profile: Profile,
    pub envelope: Envelope,
}

/// Every time-dependent part of a run (empty: a static Hamiltonian).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Drive {
    pub kicks: Vec<Kick>,
    pub terms: Vec<Term>,
    /// The quasimomentum `beta` in `[0, 1)` and the dispersion it shifts.
    pub twist: Option<(Draw, Dispersion)>,
}

/// An envelope with its drawn phase.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Strength {
    Modulated {
        depth: f64,
        frequency: f64,
        phase: f64,
    },
    Switched {
        on: usize,
        off: Option<usize>,
    },
}

impl Strength {
    /// `e` during main-run step `member` at time `time`.
    #[inline]
    pub fn at(&self, member: usize, time: f64) -> f64 {
        match *self {
            Strength::Modulated {
                depth,
                frequency,
                phase,
            } => 1.0 + depth * (frequency * time + phase).cos(),
            Strength::Switched { on, off } => {
                if member >= on && off.is_none_or(|off| member < off) {
                    1.0
                } else {
                    0.0
                }
            }
        }
    }
}

/// One realization's kick: `V` at steps `first, first + every, ...`, scaled by
/// `strength` at the kick's time when it is modulated.
#[derive(Debug, Clone, PartialEq)]
pub struct RealizedKick {
    pub values: Vec<f64>,
    pub first: usize,
    pub every: usize,
    pub strength: Option<Strength>,
}

/// The drive of one realization.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Realized {
    pub kicks: Vec<RealizedKick>,
    pub terms: Vec<(Vec<f64>, Strength)>,
    /// `(beta, 2 pi beta / L, T(k + 2 pi beta / L) in FFT order)` with a twist.
    pub twist: Option<(f64, f64, Vec<f64>)>,
}

impl Realized {
    pub fn is_static(&self) -> bool {
        self.kicks.is_empty() && self.terms.is_empty() && self.twist.is_none()
    }
}

fn check_draw(name: &str, draw: &Draw) -> Result<(), CoreError> {
    let finite = match *draw {
        Draw::Fixed(value) => value.is_finite(),
        Draw::Uniform(low, high) => low.is_finite() && high.is_finite() && low <= high,
        Draw::Normal(mean, std) => mean.is_finite() && std.is_finite() && std >= 0.0,
    };
    if finite {
        Ok(())
    } else {
        invalid(format!(
            "{name} draw {draw:?} must be finite (low <= high, std >= 0)"
        ))
    }
}

impl Modulation {
    fn validate(&self) -> Result<(), CoreError> {
        let (depth, frequency) = (self.depth, self.frequency);
        if !(depth.is_finite() && frequency.is_finite()) {
            return invalid(format!(
                "modulation depth {depth} and frequency {frequency} must be finite"
            ));
        }
        check_draw("modulation phase", &self.phase)
    }

    fn realize(&self, stream: &mut Stream) -> Strength {
        Strength::Modulated {
            depth: self.depth,
            frequency: self.frequency,
            phase: self.phase.sample(stream),
        }
    }
}

impl Profile {
    fn validate(&self, points: usize) -> Result<(), CoreError> {
        match self {
            Profile::Table(values) => {
                if values.len() != points {
                    return invalid(format!(
                        "time-dependent profile has {} values; the grid has {points}",
                        values.len()
                    ));
                }
                if let Some(bad) = values.iter().position(|v| !v.is_finite()) {
                    return invalid(format!(
                        "time-dependent profile is not finite at point {bad}: {}",
                        values[bad]
                    ));
                }
                Ok(())
            }
            Profile::Cosine {
                amplitude,
                wavenumber,
                phase,
            } => {
                if !(amplitude.is_finite() && wavenumber.is_finite()) {
                    return invalid(format!(
                        "cosine amplitude {amplitude} and wavenumber {wavenumber} must be finite"
                    ));
                }
                check_draw("cosine phase", phase)
            }
        }
    }

    /// The values at the grid's points: `points` in all, `transverse` of them
    /// (1 in 1D) at each position `start + i dx` along axis 0 (C order).
    fn realize(
        &self,
        points: usize,
        dx: f64,
        start: f64,
        transverse: usize,
        stream: &mut Stream,
    ) -> Vec<f64> {
        match self {
            Profile::Table(values) => values.clone(),
            Profile::Cosine {
                amplitude,
                wavenumber,
                phase,
            } => {
                let phase = phase.sample(stream);
                (0..points)
                    .map(|j| {
                        let x = start + (j / transverse) as f64 * dx;
                        amplitude * (wavenumber * x + phase).cos()
                    })
                    .collect()
            }
        }
    }
}

impl Drive {
    pub fn validate(&self, points: usize) -> Result<(), CoreError> {
        for kick in &self.kicks {
            if kick.every == 0 {
                return invalid("kicks must be at least one step apart, got every = 0");
            }
            kick.profile.validate(points)?;
            if let Some(modulation) = &kick.modulation {
                modulation.validate()?;
            }
        }
        for term in &self.terms {
            term.profile.validate(points)?;
            match term.envelope {
                Envelope::Modulated(modulation) => modulation.validate()?,
                Envelope::Switched { on, off } => {
                    if off.is_some_and(|off| off < on) {
                        return invalid(format!(
                            "switched term goes off at step {off:?} before it goes on at step {on}"
                        ));
                    }
                }
            }
        }
        if let Some((draw, dispersion)) = &self.twist {
            check_draw("quasimomentum", draw)?;
            dispersion.validate()?;
            let bad = match *draw {
                Draw::Fixed(beta) => !(0.0..1.0).contains(&beta),
                Draw::Uniform(low, high) => low < 0.0 || high > 1.0,
                Draw::Normal(..) => true,
            };
            if bad {
                return invalid(format!(
                    "quasimomentum {draw:?} must lie in [0, 1) (fixed, or uniform inside it)"
                ));
            }
        }
        Ok(())
    }

    /// The drive of realization `index` of `seed` on the grid of `points`
    /// points, `transverse` of them (1 in 1D) at each position `start + i dx`
    /// along axis 0. A cosine profile varies along axis 0; a twist needs 1D.
    pub fn realize(
        &self,
        points: usize,
        dx: f64,
        start: f64,
        transverse: usize,
        seed: u64,
        index: u64,
    ) -> Realized {
        let mut stream = Stream::new(seed, DRIVE_PURPOSE, index);
        let twist = self.twist.map(|(draw, dispersion)| {
            // A uniform draw on [0, 1) stays below 1.
            let beta = draw.sample(&mut stream).clamp(0.0, 1.0);
            let beta = if beta >= 1.0 { 0.0 } else { beta };
            let shift = 2.0 * std::f64::consts::PI * beta / (points as f64 * dx);
            let table = crate::observables::wavenumbers(points, dx)
                .into_iter()
                .map(|k| dispersion.at_wavenumber(k + shift, dx))
                .collect();
            (beta, shift, table)
        });
        let kicks = self
            .kicks
            .iter()
            .map(|kick| {
                let values = kick
                    .profile
                    .realize(points, dx, start, transverse, &mut stream);
                let strength = kick.modulation.map(|m| m.realize(&mut stream));
                RealizedKick {
                    values,
                    first: kick.first,
                    every: kick.every,
                    strength,
                }
            })
            .collect();
        let terms = self
            .terms
            .iter()
            .map(|term| {
                let values = term
                    .profile
                    .realize(points, dx, start, transverse, &mut stream);
                let strength = match term.envelope {
                    Envelope::Modulated(modulation) => modulation.realize(&mut stream),
                    Envelope::Switched { on, off } => Strength::Switched { on, off },
                };
                (values, strength)
            })
            .collect();
        Realized {
            kicks,
            terms,
            twist,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn switched_terms_count_whole_steps_and_off_before_on_is_refused() {
        let on = Strength::Switched {
            on: 3,
            off: Some(5),
        };
        let seen: Vec<f64> = (0..7).map(|s| on.at(s, 0.0)).collect();
        assert_eq!(seen, vec![0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0]);
        let drive = Drive {
            terms: vec![Term {
                profile: Profile::Table(vec![0.0; 4]),
                envelope: Envelope::Switched {
                    on: 5,
                    off: Some(3),
                },
            }],
            ..Drive::default()
        };
        assert!(drive.validate(4).is_err());
    }

    #[test]
    fn drawn_phases_depend_on_seed_and_index_only() {
        let drive = Drive {
            kicks: vec![Kick {
                profile: Profile::Cosine {
                    amplitude: 1.0,
                    wavenumber: 1.0,
                    phase: Draw::Uniform(0.0, 6.0),
                },
                first: 0,
                every: 1,
                modulation: Some(Modulation {
                    depth: 0.5,
                    frequency: 2.0,
                    phase: Draw::Uniform(0.0, 6.0),
                }),
            }],
            terms: vec![],
            twist: Some((
                Draw::Uniform(0.0, 1.0),
                Dispersion::Continuum {
                    hbar: 1.0,
                    mass: 1.0,
                },
            )),
        };
        drive.validate(8).unwrap();
        let a = drive.realize(8, 0.5, 0.0, 1, 7, 3);
        let b = drive.realize(8, 0.5, 0.0, 1, 7, 3);
        let c = drive.realize(8, 0.5, 0.0, 1, 7, 4);
        assert_eq!(a, b);
        assert_ne!(a, c);
        let beta = a.twist.as_ref().unwrap().0;
        assert!((0.0..1.0).contains(&beta));
    }
}
