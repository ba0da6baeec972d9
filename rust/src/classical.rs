//! Classical trajectories in the same potential as the quantum run.
//!
//! Hamilton's equations for `H = T(p) + V(x)` with `V` the piecewise-linear
//! interpolant of the grid potential (periodic), integrated by the
//! Stormer-Verlet leapfrog (symplectic, order 2) with a fixed sub-step short
//! enough that the particle crosses at most a quarter of a cell per sub-step,
//! so that a barrier one cell wide is felt. A particle that enters an
//! absorbing layer is absorbed there and stops.

/// Kinetic energy of the classical particle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Kinetic {
    /// `T = p^2 / (2 mass)`.
    Continuum { mass: f64 },
    /// `T = -2 J cos(p a / hbar)`.
    Lattice {
        hopping: f64,
        spacing: f64,
        hbar: f64,
    },
}

impl Kinetic {
    fn velocity(&self, momentum: f64) -> f64 {
        match *self {
            Kinetic::Continuum { mass } => momentum / mass,
            Kinetic::Lattice {
                hopping,
                spacing,
                hbar,
            } => 2.0 * hopping * spacing / hbar * (momentum * spacing / hbar).sin(),
        }
    }

    fn energy(&self, momentum: f64) -> f64 {
        match *self {
            Kinetic::Continuum { mass } => momentum * momentum / (2.0 * mass),
            Kinetic::Lattice {
                hopping,
                spacing,
                hbar,
            } => -2.0 * hopping * (momentum * spacing / hbar).cos(),
        }
    }

    /// The largest speed reachable with total energy `energy` over a potential of minimum `floor`.
    fn top_speed(&self, energy: f64, floor: f64) -> f64 {
        match *self {
            Kinetic::Continuum { mass } => (2.0 * (energy - floor).max(0.0) / mass).sqrt(),
            Kinetic::Lattice {
                hopping,
                spacing,
                hbar,
            } => 2.0 * hopping * spacing / hbar,
        }
    }
}

/// Where a classical particle is.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Particle {
    pub position: f64,
    pub momentum: f64,
    /// -1 absorbed on the left, +1 on the right, 0 still in the box.
    pub absorbed: i8,
}

/// The potential and box a particle moves in.
pub struct Landscape<'a> {
    pub potential: &'a [f64],
    pub start: f64,
    pub dx: f64,
    pub left_layer_end: usize,
    pub right_layer_start: usize,
    pub kinetic: Kinetic,
}

impl Landscape<'_> {
    fn length(&self) -> f64 {
        self.potential.len() as f64 * self.dx
    }

    fn cell(&self, position: f64) -> (usize, f64) {
        let n = self.potential.len();
        let u = (position - self.start) / self.dx;
        let floor = u.floor();
        let index = (floor as i64).rem_euclid(n as i64) as usize;
        (index, u - floor)
    }

    /// The interpolated potential at `position`.
    pub fn value(&self, position: f64) -> f64 {
        let (j, t) = self.cell(position);
        let next = self.potential[(j + 1) % self.potential.len()];
        self.potential[j] * (1.0 - t) + next * t
    }

    fn force(&self, position: f64) -> f64 {
        let (j, _) = self.cell(position);
        let next = self.potential[(j + 1) % self.potential.len()];
        -(next - self.potential[j]) / self.dx
    }

    fn wrap(&self, position: f64) -> f64 {
        self.start + (position - self.start).rem_euclid(self.length())
    }

    fn layer(&self, position: f64) -> i8 {
        let (j, _) = self.cell(position);
        if j < self.left_layer_end {
            -1
        } else if j >= self.right_layer_start {
            1
        } else {
            0
        }
    }

    /// Sub-steps per step of length `step` for a particle starting at `particle`.
    pub fn substeps(&self, particle: &Particle, step: f64) -> usize {
        let floor = self.potential.iter().copied().fold(f64::INFINITY, f64::min);
        let energy = self.kinetic.energy(particle.momentum) + self.value(particle.position);
        let speed = self
            .kinetic
            .top_speed(energy, floor)
            .max(self.kinetic.velocity(particle.momentum).abs());
        ((speed * step / (0.25 * self.dx)).ceil() as usize).clamp(1, 1 << 20)
    }

    /// Advance by `steps` sub-steps of length `dt` (leapfrog: kick, drift, kick).
    pub fn advance(&self, particle: &mut Particle, dt: f64, steps: usize) {
        for _ in 0..steps {
            if particle.absorbed != 0 {
                return;
            }
            particle.momentum += 0.5 * dt * self.force(particle.position);
            particle.position =
                self.wrap(particle.position + dt * self.kinetic.velocity(particle.momentum));
            particle.momentum += 0.5 * dt * self.force(particle.position);
            particle.absorbed = self.layer(particle.position);
        }
    }

    /// Total energy of a particle.
    pub fn energy(&self, particle: &Particle) -> f64 {
        self.kinetic.energy(particle.momentum) + self.value(particle.position)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn harmonic(points: usize) -> Vec<f64> {
        (0..points)
            .map(|j| 0.5 * (-10.0 + j as f64 * 20.0 / points as f64).powi(2))
            .collect()
    }

    #[test]
    fn harmonic_oscillation_returns_after_one_period() {
        // x(t) = x0 cos t for V = x^2/2, m = 1 (any mechanics textbook).
        let potential = harmonic(2048);
        let landscape = Landscape {
            potential: &potential,
            start: -10.0,
            dx: 20.0 / 2048.0,
            left_layer_end: 0,
            right_layer_start: 2048,
            kinetic: Kinetic::Continuum { mass: 1.0 },
        };
        let mut particle = Particle {
            position: 2.0,
            momentum: 0.0,
            absorbed: 0,
        };
        let steps = 20_000;
        let dt = 2.0 * std::f64::consts::PI / steps as f64;
        let energy = landscape.energy(&particle);
        landscape.advance(&mut particle, dt, steps);
        assert!((particle.position - 2.0).abs() < 1e-3, "{particle:?}");
        assert!((landscape.energy(&particle) - energy).abs() < 1e-3 * energy);
    }

    #[test]
    fn a_barrier_reflects_below_its_top_and_passes_above() {
        let points = 1000;
        let dx = 0.1;
        let potential: Vec<f64> = (0..points)
            .map(|j| if (500..510).contains(&j) { 1.0 } else { 0.0 })
            .collect();
        let landscape = Landscape {
            potential: &potential,
            start: 0.0,
            dx,
            left_layer_end: 0,
            right_layer_start: points,
            kinetic: Kinetic::Continuum { mass: 1.0 },
        };
        for (momentum, passes) in [(1.3, false), (1.5, true)] {
            let mut particle = Particle {
                position: 30.0,
                momentum,
                absorbed: 0,
            };
            let dt = 0.25 * dx / momentum;
            landscape.advance(&mut particle, dt, (30.0 / (momentum * dt)) as usize);
            assert_eq!(
                particle.position > 51.0,
                passes,
                "p = {momentum}: {particle:?}"
            );
        }
    }
}
