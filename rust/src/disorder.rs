//! Disorder realizations on the grid.
//!
//! Conventions (the Python classes document them for users):
//! - white noise of strength D: independent normals of variance D/dx per point;
//! - box disorder of width W: independent uniforms on (-W/2, W/2), 32 random
//!   bits each (a resolution of W/2^32);
//! - Gaussian disorder: `C(x) = rms^2 exp(-x^2/(2 l^2))`, a stationary Gaussian
//!   field on a periodic line longer than the region by ten correlation lengths
//!   (where `C` is below `e^-50 rms^2`), scaled to the exact variance;
//! - speckle: `V = s (I/<I> - 1)` with `I = |E|^2`, `E` a complex Gaussian field
//!   with a flat spectrum on `|q| < 1/l`; `<I>` is the exact ensemble mean, so
//!   `C(x) = s^2 sinc^2(x/l)` and `V >= -s` for `s > 0`. Its correlation decays
//!   only as `(l/x)^2`, so its periodic line is twice the region plus sixteen
//!   correlation lengths: no two points of the region are correlated through
//!   the wrap by more than `(l / (L + 16 l))^2 s^2`.
//!
//! The correlated fields are drawn in Fourier space: the discrete Fourier
//! transform of white noise is white noise, so drawing its amplitudes directly
//! (Hermitian for the real Gaussian field, only the open pupil for speckle) and
//! applying one inverse FFT gives the same field in distribution as filtering
//! white noise, with one transform instead of two and, for speckle, random
//! numbers for the open modes only.
//!
//! Each term draws from its own counter-based stream (purpose = its position
//! in the list), so realization `index` never depends on how work is spread.
//! A `Plan` (checks, filters, FFT plans) is made once per run and shared by
//! the threads; each thread's `Realizer` owns its buffers.
//!
//! On a 2D or 3D grid (`Plan::new_mesh`, a `Mesh` and `BoxTerm`s) the same
//! models are drawn in `d` dimensions by `mesh`; a 1-axis mesh is a `Line`.

use std::sync::Arc;

use num_complex::Complex64;
use realfft::{ComplexToReal, RealFftPlanner};
use rustfft::{Fft, FftPlanner};

use crate::error::{invalid, CoreError};
use crate::random::Stream;

mod cauchy;
mod mesh;

pub use mesh::{BoxTerm, Mesh, MAX_AXES};

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

/// How a term's values are made.
enum Generator {
    WhiteNoise {
        sigma: f64,
    },
    Box {
        width: f64,
    },
    Cauchy {
        width: f64,
    },
    /// `V_j = sum_k a_k e^{2 pi i j k / M}` over the Hermitian spectrum, `a_k =
    /// amplitude[k] xi_k` for `k = 0 ..= M/2`: `xi` complex normal of unit mean
    /// square (real at `k = 0` and `M/2`).
    Gaussian {
        inverse: Arc<dyn ComplexToReal<f64>>,
        amplitude: Vec<f64>,
    },
    /// `E_j = sum_k a_k e^{2 pi i j k / M}` over the open modes `0 .. open`
    /// and `length - open + 1 .. length`, `a_k` complex normal of unit mean square.
    Speckle {
        inverse: Arc<dyn Fft<f64>>,
        open: usize,
        strength: f64,
    },
}

impl Generator {
    /// Buffer sizes: (complex spectrum, real values, complex scratch).
    fn buffers(&self) -> (usize, usize, usize) {
        match self {
            Generator::WhiteNoise { .. } | Generator::Box { .. } | Generator::Cauchy { .. } => {
                (0, 0, 0)
            }
            Generator::Gaussian { inverse, .. } => (
                inverse.complex_len(),
                inverse.len() + 2,
                inverse.get_scratch_len(),
            ),
            Generator::Speckle { inverse, open, .. } => (
                inverse.len(),
                2 * (2 * open - 1),
                inverse.get_inplace_scratch_len(),
            ),
        }
    }
}

struct Prepared {
    first: usize,
    end: usize,
    generator: Generator,
}

/// What a run needs to draw realizations: checked terms, their filters and
/// FFT plans. Made once, shared by every thread (see `Realizer`).
pub struct Plan {
    line: Line,
    terms: Vec<Prepared>,
    /// A plan on 2 or 3 axes (then `terms` is empty).
    mesh: Option<mesh::MeshPlan>,
}

/// Draws realizations of a plan; one per thread (it owns the buffers).
pub struct Realizer {
    plan: Arc<Plan>,
    spectrum: Vec<Complex64>,
    values: Vec<f64>,
    scratch: Vec<Complex64>,
    mesh: mesh::Buffers,
}

/// The least even size of the form 2^a 3^b 5^c (a >= 1) at least `minimum`:
/// fast for rustfft and for the half-length transform of a real FFT.
fn smooth_size(minimum: usize) -> usize {
    let half = minimum.div_ceil(2).max(1);
    let mut best = half.next_power_of_two();
    let mut p3 = 1;
    while p3 < best {
        let mut p35 = p3;
        while p35 < best {
            let mut size = p35;
            while size < half {
                size *= 2;
            }
            best = best.min(size);
            p35 *= 5;
        }
        p3 *= 3;
    }
    2 * best
}

impl Plan {
    pub fn new(line: Line, terms: &[Term]) -> Result<Self, CoreError> {
        let mut complex = FftPlanner::<f64>::new();
        let mut real = RealFftPlanner::<f64>::new();
        let mut prepared = Vec::with_capacity(terms.len());
        for &term in terms {
            let (first, end) = region(line, term)?;
            let points = end - first;
            let generator = match term.kind {
                Kind::WhiteNoise { strength } => {
                    positive("white-noise strength", strength)?;
                    Generator::WhiteNoise {
                        sigma: (strength / line.dx).sqrt(),
                    }
                }
                Kind::Box { width } => {
                    positive("box width", width)?;
                    Generator::Box { width }
                }
                Kind::Cauchy { width } => {
                    positive("cauchy width", width)?;
                    Generator::Cauchy { width }
                }
                Kind::Gaussian {
                    rms,
                    correlation_length,
                } => {
                    positive("gaussian rms", rms)?;
                    resolved(line, correlation_length)?;
                    let margin = (10.0 * correlation_length / line.dx).ceil() as usize;
                    let length = smooth_size(points + margin);
                    let step = 2.0 * std::f64::consts::PI / (length as f64 * line.dx);
                    // The amplitude spectrum: the square root of the power spectrum.
                    let mut amplitude: Vec<f64> = (0..=length / 2)
                        .map(|k| (-(k as f64 * step * correlation_length).powi(2) / 4.0).exp())
                        .collect();
                    // var V_j = sum over all M modes of amplitude^2 (modes k and M - k alike).
                    let power = amplitude
                        .iter()
                        .enumerate()
                        .map(|(k, a)| {
                            if k == 0 || k == length / 2 {
                                a * a
                            } else {
                                2.0 * a * a
                            }
                        })
                        .sum::<f64>();
                    let scale = rms / power.sqrt();
                    amplitude.iter_mut().for_each(|a| *a *= scale);
                    Generator::Gaussian {
                        inverse: real.plan_fft_inverse(length),
                        amplitude,
                    }
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
                    let margin = (16.0 * correlation_length / line.dx).ceil() as usize;
                    let length = smooth_size(2 * points + margin);
                    let step = 2.0 * std::f64::consts::PI / (length as f64 * line.dx);
                    // Modes |k| < open lie in the pupil |q| l < 1 (k = 0 always: l >= 2 dx
                    // keeps the pupil inside the Brillouin zone).
                    let open = (0..length / 2)
                        .take_while(|&k| k as f64 * step * correlation_length < 1.0)
                        .count();
                    Generator::Speckle {
                        inverse: complex.plan_fft_inverse(length),
                        open,
                        strength,
                    }
                }
            };
            prepared.push(Prepared {
                first,
                end,
                generator,
            });
        }
        Ok(Plan {
            line,
            terms: prepared,
            mesh: None,
        })
    }

    /// A plan for `terms` on a mesh of 1 to 3 axes. A 1-axis mesh is the line
    /// `Plan::new` takes (the same numbers); on 2 or 3 axes see `mesh`.
    pub fn new_mesh(mesh: Mesh, terms: &[BoxTerm]) -> Result<Self, CoreError> {
        mesh.check()?;
        if mesh.ndim() == 1 {
            let line = Line {
                points: mesh.shape[0],
                dx: mesh.spacing[0],
                start: mesh.start[0],
            };
            let terms = terms
                .iter()
                .map(|term| match (term.start.as_slice(), term.stop.as_slice()) {
                    (&[start], &[stop]) => Ok(Term {
                        kind: term.kind,
                        start,
                        stop,
                    }),
                    _ => invalid(format!(
                        "a disorder region on a mesh of 1 axis needs 1 start and stop, got {} and {}",
                        term.start.len(),
                        term.stop.len()
                    )),
                })
                .collect::<Result<Vec<_>, _>>()?;
            return Plan::new(line, &terms);
        }
        let size = mesh.size();
        let line = Line {
            points: size,
            dx: mesh.spacing[0],
            start: mesh.start[0],
        };
        Ok(Plan {
            line,
            terms: Vec::new(),
            mesh: Some(mesh::MeshPlan::new(mesh, terms)?),
        })
    }

    /// The grid line of a 1D plan. For a plan on 2 or 3 axes it only carries
    /// the number of points (`points`, all axes together) and axis 0's
    /// spacing and start: use `mesh()`.
    pub fn line(&self) -> Line {
        self.line
    }

    /// The grid (a 1D plan's line as a 1-axis mesh).
    pub fn mesh(&self) -> Mesh {
        match &self.mesh {
            Some(plan) => plan.mesh().clone(),
            None => Mesh {
                shape: vec![self.line.points],
                spacing: vec![self.line.dx],
                start: vec![self.line.start],
            },
        }
    }

    /// The number of grid points (the length of the buffer `Realizer::add_to` takes).
    pub fn size(&self) -> usize {
        self.line.points
    }
}

impl Realizer {
    /// A plan for `terms` on `line` and buffers for it.
    pub fn new(line: Line, terms: &[Term]) -> Result<Self, CoreError> {
        Ok(Self::with_plan(Arc::new(Plan::new(line, terms)?)))
    }

    /// Buffers for a plan made once and shared (cheap).
    pub fn with_plan(plan: Arc<Plan>) -> Self {
        let (mut spectrum, mut values, mut scratch) = (0, 0, 0);
        for term in &plan.terms {
            let (c, v, s) = term.generator.buffers();
            (spectrum, values, scratch) = (spectrum.max(c), values.max(v), scratch.max(s));
        }
        let mesh = plan
            .mesh
            .as_ref()
            .map(mesh::Buffers::new)
            .unwrap_or_default();
        Realizer {
            plan,
            spectrum: vec![Complex64::new(0.0, 0.0); spectrum],
            values: vec![0.0; values],
            scratch: vec![Complex64::new(0.0, 0.0); scratch],
            mesh,
        }
    }

    pub fn plan(&self) -> &Arc<Plan> {
        &self.plan
    }

    /// Add realization `index` of `seed` to `potential` (the grid's size; on
    /// a mesh, C order with axis 0 slowest).
    pub fn add_to(
        &mut self,
        seed: u64,
        index: u64,
        potential: &mut [f64],
    ) -> Result<(), CoreError> {
        if let Some(plan) = &self.plan.mesh {
            return mesh::add(plan, &mut self.mesh, seed, index, potential);
        }
        let line = self.plan.line;
        if potential.len() != line.points {
            return invalid(format!(
                "potential has {} points; the grid has {}",
                potential.len(),
                line.points
            ));
        }
        for (purpose, prepared) in self.plan.terms.iter().enumerate() {
            let mut stream = Stream::new(seed, purpose as u64, index);
            let values = &mut potential[prepared.first..prepared.end];
            match &prepared.generator {
                &Generator::WhiteNoise { sigma } => {
                    let mut normals = [0.0; 256];
                    for chunk in values.chunks_mut(normals.len()) {
                        let normals = &mut normals[..chunk.len()];
                        stream.normals(normals);
                        for (v, z) in chunk.iter_mut().zip(normals.iter()) {
                            *v += sigma * z;
                        }
                    }
                }
                &Generator::Box { width } => stream.add_centered_uniforms(values, width),
                &Generator::Cauchy { width } => cauchy::add(&mut stream, width, values),
                Generator::Gaussian { inverse, amplitude } => {
                    let length = inverse.len();
                    let spectrum = &mut self.spectrum[..inverse.complex_len()];
                    let normals = &mut self.values[..length + 2];
                    stream.normals(normals);
                    let half = std::f64::consts::FRAC_1_SQRT_2;
                    for (k, ((z, pair), &a)) in spectrum
                        .iter_mut()
                        .zip(normals.chunks_exact(2))
                        .zip(amplitude)
                        .enumerate()
                    {
                        *z = if k == 0 || 2 * k == length {
                            Complex64::new(a * pair[0], 0.0)
                        } else {
                            Complex64::new(half * a * pair[0], half * a * pair[1])
                        };
                    }
                    let field = &mut self.values[..length];
                    inverse
                        .process_with_scratch(spectrum, field, &mut self.scratch)
                        .map_err(|error| CoreError::Internal(format!("gaussian FFT: {error}")))?;
                    for (v, &f) in values.iter_mut().zip(field.iter()) {
                        *v += f;
                    }
                }
                &Generator::Speckle {
                    ref inverse,
                    open,
                    strength,
                } => {
                    let length = inverse.len();
                    let modes = 2 * open - 1;
                    let normals = &mut self.values[..2 * modes];
                    stream.normals(normals);
                    let spectrum = &mut self.spectrum[..length];
                    spectrum.fill(Complex64::new(0.0, 0.0));
                    let half = std::f64::consts::FRAC_1_SQRT_2;
                    // Modes 0, 1, .., open - 1, then -1, -2, .., -(open - 1).
                    let slots = (0..open).chain((1..open).map(|k| length - k));
                    for (slot, pair) in slots.zip(normals.chunks_exact(2)) {
                        spectrum[slot] = Complex64::new(half * pair[0], half * pair[1]);
                    }
                    inverse.process_with_scratch(spectrum, &mut self.scratch);
                    let scale = strength / modes as f64;
                    for (v, z) in values.iter_mut().zip(spectrum.iter()) {
                        *v += scale * z.norm_sqr() - strength;
                    }
                }
            }
        }
        Ok(())
    }
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
        assert_eq!(smooth_size(243), 250);
        assert_eq!(smooth_size(1), 2);
    }
}
