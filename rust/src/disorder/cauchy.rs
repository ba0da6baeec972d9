//! Cauchy (Lloyd) disorder: independent on-site values with the Lorentzian
//! density `(width/pi) / (v^2 + width^2)` (half-width at half-maximum
//! `width`), drawn by the inverse CDF `width * tan(pi (u - 1/2))` from the
//! term's counter-based stream, one uniform per point in order. Its variance
//! is infinite; on a lattice its Lyapunov exponent is known exactly (Ishii,
//! Prog. Theor. Phys. Suppl. 53, 77 (1973); Thouless, J. Phys. C 5, 77 (1972)).

use crate::random::Stream;

/// Add one realization of Cauchy values of half-width `width` to `values`.
pub(super) fn add(stream: &mut Stream, width: f64, values: &mut [f64]) {
    values
        .iter_mut()
        .for_each(|v| *v += lorentzian(width, stream.uniform()));
}

/// The value at cumulative probability `u` in [0, 1); `u = 0` gives a large
/// finite negative value (tan of -pi/2 rounded), never infinity.
fn lorentzian(width: f64, u: f64) -> f64 {
    width * (std::f64::consts::PI * (u - 0.5)).tan()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quartiles_are_plus_minus_width() {
        // The Lorentzian's quartiles lie at -width and +width: count values below each.
        let (width, n) = (0.7, 200_000);
        let mut values = vec![0.0; n];
        add(&mut Stream::new(5, 0, 1), width, &mut values);
        let below = |x: f64| values.iter().filter(|&&v| v < x).count() as f64 / n as f64;
        // Binomial error of a quartile fraction: sqrt(3/16/n) ~ 1e-3.
        assert!((below(-width) - 0.25).abs() < 5e-3);
        assert!((below(0.0) - 0.5).abs() < 5e-3);
        assert!((below(width) - 0.75).abs() < 5e-3);
        assert!(values.iter().all(|v| v.is_finite()));
        assert!(lorentzian(1.0, 0.0).is_finite());
    }
}
