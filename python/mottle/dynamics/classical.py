"""Classical particles beside the quantum packet: the same potential, the packet's Wigner distribution.

For the minimum-uncertainty Gaussian packet of rms width ``s`` (centre x0,
wavenumber k0) the Wigner function is positive and factorizes:
``x ~ N(x0, s**2)`` and ``p ~ N(hbar k0, (hbar/(2 s))**2)``, independent. Each
particle is moved by Hamilton's equations in the realization's potential
(piecewise-linear between grid points, periodic box, absorbed on entering an
absorbing layer) with the symplectic leapfrog of the quantum runs' classical
trajectory; every particle shares one sub-step, short enough that the
fastest crosses at most a quarter of a cell per sub-step. What the classical
ensemble lacks is exactly the quantum effects: tunnelling, over-barrier
reflection, interference and localization.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _checks, _core, _requests
from ..analysis.statistics import Stat
from ..errors import InvalidParameterError, InvalidTypeError
from ..specs.grid import _memory_bytes
from ..specs.packets import GaussianPacket
from ..specs.system import System
from .propagate import Run, check_system, default_detector, propagate, run_arguments
from .realize import realize

# Bytes per particle: the core's phase-space points (24) and the arrays returned (17).
_BYTES_PER_PARTICLE = 41


@dataclass(frozen=True, eq=False)
class ClassicalEnsemble:
    """Classical particles sampled from a packet's Wigner distribution, after the run.

    ``position``, ``momentum`` and ``absorbed`` (-1 left layer, +1 right, 0 in
    the box) per particle at the end; a particle's position and momentum are
    where it entered a layer if it was absorbed. ``density[s]`` at
    ``times[s]`` is the particles' density per unit length at the grid points
    ``x`` (histogram on the grid, ``sum density * dx`` = fraction still in the
    box), the counterpart of ``|psi|**2``. ``transmission`` and ``reflection``
    are :class:`Stat` records of the indicator per particle (mean = fraction,
    binomial standard error), with the quantum runs' detector:
    ``R = P(x < left) + absorbed_left``, ``T = P(x > right) + absorbed_right``
    (``None`` without a detector). ``positions[s]``, ``momenta[s]`` and ``absorbed_at[s]``
    are every particle at ``times[s]`` (``snapshots x particles``; an absorbed particle keeps
    where it entered its layer), and ``step`` is the step used (see :func:`mottle.propagate`).
    """

    times: np.ndarray
    x: np.ndarray
    position: np.ndarray
    momentum: np.ndarray
    absorbed: np.ndarray
    density: np.ndarray
    detector: tuple[float, float] | None
    substeps: int
    step: float
    positions: np.ndarray
    momenta: np.ndarray
    absorbed_at: np.ndarray

    @property
    def count(self) -> int:
        return int(self.position.size)

    def _fraction(self, chosen: np.ndarray) -> Stat:
        return Stat.of(chosen.astype(float))

    @property
    def transmission(self) -> Stat | None:
        if self.detector is None:
            return None
        return self._fraction(
            (self.absorbed == 1) | ((self.absorbed == 0) & (self.position > self.detector[1]))
        )

    @property
    def reflection(self) -> Stat | None:
        if self.detector is None:
            return None
        return self._fraction(
            (self.absorbed == -1) | ((self.absorbed == 0) & (self.position < self.detector[0]))
        )

    @property
    def absorbed_left(self) -> float:
        return float(np.mean(self.absorbed == -1))

    @property
    def absorbed_right(self) -> float:
        return float(np.mean(self.absorbed == 1))


def classical_ensemble(
    system: System,
    packet: GaussianPacket,
    duration: float,
    step: float,
    particles: int,
    seed: int = 0,
    index: int = 0,
    detector=None,
    snapshots=(),
    threads: int | None = None,
) -> ClassicalEnsemble:
    """Move ``particles`` classical particles, drawn from ``packet``'s Wigner distribution,
    through disorder realization ``index`` of ``seed`` (the potential of
    ``mottle.realize(system, seed, index)``) for ``duration`` in steps of ``step``.

    The draws depend on ``(seed, index, particle)`` alone, never on
    ``threads``. ``detector`` and ``snapshots`` mean what they mean for
    :func:`mottle.propagate` (``detector`` defaults to the disorder region, as
    in :func:`mottle.ensemble`). The GIL is released and Ctrl-C stops the run.
    """

    check_system(system)
    _checks.one_dimensional("classical_ensemble", system.grid)
    from .drive import is_driven

    if is_driven(system):
        raise InvalidParameterError(
            "classical_ensemble moves particles in a static potential on a periodic grid: for the kicked "
            "rotor use mottle.standard_map; other time-dependent terms and twists have no classical run yet"
        )
    if not isinstance(packet, GaussianPacket):
        raise InvalidTypeError(
            f"packet must be a mottle.GaussianPacket (its Wigner distribution is a Gaussian), "
            f"got {type(packet).__name__}"
        )
    packet.validate(system.grid)
    duration = _checks.positive("duration", duration)
    step = _checks.positive("step", step)
    particles = _checks.integer("particles", particles, minimum=1)
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    threads = _checks.threads(threads)
    arguments = run_arguments(system, duration, step, snapshots, detector, default_to_disorder=True)
    detector = arguments.detector
    # The end and every snapshot.
    per_particle = _BYTES_PER_PARTICLE * (1 + len(arguments.pauses))
    have = _memory_bytes()
    if particles * per_particle > have // 2:
        raise InvalidParameterError(
            f"particles={particles} need {particles * per_particle / 2**30:.1f} GiB, "
            f"more than half this machine's {have / 2**30:.1f} GiB: "
            f"use at most {have // 2 // per_particle} particles"
        )
    grid, model = system.grid, system.model
    hbar = model.hbar
    config = _requests.particles(
        system,
        packet.center,
        packet.width,
        hbar * packet.wavenumber,
        hbar * packet.wavenumber_spread,
        particles,
        seed,
        index,
        arguments.step,
        arguments.steps,
        arguments.pauses,
        threads,
        offsets=arguments.offsets,
    )
    out = _core.classical_particles(
        _requests.line(grid), _requests.model(model), config, realize(system, seed, index)
    )
    return ClassicalEnsemble(
        times=arguments.times,
        x=np.asarray(grid.x),
        position=out["position"],
        momentum=out["momentum"],
        absorbed=out["absorbed"],
        density=out["counts"] / (particles * grid.dx),
        detector=detector,
        substeps=int(out["substeps"]),
        step=arguments.step,
        positions=out["trail_position"].T.copy(),
        momenta=out["trail_momentum"].T.copy(),
        absorbed_at=out["trail_absorbed"].T.copy(),
    )


@dataclass(frozen=True, eq=False)
class QuantumClassical:
    """A quantum run and its classical ensemble in the same realization, side by side."""

    quantum: Run
    classical: ClassicalEnsemble

    def table(self) -> str:
        """Transmission and reflection of both, as text."""
        lines = [f"{'':14}{'quantum':>12}{'classical':>22}"]
        for name in ("transmission", "reflection"):
            quantum = getattr(self.quantum, name)
            classical = getattr(self.classical, name)
            if quantum is None or classical is None:
                continue
            lines.append(f"{name:14}{quantum:12.6f}{classical.mean:12.6f} ± {classical.stderr:.1g}")
        return "\n".join(lines)


def quantum_classical(
    system: System,
    packet: GaussianPacket,
    duration: float,
    step: float,
    particles: int,
    seed: int = 0,
    index: int = 0,
    detector=None,
    snapshots=(),
    threads: int | None = None,
) -> QuantumClassical:
    """:func:`mottle.propagate` and :func:`classical_ensemble` on the same realization, packet,
    detector and snapshots (the detector defaults to the disorder region for both)."""
    detector = default_detector(system, detector)
    classical = classical_ensemble(
        system, packet, duration, step, particles, seed, index, detector, snapshots, threads
    )
    quantum = propagate(
        system, packet, duration, step, seed=seed, index=index, snapshots=snapshots, detector=detector
    )
    return QuantumClassical(quantum=quantum, classical=classical)


@dataclass(frozen=True, eq=False)
class StandardMap:
    """Chirikov's standard map, the classical kicked rotor: ``p' = p + K sin(theta)``,
    ``theta' = theta + p'`` per kick (period 1, mass 1; exact, no step).

    ``kicks`` are 1, 2, ...; ``momentum_squared[t]`` is ``<p**2>`` after ``kicks[t]`` kicks, a
    :class:`Stat` over the particles, the counterpart of the quantum rotor's
    ``EnsembleResult.momentum_squared`` for ``H = p**2/2 + K cos(theta) sum_n delta(t - n)`` (whose
    kick is ``p -> p - dV/dtheta = p + K sin(theta)``); ``momentum`` the particles after the last kick.
    """

    kicks: np.ndarray
    momentum_squared: list
    momentum: np.ndarray


def standard_map(
    kick: float, kicks: int, particles: int, seed: int = 0, momentum: float = 0.0
) -> StandardMap:
    """Iterate the standard map from ``theta`` uniform on ``[0, 2 pi)`` and ``p = momentum``.

    The angles are drawn from ``(seed, particles)`` alone (numpy's PCG64 keyed by both).
    """
    kick = _checks.real("kick", kick)
    kicks = _checks.integer("kicks", kicks, minimum=1)
    particles = _checks.integer("particles", particles, minimum=2)
    seed = _checks.integer("seed", seed, minimum=0)
    momentum = _checks.real("momentum", momentum)
    if 16 * particles > _memory_bytes():
        raise InvalidParameterError(f"particles={particles} do not fit in memory")
    rng = np.random.default_rng([seed, particles])
    theta = rng.uniform(0.0, 2.0 * np.pi, particles)
    p = np.full(particles, momentum)
    spread = []
    for _ in range(kicks):
        p += kick * np.sin(theta)
        theta = np.mod(theta + p, 2.0 * np.pi)
        spread.append(Stat.of(p * p))
    return StandardMap(kicks=np.arange(1, kicks + 1), momentum_squared=spread, momentum=p)
