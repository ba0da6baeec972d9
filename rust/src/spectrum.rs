//! Energy-resolved transmission from a time-dependent run.
//!
//! Right of the sample the transmitted wave is free:
//! `psi(x, t) = (1/2pi) int dk phi0(k) t(k) exp(i k x - i E(k) t / hbar)`.
//! Its time transform at the probe point `x_R`,
//! `F(E) = int dt exp(i E t / hbar) psi(x_R, t) = phi0(k) t(k) exp(i k x_R) / |v(k)|`,
//! gives `T(k) = |t(k)|^2 = |F(E(k))|^2 v(k)^2 / |phi0(k)|^2`, with
//! `phi0(k) = sum_j psi0_j exp(-i k x_j) dx`. A wave the absorbing layer sends
//! back would add `B exp(-i k x)` at the same energy and, interfering, spoil
//! `T` far more than its own size (a reflected probability of 4e-6 moved `T`
//! by 3e-3); recording two points a quarter wavelength apart and keeping only
//! the right-moving part `A exp(i k x)` removes it. Sampling `psi(x_R)` at every step
//! makes the time integral a rectangle sum, exact for a signal whose energies
//! lie within `pi hbar / step`; the result is exact once the transmitted wave
//! has passed `x_R`, whether or not an absorber has swallowed it since.

use num_complex::Complex64;

/// The wavenumbers to resolve and what the dispersion says of them.
#[derive(Debug, Clone, PartialEq)]
pub struct Spectrum {
    /// Two grid points on the free side where the transmitted wave is recorded.
    pub probes: [usize; 2],
    /// Their positions.
    pub positions: [f64; 2],
    /// Indices into the FFT-ordered wavenumbers.
    pub modes: Vec<usize>,
    /// The wavenumber of each mode.
    pub wavenumbers: Vec<f64>,
    /// `E(k)` of each mode (the kinetic energy the stepper uses).
    pub energies: Vec<f64>,
    /// Group velocity `dE/(hbar dk)` of each mode (> 0).
    pub velocities: Vec<f64>,
}

impl Spectrum {
    /// `T(k)` of each mode from the recorded values at both probes
    /// (interleaved, `t_n = n step`, the first pair at t = 0) and the initial
    /// state's FFT `initial_transform`.
    pub fn transmission(
        &self,
        record: &[Complex64],
        initial_transform: &[Complex64],
        step: f64,
        hbar: f64,
        dx: f64,
    ) -> Vec<f64> {
        let samples = record.len() / 2;
        self.transmission_at(record, initial_transform, step, hbar, dx, &[samples])
            .pop()
            .unwrap_or_default()
    }

    /// `T(k)` of each mode from the first `cuts[c]` recorded pairs, for each
    /// (increasing) cut: how `T` settles as the run goes on. A narrow resonance
    /// releases its wave slowly, and `T` from a run cut short still changes.
    pub fn transmission_at(
        &self,
        record: &[Complex64],
        initial_transform: &[Complex64],
        step: f64,
        hbar: f64,
        dx: f64,
        cuts: &[usize],
    ) -> Vec<Vec<f64>> {
        let samples = record.len() / 2;
        let mut out = vec![Vec::with_capacity(self.modes.len()); cuts.len()];
        for m in 0..self.modes.len() {
            let energy = self.energies[m];
            let rotation = Complex64::from_polar(1.0, energy * step / hbar);
            let mut phasor = Complex64::new(1.0, 0.0);
            let mut sums = [Complex64::new(0.0, 0.0); 2];
            let mut cut = 0;
            for n in 0..=samples {
                while cut < cuts.len() && cuts[cut].min(samples) == n {
                    out[cut].push(self.right_moving(m, sums, initial_transform, step, dx));
                    cut += 1;
                }
                if n == samples {
                    break;
                }
                sums[0] += phasor * record[2 * n];
                sums[1] += phasor * record[2 * n + 1];
                phasor *= rotation;
                if n % 256 == 255 {
                    // Rounding would slowly change |phasor|; recompute it exactly.
                    phasor = Complex64::from_polar(1.0, energy * step * (n + 1) as f64 / hbar);
                }
            }
        }
        out
    }

    /// `T` of mode `m` from the time transforms `sums` at the two probes.
    fn right_moving(
        &self,
        m: usize,
        sums: [Complex64; 2],
        initial_transform: &[Complex64],
        step: f64,
        dx: f64,
    ) -> f64 {
        // F_i = A e^{i k x_i} + B e^{-i k x_i}: solve for the right-moving A.
        let k = self.wavenumbers[m];
        let [x1, x2] = self.positions;
        let determinant = Complex64::new(0.0, 2.0 * (k * (x1 - x2)).sin());
        let right = (sums[0] * Complex64::from_polar(1.0, -k * x2)
            - sums[1] * Complex64::from_polar(1.0, -k * x1))
            / determinant
            * step;
        let incident = initial_transform[self.modes[m]].norm_sqr() * dx * dx;
        right.norm_sqr() * self.velocities[m] * self.velocities[m] / incident
    }
}
