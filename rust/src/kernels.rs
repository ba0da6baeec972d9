//! The elementwise complex products of the step, with AVX2 + FMA versions
//! chosen at run time (the FFTs already dispatch this way). These are the
//! only loops of the step besides the FFTs, so they are worth hand-writing.

use num_complex::Complex;

#[cfg(target_arch = "x86_64")]
fn has_avx2_fma() -> bool {
    use std::sync::OnceLock;
    static DETECTED: OnceLock<bool> = OnceLock::new();
    *DETECTED.get_or_init(|| is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma"))
}

fn multiply_scalar<
    T: Copy + std::ops::Mul<Output = T> + std::ops::Add<Output = T> + std::ops::Sub<Output = T>,
>(
    values: &mut [Complex<T>],
    factors: &[Complex<T>],
) {
    for (z, &f) in values.iter_mut().zip(factors) {
        *z = Complex::new(z.re * f.re - z.im * f.im, z.re * f.im + z.im * f.re);
    }
}

/// `values[j] *= factors[j]` in f64.
pub fn multiply_f64(values: &mut [Complex<f64>], factors: &[Complex<f64>]) {
    let n = values.len().min(factors.len());
    #[cfg(target_arch = "x86_64")]
    if has_avx2_fma() {
        // SAFETY: AVX2 and FMA are present (checked above); both slices hold at least n values.
        let done = unsafe {
            avx::multiply_f64(
                values.as_mut_ptr() as *mut f64,
                factors.as_ptr() as *const f64,
                n,
            )
        };
        multiply_scalar(&mut values[done..n], &factors[done..n]);
        return;
    }
    multiply_scalar(&mut values[..n], &factors[..n]);
}

/// `values[j] *= factors[j]` in f32.
pub fn multiply_f32(values: &mut [Complex<f32>], factors: &[Complex<f32>]) {
    let n = values.len().min(factors.len());
    #[cfg(target_arch = "x86_64")]
    if has_avx2_fma() {
        // SAFETY: as above.
        let done = unsafe {
            avx::multiply_f32(
                values.as_mut_ptr() as *mut f32,
                factors.as_ptr() as *const f32,
                n,
            )
        };
        multiply_scalar(&mut values[done..n], &factors[done..n]);
        return;
    }
    multiply_scalar(&mut values[..n], &factors[..n]);
}

#[cfg(target_arch = "x86_64")]
mod avx {
    use std::arch::x86_64::*;

    /// Multiplies the first `n` interleaved complex values pairwise, two per
    /// register; returns how many it did (the rest is left to the caller).
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn multiply_f64(values: *mut f64, factors: *const f64, n: usize) -> usize {
        let whole = n / 2 * 2;
        let mut j = 0;
        while j < whole {
            let a = _mm256_loadu_pd(values.add(2 * j));
            let b = _mm256_loadu_pd(factors.add(2 * j));
            let b_re = _mm256_movedup_pd(b);
            let b_im = _mm256_permute_pd(b, 0b1111);
            let a_swapped = _mm256_permute_pd(a, 0b0101);
            // even lanes: re*b_re - im*b_im; odd lanes: im*b_re + re*b_im
            let product = _mm256_fmaddsub_pd(a, b_re, _mm256_mul_pd(a_swapped, b_im));
            _mm256_storeu_pd(values.add(2 * j), product);
            j += 2;
        }
        whole
    }

    /// As `multiply_f64`, four complex values per register.
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn multiply_f32(values: *mut f32, factors: *const f32, n: usize) -> usize {
        let whole = n / 4 * 4;
        let mut j = 0;
        while j < whole {
            let a = _mm256_loadu_ps(values.add(2 * j));
            let b = _mm256_loadu_ps(factors.add(2 * j));
            let b_re = _mm256_moveldup_ps(b);
            let b_im = _mm256_movehdup_ps(b);
            let a_swapped = _mm256_permute_ps(a, 0b1011_0001);
            let product = _mm256_fmaddsub_ps(a, b_re, _mm256_mul_ps(a_swapped, b_im));
            _mm256_storeu_ps(values.add(2 * j), product);
            j += 4;
        }
        whole
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn products_match_complex_arithmetic_for_any_length() {
        for n in [0, 1, 2, 3, 5, 8, 37] {
            let a: Vec<Complex<f64>> = (0..n)
                .map(|j| Complex::new(j as f64 * 0.3 - 2.0, 1.0 / (j as f64 + 1.0)))
                .collect();
            let b: Vec<Complex<f64>> = (0..n).map(|j| Complex::from_polar(1.1, j as f64)).collect();
            let mut c = a.clone();
            multiply_f64(&mut c, &b);
            for ((x, y), z) in a.iter().zip(&b).zip(&c) {
                assert!(
                    (x * y - z).norm() <= 1e-15 * (x * y).norm().max(1.0),
                    "n = {n}"
                );
            }
            let a32: Vec<Complex<f32>> = a
                .iter()
                .map(|z| Complex::new(z.re as f32, z.im as f32))
                .collect();
            let b32: Vec<Complex<f32>> = b
                .iter()
                .map(|z| Complex::new(z.re as f32, z.im as f32))
                .collect();
            let mut c32 = a32.clone();
            multiply_f32(&mut c32, &b32);
            for ((x, y), z) in a32.iter().zip(&b32).zip(&c32) {
                assert!(
                    (x * y - z).norm() <= 1e-6 * (x * y).norm().max(1.0),
                    "n = {n}"
                );
            }
        }
    }
}
