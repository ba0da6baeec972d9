//! The floating-point types a propagation can run in (f64, or f32 on request).

use num_complex::Complex;
use num_traits::Float;
use rustfft::FftNum;

/// A real type the split-step loop is generic over. Sums of probabilities
/// are always accumulated in f64, whatever the working type.
pub trait Real: FftNum + Float + Send + Sync {
    fn of(value: f64) -> Self;
    fn wide(self) -> f64;
    /// `values[j] *= factors[j]`, vectorized where the CPU allows.
    fn multiply(values: &mut [Complex<Self>], factors: &[Complex<Self>]);
}

impl Real for f64 {
    #[inline(always)]
    fn of(value: f64) -> Self {
        value
    }
    #[inline(always)]
    fn wide(self) -> f64 {
        self
    }
    fn multiply(values: &mut [Complex<Self>], factors: &[Complex<Self>]) {
        crate::kernels::multiply_f64(values, factors)
    }
}

impl Real for f32 {
    #[inline(always)]
    fn of(value: f64) -> Self {
        value as f32
    }
    #[inline(always)]
    fn wide(self) -> f64 {
        self as f64
    }
    fn multiply(values: &mut [Complex<Self>], factors: &[Complex<Self>]) {
        crate::kernels::multiply_f32(values, factors)
    }
}

/// `|z|^2` in f64.
#[inline(always)]
pub fn density<T: Real>(z: Complex<T>) -> f64 {
    let re = z.re.wide();
    let im = z.im.wide();
    re * re + im * im
}

/// Narrow a double-precision complex number to the working type.
#[inline(always)]
pub fn narrow<T: Real>(z: Complex<f64>) -> Complex<T> {
    Complex::new(T::of(z.re), T::of(z.im))
}
