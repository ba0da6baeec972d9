//! Disorder on a 2D or 3D mesh: the models of `super` in `d` dimensions, each
//! isotropic with the parameters it has on a line (a 1-axis mesh takes the
//! line's own code, so its numbers are the line's).
//!
//! Conventions (C order, axis 0 slowest; `dV` the cell volume, the product of
//! the spacings; `r` the distance between two points):
//! - white noise of strength D: independent normals of variance `D / dV`, so
//!   `<V(r) V(r')> = D delta(r - r')`;
//! - box disorder of width W and Cauchy disorder: per site, as on a line;
//! - Gaussian disorder: `C(r) = rms^2 exp(-r^2/(2 l^2))`, a stationary field on
//!   a periodic box longer than the region by ten correlation lengths along
//!   each axis, scaled to the exact variance;
//! - speckle: `V = s (I/<I> - 1)` with `I = |E|^2`, `E` a complex Gaussian field
//!   with a flat spectrum on the pupil `|q| < 1/l` (a disc in 2D, a ball in 3D)
//!   and `<I>` its exact ensemble mean, so `C(r) = s^2 [2 J1(u)/u]^2` in 2D and
//!   `s^2 [3 j1(u)/u]^2` in 3D with `u = r/l` (Goodman, Speckle Phenomena in
//!   Optics, 2007) and `V >= -s` for `s > 0`. Its periodic box is, along each
//!   axis, twice the region plus sixteen correlation lengths, as on a line.
//!
//! (`_PADDING` in python/mottle/specs/disorder.py repeats these box sizes to
//! refuse, before any allocation, a box that cannot fit in memory.)
//!
//! The Gaussian field is `sqrt(2) Re E` for the complex field `E = sum_q A(q)
//! xi_q e^{i q r}` with `xi_q` independent complex normals of unit mean square:
//! the real and imaginary parts of `E` are independent real Gaussian fields of
//! covariance `C / 2` each (`<E E> = 0`), so no Hermitian bookkeeping is needed
//! in `d` dimensions. `A(q) = prod_a A_a(q_a)` factorizes (the Gaussian
//! spectrum does), and the `d`-dimensional inverse FFT is one 1D transform per
//! axis, planned once per axis length.
//!
//! Random numbers: each term draws from its own stream (purpose = its position
//! in the list), in C order over the region (per-site models, one value per
//! site, as `super` does on a line), over the whole periodic box (Gaussian, two
//! normals per mode) or over the open modes in C order (speckle).

use std::f64::consts::{FRAC_1_SQRT_2, PI, SQRT_2};

use num_complex::Complex64;

use super::{cauchy, positive, smooth_size, Kind};
use crate::error::{invalid, CoreError};
use crate::ndfft::Transforms;
use crate::random::Stream;

/// The most axes a mesh may have: the grid's.
pub use crate::ndfft::MAX_AXES;

const AXIS_NAMES: [&str; MAX_AXES] = ["x", "y", "z"];

/// Where the grid is: `shape[a]` points along axis `a` at `start[a] + j
/// spacing[a]`; values are stored in C order (axis 0 slowest).
#[derive(Debug, Clone, PartialEq)]
pub struct Mesh {
    pub shape: Vec<usize>,
    pub spacing: Vec<f64>,
    pub start: Vec<f64>,
}

impl Mesh {
    pub fn ndim(&self) -> usize {
        self.shape.len()
    }

    /// The number of points (the product of the shape; 0 if it overflows).
    pub fn size(&self) -> usize {
        self.shape
            .iter()
            .try_fold(1usize, |size, &n| size.checked_mul(n))
            .unwrap_or(0)
    }

    /// The volume of one cell, the product of the spacings.
    pub fn cell_volume(&self) -> f64 {
        self.spacing.iter().product()
    }

    /// Checks the mesh; its size.
    pub(super) fn check(&self) -> Result<usize, CoreError> {
        let ndim = self.ndim();
        if !(1..=MAX_AXES).contains(&ndim) {
            return invalid(format!(
                "a disorder mesh has 1 to {MAX_AXES} axes, got {ndim}"
            ));
        }
        if self.spacing.len() != ndim || self.start.len() != ndim {
            return invalid(format!(
                "a disorder mesh needs one spacing and one start per axis: shape has {ndim} axes, \
                 spacing {}, start {}",
                self.spacing.len(),
                self.start.len()
            ));
        }
        for (a, name) in AXIS_NAMES.iter().enumerate().take(ndim) {
            if self.shape[a] == 0 {
                return invalid(format!("the disorder mesh has no points along {name}"));
            }
            if !(self.spacing[a].is_finite() && self.spacing[a] > 0.0) {
                return invalid(format!(
                    "the disorder mesh spacing along {name} must be finite and > 0, got {}",
                    self.spacing[a]
                ));
            }
            if !self.start[a].is_finite() {
                return invalid(format!(
                    "the disorder mesh start along {name} must be finite, got {}",
                    self.start[a]
                ));
            }
        }
        match self.size() {
            0 => invalid(format!(
                "the disorder mesh of shape {:?} has too many points",
                self.shape
            )),
            size => Ok(size),
        }
    }

    fn strides(&self) -> [usize; MAX_AXES] {
        strides(&self.shape)
    }
}

/// C-order strides of `shape` (unused axes: 0).
fn strides(shape: &[usize]) -> [usize; MAX_AXES] {
    let mut out = [0; MAX_AXES];
    let mut stride = 1;
    for a in (0..shape.len()).rev() {
        out[a] = stride;
        stride *= shape[a];
    }
    out
}

/// One random model and its box region: along each axis `a`, the points with
/// `start[a] <= x < stop[a]` (in position units).
#[derive(Debug, Clone, PartialEq)]
pub struct BoxTerm {
    pub kind: Kind,
    pub start: Vec<f64>,
    pub stop: Vec<f64>,
}

/// Grid points `first[a] .. first[a] + extent[a]` along each axis.
#[derive(Debug, Clone, Copy)]
struct Region {
    first: [usize; MAX_AXES],
    extent: [usize; MAX_AXES],
}

impl Region {
    fn new(mesh: &Mesh, term: &BoxTerm) -> Result<Self, CoreError> {
        let ndim = mesh.ndim();
        if term.start.len() != ndim || term.stop.len() != ndim {
            return invalid(format!(
                "a disorder region on a mesh of {ndim} axes needs {ndim} starts and stops, got {} and {}",
                term.start.len(),
                term.stop.len()
            ));
        }
        let mut region = Region {
            first: [0; MAX_AXES],
            extent: [1; MAX_AXES],
        };
        for (a, name) in AXIS_NAMES.iter().enumerate().take(ndim) {
            let (start, stop) = (term.start[a], term.stop[a]);
            if !(start.is_finite() && stop.is_finite() && start < stop) {
                return invalid(format!(
                    "disorder region [{start}, {stop}) along {name} needs finite start < stop"
                ));
            }
            let points = mesh.shape[a];
            let index = |x: f64| {
                ((x - mesh.start[a]) / mesh.spacing[a])
                    .ceil()
                    .clamp(0.0, points as f64) as usize
            };
            let (first, end) = (index(start), index(stop));
            if first >= end {
                return invalid(format!(
                    "disorder region [{start}, {stop}) along {name} holds no grid point"
                ));
            }
            region.first[a] = first;
            region.extent[a] = end - first;
        }
        Ok(region)
    }

    fn size(&self) -> usize {
        self.extent.iter().product()
    }
}

/// Calls `f(a, b)` with the flat offsets, in two C-order arrays of strides
/// `strides_a` and `strides_b`, of the first point of each row (along the last
/// of `ndim` axes) of a block of `extent` points, the block starting at
/// offsets `base_a` and `base_b`.
fn for_rows(
    ndim: usize,
    extent: &[usize; MAX_AXES],
    (strides_a, base_a): (&[usize; MAX_AXES], usize),
    (strides_b, base_b): (&[usize; MAX_AXES], usize),
    mut f: impl FnMut(usize, usize),
) {
    let rows: usize = extent[..ndim - 1].iter().product();
    for row in 0..rows {
        let (mut a, mut b, mut rest) = (base_a, base_b, row);
        for k in (0..ndim - 1).rev() {
            let i = rest % extent[k];
            rest /= extent[k];
            a += i * strides_a[k];
            b += i * strides_b[k];
        }
        f(a, b);
    }
}

/// An inverse `d`-dimensional DFT, `x_j = sum_k y_k e^{+2 pi i j.k / M}`
/// (unnormalized), on a C-order box: the split step's transforms
/// (`crate::ndfft::Transforms`), with the box's size checked first.
struct Transform {
    shape: Vec<usize>,
    plans: Transforms<f64>,
}

impl Transform {
    fn new(shape: Vec<usize>) -> Result<Self, CoreError> {
        // Its complex buffer must be addressable (a Vec larger than isize::MAX bytes panics).
        let bytes = shape
            .iter()
            .try_fold(std::mem::size_of::<Complex64>(), |size, &n| {
                size.checked_mul(n)
            });
        if bytes.is_none_or(|bytes| bytes > isize::MAX as usize) {
            return invalid(format!(
                "the periodic box of a correlated disorder term, shape {shape:?}, has too many points"
            ));
        }
        let plans = Transforms::new(&shape);
        Ok(Transform { shape, plans })
    }

    fn size(&self) -> usize {
        self.shape.iter().product()
    }

    fn line_len(&self) -> usize {
        self.plans.work_len()
    }

    fn scratch_len(&self) -> usize {
        self.plans.scratch_len()
    }

    /// Transforms `data` (the box's size) in place; `lines` and `scratch` are
    /// at least `line_len()` and `scratch_len()` long.
    fn inverse(&self, data: &mut [Complex64], lines: &mut [Complex64], scratch: &mut [Complex64]) {
        let (lines, scratch) = (
            &mut lines[..self.line_len()],
            &mut scratch[..self.scratch_len()],
        );
        self.plans.inverse_natural(data, lines, scratch);
    }
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
    /// `A(q) = prod_a amplitude[a][k_a]` on the box of `transform`.
    Gaussian {
        transform: Transform,
        amplitude: Vec<Vec<f64>>,
    },
    /// The open modes (flat C-order indices into the box of `transform`).
    Speckle {
        transform: Transform,
        open: Vec<usize>,
        strength: f64,
    },
}

struct Prepared {
    region: Region,
    generator: Generator,
}

/// The checked terms of a mesh, their filters and FFT plans (see `super::Plan`).
pub(super) struct MeshPlan {
    mesh: Mesh,
    size: usize,
    terms: Vec<Prepared>,
}

/// Wavenumber of mode `k` of `length` on spacing `dx`, in FFT order (`k >= length/2`: negative).
fn wavenumber(k: usize, length: usize, dx: f64) -> f64 {
    let signed = if 2 * k >= length {
        k as f64 - length as f64
    } else {
        k as f64
    };
    2.0 * PI * signed / (length as f64 * dx)
}

fn resolved(mesh: &Mesh, correlation_length: f64) -> Result<(), CoreError> {
    for (&dx, name) in mesh.spacing.iter().zip(AXIS_NAMES) {
        if !(correlation_length.is_finite() && correlation_length >= 2.0 * dx) {
            return invalid(format!(
                "correlation_length {correlation_length} is not resolved by the grid spacing {dx} \
                 along {name}: use >= {}",
                2.0 * dx
            ));
        }
    }
    Ok(())
}

impl MeshPlan {
    pub(super) fn new(mesh: Mesh, terms: &[BoxTerm]) -> Result<Self, CoreError> {
        let size = mesh.check()?;
        let ndim = mesh.ndim();
        let mut prepared = Vec::with_capacity(terms.len());
        for term in terms {
            let region = Region::new(&mesh, term)?;
            let generator = match term.kind {
                Kind::WhiteNoise { strength } => {
                    positive("white-noise strength", strength)?;
                    Generator::WhiteNoise {
                        sigma: (strength / mesh.cell_volume()).sqrt(),
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
                    resolved(&mesh, correlation_length)?;
                    let shape: Vec<usize> = (0..ndim)
                        .map(|a| {
                            let margin = (10.0 * correlation_length / mesh.spacing[a]).ceil();
                            smooth_size(region.extent[a] + margin as usize)
                        })
                        .collect();
                    // Per axis, the square root of the power spectrum's factor exp(-q^2 l^2 / 2).
                    let mut amplitude: Vec<Vec<f64>> = (0..ndim)
                        .map(|a| {
                            (0..shape[a])
                                .map(|k| {
                                    let q = wavenumber(k, shape[a], mesh.spacing[a]);
                                    (-(q * correlation_length).powi(2) / 4.0).exp()
                                })
                                .collect()
                        })
                        .collect();
                    // var V = sum over all modes of A^2, a product of per-axis sums.
                    let power: f64 = amplitude
                        .iter()
                        .map(|axis| axis.iter().map(|a| a * a).sum::<f64>())
                        .product();
                    let scale = rms / power.sqrt();
                    amplitude[0].iter_mut().for_each(|a| *a *= scale);
                    Generator::Gaussian {
                        transform: Transform::new(shape)?,
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
                    resolved(&mesh, correlation_length)?;
                    let shape: Vec<usize> = (0..ndim)
                        .map(|a| {
                            let margin = (16.0 * correlation_length / mesh.spacing[a]).ceil();
                            smooth_size(2 * region.extent[a] + margin as usize)
                        })
                        .collect();
                    let transform = Transform::new(shape)?;
                    let open = pupil(&transform.shape, &mesh.spacing, correlation_length);
                    Generator::Speckle {
                        transform,
                        open,
                        strength,
                    }
                }
            };
            prepared.push(Prepared { region, generator });
        }
        Ok(MeshPlan {
            mesh,
            size,
            terms: prepared,
        })
    }

    pub(super) fn mesh(&self) -> &Mesh {
        &self.mesh
    }
}

/// The modes of the box `shape` inside the pupil `|q| l < 1`, as flat C-order
/// indices in increasing order (`q = 0` always: `l >= 2 dx` keeps the pupil
/// inside the Brillouin zone, so no mode at a Nyquist frequency is open).
fn pupil(shape: &[usize], spacing: &[f64], correlation_length: f64) -> Vec<usize> {
    let ndim = shape.len();
    let box_strides = strides(shape);
    let q2: Vec<Vec<f64>> = (0..ndim)
        .map(|a| {
            (0..shape[a])
                .map(|k| (wavenumber(k, shape[a], spacing[a]) * correlation_length).powi(2))
                .collect()
        })
        .collect();
    // Only |k_a| < (length dx / 2 pi l) + 1 can be open: walk that corner block.
    let reach: Vec<usize> = (0..ndim)
        .map(|a| {
            ((shape[a] as f64 * spacing[a] / (2.0 * PI * correlation_length)).floor() as usize + 1)
                .min(shape[a] / 2)
        })
        .collect();
    let axis_modes = |a: usize| -> Vec<usize> {
        let n = shape[a];
        let mut modes: Vec<usize> = (0..reach[a]).collect();
        modes.extend((n + 1 - reach[a]..n).filter(|&k| k >= reach[a]));
        modes
    };
    let modes: Vec<Vec<usize>> = (0..ndim).map(axis_modes).collect();
    let mut open = Vec::new();
    let mut index = [0usize; MAX_AXES];
    let count: usize = modes.iter().map(Vec::len).product();
    for n in 0..count {
        let mut rest = n;
        for a in (0..ndim).rev() {
            index[a] = modes[a][rest % modes[a].len()];
            rest /= modes[a].len();
        }
        let sum: f64 = (0..ndim).map(|a| q2[a][index[a]]).sum();
        if sum < 1.0 {
            open.push((0..ndim).map(|a| index[a] * box_strides[a]).sum());
        }
    }
    open.sort_unstable();
    open
}

/// Each thread's buffers for a mesh plan.
#[derive(Default)]
pub(super) struct Buffers {
    spectrum: Vec<Complex64>,
    lines: Vec<Complex64>,
    scratch: Vec<Complex64>,
    values: Vec<f64>,
}

impl Buffers {
    pub(super) fn new(plan: &MeshPlan) -> Self {
        let (mut spectrum, mut lines, mut scratch, mut values) = (0, 0, 0, 0);
        for term in &plan.terms {
            match &term.generator {
                Generator::WhiteNoise { .. } | Generator::Box { .. } | Generator::Cauchy { .. } => {
                }
                Generator::Gaussian { transform, .. } | Generator::Speckle { transform, .. } => {
                    spectrum = spectrum.max(transform.size());
                    lines = lines.max(transform.line_len());
                    scratch = scratch.max(transform.scratch_len());
                    let last = transform.shape[transform.shape.len() - 1];
                    values = values.max(2 * last);
                }
            }
        }
        let zero = Complex64::new(0.0, 0.0);
        Buffers {
            spectrum: vec![zero; spectrum],
            lines: vec![zero; lines],
            scratch: vec![zero; scratch],
            values: vec![0.0; values],
        }
    }
}

/// Values of a per-site model made at once (even, so that box disorder's two
/// values per word pair up as in one call over the whole region).
const SITE_CHUNK: usize = 1024;

/// Adds the values `fill` makes, the region's points in C order, to the region
/// of `potential`: `fill` overwrites a chunk with the next values, chunks of
/// `SITE_CHUNK` but the last, so the stream is read as by one call over the
/// whole region and no buffer of the region's size is needed.
fn add_sites(
    ndim: usize,
    region: &Region,
    mesh: (&[usize; MAX_AXES], usize),
    potential: &mut [f64],
    mut fill: impl FnMut(&mut [f64]),
) {
    let row = region.extent[ndim - 1];
    let mut chunk = [0.0; SITE_CHUNK];
    let (mut remaining, mut made, mut used) = (region.size(), 0, 0);
    for_rows(ndim, &region.extent, mesh, (&[0; MAX_AXES], 0), |at, _| {
        let mut done = 0;
        while done < row {
            if used == made {
                made = SITE_CHUNK.min(remaining);
                fill(&mut chunk[..made]);
                (remaining, used) = (remaining - made, 0);
            }
            let take = (row - done).min(made - used);
            for (v, &w) in potential[at + done..at + done + take]
                .iter_mut()
                .zip(&chunk[used..used + take])
            {
                *v += w;
            }
            (done, used) = (done + take, used + take);
        }
    });
}

/// Add realization `index` of `seed` to `potential` (the mesh's size, C order).
pub(super) fn add(
    plan: &MeshPlan,
    buffers: &mut Buffers,
    seed: u64,
    index: u64,
    potential: &mut [f64],
) -> Result<(), CoreError> {
    if potential.len() != plan.size {
        return invalid(format!(
            "potential has {} points; the mesh of shape {:?} has {}",
            potential.len(),
            plan.mesh.shape,
            plan.size
        ));
    }
    let ndim = plan.mesh.ndim();
    let mesh_strides = plan.mesh.strides();
    for (purpose, prepared) in plan.terms.iter().enumerate() {
        let mut stream = Stream::new(seed, purpose as u64, index);
        let region = &prepared.region;
        let origin: usize = (0..ndim).map(|a| region.first[a] * mesh_strides[a]).sum();
        let row = region.extent[ndim - 1];
        match &prepared.generator {
            &Generator::WhiteNoise { sigma } => {
                add_sites(ndim, region, (&mesh_strides, origin), potential, |values| {
                    stream.normals(values);
                    values.iter_mut().for_each(|v| *v *= sigma);
                });
            }
            &Generator::Box { width } => {
                add_sites(ndim, region, (&mesh_strides, origin), potential, |values| {
                    values.fill(0.0);
                    stream.add_centered_uniforms(values, width);
                });
            }
            &Generator::Cauchy { width } => {
                add_sites(ndim, region, (&mesh_strides, origin), potential, |values| {
                    values.fill(0.0);
                    cauchy::add(&mut stream, width, values);
                });
            }
            Generator::Gaussian {
                transform,
                amplitude,
            } => {
                let shape = &transform.shape;
                let last = shape[ndim - 1];
                let spectrum = &mut buffers.spectrum[..transform.size()];
                let normals = &mut buffers.values[..2 * last];
                let box_strides = strides(shape);
                for (line, out) in spectrum.chunks_exact_mut(last).enumerate() {
                    let mut rest = line;
                    let mut prefactor = FRAC_1_SQRT_2;
                    for a in (0..ndim - 1).rev() {
                        prefactor *= amplitude[a][rest % shape[a]];
                        rest /= shape[a];
                    }
                    stream.normals(normals);
                    for ((z, pair), &a) in out
                        .iter_mut()
                        .zip(normals.chunks_exact(2))
                        .zip(&amplitude[ndim - 1])
                    {
                        let a = prefactor * a;
                        *z = Complex64::new(a * pair[0], a * pair[1]);
                    }
                }
                transform.inverse(spectrum, &mut buffers.lines, &mut buffers.scratch);
                for_rows(
                    ndim,
                    &region.extent,
                    (&mesh_strides, origin),
                    (&box_strides, 0),
                    |at, from| {
                        for (v, z) in potential[at..at + row].iter_mut().zip(&spectrum[from..]) {
                            *v += SQRT_2 * z.re;
                        }
                    },
                );
            }
            Generator::Speckle {
                transform,
                open,
                strength,
            } => {
                let spectrum = &mut buffers.spectrum[..transform.size()];
                spectrum.fill(Complex64::new(0.0, 0.0));
                let mut normals = [0.0; 512];
                for slots in open.chunks(normals.len() / 2) {
                    let normals = &mut normals[..2 * slots.len()];
                    stream.normals(normals);
                    for (&slot, pair) in slots.iter().zip(normals.chunks_exact(2)) {
                        spectrum[slot] =
                            Complex64::new(FRAC_1_SQRT_2 * pair[0], FRAC_1_SQRT_2 * pair[1]);
                    }
                }
                transform.inverse(spectrum, &mut buffers.lines, &mut buffers.scratch);
                let scale = strength / open.len() as f64;
                let box_strides = strides(&transform.shape);
                for_rows(
                    ndim,
                    &region.extent,
                    (&mesh_strides, origin),
                    (&box_strides, 0),
                    |at, from| {
                        for (v, z) in potential[at..at + row].iter_mut().zip(&spectrum[from..]) {
                            *v += scale * z.norm_sqr() - strength;
                        }
                    },
                );
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::super::{Line, Plan, Realizer, Term};
    use super::*;
    use std::sync::Arc;

    fn mesh() -> Mesh {
        Mesh {
            shape: vec![24, 20, 18],
            spacing: vec![0.5, 0.4, 0.6],
            start: vec![-6.0, -4.0, -5.4],
        }
    }

    fn whole(mesh: &Mesh, kind: Kind) -> BoxTerm {
        BoxTerm {
            kind,
            start: mesh.start.clone(),
            stop: (0..mesh.ndim())
                .map(|a| mesh.start[a] + mesh.shape[a] as f64 * mesh.spacing[a])
                .collect(),
        }
    }

    fn kinds() -> Vec<Kind> {
        vec![
            Kind::WhiteNoise { strength: 0.3 },
            Kind::Box { width: 2.0 },
            Kind::Cauchy { width: 0.5 },
            Kind::Gaussian {
                rms: 1.0,
                correlation_length: 1.3,
            },
            Kind::Speckle {
                strength: -0.7,
                correlation_length: 1.2,
            },
        ]
    }

    fn realize(realizer: &mut Realizer, seed: u64, index: u64) -> Vec<f64> {
        let mut potential = vec![0.0; realizer.plan().size()];
        realizer.add_to(seed, index, &mut potential).unwrap();
        potential
    }

    #[test]
    fn plans_are_shared_between_threads() {
        fn assert_send_sync<T: Send + Sync>() {}
        assert_send_sync::<Plan>();
        assert_send_sync::<Mesh>();
        fn assert_send<T: Send>() {}
        assert_send::<Realizer>();
    }

    #[test]
    fn transform_is_the_direct_dft() {
        // The inverse DFT by its definition, sum_k y_k e^{+2 pi i j.k / M}, on small boxes.
        for shape in [vec![6, 5], vec![4, 6, 5], vec![3, 1, 7]] {
            let size: usize = shape.iter().product();
            let mut stream = Stream::new(1, 2, 3);
            let mut normals = vec![0.0; 2 * size];
            stream.normals(&mut normals);
            let input: Vec<Complex64> = normals
                .chunks_exact(2)
                .map(|p| Complex64::new(p[0], p[1]))
                .collect();
            let transform = Transform::new(shape.clone()).unwrap();
            let mut data = input.clone();
            let mut lines = vec![Complex64::new(0.0, 0.0); transform.line_len()];
            let mut scratch = vec![Complex64::new(0.0, 0.0); transform.scratch_len()];
            transform.inverse(&mut data, &mut lines, &mut scratch);
            let s = strides(&shape);
            let digits = |flat: usize| -> Vec<usize> {
                (0..shape.len()).map(|a| (flat / s[a]) % shape[a]).collect()
            };
            for (j, out) in data.iter().enumerate() {
                let jd = digits(j);
                let direct: Complex64 = input
                    .iter()
                    .enumerate()
                    .map(|(k, &y)| {
                        let kd = digits(k);
                        let phase: f64 = (0..shape.len())
                            .map(|a| (jd[a] * kd[a]) as f64 / shape[a] as f64)
                            .sum();
                        y * Complex64::from_polar(1.0, 2.0 * PI * phase)
                    })
                    .sum();
                assert!((direct - out).norm() < 1e-10, "{shape:?} {j}");
            }
        }
    }

    #[test]
    fn the_pupil_is_every_mode_inside_it() {
        let (shape, spacing, l) = (vec![40, 36, 50], vec![0.5, 0.7, 0.4], 1.0);
        let open = pupil(&shape, &spacing, l);
        let s = strides(&shape);
        let brute: Vec<usize> = (0..shape.iter().product())
            .filter(|&flat: &usize| {
                let q2: f64 = (0..3)
                    .map(|a| {
                        (wavenumber((flat / s[a]) % shape[a], shape[a], spacing[a]) * l).powi(2)
                    })
                    .sum();
                q2 < 1.0
            })
            .collect();
        assert_eq!(open, brute);
        assert!(open.len() > 100, "{}", open.len());
    }

    #[test]
    fn a_one_axis_mesh_is_the_line() {
        let line = Line {
            points: 300,
            dx: 0.3,
            start: -40.0,
        };
        let mesh = Mesh {
            shape: vec![300],
            spacing: vec![0.3],
            start: vec![-40.0],
        };
        for kind in kinds() {
            let term = Term {
                kind,
                start: -30.0,
                stop: 35.0,
            };
            let boxed = BoxTerm {
                kind,
                start: vec![-30.0],
                stop: vec![35.0],
            };
            let mut old = Realizer::new(line, &[term]).unwrap();
            let mut new =
                Realizer::with_plan(Arc::new(Plan::new_mesh(mesh.clone(), &[boxed]).unwrap()));
            assert_eq!(realize(&mut old, 4, 9), realize(&mut new, 4, 9));
        }
    }

    #[test]
    fn realizations_depend_on_seed_and_index_alone() {
        let mesh = mesh();
        let terms: Vec<BoxTerm> = kinds().into_iter().map(|k| whole(&mesh, k)).collect();
        let plan = Arc::new(Plan::new_mesh(mesh, &terms).unwrap());
        let mut fresh = Realizer::with_plan(plan.clone());
        let target = realize(&mut fresh, 11, 5);
        let mut used = Realizer::with_plan(plan.clone());
        for index in 0..5 {
            realize(&mut used, 11, index);
        }
        assert_eq!(realize(&mut used, 11, 5), target);
        // Another thread, its own realizer, the same plan: the same numbers.
        let other = std::thread::spawn(move || realize(&mut Realizer::with_plan(plan), 11, 5))
            .join()
            .unwrap();
        assert_eq!(other, target);
        assert_ne!(realize(&mut fresh, 11, 6), target);
        assert_ne!(realize(&mut fresh, 12, 5), target);
    }

    #[test]
    fn disorder_stays_in_its_box() {
        let mesh = mesh();
        let (start, stop) = (vec![-2.0, 0.0, -5.4], vec![3.0, 2.5, 1.0]);
        for kind in kinds() {
            let term = BoxTerm {
                kind,
                start: start.clone(),
                stop: stop.clone(),
            };
            let mut realizer =
                Realizer::with_plan(Arc::new(Plan::new_mesh(mesh.clone(), &[term]).unwrap()));
            let potential = realize(&mut realizer, 2, 1);
            let s = mesh.strides();
            for (flat, v) in potential.iter().enumerate() {
                let inside = (0..3).all(|a| {
                    let x =
                        mesh.start[a] + ((flat / s[a]) % mesh.shape[a]) as f64 * mesh.spacing[a];
                    (start[a]..stop[a]).contains(&x)
                });
                assert_eq!(*v != 0.0, inside, "{kind:?} at {flat}");
            }
        }
    }

    #[test]
    fn speckle_is_bounded_below() {
        let mesh = Mesh {
            shape: vec![40, 40],
            spacing: vec![0.5, 0.5],
            start: vec![-10.0, -10.0],
        };
        let term = whole(
            &mesh,
            Kind::Speckle {
                strength: 0.5,
                correlation_length: 1.0,
            },
        );
        let mut realizer = Realizer::with_plan(Arc::new(Plan::new_mesh(mesh, &[term]).unwrap()));
        assert!(realize(&mut realizer, 9, 2).iter().all(|&v| v >= -0.5));
    }

    #[test]
    fn bad_meshes_and_terms_are_errors() {
        let mesh = mesh();
        let message = |mesh: Mesh, terms: &[BoxTerm]| match Plan::new_mesh(mesh, terms) {
            Err(CoreError::InvalidInput(message)) => message,
            Err(other) => panic!("{other:?}"),
            Ok(_) => panic!("accepted"),
        };
        let mut flat = mesh.clone();
        flat.spacing[1] = 0.0;
        assert!(message(flat, &[]).contains("along y"));
        let mut short = whole(&mesh, Kind::Box { width: 1.0 });
        short.start.pop();
        assert!(message(mesh.clone(), &[short]).contains("needs 3 starts"));
        let mut outside = whole(&mesh, Kind::Box { width: 1.0 });
        (outside.start[2], outside.stop[2]) = (20.0, 30.0);
        assert!(message(mesh.clone(), &[outside]).contains("along z holds no grid point"));
        // Resolved along every axis: 2 * 0.6 along z is more than 1.0.
        let coarse = whole(
            &mesh,
            Kind::Gaussian {
                rms: 1.0,
                correlation_length: 1.0,
            },
        );
        assert!(message(mesh.clone(), &[coarse]).contains("along z"));
        let mut realizer = Realizer::with_plan(Arc::new(Plan::new_mesh(mesh, &[]).unwrap()));
        assert!(realizer.add_to(0, 0, &mut [0.0; 10]).is_err());
    }
}
