//! Fourier transforms on 1D, 2D and 3D grids: rustfft along contiguous rows,
//! the other axes in cache-sized pieces.
//!
//! Arrays are in C order (axis 0 slowest) and stay so: the last axis is
//! transformed row by row in place; in 3D the middle axis plane by plane (each
//! plane transposed into a work buffer, transformed, transposed back: a plane
//! of 128 x 128 stays in cache); axis 0 in blocks of columns gathered
//! into rows of the work buffer (`block`). The split step's kinetic factor (`kinetic`)
//! multiplies each gathered block between its forward and inverse transform
//! along axis 0, so that pass reads and writes the array once; its factors are
//! kept in that block order (`step_layout`). In 1D it is one out-of-place
//! transform there and back.

use std::sync::Arc;

use num_complex::Complex;
use rustfft::{Fft, FftPlanner};

use crate::real::Real;

/// Side of the square tiles of a transpose: 16 x 16 complex doubles are 4 kB,
/// so that one tile of the source and one of the destination stay in L1.
const TILE: usize = 16;

/// Values gathered at once along axis 0: blocks of at least `MIN_BLOCK` columns
/// (16 complex doubles are 256 contiguous bytes of each row), more when axis 0
/// is short, so that a block holds about `BLOCK_VALUES` values (128 kB, in L2)
/// and each row gives a longer contiguous read.
const MIN_BLOCK: usize = 16;
const BLOCK_VALUES: usize = 8192;

/// The most axes a grid may have.
pub const MAX_AXES: usize = 3;

/// Plans for every axis of a grid, shared by every thread.
pub struct Transforms<T: Real> {
    shape: Vec<usize>,
    forward: Vec<Arc<dyn Fft<T>>>,
    inverse: Vec<Arc<dyn Fft<T>>>,
}

impl<T: Real> Transforms<T> {
    /// Plans for `shape` (1 to `MAX_AXES` axes, each of at least 1 point).
    pub fn new(shape: &[usize]) -> Self {
        let mut planner = FftPlanner::<T>::new();
        Transforms {
            shape: shape.to_vec(),
            forward: shape.iter().map(|&n| planner.plan_fft_forward(n)).collect(),
            inverse: shape.iter().map(|&n| planner.plan_fft_inverse(n)).collect(),
        }
    }

    pub fn points(&self) -> usize {
        self.shape.iter().product()
    }

    pub fn shape(&self) -> &[usize] {
        &self.shape
    }

    /// The scratch one thread needs for any of these transforms.
    pub fn scratch_len(&self) -> usize {
        self.forward
            .iter()
            .chain(&self.inverse)
            .flat_map(|plan| {
                [
                    plan.get_inplace_scratch_len(),
                    plan.get_outofplace_scratch_len(),
                ]
            })
            .max()
            .unwrap_or(0)
    }

    /// The points of one plane across axis 0 (every point in 1D).
    fn plane(&self) -> usize {
        self.points() / self.shape[0]
    }

    /// Columns per block along axis 0.
    fn block(&self) -> usize {
        (BLOCK_VALUES / self.shape[0]).max(MIN_BLOCK)
    }

    /// Transform the last axis (and in 3D the middle one) of `psi` in place,
    /// forward or back; `work` holds a plane.
    fn inner_axes(
        &self,
        psi: &mut [Complex<T>],
        work: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
        forward: bool,
    ) {
        let plans = if forward {
            &self.forward
        } else {
            &self.inverse
        };
        let axes = self.shape.len();
        let last = axes - 1;
        if forward {
            plans[last].process_with_scratch(psi, scratch);
        }
        if axes == 3 {
            let (rows, cols) = (self.shape[1], self.shape[2]);
            let work = &mut work[..rows * cols];
            for plane in psi.chunks_exact_mut(rows * cols) {
                transpose(plane, work, rows, cols);
                plans[1].process_with_scratch(work, scratch);
                transpose(work, plane, cols, rows);
            }
        }
        if !forward {
            plans[last].process_with_scratch(psi, scratch);
        }
    }

    /// Axis 0 in blocks of columns: each block gathered from `psi` into rows of
    /// `work`, handed to `each` (with its first column and the scratch), then
    /// scattered back.
    fn along_axis0(
        &self,
        psi: &mut [Complex<T>],
        work: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
        mut each: impl FnMut(usize, &mut [Complex<T>], &mut [Complex<T>]),
    ) {
        let (rows, plane) = (self.shape[0], self.plane());
        let columns = self.block();
        for first in (0..plane).step_by(columns) {
            let width = columns.min(plane - first);
            let block = &mut work[..rows * width];
            gather(psi, block, rows, plane, first, width);
            each(first, block, scratch);
            scatter(block, psi, rows, plane, first, width);
        }
    }

    /// `psi <- F^-1 (factors * F psi)` with `factors` in `step_layout` order;
    /// `work` is work space of the grid's size.
    pub fn kinetic(
        &self,
        psi: &mut [Complex<T>],
        work: &mut [Complex<T>],
        factors: &[Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        if self.shape.len() == 1 {
            self.forward[0].process_outofplace_with_scratch(psi, work, scratch);
            T::multiply(work, factors);
            self.inverse[0].process_outofplace_with_scratch(work, psi, scratch);
            return;
        }
        self.inner_axes(psi, work, scratch, true);
        let rows = self.shape[0];
        self.along_axis0(psi, work, scratch, |first, block, scratch| {
            self.forward[0].process_with_scratch(block, scratch);
            T::multiply(block, &factors[first * rows..first * rows + block.len()]);
            self.inverse[0].process_with_scratch(block, scratch);
        });
        self.inner_axes(psi, work, scratch, false);
    }

    /// `psi <- F^-1 (table F psi)` with a real `table` in C order over k space
    /// (already divided by N); `work` is work space of the grid's size. The
    /// same passes as `kinetic`, for tables that change from call to call.
    pub fn filter(
        &self,
        psi: &mut [Complex<T>],
        work: &mut [Complex<T>],
        table: &[f64],
        scratch: &mut [Complex<T>],
    ) {
        if self.shape.len() == 1 {
            self.forward[0].process_outofplace_with_scratch(psi, work, scratch);
            for (z, &t) in work.iter_mut().zip(table) {
                *z = *z * T::of(t);
            }
            self.inverse[0].process_outofplace_with_scratch(work, psi, scratch);
            return;
        }
        self.inner_axes(psi, work, scratch, true);
        let (rows, plane) = (self.shape[0], self.plane());
        self.along_axis0(psi, work, scratch, |first, block, scratch| {
            self.forward[0].process_with_scratch(block, scratch);
            for (column, values) in block.chunks_exact_mut(rows).enumerate() {
                for (row, z) in values.iter_mut().enumerate() {
                    *z = *z * T::of(table[row * plane + first + column]);
                }
            }
            self.inverse[0].process_with_scratch(block, scratch);
        });
        self.inner_axes(psi, work, scratch, false);
    }

    /// Forward transform (unnormalized) of `psi` into `out` in C order; `work`
    /// is work space of the grid's size.
    pub fn forward_natural(
        &self,
        psi: &[Complex<T>],
        out: &mut [Complex<T>],
        work: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        out.copy_from_slice(psi);
        if self.shape.len() == 1 {
            self.forward[0].process_with_scratch(out, scratch);
            return;
        }
        self.inner_axes(out, work, scratch, true);
        self.along_axis0(out, work, scratch, |_, block, scratch| {
            self.forward[0].process_with_scratch(block, scratch);
        });
    }

    /// Inverse transform (unnormalized) of `data` in place, in C order; `work`
    /// holds at least `work_len()` values.
    pub fn inverse_natural(
        &self,
        data: &mut [Complex<T>],
        work: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        if self.shape.len() == 1 {
            self.inverse[0].process_with_scratch(data, scratch);
            return;
        }
        self.inner_axes(data, work, scratch, false);
        self.along_axis0(data, work, scratch, |_, block, scratch| {
            self.inverse[0].process_with_scratch(block, scratch);
        });
    }

    /// The work space `forward_natural` and `inverse_natural` need: a plane in
    /// 3D, a block of axis 0 (nothing in 1D). `kinetic` and `filter` need the
    /// grid's size in 1D.
    pub fn work_len(&self) -> usize {
        match self.shape.len() {
            1 => 0,
            axes => {
                let plane = if axes == 3 {
                    self.shape[1] * self.shape[2]
                } else {
                    0
                };
                plane.max(self.shape[0] * self.block().min(self.plane()))
            }
        }
    }

    /// A table given in C order over k space, in the order `kinetic` reads its
    /// factors: the blocks of `block()` columns of axis 0, each column contiguous.
    pub fn step_layout<U: Copy>(&self, natural: &[U]) -> Vec<U> {
        if self.shape.len() == 1 {
            return natural.to_vec();
        }
        let (rows, plane) = (self.shape[0], self.plane());
        let mut table = Vec::with_capacity(natural.len());
        let columns = self.block();
        for first in (0..plane).step_by(columns) {
            for column in first..(first + columns).min(plane) {
                table.extend((0..rows).map(|row| natural[row * plane + column]));
            }
        }
        table
    }
}

/// Columns `first .. first + width` of the `rows x plane` matrix `source`, as
/// `width` contiguous rows of `rows` values in `block`.
fn gather<U: Copy>(
    source: &[U],
    block: &mut [U],
    rows: usize,
    plane: usize,
    first: usize,
    width: usize,
) {
    for row in 0..rows {
        let line = &source[row * plane + first..row * plane + first + width];
        for (column, &value) in line.iter().enumerate() {
            block[column * rows + row] = value;
        }
    }
}

/// The inverse of `gather`.
fn scatter<U: Copy>(
    block: &[U],
    target: &mut [U],
    rows: usize,
    plane: usize,
    first: usize,
    width: usize,
) {
    for row in 0..rows {
        let line = &mut target[row * plane + first..row * plane + first + width];
        for (column, value) in line.iter_mut().enumerate() {
            *value = block[column * rows + row];
        }
    }
}

/// `output = input^T` for a `rows x cols` row-major matrix, in square tiles.
pub fn transpose<U: Copy>(input: &[U], output: &mut [U], rows: usize, cols: usize) {
    debug_assert_eq!(input.len(), rows * cols);
    debug_assert_eq!(output.len(), rows * cols);
    for r0 in (0..rows).step_by(TILE) {
        let r1 = (r0 + TILE).min(rows);
        for c0 in (0..cols).step_by(TILE) {
            let c1 = (c0 + TILE).min(cols);
            for r in r0..r1 {
                let source = &input[r * cols + c0..r * cols + c1];
                for (c, &value) in (c0..c1).zip(source) {
                    output[c * rows + r] = value;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use num_complex::Complex64;

    /// The d-dimensional DFT by its definition, `X[k] = sum_j x[j] e^{-2 pi i k.j/N}`.
    fn direct(shape: &[usize], x: &[Complex64], sign: f64) -> Vec<Complex64> {
        let n: usize = shape.iter().product();
        let index = |mut flat: usize| {
            let mut out = vec![0; shape.len()];
            for a in (0..shape.len()).rev() {
                out[a] = flat % shape[a];
                flat /= shape[a];
            }
            out
        };
        (0..n)
            .map(|k| {
                let kk = index(k);
                (0..n)
                    .map(|j| {
                        let jj = index(j);
                        let phase: f64 = (0..shape.len())
                            .map(|a| (kk[a] * jj[a]) as f64 / shape[a] as f64)
                            .sum();
                        x[j] * Complex64::from_polar(1.0, sign * 2.0 * std::f64::consts::PI * phase)
                    })
                    .sum()
            })
            .collect()
    }

    /// 1D, 2D and 3D, with axis-0 blocks cut ragged.
    const SHAPES: [&[usize]; 5] = [&[6], &[4, 6], &[3, 5, 4], &[5, 37], &[4, 5, 7]];

    /// The largest distance between two arrays, entry by entry.
    fn gap(a: &[Complex64], b: &[Complex64]) -> f64 {
        a.iter()
            .zip(b)
            .map(|(u, v)| (u - v).norm())
            .fold(0.0, f64::max)
    }

    fn sample(n: usize) -> Vec<Complex64> {
        (0..n)
            .map(|j| Complex64::new((0.37 * j as f64).sin(), (1.3 * j as f64 + 0.2).cos()))
            .collect()
    }

    #[test]
    fn the_natural_transform_agrees_with_the_definition() {
        for shape in SHAPES.map(<[usize]>::to_vec) {
            let plans = Transforms::<f64>::new(&shape);
            let n = plans.points();
            let x = sample(n);
            let expected = direct(&shape, &x, -1.0);
            let mut scratch = vec![Complex64::default(); plans.scratch_len()];
            let (mut out, mut work) =
                (vec![Complex64::default(); n], vec![Complex64::default(); n]);
            plans.forward_natural(&x, &mut out, &mut work, &mut scratch);
            let gap_forward = gap(&out, &expected);
            assert!(gap_forward < 1e-12, "{shape:?} natural {gap_forward}");
            // The inverse, in place with the least work space, is the definition's too.
            let mut back = x.clone();
            let mut small = vec![Complex64::default(); plans.work_len()];
            plans.inverse_natural(&mut back, &mut small, &mut scratch);
            let gap_inverse = gap(&back, &direct(&shape, &x, 1.0));
            assert!(gap_inverse < 1e-12, "{shape:?} inverse {gap_inverse}");
        }
    }

    #[test]
    fn the_fused_kinetic_factor_is_the_transform_the_product_and_back() {
        for shape in SHAPES.map(<[usize]>::to_vec) {
            let plans = Transforms::<f64>::new(&shape);
            let n = plans.points();
            let x = sample(n);
            let natural: Vec<Complex64> = (0..n)
                .map(|j| Complex64::from_polar(1.0 / n as f64, 0.1 * j as f64))
                .collect();
            let factors = plans.step_layout(&natural);
            let mut scratch = vec![Complex64::default(); plans.scratch_len()];
            let (mut psi, mut work) = (x.clone(), vec![Complex64::default(); n]);
            plans.kinetic(&mut psi, &mut work, &factors, &mut scratch);
            // By the definition: F^-1 (natural * F x), F^-1 = conj transform / 1 (N in `natural`).
            let spectrum = direct(&shape, &x, -1.0);
            let product: Vec<Complex64> =
                spectrum.iter().zip(&natural).map(|(a, b)| a * b).collect();
            let expected = direct(&shape, &product, 1.0);
            let gap = gap(&psi, &expected);
            assert!(gap < 1e-12, "{shape:?} {gap}");
        }
    }

    #[test]
    fn the_real_filter_is_the_kinetic_factor_of_its_table() {
        for shape in SHAPES.map(<[usize]>::to_vec) {
            let plans = Transforms::<f64>::new(&shape);
            let n = plans.points();
            let table: Vec<f64> = (0..n).map(|j| (0.3 * j as f64).cos() / n as f64).collect();
            let complex: Vec<Complex64> = table.iter().map(|&t| Complex64::new(t, 0.0)).collect();
            let mut scratch = vec![Complex64::default(); plans.scratch_len()];
            let mut work = vec![Complex64::default(); n];
            let (mut a, mut b) = (sample(n), sample(n));
            plans.filter(&mut a, &mut work, &table, &mut scratch);
            plans.kinetic(
                &mut b,
                &mut work,
                &plans.step_layout(&complex),
                &mut scratch,
            );
            let gap = gap(&a, &b);
            assert!(gap < 1e-14, "{shape:?} {gap}");
        }
    }

    #[test]
    fn transpose_of_ragged_tiles() {
        let (rows, cols) = (37, 21);
        let input: Vec<usize> = (0..rows * cols).collect();
        let mut output = vec![0; rows * cols];
        transpose(&input, &mut output, rows, cols);
        for r in 0..rows {
            for c in 0..cols {
                assert_eq!(output[c * rows + r], input[r * cols + c]);
            }
        }
    }
}
