//! Quasi-one-dimensional transfer matrices: the Lyapunov exponents of a 2D
//! strip (`M` sites across) or a 3D bar (`M x M` sites across) of the
//! Anderson model with periodic transverse boundaries, by the method of
//! MacKinnon & Kramer (Z. Phys. B 53, 1 (1983)).
//!
//! Conventions, owned here:
//! - Sites `(n, j)`: slice `n = 0 .. slices` along axis 0 and transverse site
//!   `j = 0 .. channels` (`channels = M` in 2D, `M^2` in 3D with
//!   `j = y M + z`), the row-major order of the grid `(slices, M[, M])`.
//! - `-J (psi[n+1] + psi[n-1]) + H_n psi[n] = E psi[n]`, the sign of the 1D
//!   lattice (`transfer/mod.rs`), with `H_n = diag(eps_n) - J A` and `A` the
//!   transverse adjacency, wrapped periodically (for `M = 1, 2` a wrapped bond
//!   counts twice, as the lattice dispersion `-2J cos(k a)` on such a ring
//!   does). So `psi[n+1] = ((H_n - E)/J) psi[n] - psi[n-1]`, applied as a
//!   stencil, never as a dense matrix.
//! - Box disorder of width `W`: `eps` of site `(n, j)` is value number
//!   `n * channels + j` of the stream `(seed, 0, realization)` drawn by
//!   `Stream::add_centered_uniforms` (the first disorder term of a grid whose
//!   points are flattened in row-major order).
//! - The block of `channels` vectors `(psi[n], psi[n-1])` starts as
//!   `(identity, 0)`. Every `qr_interval` slices (and after the last) it is
//!   re-orthonormalized by modified Gram-Schmidt, and `ln R_ii` is summed per
//!   column: column `i`'s sum over `L` slices, divided by `L`, tends to the
//!   `i`-th largest Lyapunov exponent (per site, amplitude: `|psi| ~ e^{-gamma n}`).
//!   The `2 channels` exponents of the symplectic transfer matrix come in
//!   pairs `+-gamma`, so the block's `channels` exponents are the non-negative
//!   half and the last one is the smallest positive, `gamma_min = 1/xi_M`.
//!
//! Layout: the block is stored row-major with one row per transverse site and
//! one column per vector, so that every term of the stencil and every update
//! of the Gram-Schmidt sweep is a contiguous run over the columns (an axpy the
//! compiler vectorizes), and rows `channels ..` of the stacked `(psi[n],
//! psi[n-1])` follow rows `.. channels`. Only vertical (elementwise) operations
//! are vectorized, never reductions across a row, so the SSE2 and AVX2 builds
//! of the same loops give the same bits.

use std::sync::atomic::{AtomicBool, Ordering};

use rayon::prelude::*;

use crate::error::{invalid, CoreError};
use crate::random::Stream;

/// Slices drawn at once: an even count, so that the draws of any number of
/// channels split the stream exactly as one draw over the whole bar would.
const DRAW_SLICES: usize = 64;
/// Slices between two looks at the cancel flag.
const CANCEL_POLL_SLICES: usize = 1024;
/// The block of one thread may take at most this many bytes (two `channels^2` matrices).
const MAX_BLOCK_BYTES: usize = 1 << 30;
/// The vectors may grow by at most `e^MAX_LOG_GROWTH` between two
/// re-orthonormalizations: their squared norms stay far from overflow at `e^709`.
const MAX_LOG_GROWTH: f64 = 300.0;

/// A strip or bar of the Anderson model with box disorder at one energy.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bar {
    /// 2 (strip) or 3 (bar).
    pub dimensions: usize,
    /// `M`: transverse sites per axis.
    pub width: usize,
    /// Slices along axis 0.
    pub slices: usize,
    pub hopping: f64,
    /// `W`: on-site energies uniform in `(-W/2, W/2)`.
    pub disorder_width: f64,
    pub energy: f64,
    /// Slices between two re-orthonormalizations.
    pub qr_interval: usize,
    /// Contiguous blocks of slices, each reported on its own (for error bars).
    pub blocks: usize,
    pub seed: u64,
}

impl Bar {
    /// Transverse sites per slice: `M` or `M^2`.
    pub fn channels(&self) -> usize {
        self.width.pow(self.dimensions.saturating_sub(1) as u32)
    }

    /// Groups of `qr_interval` slices (the last may be shorter), one QR after each.
    fn groups(&self) -> usize {
        self.slices.div_ceil(self.qr_interval)
    }

    pub fn validate(&self) -> Result<(), CoreError> {
        if !(2..=3).contains(&self.dimensions) {
            return invalid(format!(
                "a quasi-1D bar has 2 or 3 dimensions, got {}",
                self.dimensions
            ));
        }
        if self.width == 0 || self.slices == 0 || self.qr_interval == 0 {
            return invalid(format!(
                "width ({}), slices ({}) and qr_interval ({}) must be >= 1",
                self.width, self.slices, self.qr_interval
            ));
        }
        let bytes = self
            .width
            .checked_pow(2 * (self.dimensions as u32 - 1))
            .and_then(|square| square.checked_mul(16));
        if bytes.is_none_or(|bytes| bytes > MAX_BLOCK_BYTES) {
            return invalid(format!(
                "width {} in {}D makes {} channels, whose block of vectors needs more than {} MiB \
                 per thread: use a smaller width",
                self.width,
                self.dimensions,
                self.channels(),
                MAX_BLOCK_BYTES >> 20
            ));
        }
        if !(self.hopping.is_finite() && self.hopping > 0.0) {
            return invalid(format!(
                "hopping must be finite and > 0, got {}",
                self.hopping
            ));
        }
        if !(self.disorder_width.is_finite() && self.disorder_width >= 0.0) {
            return invalid(format!(
                "disorder width must be finite and >= 0, got {}",
                self.disorder_width
            ));
        }
        if !self.energy.is_finite() {
            return invalid(format!("energy must be finite, got {}", self.energy));
        }
        if self.blocks == 0 || self.blocks > self.groups() {
            return invalid(format!(
                "blocks must be between 1 and the {} groups of qr_interval = {} slices, got {}",
                self.groups(),
                self.qr_interval,
                self.blocks
            ));
        }
        // |(eps - E)/J| + 2 (d - 1) + 1 bounds the growth of a vector per slice.
        let per_slice = ((self.energy.abs() + 0.5 * self.disorder_width) / self.hopping
            + 2.0 * (self.dimensions - 1) as f64
            + 1.0)
            .ln();
        if self.qr_interval as f64 * per_slice > MAX_LOG_GROWTH {
            return invalid(format!(
                "qr_interval {} lets the vectors grow by up to e^{:.0} between re-orthonormalizations, \
                 beyond e^{MAX_LOG_GROWTH}: use qr_interval <= {}",
                self.qr_interval,
                self.qr_interval as f64 * per_slice,
                (MAX_LOG_GROWTH / per_slice).floor().max(1.0)
            ));
        }
        Ok(())
    }

    /// The transverse neighbours of each site (2 in 2D, 4 in 3D; the second
    /// pair repeats the first in 2D so that one loop serves both).
    fn neighbours(&self) -> Vec<[usize; 4]> {
        let m = self.width;
        let wrap = |i: usize, step: isize| ((i as isize + step).rem_euclid(m as isize)) as usize;
        (0..self.channels())
            .map(|j| {
                if self.dimensions == 2 {
                    [wrap(j, 1), wrap(j, -1), usize::MAX, usize::MAX]
                } else {
                    let (y, z) = (j / m, j % m);
                    [
                        wrap(y, 1) * m + z,
                        wrap(y, -1) * m + z,
                        y * m + wrap(z, 1),
                        y * m + wrap(z, -1),
                    ]
                }
            })
            .collect()
    }
}

/// The on-site energies of realization `index`: `slices x channels`, row-major.
pub fn bar_disorder(bar: &Bar, index: u64) -> Result<Vec<f64>, CoreError> {
    bar.validate()?;
    let mut values = vec![0.0; bar.slices * bar.channels()];
    Stream::new(bar.seed, 0, index).add_centered_uniforms(&mut values, bar.disorder_width);
    Ok(values)
}

/// The multiple the row stride is padded to (the padding columns stay zero):
/// a whole number of chunks of the Gram-Schmidt sweep (16 columns, or 32
/// where the stride allows and AVX-512 is present).
const CHUNK: usize = 16;

/// One thread's buffers.
struct Workspace {
    /// The stacked `(psi[n]; psi[n-1])`, or `(psi[n-1]; psi[n])` when
    /// `current_first` is false: `2 channels` rows of `stride` columns, the
    /// first `channels` of them used.
    block: Vec<f64>,
    stride: usize,
    current_first: bool,
    /// The on-site energies of the drawn slices, and the next one to use.
    drawn: Vec<f64>,
    next_slice: usize,
    /// Gram-Schmidt coefficients: this column's and the next one's (`stride` each).
    coefficients: Vec<f64>,
    next_coefficients: Vec<f64>,
    neighbours: Vec<[usize; 4]>,
}

impl Workspace {
    fn new(bar: &Bar) -> Self {
        let channels = bar.channels();
        let stride = channels.div_ceil(CHUNK) * CHUNK;
        Workspace {
            block: vec![0.0; 2 * channels * stride],
            stride,
            current_first: true,
            drawn: vec![0.0; DRAW_SLICES * channels],
            next_slice: DRAW_SLICES,
            coefficients: vec![0.0; stride],
            next_coefficients: vec![0.0; stride],
            neighbours: bar.neighbours(),
        }
    }

    fn orthonormalize(&mut self, channels: usize, logs: &mut [f64]) -> Result<(), CoreError> {
        gram_schmidt(
            &mut self.block,
            self.stride,
            channels,
            &mut self.coefficients,
            &mut self.next_coefficients,
            logs,
        )
    }
}

/// The block's start: `psi[0] = 1` and `psi[-1][i][j] = cos(1 + 0.7 i + 1.3 j +
/// 0.37 i j) / 2`, orthonormalized. With `psi[-1] = 0` the first `k` site
/// vectors can miss a direction of the `k` fastest-growing ones exactly (a
/// clean bar's symmetric modes do), which rounding then fills only after
/// `ln(1/eps)/gamma` slices; a generic `psi[-1]` has no such trap.
fn start_block(channels: usize, work: &mut Workspace) -> Result<(), CoreError> {
    let stride = work.stride;
    work.block.fill(0.0);
    let (top, bottom) = work.block.split_at_mut(channels * stride);
    for (i, (row, below)) in top
        .chunks_exact_mut(stride)
        .zip(bottom.chunks_exact_mut(stride))
        .enumerate()
    {
        for (j, (v, w)) in row[..channels]
            .iter_mut()
            .zip(below[..channels].iter_mut())
            .enumerate()
        {
            let (i, j) = (i as f64, j as f64);
            *v = if i == j { 1.0 } else { 0.0 };
            *w = 0.5 * (1.0 + 0.7 * i + 1.3 * j + 0.37 * i * j).cos();
        }
    }
    work.current_first = true;
    // The start's own R is not part of any exponent.
    work.orthonormalize(channels, &mut vec![0.0; channels])
}

/// `ln R_ii` summed over each block of slices and divided by its slices, for
/// realization `index`: `blocks x channels`, block-major; each row's entries
/// are in decreasing order up to the noise.
fn realization_exponents(
    bar: &Bar,
    index: u64,
    work: &mut Workspace,
    cancel: &AtomicBool,
) -> Result<Vec<f64>, CoreError> {
    let channels = bar.channels();
    let stride = work.stride;
    let mut stream = Stream::new(bar.seed, 0, index);
    start_block(channels, work)?;
    work.next_slice = DRAW_SLICES;
    let groups = bar.groups();
    let mut out = vec![0.0; bar.blocks * channels];
    let mut slice = 0;
    let inverse = 1.0 / bar.hopping;
    for block in 0..bar.blocks {
        let (first, end) = (
            block * groups / bar.blocks,
            (block + 1) * groups / bar.blocks,
        );
        let logs = &mut out[block * channels..(block + 1) * channels];
        let start_slice = slice;
        for _ in first..end {
            let group_end = (slice + bar.qr_interval).min(bar.slices);
            while slice < group_end {
                if slice % CANCEL_POLL_SLICES == 0 && cancel.load(Ordering::Relaxed) {
                    return Err(CoreError::Interrupted);
                }
                if work.next_slice == DRAW_SLICES {
                    // Draw the next slices in one go (the last draw may be shorter).
                    let count = DRAW_SLICES.min(bar.slices - slice);
                    let values = &mut work.drawn[..count * channels];
                    values.fill(0.0);
                    stream.add_centered_uniforms(values, bar.disorder_width);
                    work.next_slice = 0;
                }
                let eps = &work.drawn[work.next_slice * channels..(work.next_slice + 1) * channels];
                let (top, bottom) = work.block.split_at_mut(channels * stride);
                let (current, previous) = if work.current_first {
                    (&*top, bottom)
                } else {
                    (&*bottom, top)
                };
                slice_step(
                    bar.dimensions,
                    eps,
                    bar.energy,
                    inverse,
                    &work.neighbours,
                    stride,
                    current,
                    previous,
                );
                work.current_first = !work.current_first;
                work.next_slice += 1;
                slice += 1;
            }
            // The QR runs over the rows as stored, (psi[n]; psi[n-1]) or
            // (psi[n-1]; psi[n]): a row permutation changes neither R nor the
            // subspace, and the two halves stay where they are.
            work.orthonormalize(channels, logs)?;
        }
        let length = (slice - start_slice) as f64;
        logs.iter_mut().for_each(|log| *log /= length);
    }
    Ok(out)
}

/// `previous <- ((eps - E)/J) current - A current - previous`, row by row
/// over the first `eps.len()` columns of rows `stride` apart.
#[allow(clippy::too_many_arguments)]
fn slice_step(
    dimensions: usize,
    eps: &[f64],
    energy: f64,
    inverse: f64,
    neighbours: &[[usize; 4]],
    stride: usize,
    current: &[f64],
    previous: &mut [f64],
) {
    #[cfg(target_arch = "x86_64")]
    if simd() != Simd::None {
        // SAFETY: AVX2 is present (checked by `simd`; AVX-512F implies it).
        unsafe {
            return slice_step_avx2(
                dimensions, eps, energy, inverse, neighbours, stride, current, previous,
            );
        }
    }
    slice_step_portable(
        dimensions, eps, energy, inverse, neighbours, stride, current, previous,
    );
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
#[allow(clippy::too_many_arguments)]
unsafe fn slice_step_avx2(
    dimensions: usize,
    eps: &[f64],
    energy: f64,
    inverse: f64,
    neighbours: &[[usize; 4]],
    stride: usize,
    current: &[f64],
    previous: &mut [f64],
) {
    slice_step_portable(
        dimensions, eps, energy, inverse, neighbours, stride, current, previous,
    );
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn slice_step_portable(
    dimensions: usize,
    eps: &[f64],
    energy: f64,
    inverse: f64,
    neighbours: &[[usize; 4]],
    stride: usize,
    current: &[f64],
    previous: &mut [f64],
) {
    let n = eps.len();
    let row = |j: usize| &current[j * stride..j * stride + n];
    for (j, (out, (&v, near))) in previous
        .chunks_exact_mut(stride)
        .zip(eps.iter().zip(neighbours))
        .enumerate()
    {
        let c = (v - energy) * inverse;
        let out = &mut out[..n];
        let (here, a, b) = (row(j), row(near[0]), row(near[1]));
        if dimensions == 2 {
            for (o, ((&h, &a), &b)) in out.iter_mut().zip(here.iter().zip(a).zip(b)) {
                *o = c * h - a - b - *o;
            }
        } else {
            let (p, q) = (row(near[2]), row(near[3]));
            for (o, ((((&h, &a), &b), &p), &q)) in
                out.iter_mut().zip(here.iter().zip(a).zip(b).zip(p).zip(q))
            {
                *o = c * h - a - b - p - q - *o;
            }
        }
    }
}

/// Modified Gram-Schmidt on the first `n` columns of the rows of `block`
/// (`stride` apart, a multiple of `CHUNK`, the columns beyond `n` zero), in
/// place: the columns become orthonormal and `logs[k] += ln R_kk`.
///
/// Column `k`'s update of the later columns and the next column's dot
/// products are fused into one sweep over the rows (`2 m n^2` flops for
/// `m = 2n` rows, and Q comes out directly, where Householder needs about
/// twice that to form Q). The sweep runs over whole chunks of `CHUNK`
/// columns, aligned, so that every inner loop has a fixed length and each
/// chunk's dot products stay in registers; in the first chunk the columns
/// up to `k` get a zero coefficient (`v - x * 0 = v`), which changes none of
/// their bits but a zero's sign.
fn gram_schmidt(
    block: &mut [f64],
    stride: usize,
    n: usize,
    coefficients: &mut [f64],
    next: &mut [f64],
    logs: &mut [f64],
) -> Result<(), CoreError> {
    #[cfg(target_arch = "x86_64")]
    match simd() {
        Simd::Avx512 => {
            // SAFETY: AVX-512F is present (checked by `simd`).
            return unsafe { gram_schmidt_avx512(block, stride, n, coefficients, next, logs) };
        }
        Simd::Avx2 => {
            // SAFETY: AVX2 is present (checked by `simd`).
            return unsafe { gram_schmidt_avx2(block, stride, n, coefficients, next, logs) };
        }
        Simd::None => {}
    }
    gram_schmidt_portable::<8>(block, stride, n, coefficients, next, logs)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn gram_schmidt_avx2(
    block: &mut [f64],
    stride: usize,
    n: usize,
    coefficients: &mut [f64],
    next: &mut [f64],
    logs: &mut [f64],
) -> Result<(), CoreError> {
    gram_schmidt_portable::<16>(block, stride, n, coefficients, next, logs)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
unsafe fn gram_schmidt_avx512(
    block: &mut [f64],
    stride: usize,
    n: usize,
    coefficients: &mut [f64],
    next: &mut [f64],
    logs: &mut [f64],
) -> Result<(), CoreError> {
    if stride.is_multiple_of(32) {
        gram_schmidt_portable::<32>(block, stride, n, coefficients, next, logs)
    } else {
        gram_schmidt_portable::<16>(block, stride, n, coefficients, next, logs)
    }
}

#[inline(always)]
fn gram_schmidt_portable<const W: usize>(
    block: &mut [f64],
    stride: usize,
    n: usize,
    coefficients: &mut [f64],
    next: &mut [f64],
    logs: &mut [f64],
) -> Result<(), CoreError> {
    // Dot products of column 0 with every column.
    for c0 in (0..stride).step_by(W) {
        let mut sums = [0.0; W];
        for row in block.chunks_exact(stride) {
            let x = row[0];
            let part: &[f64; W] = row[c0..c0 + W].try_into().unwrap_or(&[0.0; W]);
            for (s, &v) in sums.iter_mut().zip(part) {
                *s += x * v;
            }
        }
        coefficients[c0..c0 + W].copy_from_slice(&sums);
    }
    for k in 0..n {
        let square = coefficients[k];
        if !(square.is_finite() && square > 0.0) {
            return Err(CoreError::InvalidInput(format!(
                "the transfer-matrix vectors lost their independence (|R_{k}{k}|^2 = {square}): \
                 lower qr_interval"
            )));
        }
        logs[k] += 0.5 * square.ln();
        let scale = 1.0 / square.sqrt();
        let inverse_square = 1.0 / square;
        let first = (k + 1) / W * W;
        if first <= k {
            coefficients[first..=k].fill(0.0);
        }
        coefficients[k + 1..]
            .iter_mut()
            .for_each(|r| *r *= inverse_square);
        if k + 1 < n {
            for c0 in (first..stride).step_by(W) {
                sweep::<W>(block, stride, k, c0, coefficients, next);
            }
        }
        for row in block.chunks_exact_mut(stride) {
            row[k] *= scale;
        }
        coefficients[k + 1..].copy_from_slice(&next[k + 1..]);
    }
    Ok(())
}

/// Columns `c0 .. c0 + W` minus `row[k] * coefficients`, and their dot
/// products with the updated column `k + 1` into `next`.
#[inline(always)]
fn sweep<const W: usize>(
    block: &mut [f64],
    stride: usize,
    k: usize,
    c0: usize,
    coefficients: &[f64],
    next: &mut [f64],
) {
    let coefficient: [f64; W] = coefficients[c0..c0 + W].try_into().unwrap_or([0.0; W]);
    let mut sums = [0.0; W];
    for row in block.chunks_exact_mut(stride) {
        let x = row[k];
        let Ok(part) = <&mut [f64; W]>::try_from(&mut row[c0..c0 + W]) else {
            continue;
        };
        for (v, &r) in part.iter_mut().zip(&coefficient) {
            *v -= x * r;
        }
        let y = row[k + 1];
        let part: &[f64; W] = row[c0..c0 + W].try_into().unwrap_or(&[0.0; W]);
        for (s, &v) in sums.iter_mut().zip(part) {
            *s += y * v;
        }
    }
    next[c0..c0 + W].copy_from_slice(&sums);
}

#[cfg(target_arch = "x86_64")]
#[derive(Clone, Copy, PartialEq)]
enum Simd {
    Avx512,
    Avx2,
    None,
}

/// The widest vector instructions present (the same operations on any of them).
#[cfg(target_arch = "x86_64")]
fn simd() -> Simd {
    use std::sync::OnceLock;
    static DETECTED: OnceLock<Simd> = OnceLock::new();
    *DETECTED.get_or_init(|| {
        if is_x86_feature_detected!("avx512f") {
            Simd::Avx512
        } else if is_x86_feature_detected!("avx2") {
            Simd::Avx2
        } else {
            Simd::None
        }
    })
}

/// The per-block exponents (per site) of realizations `first .. first + count`:
/// `count x blocks x channels`, realization-major, in index order whatever
/// the threads (each realization depends on `(seed, index)` alone).
pub fn bar_exponents(
    bar: &Bar,
    first: usize,
    count: usize,
    cancel: &AtomicBool,
) -> Result<Vec<f64>, CoreError> {
    bar.validate()?;
    let rows = (first..first + count)
        .into_par_iter()
        .map_init(
            || Workspace::new(bar),
            |work, index| realization_exponents(bar, index as u64, work, cancel),
        )
        .collect::<Result<Vec<Vec<f64>>, CoreError>>()?;
    Ok(rows.into_iter().flatten().collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn never() -> AtomicBool {
        AtomicBool::new(false)
    }

    fn bar(dimensions: usize, width: usize, disorder_width: f64, energy: f64) -> Bar {
        Bar {
            dimensions,
            width,
            slices: 4000,
            hopping: 1.0,
            disorder_width,
            energy,
            qr_interval: 5,
            blocks: 1,
            seed: 7,
        }
    }

    /// Mean over blocks of each realization's exponents.
    fn spectrum(bar: &Bar, realizations: usize) -> Vec<f64> {
        let values = bar_exponents(bar, 0, realizations, &never()).unwrap();
        let channels = bar.channels();
        let mut mean = vec![0.0; channels];
        for row in values.chunks_exact(channels) {
            mean.iter_mut().zip(row).for_each(|(m, v)| *m += v);
        }
        let rows = (realizations * bar.blocks) as f64;
        mean.iter_mut().for_each(|m| *m /= rows);
        mean
    }

    /// Clean strip or bar: each transverse Fourier mode of the periodic ring
    /// (eigenvalue `e_m = -2J sum_a cos(2 pi m_a / M)` of `-J A`) decouples, and
    /// its amplitude follows the 1D recursion `psi[n+1] = x psi[n] - psi[n-1]`,
    /// `x = (e_m - E)/J`: growth `e^gamma` with `cosh gamma = |x|/2` where
    /// `|x| > 2` (a closed channel), `|e^gamma| = 1` otherwise (open).
    /// (Separation of variables; common practice.)
    fn clean_exponents(dimensions: usize, width: usize, energy: f64) -> Vec<f64> {
        let ring: Vec<f64> = (0..width)
            .map(|m| -2.0 * (2.0 * std::f64::consts::PI * m as f64 / width as f64).cos())
            .collect();
        let modes: Vec<f64> = if dimensions == 2 {
            ring.clone()
        } else {
            ring.iter()
                .flat_map(|a| ring.iter().map(move |b| a + b))
                .collect()
        };
        let mut gammas: Vec<f64> = modes
            .iter()
            .map(|e| {
                let x = ((e - energy) / 1.0f64).abs();
                if x > 2.0 {
                    (0.5 * x).acosh()
                } else {
                    0.0
                }
            })
            .collect();
        gammas.sort_by(|a, b| b.partial_cmp(a).unwrap());
        gammas
    }

    #[test]
    fn clean_strip_and_bar_have_the_transverse_band_exponents() {
        for (dimensions, width, energy) in [
            (2, 4, 3.0),
            (2, 5, -2.5),
            (3, 3, 4.5),
            (3, 4, 4.5),
            (3, 4, 1.0),
            (3, 5, -3.0),
        ] {
            let mut clean = bar(dimensions, width, 0.0, energy);
            clean.slices = 20_000;
            let measured = spectrum(&clean, 1);
            let exact = clean_exponents(dimensions, width, energy);
            for (i, (m, e)) in measured.iter().zip(&exact).enumerate() {
                // Closed channels up to the start's O(1/L) (the log of its projection
                // onto the growing modes, a few units); open ones only bounded.
                let tolerance = if *e > 0.0 { 10.0 } else { 40.0 } / clean.slices as f64;
                assert!(
                    (m - e).abs() < tolerance,
                    "{dimensions}D M={width} E={energy}: exponent {i} {m} vs {e}"
                );
            }
        }
    }

    #[test]
    fn results_do_not_depend_on_threads_or_the_draw_chunks() {
        let mut strip = bar(3, 3, 12.0, 0.0);
        strip.slices = 301;
        strip.blocks = 4;
        let run = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| bar_exponents(&strip, 3, 5, &never()).unwrap())
        };
        let one = run(1);
        assert_eq!(one, run(2));
        assert_eq!(one.len(), 5 * 4 * 9);
        // Realization 3's values are those of a single run of it.
        let alone = bar_exponents(&strip, 3, 1, &never()).unwrap();
        assert_eq!(&one[..36], &alone[..]);
        // The drawn slices (odd channel count, 64 at a time) are one draw over the bar.
        let values = bar_disorder(&strip, 3).unwrap();
        assert_eq!(values.len(), 301 * 9);
        assert!(values.iter().all(|v| v.abs() < 6.0));
    }

    #[test]
    fn gram_schmidt_orthonormalizes_and_keeps_the_volume() {
        // Fixed pseudo-random 2n x n blocks (n = 4, 20, 37: one chunk, a full one
        // plus a partial one, several): Q^T Q = 1 and sum ln R_kk = ln sqrt(det(X^T X)).
        for n in [4usize, 20, 37] {
            let stride = n.div_ceil(CHUNK) * CHUNK;
            let mut seed = 99u64;
            let mut values = vec![0.0; 2 * n * stride];
            for row in values.chunks_exact_mut(stride) {
                for v in &mut row[..n] {
                    seed = seed
                        .wrapping_mul(6364136223846793005)
                        .wrapping_add(1442695040888963407);
                    *v = (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5;
                }
            }
            let original = values.clone();
            let gram = |x: &[f64], a: usize, b: usize| -> f64 {
                (0..2 * n)
                    .map(|i| x[i * stride + a] * x[i * stride + b])
                    .sum()
            };
            // ln det of the Gram matrix by Gaussian elimination.
            let mut g: Vec<Vec<f64>> = (0..n)
                .map(|a| (0..n).map(|b| gram(&original, a, b)).collect())
                .collect();
            let mut log_det = 0.0;
            for k in 0..n {
                log_det += g[k][k].ln();
                let pivot = g[k].clone();
                for row in &mut g[k + 1..] {
                    let f = row[k] / pivot[k];
                    for (v, p) in row[k..].iter_mut().zip(&pivot[k..]) {
                        *v -= f * p;
                    }
                }
            }
            let (mut c, mut d, mut logs) = (vec![0.0; stride], vec![0.0; stride], vec![0.0; n]);
            gram_schmidt(&mut values, stride, n, &mut c, &mut d, &mut logs).unwrap();
            for a in 0..n {
                for b in 0..n {
                    let expected = if a == b { 1.0 } else { 0.0 };
                    assert!((gram(&values, a, b) - expected).abs() < 1e-13, "n = {n}");
                }
            }
            assert!(values
                .chunks_exact(stride)
                .all(|row| row[n..].iter().all(|&v| v == 0.0)));
            let volume: f64 = logs.iter().sum();
            assert!((volume - 0.5 * log_det).abs() < 1e-11, "n = {n}: {volume}");
            // Every instruction set gives the same bits.
            let mut portable = original.clone();
            let mut portable_logs = vec![0.0; n];
            gram_schmidt_portable::<8>(
                &mut portable,
                stride,
                n,
                &mut c,
                &mut d,
                &mut portable_logs,
            )
            .unwrap();
            assert_eq!(portable, values);
            assert_eq!(portable_logs, logs);
        }
    }

    #[test]
    fn anderson_strip_is_localized() {
        // 2D, W = 6, E = 0: Lambda = xi_M / M falls with M (Abrahams, Anderson,
        // Licciardello & Ramakrishnan, Phys. Rev. Lett. 42, 673 (1979)).
        let lambda = |width: usize| {
            let mut strip = bar(2, width, 6.0, 0.0);
            strip.slices = 20_000;
            let gammas = spectrum(&strip, 1);
            1.0 / (gammas[width - 1] * width as f64)
        };
        let (small, large) = (lambda(4), lambda(8));
        assert!(large < small, "Lambda_4 = {small}, Lambda_8 = {large}");
    }

    #[test]
    fn bad_bars_and_cancellation_are_errors() {
        let good = bar(3, 4, 16.0, 0.0);
        assert!(good.validate().is_ok());
        for bad in [
            Bar {
                dimensions: 4,
                ..good
            },
            Bar { width: 0, ..good },
            Bar { width: 200, ..good },
            Bar {
                qr_interval: 0,
                ..good
            },
            Bar {
                qr_interval: 400,
                ..good
            },
            Bar {
                blocks: 2000,
                ..good
            },
            Bar {
                hopping: 0.0,
                ..good
            },
            Bar {
                disorder_width: f64::NAN,
                ..good
            },
            Bar {
                energy: f64::INFINITY,
                ..good
            },
        ] {
            assert!(bar_exponents(&bad, 0, 1, &never()).is_err(), "{bad:?}");
        }
        let cancelled = AtomicBool::new(true);
        assert_eq!(
            bar_exponents(&good, 0, 2, &cancelled),
            Err(CoreError::Interrupted)
        );
    }
}
