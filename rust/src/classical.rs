//! Classical trajectories in the same potential as the quantum run.
//!
//! Hamilton's equations for `H = T(p) + V(x)` with `V` the piecewise-linear
//! interpolant of the grid potential (periodic). In the continuum the force is
//! constant inside each cell, so the motion is integrated exactly, cell by
//! cell (a parabola to the next cell edge or turning point): energy is
//! conserved to rounding even at a barrier's sharp edge, where a leapfrog
//! loses up to a quarter of the jump per crossing. On the lattice
//! (`T = -2J cos(pa/hbar)`) the Stormer-Verlet leapfrog (symplectic, order 2)
//! runs with a fixed sub-step short enough that the particle crosses at most a
//! quarter of a cell per sub-step. A particle that enters an absorbing layer
//! is absorbed there and stops.

use crate::dispersion::Dispersion;

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
    /// The kinetic energy (with the grid spacing `dx` for a lattice).
    pub dispersion: Dispersion,
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
        let energy =
            self.dispersion.energy(particle.momentum, self.dx) + self.value(particle.position);
        let speed = self
            .dispersion
            .top_speed(energy - floor, self.dx)
            .max(self.dispersion.velocity(particle.momentum, self.dx).abs());
        ((speed * step / (0.25 * self.dx)).ceil() as usize).clamp(1, 1 << 20)
    }

    /// Evolve `particle` for `duration`: exactly in the continuum, by `substeps`
    /// leapfrog sub-steps on the lattice.
    pub fn evolve(&self, particle: &mut Particle, duration: f64, substeps: usize) {
        match self.dispersion {
            Dispersion::Continuum { mass, .. } => self.exact(particle, duration, mass),
            Dispersion::Lattice { .. } => {
                self.advance(particle, duration / substeps as f64, substeps)
            }
        }
    }

    /// Exact motion under the cell-wise constant force, for `T = p^2/2m`.
    fn exact(&self, particle: &mut Particle, duration: f64, mass: f64) {
        let n = self.potential.len() as i64;
        let u = (particle.position - self.start) / self.dx;
        let mut cell = u.floor() as i64;
        let mut offset = (u - cell as f64) * self.dx;
        let mut momentum = particle.momentum;
        let mut remaining = duration;
        // A crossing costs a few flops; the bound only guards against a stuck loop.
        let mut crossings_left = 1usize << 32;
        while remaining > 0.0 && crossings_left > 0 && particle.absorbed == 0 {
            crossings_left -= 1;
            let velocity = momentum / mass;
            if offset <= 0.0 {
                remaining = self.skip_kink_periods(cell, velocity, mass, remaining);
            }
            // On an edge moving left (or at rest, pushed left), the particle is in the cell below.
            if offset <= 0.0 {
                let pushed_left =
                    velocity < 0.0 || (velocity == 0.0 && self.cell_force(cell) < 0.0);
                if pushed_left {
                    cell -= 1;
                    offset = self.dx;
                }
            }
            let force = self.cell_force(cell);
            let acceleration = force / mass;
            let exit = [
                first_arrival(offset, velocity, acceleration, 0.0),
                first_arrival(offset, velocity, acceleration, self.dx),
            ];
            let (time, edge) = match (exit[0], exit[1]) {
                (Some(a), Some(b)) if a <= b => (a, 0.0),
                (Some(a), None) => (a, 0.0),
                (_, Some(b)) => (b, self.dx),
                (None, None) => (f64::INFINITY, 0.0),
            };
            if time >= remaining {
                offset =
                    (offset + velocity * remaining + 0.5 * acceleration * remaining * remaining)
                        .clamp(0.0, self.dx);
                momentum += force * remaining;
                remaining = 0.0;
            } else {
                momentum += force * time;
                remaining -= time;
                if edge > 0.0 {
                    cell += 1;
                }
                offset = 0.0;
            }
            let wrapped = cell.rem_euclid(n) as usize;
            particle.absorbed = if wrapped < self.left_layer_end {
                -1
            } else if wrapped >= self.right_layer_start {
                1
            } else {
                0
            };
        }
        let position = self.start + cell as f64 * self.dx + offset;
        particle.position = self.wrap(position);
        particle.momentum = momentum;
    }

    /// On the edge below `cell`, at a minimum of the interpolant (a kink: pushed up from
    /// below and down from above), a slow particle oscillates about the edge with the exact
    /// period `2 m |v| (1/F_below + 1/|F_above|)` as long as its excursion stays inside the
    /// two cells. Whole periods change nothing, so only the rest of `remaining` is left to
    /// integrate: without this a particle at rest to rounding at the bottom of a well (a
    /// ground state's mean) crosses the edge once per ~|v| of time, unboundedly often.
    fn skip_kink_periods(&self, cell: i64, velocity: f64, mass: f64, remaining: f64) -> f64 {
        let below = self.cell_force(cell - 1);
        let above = -self.cell_force(cell);
        if !(below > 0.0 && above > 0.0) {
            return remaining;
        }
        let speed = velocity.abs();
        let reach = 0.5 * mass * speed * speed / below.min(above);
        if reach >= self.dx {
            return remaining;
        }
        let period = 2.0 * mass * speed * (1.0 / below + 1.0 / above);
        if period > 0.0 {
            remaining % period
        } else {
            // At rest on the bottom edge: it stays.
            0.0
        }
    }

    fn cell_force(&self, cell: i64) -> f64 {
        let n = self.potential.len() as i64;
        let j = cell.rem_euclid(n) as usize;
        let next = self.potential[(j + 1) % self.potential.len()];
        -(next - self.potential[j]) / self.dx
    }

    /// Advance by `steps` sub-steps of length `dt` (leapfrog: kick, drift, kick).
    pub fn advance(&self, particle: &mut Particle, dt: f64, steps: usize) {
        for _ in 0..steps {
            if particle.absorbed != 0 {
                return;
            }
            particle.momentum += 0.5 * dt * self.force(particle.position);
            particle.position = self.wrap(
                particle.position + dt * self.dispersion.velocity(particle.momentum, self.dx),
            );
            particle.momentum += 0.5 * dt * self.force(particle.position);
            particle.absorbed = self.layer(particle.position);
        }
    }

    /// Total energy of a particle.
    pub fn energy(&self, particle: &Particle) -> f64 {
        self.dispersion.energy(particle.momentum, self.dx) + self.value(particle.position)
    }
}

/// The first time `t > 0` at which `offset + v t + a t^2 / 2` reaches `edge`
/// (moving onto it from inside the cell), if it ever does.
fn first_arrival(offset: f64, velocity: f64, acceleration: f64, edge: f64) -> Option<f64> {
    let distance = edge - offset;
    if distance == 0.0 {
        // Sitting on this edge: only a return to it counts.
        let back = -2.0 * velocity / acceleration;
        return (acceleration != 0.0 && back > 0.0).then_some(back);
    }
    if acceleration == 0.0 {
        let time = distance / velocity;
        return (velocity != 0.0 && time > 0.0).then_some(time);
    }
    // (a/2) t^2 + v t - d = 0, roots by the cancellation-free form.
    let discriminant = velocity * velocity + 2.0 * acceleration * distance;
    if discriminant < 0.0 {
        return None;
    }
    let sign = if velocity >= 0.0 { 1.0 } else { -1.0 };
    let q = -0.5 * (velocity + sign * discriminant.sqrt());
    let roots = [q / (0.5 * acceleration), -distance / q];
    roots
        .into_iter()
        .filter(|t| t.is_finite() && *t > 0.0)
        .reduce(f64::min)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A continuum particle of unit mass, no absorbing layers.
    fn free_landscape(potential: &[f64], start: f64, dx: f64) -> Landscape<'_> {
        Landscape {
            potential,
            start,
            dx,
            left_layer_end: 0,
            right_layer_start: potential.len(),
            dispersion: Dispersion::Continuum {
                hbar: 1.0,
                mass: 1.0,
            },
        }
    }

    fn harmonic(points: usize) -> Vec<f64> {
        (0..points)
            .map(|j| 0.5 * (-10.0 + j as f64 * 20.0 / points as f64).powi(2))
            .collect()
    }

    #[test]
    fn harmonic_oscillation_returns_after_one_period() {
        // x(t) = x0 cos t for V = x^2/2, m = 1 (any mechanics textbook).
        let potential = harmonic(2048);
        let landscape = free_landscape(&potential, -10.0, 20.0 / 2048.0);
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
    fn exact_flow_conserves_energy_across_a_sharp_barrier() {
        let points = 1000;
        let potential: Vec<f64> = (0..points)
            .map(|j| if (500..510).contains(&j) { 1.0 } else { 0.0 })
            .collect();
        let landscape = free_landscape(&potential, 0.0, 0.1);
        for momentum in [1.3, 1.5, 3.0f64.sqrt(), -1.7] {
            let mut particle = Particle {
                position: 30.0,
                momentum,
                absorbed: 0,
            };
            for _ in 0..40 {
                landscape.evolve(&mut particle, 1.0, 1);
            }
            // E = p^2/2 is conserved; far from the barrier |p| is back to its start.
            assert!(
                (particle.momentum.abs() - momentum.abs()).abs() < 1e-12,
                "{momentum}: {particle:?}"
            );
        }
    }

    #[test]
    fn a_particle_resting_at_the_bottom_of_a_well_finishes_at_once() {
        // The grid harmonic has a grid point (a kink minimum of the interpolant) at x = 0.
        let potential = harmonic(256);
        let dx = 20.0 / 256.0;
        let landscape = free_landscape(&potential, -10.0, dx);
        for momentum in [0.0, 1e-17, -3e-16, 1e-3, -2e-2] {
            let mut one = Particle {
                position: 0.0,
                momentum,
                absorbed: 0,
            };
            let energy = landscape.energy(&one);
            landscape.evolve(&mut one, 2.0, 1);
            // Exact flow in pieces gives the same point (each piece starting off the edge
            // integrates the crossings one by one); energy is conserved.
            let mut pieces = Particle {
                position: 0.0,
                momentum,
                absorbed: 0,
            };
            for _ in 0..1000 {
                landscape.evolve(&mut pieces, 2e-3, 1);
            }
            assert!(
                (one.position - pieces.position).abs() < 1e-9,
                "{momentum}: {one:?} {pieces:?}"
            );
            assert!(
                (landscape.energy(&one) - energy).abs() < 1e-12,
                "{momentum}: {one:?}"
            );
            // The motion in the kink |F| = dx/2 on both sides (m = 1), in closed form: up and
            // back in one cell in 2|v|/F, then the same in the other (common practice).
            let (force, speed) = (dx / 2.0, momentum.abs());
            let half = 2.0 * speed / force;
            let tau = if half > 0.0 { 2.0 % (2.0 * half) } else { 0.0 };
            let lobe = |t: f64| speed * t - 0.5 * force * t * t;
            let exact = if tau < half {
                lobe(tau)
            } else {
                -lobe(tau - half)
            };
            let exact = exact * momentum.signum();
            assert!(
                (one.position - exact).abs() < 1e-12,
                "{momentum}: {one:?} vs {exact}"
            );
        }
    }

    #[test]
    fn exact_flow_matches_the_harmonic_orbit() {
        // x(t) = x0 cos t for V = x^2/2 sampled on a fine grid (any mechanics textbook).
        let potential = harmonic(4096);
        let landscape = free_landscape(&potential, -10.0, 20.0 / 4096.0);
        let mut particle = Particle {
            position: 2.0,
            momentum: 0.0,
            absorbed: 0,
        };
        landscape.evolve(&mut particle, 1.0, 1);
        assert!(
            (particle.position - 2.0 * 1f64.cos()).abs() < 1e-4,
            "{particle:?}"
        );
        landscape.evolve(&mut particle, 2.0 * std::f64::consts::PI - 1.0, 1);
        assert!((particle.position - 2.0).abs() < 1e-4, "{particle:?}");
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
            dispersion: Dispersion::Continuum {
                hbar: 1.0,
                mass: 1.0,
            },
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
