//! Disorder realizations on the grid.
//!
//! Conventions (the Python classes document them for users):
//! - white noise of strength D: independent normals of variance D/dx per point;
//! - box disorder of width W: independent uniforms on [-W/2, W/2];
//! - Gaussian disorder: `C(x) = rms^2 exp(-x^2/(2 l^2))`, by spectral filtering of
//!   white noise on a padded periodic line, rescaled to the exact variance;
//! - speckle: `V = s (I/<I> - 1)` with `I = |E|^2`, `E` a complex Gaussian field
//!   with a flat spectrum on `|q| < 1/l`; `<I>` is the exact ensemble mean, so
//!   `C(x) = s^2 sinc^2(x/l)` and `V >= -s` for `s > 0`.
//!
//! Each term draws from its own counter-based stream (purpose = its position
//! in the list), so realization `index` never depends on how work is spread.

use std::sync::Arc;

use num_complex::Complex64;
use rustfft::{Fft, FftPlanner};

use crate::error::{invalid, CoreError};
use crate::random::Stream;

mod cauchy;

/// One random model and its region `[start, stop)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Term {
    pub kind: Kind,
    pub start: f64,
    pub stop: f64,
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Kind {
    WhiteNoise {
        strength: f64,
    },
    Box {
        width: f64,
    },
    Gaussian {
        rms: f64,
        correlation_length: f64,
    },
    /// `strength` carries the sign.
    Speckle {
        strength: f64,
        correlation_length: f64,
    },
    /// Lorentzian on-site values of half-width `width` (see `cauchy`).
    Cauchy {
        width: f64,
    },
}

/// Where the grid is.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Line {
    pub points: usize,
    pub dx: f64,
    pub start: f64,
}

/// A filtered term's plans and filter, built once per run.
struct Filtered {
    length: usize,
    forward: Arc<dyn Fft<f64>>,
    inverse: Arc<dyn Fft<f64>>,
    /// Multiplies the transformed noise.
    filter: Vec<f64>,
    /// Speckle: `<I>`, the ensemble-mean intensity.
    mean_intensity: f64,
}

impl Filtered {
    fn new(planner: &mut FftPlanner<f64>, filter: Vec<f64>, mean_intensity: f64) -> Self {
        let length = filter.len();
        Filtered {
            length,
            forward: planner.plan_fft_forward(length),
            inverse: planner.plan_fft_inverse(length),
            filter,
            mean_intensity,
        }
    }
}

struct Prepared {
    term: Term,
    first: usize,
    end: usize,
    filtered: Option<Filtered>,
}

/// Generates realizations of a list of terms; one per thread (it owns buffers).
pub struct Realizer {
    line: Line,
    terms: Vec<Prepared>,
    buffer: Vec<Complex64>,
    scratch: Vec<Complex64>,
}

fn smooth_size(minimum: usize) -> usize {
    // The next size of the form 2^a 3^b 5^c: fast for rustfft.
    let mut best = minimum.next_power_of_two();
    let mut p3 = 1;
    while p3 < best {
        let mut p35 = p3;
        while p35 < best {
            let mut size = p35;
            while size < minimum {
                size *= 2;
            }
            best = best.min(size);
            p35 *= 5;
        }
        p3 *= 3;
    }
    best
}

impl Realizer {
    pub fn new(line: Line, terms: &[Term]) -> Result<Self, CoreError> {
        let mut planner = FftPlanner::<f64>::new();
        let mut prepared = Vec::with_capacity(terms.len());
        let mut longest = 0;
        for &term in terms {
            let (first, end) = region(line, term)?;
            let filtered = match term.kind {
                Kind::WhiteNoise { strength } => {
                    positive("white-noise strength", strength)?;
                    None
                }
                Kind::Box { width } => {
                    positive("box width", width)?;
                    None
                }
                Kind::Cauchy { width } => {
                    positive("cauchy width", width)?;
                    None
                }
                Kind::Gaussian {
                    rms,
                    correlation_length,
                } => {
                    positive("gaussian rms", rms)?;
                    resolved(line, correlation_length)?;
                    let length = padded(end - first, correlation_length, line.dx);
                    let q = wavenumbers(length, line.dx);
                    let raw: Vec<f64> = q
                        .iter()
                        .map(|&q| (-(q * correlation_length).powi(2) / 4.0).exp())
                        .collect();
                    // Normalize so that the variance is exactly rms^2:
                    // var = (1/M) sum |H_q|^2 for unit-variance white noise.
                    let power: f64 = raw.iter().map(|h| h * h).sum::<f64>() / length as f64;
                    let scale = rms / power.sqrt();
                    let filter = raw.iter().map(|h| h * scale / length as f64).collect();
                    longest = longest.max(length);
                    Some(Filtered::new(&mut planner, filter, 0.0))
                }
                Kind::Speckle {
                    strength,
                    correlation_length,
                } => {
                    if !(strength.is_finite() && strength != 0.0) {
                        return invalid(format!(
                            "speckle strength must be finite and nonzero, got {strength}"
                        ));
                    }
                    resolved(line, correlation_length)?;
                    let length = padded(end - first, correlation_length, line.dx);
                    let q = wavenumbers(length, line.dx);
                    let pupil: Vec<f64> = q
                        .iter()
                        .map(|&q| {
                            if q.abs() * correlation_length < 1.0 {
                                1.0
                            } else {
                                0.0
                            }
                        })
                        .collect();
                    let open = pupil.iter().sum::<f64>();
                    if open < 1.0 {
                        return invalid("speckle pupil holds no wavenumber: correlation_length too long for the region");
                    }
                    // E = IFFT(P W)/M with unit complex noise: <|E|^2> = open / M^2 * M.
                    let filter = pupil.iter().map(|p| p / length as f64).collect();
                    longest = longest.max(length);
                    Some(Filtered::new(&mut planner, filter, open / length as f64))
                }
            };
            prepared.push(Prepared {
                term,
                first,
                end,
                filtered,
            });
        }
        let scratch_len = prepared
            .iter()
            .filter_map(|p| p.filtered.as_ref())
            .map(|f| {
                f.forward
                    .get_inplace_scratch_len()
                    .max(f.inverse.get_inplace_scratch_len())
            })
            .max()
            .unwrap_or(0);
        Ok(Realizer {
            line,
            terms: prepared,
            buffer: vec![Complex64::new(0.0, 0.0); longest],
            scratch: vec![Complex64::new(0.0, 0.0); scratch_len],
        })
    }

    /// Add realization `index` of `seed` to `potential` (the grid's size).
    pub fn add_to(
        &mut self,
        seed: u64,
        index: u64,
        potential: &mut [f64],
    ) -> Result<(), CoreError> {
        if potential.len() != self.line.points {
            return invalid(format!(
                "potential has {} points; the grid has {}",
                potential.len(),
                self.line.points
            ));
        }
        for (purpose, prepared) in self.terms.iter().enumerate() {
            let mut stream = Stream::new(seed, purpose as u64, index);
            let values = &mut potential[prepared.first..prepared.end];
            match (prepared.term.kind, &prepared.filtered) {
                (Kind::WhiteNoise { strength }, _) => {
                    let sigma = (strength / self.line.dx).sqrt();
                    values
                        .iter_mut()
                        .for_each(|v| *v += sigma * stream.normal());
                }
                (Kind::Box { width }, _) => {
                    values
                        .iter_mut()
                        .for_each(|v| *v += width * (stream.uniform() - 0.5));
                }
                (Kind::Cauchy { width }, _) => cauchy::add(&mut stream, width, values),
                (Kind::Gaussian { .. }, Some(filtered)) => {
                    let buffer = &mut self.buffer[..filtered.length];
                    buffer
                        .iter_mut()
                        .for_each(|z| *z = Complex64::new(stream.normal(), 0.0));
                    filter(filtered, buffer, &mut self.scratch);
                    values
                        .iter_mut()
                        .zip(buffer.iter())
                        .for_each(|(v, z)| *v += z.re);
                }
                (Kind::Speckle { strength, .. }, Some(filtered)) => {
                    let buffer = &mut self.buffer[..filtered.length];
                    // Unit complex noise: real and imaginary parts of variance 1/2.
                    let half = std::f64::consts::FRAC_1_SQRT_2;
                    buffer.iter_mut().for_each(|z| {
                        *z = Complex64::new(half * stream.normal(), half * stream.normal())
                    });
                    filter(filtered, buffer, &mut self.scratch);
                    let mean = filtered.mean_intensity;
                    values
                        .iter_mut()
                        .zip(buffer.iter())
                        .for_each(|(v, z)| *v += strength * (z.norm_sqr() / mean - 1.0));
                }
                _ => {
                    return Err(CoreError::Internal(
                        "filtered term without its filter".into(),
                    ))
                }
            }
        }
        Ok(())
    }
}

fn filter(filtered: &Filtered, buffer: &mut [Complex64], scratch: &mut [Complex64]) {
    filtered.forward.process_with_scratch(buffer, scratch);
    buffer
        .iter_mut()
        .zip(&filtered.filter)
        .for_each(|(z, &h)| *z *= h);
    filtered.inverse.process_with_scratch(buffer, scratch);
}

fn positive(name: &str, value: f64) -> Result<(), CoreError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        invalid(format!("{name} must be finite and > 0, got {value}"))
    }
}

fn resolved(line: Line, correlation_length: f64) -> Result<(), CoreError> {
    if correlation_length.is_finite() && correlation_length >= 2.0 * line.dx {
        Ok(())
    } else {
        invalid(format!(
            "correlation_length {correlation_length} is not resolved by the grid spacing {}: use >= {}",
            line.dx,
            2.0 * line.dx
        ))
    }
}

/// A periodic line long enough that wrap-around correlations are negligible:
/// twice the region plus sixteen correlation lengths.
fn padded(points: usize, correlation_length: f64, dx: f64) -> usize {
    smooth_size(2 * points + (16.0 * correlation_length / dx).ceil() as usize)
}

fn wavenumbers(length: usize, dx: f64) -> Vec<f64> {
    crate::observables::wavenumbers(length, dx)
}

/// Grid points `first .. end` with `start <= x < stop`.
fn region(line: Line, term: Term) -> Result<(usize, usize), CoreError> {
    if !(term.start.is_finite() && term.stop.is_finite() && term.start < term.stop) {
        return invalid(format!(
            "disorder region [{}, {}) needs finite start < stop",
            term.start, term.stop
        ));
    }
    let index = |x: f64| {
        ((x - line.start) / line.dx)
            .ceil()
            .clamp(0.0, line.points as f64) as usize
    };
    let (first, end) = (index(term.start), index(term.stop));
    if first >= end {
        return invalid(format!(
            "disorder region [{}, {}) holds no grid point",
            term.start, term.stop
        ));
    }
    Ok((first, end))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn line() -> Line {
        Line {
            points: 4096,
            dx: 0.25,
            start: -512.0,
        }
    }

    fn realize(terms: &[Term], seed: u64, index: u64) -> Vec<f64> {
        let mut realizer = Realizer::new(line(), terms).unwrap();
        let mut potential = vec![0.0; line().points];
        realizer.add_to(seed, index, &mut potential).unwrap();
        potential
    }

    #[test]
    fn realizations_repeat_and_differ() {
        let terms = [Term {
            kind: Kind::Gaussian {
                rms: 1.0,
                correlation_length: 1.0,
            },
            start: -100.0,
            stop: 100.0,
        }];
        assert_eq!(realize(&terms, 3, 5), realize(&terms, 3, 5));
        assert_ne!(realize(&terms, 3, 5), realize(&terms, 3, 6));
        assert_ne!(realize(&terms, 3, 5), realize(&terms, 4, 5));
    }

    #[test]
    fn disorder_stays_in_its_region() {
        let terms = [Term {
            kind: Kind::Box { width: 1.0 },
            start: 0.0,
            stop: 10.0,
        }];
        let potential = realize(&terms, 1, 0);
        for (j, v) in potential.iter().enumerate() {
            let x = -512.0 + j as f64 * 0.25;
            assert_eq!(*v != 0.0, (0.0..10.0).contains(&x), "x = {x}");
        }
    }

    #[test]
    fn speckle_is_bounded_below() {
        let terms = [Term {
            kind: Kind::Speckle {
                strength: 0.5,
                correlation_length: 1.0,
            },
            start: -500.0,
            stop: 500.0,
        }];
        let potential = realize(&terms, 9, 2);
        assert!(potential.iter().all(|&v| v >= -0.5));
    }

    #[test]
    fn bad_terms_are_errors() {
        let unresolved = [Term {
            kind: Kind::Gaussian {
                rms: 1.0,
                correlation_length: 0.1,
            },
            start: 0.0,
            stop: 10.0,
        }];
        assert!(Realizer::new(line(), &unresolved).is_err());
        let empty = [Term {
            kind: Kind::Box { width: 1.0 },
            start: 0.05,
            stop: 0.2,
        }];
        assert!(Realizer::new(line(), &empty).is_err());
    }

    #[test]
    fn smooth_sizes() {
        assert_eq!(smooth_size(1000), 1000);
        assert_eq!(smooth_size(1001), 1024);
        assert_eq!(smooth_size(4097), 4320);
    }
}
