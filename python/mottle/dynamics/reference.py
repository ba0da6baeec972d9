"""A pure-numpy split-step propagator: the oracle of the tests and the baseline of the benchmarks.

It is written to be read, not to be fast, and follows the Rust core's
conventions exactly, so that the two agree to rounding (the tests hold them to
1e-10):

* ``psi`` is sampled at the grid points with ``sum |psi|**2 dx = 1``.
* One step of length ``h`` of a splitting with potential fractions ``a_0..a_m``
  and kinetic fractions ``b_0..b_{m-1}`` is
  ``V(a_m h) K(b_{m-1} h) ... V(a_1 h) K(b_0 h) V(a_0 h)`` (rightmost first), with
  ``K(f h) psi = ifft(exp(-i T(k) f h / hbar) fft(psi))`` and
  ``V(f h) psi = exp(-i (V + g |psi|**2) f h / hbar) exp(-W f_abs h / hbar) psi``.
  Between two steps ``V(a_m h) V(a_0 h)`` is applied as the single factor
  ``V((a_m + a_0) h)``; a run starts and, at every snapshot, pauses with the
  unmerged factors.
* The absorbing potential ``-i W`` acts only in the potential factors of positive
  fraction, with ``f_abs = max(f, 0) / (sum of the positive a_i)`` so that the
  layers absorb for exactly one step per step (a negative fraction, as in
  Yoshida's and Blanes-Moan's schemes, would otherwise amplify in the layers).
* ``g |psi|**2`` uses ``|psi|`` at the start of each potential factor (exact for
  the real part, whose factor keeps ``|psi|``).
* The probability removed on each side, ``sum |psi|**2 (1 - exp(-2 W f_abs h/hbar)) dx``
  over that side's layer, is added up just before each potential factor
  multiplies, so ``norm + absorbed_left + absorbed_right = 1`` to rounding.
* Expectation values are those of the probability still in the box, normalized
  by it; ``<p>`` and ``<T>`` come from ``|fft(psi)|**2``.
* Time-dependent terms (:class:`mottle.Kicked`, :class:`mottle.Modulated`,
  :class:`mottle.Switched`): a kick at step boundary ``s`` multiplies by
  ``exp(-i V / hbar)`` at the start of step ``s`` (after that boundary's
  potential factor), so kicks fall in ``[0, duration)`` (a modulated kick by
  ``exp(-i e(s h) V / hbar)``); a term ``e(t) V(x)``
  joins each potential factor with ``-(h/hbar) sum fraction e(member, time)``,
  the time of factor ``i`` of step ``s`` being ``s h + (b_0 + .. + b_{i-1}) h``
  and a merged factor being the closing part of step ``s - 1`` plus the
  opening part of step ``s`` (a switched term is on in steps ``on .. off``).
* A twisted boundary ``Grid(quasimomentum=beta)`` evolves the periodic part
  with the kinetic table at ``k + 2 pi beta / L``. The reference takes fixed
  phases and quasimomenta only (drawn ones are drawn by the core).

The classical fields of the returned :class:`mottle.Run` come from the same
integrator as the core's (a loop in plain Python): Hamilton's equations in
the piecewise-linear interpolant of the grid potential, solved exactly cell
by cell in the continuum and by the Stormer-Verlet leapfrog on the lattice
(sub-steps that cross at most a quarter of a cell); a particle that enters
an absorbing layer stops there and reads NaN.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError
from ..specs.models import Continuum
from ..specs.system import System
from .propagate import Run, check_system, initial_phase_space, prepare_single_run

if TYPE_CHECKING:
    from .reference_nd import BoxRun


def _strang() -> tuple[list[float], list[float]]:
    # Strang, SIAM J. Numer. Anal. 5, 506 (1968): V(h/2) K(h) V(h/2).
    return [0.5, 0.5], [1.0]


def _yoshida() -> tuple[list[float], list[float]]:
    # Yoshida, Phys. Lett. A 150, 262 (1990): Strang steps of w1 h, w0 h, w1 h.
    cube_root = 2.0 ** (1.0 / 3.0)
    w1 = 1.0 / (2.0 - cube_root)
    w0 = -cube_root / (2.0 - cube_root)
    return [w1 / 2.0, (w1 + w0) / 2.0, (w0 + w1) / 2.0, w1 / 2.0], [w1, w0, w1]


def _blanes_moan() -> tuple[list[float], list[float]]:
    # Blanes & Moan, J. Comput. Appl. Math. 142, 313 (2002), the 6-stage order-4
    # method, potential outermost; the same numbers as rust/src/splitting.rs.
    a1 = 0.0792036964311957
    a2 = 0.353172906049774
    a3 = -0.0420650803577195
    a4 = 1.0 - 2.0 * (a1 + a2 + a3)
    b1 = 0.209515106613362
    b2 = -0.143851773179818
    b3 = 0.5 - (b1 + b2)
    return [a1, a2, a3, a4, a3, a2, a1], [b1, b2, b3, b3, b2, b1]


SPLITTING_COEFFICIENTS = {"strang": _strang, "yoshida": _yoshida, "blanes-moan": _blanes_moan}


def coefficients(splitting: str) -> tuple[list[float], list[float]]:
    """``(a, b)``: potential fractions ``a_0..a_m`` and kinetic fractions ``b_0..b_{m-1}`` of a step."""
    _checks.choice("splitting", splitting, tuple(SPLITTING_COEFFICIENTS))
    return SPLITTING_COEFFICIENTS[splitting]()


def _switch(on: int, off: int | None) -> Callable[[int, float], float]:
    """``e = 1`` during the main run's steps ``on .. off``, else 0."""

    def strength(member: int, time: float) -> float:
        return 1.0 if on <= member and (off is None or member < off) else 0.0

    return strength


def _modulation(depth: float, frequency: float, phase: float) -> Callable[[int, float], float]:
    """``e = 1 + depth cos(frequency t + phase)``."""

    def strength(member: int, time: float) -> float:
        return 1.0 + depth * math.cos(frequency * time + phase)

    return strength


class _Propagator:
    """The state of one run: wavefunction, tables, and the probability absorbed so far."""

    def __init__(self, system: System, potential: np.ndarray, step: float, splitting: str) -> None:
        grid = system.grid
        self.hbar = system.hbar
        self.step = step
        self.dx = grid.dx
        self.nonlinearity = system.nonlinearity
        self.potential = np.asarray(potential, dtype=float)
        self.kinetic = system.kinetic_table()
        self.absorption = system.absorption()
        self.left_end, self.right_start = system.layer_bounds()
        self.a, self.b = coefficients(splitting)
        positive_total = sum(max(f, 0.0) for f in self.a)
        self.absorbing = [max(f, 0.0) / positive_total for f in self.a]
        self.absorbed_left = 0.0
        self.absorbed_right = 0.0
        self._kinetic_factors: dict[float, np.ndarray] = {}
        self._potential_factors: dict[tuple[float, float], tuple[np.ndarray, np.ndarray, float]] = {}
        self.shift = 0.0
        if grid.twisted:
            self.shift = grid.shift()
            self.kinetic = np.asarray(
                system.model.kinetic(np.asarray(grid.k) + self.shift, grid.dx), dtype=float
            )
        # (V / hbar, first, every, strength at a kick's time or None)
        self.kicks: list[tuple[np.ndarray, int, int, Callable[[int, float], float] | None]] = []
        self.terms: list[tuple[np.ndarray, Callable[[int, float], float]]] = []
        self.origin = (0, 0.0)  # main-run step and time at this propagator's first step
        self.done = 0

    def drive(self, system: System, main_step: float, main_steps: int) -> None:
        """Take the system's time-dependent terms, with kicks and switches on the main run's steps."""
        from .drive import KickSteps, SwitchSteps, drive_steps

        grid, model = system.grid, system.model
        for item in drive_steps(system, main_step, main_steps):
            if isinstance(item, KickSteps):
                modulation = item.term.modulation
                strength = None
                if modulation is not None:
                    strength = _modulation(modulation.depth, modulation.frequency, float(modulation.phase))
                self.kicks.append(
                    (item.term.profile(grid, model) / self.hbar, item.first, item.every, strength)
                )
            elif isinstance(item, SwitchSteps):
                self.terms.append((item.term.profile(grid, model), _switch(item.on, item.off)))
            else:
                envelope = _modulation(item.depth, item.frequency, float(item.phase))
                self.terms.append((item.profile(grid, model), envelope))

    def apply_drive(self, psi: np.ndarray, parts) -> np.ndarray:
        """Multiply by ``exp(-i (h/hbar) sum_j [sum_parts fraction e_j(member, time)] V_j)``."""
        angle = np.zeros(psi.size)
        for values, strength in self.terms:
            angle -= self.step / self.hbar * sum(f * strength(s, t) for f, s, t in parts) * values
        return psi * np.exp(1j * angle) if self.terms else psi

    def kick(self, psi: np.ndarray, member: int, time: float) -> np.ndarray:
        for angle, first, every, strength in self.kicks:
            if member >= first and (member - first) % every == 0:
                scale = 1.0 if strength is None else strength(member, time)
                psi = psi * np.exp(-1j * scale * angle)
        return psi

    def kinetic_factor(self, fraction: float) -> np.ndarray:
        if fraction not in self._kinetic_factors:
            self._kinetic_factors[fraction] = np.exp(-1j * self.kinetic * fraction * self.step / self.hbar)
        return self._kinetic_factors[fraction]

    def potential_factor(self, fraction: float, absorbing: float) -> tuple[np.ndarray, np.ndarray, float]:
        """The factor ``exp(-i V f h/hbar) exp(-W f_abs h/hbar)``, the layers' loss
        ``1 - exp(-2 W f_abs h/hbar)`` and the nonlinear angle ``-g f h/hbar``."""
        key = (fraction, absorbing)
        if key not in self._potential_factors:
            h = self.step / self.hbar
            factor = np.exp(-absorbing * h * self.absorption) * np.exp(-1j * fraction * h * self.potential)
            loss = -np.expm1(-2.0 * absorbing * h * self.absorption)
            self._potential_factors[key] = (factor, loss, -self.nonlinearity * fraction * h)
        return self._potential_factors[key]

    def apply_potential(self, psi: np.ndarray, fraction: float, absorbing: float) -> np.ndarray:
        factor, loss, nonlinear_angle = self.potential_factor(fraction, absorbing)
        density = np.abs(psi) ** 2
        # What the layers remove is counted before the factor acts, from the same |psi|.
        left, right = slice(0, self.left_end), slice(self.right_start, None)
        self.absorbed_left += float(np.sum(density[left] * loss[left])) * self.dx
        self.absorbed_right += float(np.sum(density[right] * loss[right])) * self.dx
        psi = psi * factor
        if nonlinear_angle != 0.0:
            psi = psi * np.exp(1j * nonlinear_angle * density)
        return psi

    def apply_kinetic(self, psi: np.ndarray, fraction: float) -> np.ndarray:
        return np.fft.ifft(self.kinetic_factor(fraction) * np.fft.fft(psi))

    def advance(self, psi: np.ndarray, steps: int) -> np.ndarray:
        """``steps`` whole steps, from a paused state to a paused state."""
        a, b, absorbing = self.a, self.b, self.absorbing
        m, h = len(b), self.step
        for step in range(steps):
            member = self.origin[0] + self.done
            start = self.origin[1] + self.done * h
            for stage in range(m):
                if stage == 0 and step > 0:
                    # The closing V(a_m h) of the previous step merged with this step's V(a_0 h).
                    psi = self.apply_potential(psi, a[m] + a[0], absorbing[m] + absorbing[0])
                    psi = self.apply_drive(psi, [(a[m], member - 1, start), (a[0], member, start)])
                else:
                    psi = self.apply_potential(psi, a[stage], absorbing[stage])
                    psi = self.apply_drive(psi, [(a[stage], member, start + sum(b[:stage]) * h)])
                if stage == 0:
                    psi = self.kick(psi, member, start)
                psi = self.apply_kinetic(psi, b[stage])
            self.done += 1
        if steps > 0:
            psi = self.apply_potential(psi, a[m], absorbing[m])
            psi = self.apply_drive(
                psi, [(a[m], self.origin[0] + self.done - 1, self.origin[1] + self.done * h)]
            )
        return psi

    def observe(self, psi: np.ndarray, x: np.ndarray, k: np.ndarray, bounds) -> dict:
        """Norm and expectation values of the probability in the box, normalized by it."""
        density = np.abs(psi) ** 2
        in_box = float(np.sum(density))
        spectrum = np.abs(np.fft.fft(psi)) ** 2
        in_spectrum = float(np.sum(spectrum))
        # <g|psi|**2 / 2>: the interaction energy of the cubic term, per unit probability.
        interaction = 0.5 * self.nonlinearity * float(np.sum(density**2))
        seen = {
            "norm": in_box * self.dx,
            "position": float(np.sum(density * x)) / in_box,
            "position_squared": float(np.sum(density * x**2)) / in_box,
            "momentum": self.hbar * float(np.sum(spectrum * (k + self.shift))) / in_spectrum,
            "momentum_squared": self.hbar**2 * float(np.sum(spectrum * (k + self.shift) ** 2)) / in_spectrum,
            "energy": float(np.sum(spectrum * self.kinetic)) / in_spectrum
            + (float(np.sum(density * self.potential)) + interaction) / in_box,
            "absorbed_left": self.absorbed_left,
            "absorbed_right": self.absorbed_right,
            "participation": float(np.sum(density**2)) * self.dx / (in_box * self.dx) ** 2,
            "momentum_density": spectrum * self.dx**2 / (2.0 * math.pi),
            "reflection": math.nan,
            "transmission": math.nan,
        }
        if bounds is not None:
            left_end, right_start = bounds
            seen["reflection"] = float(np.sum(density[:left_end])) * self.dx + self.absorbed_left
            seen["transmission"] = float(np.sum(density[right_start:])) * self.dx + self.absorbed_right
        return seen


class _Particle:
    """A classical particle in the piecewise-linear interpolant of the grid potential (periodic)."""

    def __init__(self, system: System, potential: np.ndarray, position: float, momentum: float) -> None:
        grid, model = system.grid, system.model
        self.potential = np.asarray(potential, dtype=float)
        self.start, self.dx, self.points = grid.start, grid.dx, grid.points
        self.left_end, self.right_start = system.layer_bounds()
        self.position, self.momentum, self.absorbed = position, momentum, False
        self.mass = model.mass if isinstance(model, Continuum) else None
        if isinstance(model, Continuum):
            mass = model.mass
            self.velocity = lambda p: p / mass
            self.kinetic_energy = lambda p: p * p / (2.0 * mass)
            self.top_speed = lambda energy, floor: math.sqrt(2.0 * max(energy - floor, 0.0) / mass)
        else:
            hopping, a, hbar = model.hopping, grid.dx, model.hbar
            self.velocity = lambda p: 2.0 * hopping * a / hbar * math.sin(p * a / hbar)
            self.kinetic_energy = lambda p: -2.0 * hopping * math.cos(p * a / hbar)
            self.top_speed = lambda energy, floor: 2.0 * hopping * a / hbar

    def cell(self, position: float) -> tuple[int, float]:
        u = (position - self.start) / self.dx
        floor = math.floor(u)
        return int(floor) % self.points, u - floor

    def value(self, position: float) -> float:
        j, t = self.cell(position)
        return self.potential[j] * (1.0 - t) + self.potential[(j + 1) % self.points] * t

    def force(self, position: float) -> float:
        j, _ = self.cell(position)
        return -(self.potential[(j + 1) % self.points] - self.potential[j]) / self.dx

    def substeps(self, step: float) -> int:
        """Sub-steps per step, so that even at its top speed the particle crosses <= 1/4 cell each."""
        energy = self.kinetic_energy(self.momentum) + self.value(self.position)
        speed = max(self.top_speed(energy, float(np.min(self.potential))), abs(self.velocity(self.momentum)))
        return min(max(math.ceil(speed * step / (0.25 * self.dx)), 1), 1 << 20)

    def evolve(self, duration: float, substeps: int) -> None:
        """Exact cell-by-cell motion in the continuum; ``substeps`` leapfrog steps on the lattice."""
        if self.mass is None:
            self.advance(duration / substeps, substeps)
        else:
            self.exact(duration)

    def cell_force(self, cell: int) -> float:
        j = cell % self.points
        return -(self.potential[(j + 1) % self.points] - self.potential[j]) / self.dx

    def exact(self, duration: float) -> None:
        """The force is constant in a cell: follow the parabola to the next edge, cell after cell."""
        u = (self.position - self.start) / self.dx
        cell = math.floor(u)
        offset = (u - cell) * self.dx
        momentum, remaining, mass = self.momentum, duration, self.mass
        assert mass is not None  # the parabolic steps are the continuum's
        while remaining > 0.0 and not self.absorbed:
            velocity = momentum / mass
            if offset <= 0.0 and (velocity < 0.0 or (velocity == 0.0 and self.cell_force(cell) < 0.0)):
                cell, offset = cell - 1, self.dx
            force = self.cell_force(cell)
            acceleration = force / mass
            exits = [
                (t, edge)
                for edge in (0.0, self.dx)
                if (t := _first_arrival(offset, velocity, acceleration, edge)) is not None
            ]
            time, edge = min(exits) if exits else (math.inf, 0.0)
            if time >= remaining:
                offset = offset + velocity * remaining + 0.5 * acceleration * remaining * remaining
                offset = min(max(offset, 0.0), self.dx)
                momentum += force * remaining
                remaining = 0.0
            else:
                momentum += force * time
                remaining -= time
                cell += 1 if edge > 0.0 else 0
                offset = 0.0
            wrapped = cell % self.points
            self.absorbed = wrapped < self.left_end or wrapped >= self.right_start
        length = self.points * self.dx
        self.position = self.start + (self.start + cell * self.dx + offset - self.start) % length
        self.momentum = momentum

    def advance(self, dt: float, count: int) -> None:
        """``count`` leapfrog sub-steps of ``dt``: kick, drift, kick."""
        length = self.points * self.dx
        for _ in range(count):
            if self.absorbed:
                return
            self.momentum += 0.5 * dt * self.force(self.position)
            moved = self.position + dt * self.velocity(self.momentum)
            self.position = self.start + (moved - self.start) % length
            self.momentum += 0.5 * dt * self.force(self.position)
            j, _ = self.cell(self.position)
            self.absorbed = j < self.left_end or j >= self.right_start


def _first_arrival(offset: float, velocity: float, acceleration: float, edge: float) -> float | None:
    """The first t > 0 at which offset + v t + a t**2/2 reaches edge, if ever."""
    distance = edge - offset
    if distance == 0.0:
        back = -2.0 * velocity / acceleration if acceleration != 0.0 else 0.0
        return back if back > 0.0 else None
    if acceleration == 0.0:
        time = distance / velocity if velocity != 0.0 else -1.0
        return time if time > 0.0 else None
    discriminant = velocity * velocity + 2.0 * acceleration * distance
    if discriminant < 0.0:
        return None
    q = -0.5 * (velocity + math.copysign(1.0, velocity if velocity != 0.0 else 1.0) * math.sqrt(discriminant))
    roots = [
        t
        for t in (q / (0.5 * acceleration), -distance / q if q != 0.0 else -1.0)
        if math.isfinite(t) and t > 0.0
    ]
    return min(roots) if roots else None


def propagate(
    system: System,
    packet,
    duration: float,
    step: float,
    order: int = 2,
    snapshots=(),
    detector=None,
    splitting: str | None = None,
    seed: int = 0,
    index: int = 0,
    classical: bool = True,
) -> Run | BoxRun:
    """Propagate ``packet`` in ``system`` like :func:`mottle.propagate`, in plain numpy.

    Same arguments, validation and :class:`mottle.Run` fields as the core's
    (double precision only); see the module docstring for the conventions.

    On a 2D or 3D grid this is :func:`mottle.dynamics.reference_nd.propagate`, which returns a
    :class:`~mottle.dynamics.reference_nd.BoxRun` (no detector, no classical particle there:
    ``detector`` must be None and ``classical`` is ignored).
    """
    if isinstance(system, System) and system.grid.ndim > 1:
        from . import reference_nd

        if detector is not None:
            raise InvalidParameterError(
                f"detector {detector!r}: a detector is 1D only for now (use detector=None on a 2D/3D grid)"
            )
        return reference_nd.propagate(
            system, packet, duration, step, order, snapshots, splitting, seed=seed, index=index
        )
    packet, arguments, potential = prepare_single_run(
        system, packet, duration, step, order, seed, index, snapshots, detector, splitting
    )
    bounds, step, steps, splitting = arguments.bounds, arguments.step, arguments.steps, arguments.splitting
    grid = system.grid
    x = grid.start + np.arange(grid.points) * grid.dx
    k = np.asarray(grid.k)
    _fixed_drive_only(system)
    propagator = _Propagator(system, potential, step, splitting)
    propagator.drive(system, step, steps)
    psi = packet.values(grid).astype(np.complex128)
    particle = None
    from .drive import is_driven

    classical = classical and not is_driven(system)
    if classical:
        particle = _Particle(system, potential, *initial_phase_space(system, packet))
        substeps = particle.substeps(step)

    kept, seen, trajectory = [], [], []
    done = 0
    for pause, offset in zip(arguments.pauses, arguments.offsets, strict=True):
        psi = propagator.advance(psi, pause - done)
        if particle is not None:
            particle.evolve((pause - done) * step, (pause - done) * substeps)
        done = pause
        now, observer = psi, propagator
        if offset > 0.0:
            # Between step boundaries: a copy advanced by one shorter step; the run goes on.
            observer = _Propagator(system, potential, offset, splitting)
            observer.drive(system, step, steps)
            observer.origin = (pause, pause * step)
            observer.absorbed_left, observer.absorbed_right = (
                propagator.absorbed_left,
                propagator.absorbed_right,
            )
            now = observer.advance(psi.copy(), 1)
        if particle is not None:
            moved = copy.copy(particle)
            if offset > 0.0:
                moved.evolve(offset, substeps)
            nan = moved.absorbed
            trajectory.append((math.nan if nan else moved.position, math.nan if nan else moved.momentum))
        kept.append(now.copy())
        seen.append(observer.observe(now, x, k, bounds))
    psi = propagator.advance(psi, steps - done)
    last = propagator.observe(psi, x, k, bounds)

    def column(name: str) -> np.ndarray:
        return np.array([observation[name] for observation in seen], dtype=float)

    classical_path = np.array(trajectory, dtype=float).reshape(len(trajectory), 2)
    return Run(
        times=arguments.times,
        psi=psi,
        snapshots=np.array(kept, dtype=np.complex128).reshape(len(kept), grid.points),
        norm=last["norm"],
        absorbed_left=propagator.absorbed_left,
        absorbed_right=propagator.absorbed_right,
        reflection=last["reflection"] if bounds is not None else None,
        transmission=last["transmission"] if bounds is not None else None,
        position=column("position"),
        position_squared=column("position_squared"),
        momentum=column("momentum"),
        energy=column("energy"),
        norms=column("norm"),
        absorbed_lefts=column("absorbed_left"),
        absorbed_rights=column("absorbed_right"),
        reflections=column("reflection") if bounds is not None else None,
        transmissions=column("transmission") if bounds is not None else None,
        classical_position=classical_path[:, 0] if classical else None,
        classical_momentum=classical_path[:, 1] if classical else None,
        x=grid.x,
        dx=grid.dx,
        step=step,
        participation=column("participation"),
        momentum_density=np.fft.fftshift(
            np.array([o["momentum_density"] for o in seen], dtype=float).reshape(len(seen), grid.points),
            axes=-1,
        ),
        k=np.fft.fftshift(k) + propagator.shift,
        momentum_squared=column("momentum_squared"),
        quasimomentum=float(grid.quasimomentum) if grid.twisted else 0.0,
    )


def _fixed_drive_only(system: System) -> None:
    from ..specs.packets import is_drawn
    from ..specs.potentials import time_dependent_terms

    drawn = [is_drawn(system.grid.quasimomentum)]
    for term in time_dependent_terms(system.potential):
        drawn.append(is_drawn(getattr(term, "phase", 0.0)))
        drawn.append(is_drawn(getattr(term.potential, "phase", 0.0)))
    if any(drawn):
        raise InvalidParameterError(
            "the reference propagator takes fixed phases and quasimomenta only: fix them (the core draws)"
        )


def hamiltonian_matrix(system: System, seed: int = 0, index: int = 0) -> np.ndarray:
    """The discretized Hamiltonian ``H = F^-1 diag(T(k)) F + diag(V) - i diag(W)`` as a dense matrix.

    ``F`` is the discrete Fourier transform, so ``H @ psi`` equals
    ``ifft(T * fft(psi)) + (V - i W) psi``: the generator the split-step scheme
    approximates, ``psi(t) = exp(-i H t / hbar) psi(0)``. Dense, so for small
    grids only (at most 4096 points); linear systems only.
    """
    check_system(system)
    if system.nonlinearity != 0.0:
        raise InvalidParameterError(
            f"a system with nonlinearity {system.nonlinearity} has no fixed Hamiltonian matrix: "
            "use nonlinearity=0"
        )
    points = system.grid.points
    if points > 4096:
        raise InvalidParameterError(f"points={points} is too many for a dense Hamiltonian: use at most 4096")
    from .realize import realize

    identity = np.eye(points)
    kinetic = np.fft.ifft(system.kinetic_table()[:, None] * np.fft.fft(identity, axis=0), axis=0)
    return kinetic + np.diag(realize(system, seed, index) - 1j * system.absorption())
