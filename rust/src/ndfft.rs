//! Fourier transforms on 1D, 2D and 3D grids: rustfft along contiguous rows,
//! with blocked transposes between the axes.
//!
//! Arrays are in C order (axis 0 slowest). A transform of `d` axes runs `d`
//! passes; each transforms the rows (the last axis of the current layout) and
//! then rotates the layout, `(r..., n) -> (n, r...)`, a transpose of the
//! `prod(r) x n` matrix, so that the next axis becomes contiguous. The split
//! step never needs the natural layout in k space: it skips the last rotation
//! (the "step layout", `d - 1` transposes each way) and keeps its kinetic
//! factors in that layout. Observables use `forward_natural`, which makes all
//! `d` rotations and so returns to C order. In 1D both layouts are the natural
//! one and no transpose is made.

use std::sync::Arc;

use num_complex::Complex;
use rustfft::{Fft, FftPlanner};

use crate::real::Real;

/// Side of the square tiles of a transpose: 16 x 16 complex doubles are 4 kB,
/// so that one tile of the source and one of the destination stay in L1.
const TILE: usize = 16;

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

    /// The layouts the passes of a forward transform run in: `layouts[i]` is
    /// the order of the original axes during pass `i` (its last axis is the
    /// one transformed). The step layout is the last.
    fn layouts(&self) -> Vec<Vec<usize>> {
        let mut order: Vec<usize> = (0..self.shape.len()).collect();
        let mut layouts = Vec::with_capacity(self.shape.len());
        for _ in 0..self.shape.len() {
            layouts.push(order.clone());
            order.rotate_right(1);
        }
        layouts
    }

    /// Forward transform (unnormalized) of `psi` into `spectrum`, in the step
    /// layout. `psi` is used as work space and left undefined.
    pub fn forward(
        &self,
        psi: &mut [Complex<T>],
        spectrum: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        let layouts = self.layouts();
        let passes = layouts.len();
        for (pass, order) in layouts.iter().enumerate() {
            let axis = order[passes - 1];
            self.forward[axis].process_outofplace_with_scratch(psi, spectrum, scratch);
            if pass + 1 < passes {
                let cols = self.shape[axis];
                transpose(spectrum, psi, self.points() / cols, cols);
            }
        }
    }

    /// Inverse transform (unnormalized) of `spectrum`, in the step layout, into
    /// `psi`. `spectrum` is used as work space and left undefined.
    pub fn inverse(
        &self,
        spectrum: &mut [Complex<T>],
        psi: &mut [Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        let layouts = self.layouts();
        let passes = layouts.len();
        for (pass, order) in layouts.iter().rev().enumerate() {
            let axis = order[passes - 1];
            self.inverse[axis].process_outofplace_with_scratch(spectrum, psi, scratch);
            if pass + 1 < passes {
                // Undo the rotation that led to this layout: `(n, r...) -> (r..., n)`.
                let rows = self.shape[order[0]];
                transpose(psi, spectrum, rows, self.points() / rows);
            }
        }
    }

    /// `psi <- F^-1 (factors * F psi)` with `factors` in the step layout; `work`
    /// is work space of the grid's size. The last forward pass, the product and
    /// the first inverse pass run row by row, each row staying in cache.
    pub fn kinetic(
        &self,
        psi: &mut [Complex<T>],
        work: &mut [Complex<T>],
        factors: &[Complex<T>],
        scratch: &mut [Complex<T>],
    ) {
        let layouts = self.layouts();
        let passes = layouts.len();
        let n = self.points();
        // Every forward pass but the last: rows, then the rotation, ending in `psi`.
        for order in &layouts[..passes - 1] {
            let axis = order[passes - 1];
            self.forward[axis].process_outofplace_with_scratch(psi, work, scratch);
            let cols = self.shape[axis];
            transpose(work, psi, n / cols, cols);
        }
        let last = layouts[passes - 1][passes - 1];
        let row = self.shape[last];
        for ((source, spectrum), factor) in psi
            .chunks_exact_mut(row)
            .zip(work.chunks_exact_mut(row))
            .zip(factors.chunks_exact(row))
        {
            self.forward[last].process_outofplace_with_scratch(source, spectrum, scratch);
            T::multiply(spectrum, factor);
            self.inverse[last].process_outofplace_with_scratch(spectrum, source, scratch);
        }
        // The other inverse passes: undo each rotation, then the rows of the layout before it.
        for pass in (1..passes).rev() {
            let rows = self.shape[layouts[pass][0]];
            transpose(psi, work, rows, n / rows);
            let axis = layouts[pass - 1][passes - 1];
            self.inverse[axis].process_outofplace_with_scratch(work, psi, scratch);
        }
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
        for order in self.layouts() {
            let axis = order[order.len() - 1];
            self.forward[axis].process_with_scratch(out, scratch);
            let cols = self.shape[axis];
            transpose(out, work, self.points() / cols, cols);
            out.copy_from_slice(work);
        }
    }

    /// A table given in C order over k space, rearranged into the step layout.
    pub fn step_layout<U: Copy>(&self, natural: &[U]) -> Vec<U> {
        let mut table = natural.to_vec();
        let mut other = natural.to_vec();
        let layouts = self.layouts();
        for order in &layouts[..layouts.len() - 1] {
            let cols = self.shape[order[order.len() - 1]];
            transpose(&table, &mut other, table.len() / cols, cols);
            std::mem::swap(&mut table, &mut other);
        }
        table
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

    fn sample(n: usize) -> Vec<Complex64> {
        (0..n)
            .map(|j| Complex64::new((0.37 * j as f64).sin(), (1.3 * j as f64 + 0.2).cos()))
            .collect()
    }

    #[test]
    fn natural_and_step_layouts_agree_with_the_definition() {
        for shape in [vec![6], vec![4, 6], vec![3, 5, 4]] {
            let plans = Transforms::<f64>::new(&shape);
            let n = plans.points();
            let x = sample(n);
            let expected = direct(&shape, &x, -1.0);
            let mut scratch = vec![Complex64::default(); plans.scratch_len()];
            let (mut out, mut work) =
                (vec![Complex64::default(); n], vec![Complex64::default(); n]);
            plans.forward_natural(&x, &mut out, &mut work, &mut scratch);
            let gap = out
                .iter()
                .zip(&expected)
                .map(|(a, b)| (a - b).norm())
                .fold(0.0, f64::max);
            assert!(gap < 1e-12, "{shape:?} natural {gap}");
            let mut psi = x.clone();
            let mut spectrum = vec![Complex64::default(); n];
            plans.forward(&mut psi, &mut spectrum, &mut scratch);
            let stepped = plans.step_layout(&expected);
            let gap = spectrum
                .iter()
                .zip(&stepped)
                .map(|(a, b)| (a - b).norm())
                .fold(0.0, f64::max);
            assert!(gap < 1e-12, "{shape:?} step layout {gap}");
            // And back: the inverse of the step layout returns N x.
            plans.inverse(&mut spectrum, &mut psi, &mut scratch);
            let gap = psi
                .iter()
                .zip(&x)
                .map(|(a, b)| (a / n as f64 - b).norm())
                .fold(0.0, f64::max);
            assert!(gap < 1e-12, "{shape:?} inverse {gap}");
        }
    }

    #[test]
    fn the_fused_kinetic_factor_is_the_transform_the_product_and_back() {
        for shape in [vec![6], vec![4, 6], vec![3, 5, 4]] {
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
            let gap = psi
                .iter()
                .zip(&expected)
                .map(|(a, b)| (a - b).norm())
                .fold(0.0, f64::max);
            assert!(gap < 1e-12, "{shape:?} {gap}");
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
