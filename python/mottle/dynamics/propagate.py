"""Single runs: :func:`propagate` and the :class:`Run` it returns."""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass

import numpy as np

from .. import _checks, _core, _requests, limits
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning
from ..specs.packets import GaussianPacket, Wavefunction
from ..specs.system import System
from . import nd

SPLITTINGS = {"strang": 2, "yoshida": 4, "blanes-moan": 4}
# The 4th-order splitting `order=4` selects: Blanes-Moan needs twice the FFTs
# of Yoshida per step but reaches the same error with a step about six times
# longer (benches/bench_splitting.py measures both).
DEFAULT_SPLITTING = {2: "strang", 4: "blanes-moan"}
PRECISIONS = ("double", "single")


@dataclass(frozen=True, eq=False)
class Run:
    """The outcome of one propagation.

    Scalars (``norm``, ``absorbed_left``, ``absorbed_right``, ``reflection``,
    ``transmission``) are at the end of the run; arrays indexed like ``times``
    are at the snapshots. Expectation values are those of the probability still
    in the box, normalized by it. ``reflection = P(x < left) + absorbed_left`` and
    ``transmission = P(x > right) + absorbed_right`` for ``detector=(left, right)``
    (``None`` without a detector). ``norms``, ``absorbed_lefts``,
    ``absorbed_rights``, ``reflections`` and ``transmissions`` are the same at
    each snapshot. ``classical_position`` and
    ``classical_momentum`` follow a classical particle started at the packet's
    ``<x>`` and ``<p>`` in the same (real) potential; they are NaN once it has
    entered an absorbing layer. ``step`` is the step the run used (see
    :func:`propagate`). Per snapshot, as :class:`mottle.EnsembleResult` has them:
    ``energy``, ``second_moment``, ``participation`` (inverse participation ratio
    ``sum |psi|**4 dx / (sum |psi|**2 dx)**2``, 1/length) and ``momentum_density``
    (``|phi(k)|**2`` at the increasing wavenumbers ``k``, ``sum momentum_density dk = norm``) and
    ``momentum_squared`` (``<p**2>``). With a twisted boundary (``Grid(quasimomentum=beta)``)
    ``psi`` and ``snapshots`` hold the periodic part ``exp(-2 pi i beta x / L) psi``, ``k`` are the
    twisted wavenumbers ``2 pi (n + beta) / L``, ``quasimomentum`` is the ``beta`` of this run (drawn
    for ``(seed, index)`` when the grid draws it) and ``momentum`` and ``momentum_squared`` are at
    ``hbar k``. ``energy`` counts the static potential only (not the time-dependent terms), and a
    run with time-dependent terms or a twist has no classical trajectory (``None``; see
    :func:`mottle.standard_map` for the kicked rotor's).

    On a 2D/3D grid ``psi`` has the grid's shape and ``snapshots`` and ``momentum_density`` a
    leading snapshot axis (C order, axis 0 slowest); ``x`` and ``k`` are tuples of the axes'
    coordinates and increasing wavenumbers (k = 0 at index ``N // 2``), ``dx`` the tuple of
    spacings, and ``position``, ``position_squared``, ``momentum`` and ``momentum_squared`` have
    one column per axis. ``sum momentum_density dk_0 dk_1 ... = norm``. The detector's sides are
    the slabs ``x_0 < left`` and ``x_0 > right``; ``absorbed_sides`` is what the layers on the
    faces across axis 0 took (0 with ``Absorber(axes=(0,))`` or in 1D). There is no classical
    trajectory.
    """

    times: np.ndarray
    psi: np.ndarray
    snapshots: np.ndarray
    norm: float
    absorbed_left: float
    absorbed_right: float
    reflection: float | None
    transmission: float | None
    position: np.ndarray
    position_squared: np.ndarray
    momentum: np.ndarray
    energy: np.ndarray
    norms: np.ndarray
    absorbed_lefts: np.ndarray
    absorbed_rights: np.ndarray
    reflections: np.ndarray | None
    transmissions: np.ndarray | None
    classical_position: np.ndarray | None
    classical_momentum: np.ndarray | None
    x: np.ndarray | tuple[np.ndarray, ...]
    dx: float | tuple[float, ...]
    step: float
    participation: np.ndarray
    momentum_density: np.ndarray
    k: np.ndarray | tuple[np.ndarray, ...]
    momentum_squared: np.ndarray | None = None
    quasimomentum: float = 0.0
    absorbed_sides: float = 0.0

    @property
    def second_moment(self) -> np.ndarray:
        """``<(x - <x>)**2>`` at the snapshots (the ensemble's ``second_moment`` of one run)."""
        return self.position_squared - self.position**2

    @property
    def width(self) -> np.ndarray:
        """rms width ``sqrt(<x**2> - <x>**2)`` of ``|psi|**2`` at the snapshots."""
        return np.sqrt(np.maximum(self.position_squared - self.position**2, 0.0))

    @property
    def density(self) -> np.ndarray:
        """``|psi|**2`` at the end of the run."""
        return np.abs(self.psi) ** 2


STEP_CHANGE = 0.01
"""A duration that is not a whole number of steps runs ``ceil(duration / step)`` equal shorter steps;
a change of the step by more than this fraction warns (:class:`mottle.errors.StepChangedWarning`)."""

# Times closer than this fraction of a step to a step boundary are on it (rounding noise).
_ON_BOUNDARY = 1e-9


def steps_for(duration: float, step: float) -> tuple[int, float]:
    """``(n, h)``: ``n = ceil(duration / step)`` equal steps of ``h = duration / n`` (``h = step`` when
    ``duration`` is a whole number of steps, to rounding)."""
    ratio = duration / step
    nearest = round(ratio)
    if nearest >= 1 and abs(ratio - nearest) <= _ON_BOUNDARY * max(nearest, 1):
        return nearest, step
    count = max(1, math.ceil(ratio))
    return count, duration / count


def pauses_for(snapshots, step: float, steps: int) -> tuple[list[int], list[float], np.ndarray]:
    """The snapshot times as ``(whole steps, offsets, times)``: time ``t`` is ``m = floor(t / step)``
    whole steps and an offset ``t - m step`` in ``[0, step)``, which the core takes as one shorter step
    on a copy, so every snapshot is at its exact time while the run keeps one step."""
    if isinstance(snapshots, (str, bytes)) or snapshots is None:
        raise InvalidTypeError(f"snapshots must be a sequence of times, got {snapshots!r}")
    try:
        times = np.atleast_1d(np.asarray(snapshots, dtype=float))
    except (TypeError, ValueError):
        raise InvalidTypeError(f"snapshots must be a sequence of times, got {snapshots!r}") from None
    if times.ndim != 1:
        raise InvalidParameterError(f"snapshots must be one-dimensional, got shape {times.shape}")
    duration = steps * step
    pauses, offsets, exact = [], [], []
    for time in times:
        if not math.isfinite(time) or time <= 0.0 or time > duration * (1 + 1e-12):
            raise InvalidParameterError(f"snapshot time {time} must lie in (0, duration = {duration:g}]")
        ratio = time / step
        nearest = round(ratio)
        if abs(ratio - nearest) <= _ON_BOUNDARY * max(nearest, 1) and nearest >= 1:
            pause, offset = min(nearest, steps), 0.0
        else:
            pause = min(math.floor(ratio), steps - 1)
            offset = min(max(time - pause * step, 0.0), math.nextafter(step, 0.0))
        pauses.append(pause)
        offsets.append(offset)
        exact.append(pause * step + offset)
    if any(b <= a for a, b in itertools.pairwise(zip(pauses, offsets, strict=True))):
        raise InvalidParameterError(f"snapshot times must increase, got {list(times)}")
    return pauses, offsets, np.asarray(exact, dtype=float)


def check_snapshot_memory(grid, count: int) -> None:
    """Refuse, before the run, snapshots that could not be kept in memory: each holds the wavefunction
    (16 bytes a point) and its momentum density (8), two copies at the hand-over."""
    from ..specs.grid import _memory_bytes

    need = 2 * 24 * count * grid.size
    have = _memory_bytes()
    if need > have:
        raise InvalidParameterError(
            f"{count} snapshots of {grid.size} points need about {need / 2**30:.1f} GiB, more than this "
            f"machine's {have / 2**30:.1f} GiB; keep at most {have // (48 * grid.size)} snapshots"
        )


def check_detector(detector, grid=None) -> tuple[float, float] | None:
    """``detector=(left, right)`` validated: two finite numbers with ``left <= right`` inside the box
    ``[grid.start, grid.stop]`` when ``grid`` is given (or None)."""
    if detector is None:
        return None
    try:
        left, right = detector
    except (TypeError, ValueError):
        raise InvalidTypeError(f"detector must be a pair (left, right), got {detector!r}") from None
    left = _checks.real("detector left", left)
    right = _checks.real("detector right", right)
    if left > right:
        raise InvalidParameterError(f"detector left={left} must be <= right={right}")
    if grid is None:
        return left, right
    # On a 2D/3D grid the detector's two sides are slabs of axis 0.
    low, high, where = (
        (grid.start, grid.stop, "") if grid.ndim == 1 else (grid.start[0], grid.stop[0], " along axis 0")
    )
    if left < low or right > high:
        raise InvalidParameterError(
            f"detector ({left:g}, {right:g}) leaves the box [{low:g}, {high:g}]{where}: "
            "put both edges inside it"
        )
    return left, right


def default_detector(system: System, detector):
    """The one rule for runs that count R and T by default: ``detector=None`` is the disorder region
    ``(disorder.start, disorder.stop)`` when the system has disorder (and stays None otherwise)."""
    if detector is None and isinstance(system, System) and system.disorder is not None:
        start, stop = system.disorder.start, system.disorder.stop
        # A 2D/3D region: its extent along axis 0.
        first = lambda bound: bound[0] if isinstance(bound, tuple) else bound  # noqa: E731
        return (first(start), first(stop))
    return detector


def detector_bounds(system: System, detector) -> tuple[int, int] | None:
    """``(left_end, right_start)`` of ``detector=(left, right)``: points ``x < left`` and ``x > right``."""
    detector = check_detector(detector, system.grid)
    if detector is None:
        return None
    if system.grid.ndim > 1:
        return nd.detector_bounds(system.grid, detector)
    left, right = detector
    x = system.grid.x
    return int(np.searchsorted(x, left, side="left")), int(np.searchsorted(x, right, side="right"))


@dataclass(frozen=True)
class RunArguments:
    """A run's arguments, checked once; :func:`propagate`, :func:`mottle.ensemble`, the classical
    ensemble, studies and :mod:`mottle.reference` all build theirs with :func:`run_arguments`.

    ``step`` is the step used (``duration / steps``, see :data:`STEP_CHANGE`); snapshot ``s`` is at
    ``times[s] = pauses[s] * step + offsets[s]``.
    """

    duration: float
    requested_step: float
    step: float
    steps: int
    pauses: tuple[int, ...]
    offsets: tuple[float, ...]
    times: np.ndarray
    detector: tuple[float, float] | None
    bounds: tuple[int, int] | None
    splitting: str

    def core_pauses(self) -> dict:
        """What the core reads of the snapshots."""
        return {"steps": self.steps, "pauses": list(self.pauses), "offsets": list(self.offsets)}


def run_arguments(
    system: System,
    duration,
    step,
    snapshots=(),
    detector=None,
    order=2,
    splitting=None,
    default_to_disorder: bool = False,
    warn: bool = True,
) -> RunArguments:
    """Check a run's duration, step, snapshots, detector and splitting once (no large allocation).

    With ``default_to_disorder`` the detector defaults to the disorder region
    (:func:`default_detector`). ``warn`` issues the :class:`StepChangedWarning` when the step used
    differs from ``step`` by more than :data:`STEP_CHANGE`.
    """
    from ..errors import StepChangedWarning

    check_system(system)
    if nd.is_box(system):
        nd.check_run(system)
    duration = _checks.positive("duration", duration)
    step = _checks.positive("step", step)
    splitting = resolve_splitting(order, splitting)
    steps, used = steps_for(duration, step)
    if warn and abs(used - step) > STEP_CHANGE * step:
        warnings.warn(
            f"duration {duration:g} is not a whole number of steps of {step:g}: running {steps} equal "
            f"steps of {used:.6g} ({100 * (1 - used / step):.3g}% shorter); pass step={used:.6g} or a "
            f"duration that is a multiple of the step to silence this",
            StepChangedWarning,
            stacklevel=3,
        )
    pauses, offsets, times = pauses_for(snapshots, used, steps)
    from .drive import drive_steps

    drive_steps(system, used, steps)  # kicks and switches land on steps, or a one-line error
    if default_to_disorder:
        detector = default_detector(system, detector)
    detector = check_detector(detector, system.grid)
    return RunArguments(
        duration=duration,
        requested_step=step,
        step=used,
        steps=steps,
        pauses=tuple(pauses),
        offsets=tuple(offsets),
        times=times,
        detector=detector,
        bounds=detector_bounds(system, detector),
        splitting=splitting,
    )


def resolve_splitting(order, splitting) -> str:
    if splitting is not None:
        _checks.choice("splitting", splitting, tuple(SPLITTINGS))
        if order is not None and order != SPLITTINGS[splitting] and order != 2:
            raise InvalidParameterError(
                f"splitting {splitting!r} has order {SPLITTINGS[splitting]}, not {order}"
            )
        return splitting
    if isinstance(order, bool) or order not in DEFAULT_SPLITTING:
        raise InvalidParameterError(f"order must be 2 or 4, got {order!r}")
    return DEFAULT_SPLITTING[order]


def check_packet(system: System, packet) -> None:
    if not isinstance(packet, (GaussianPacket, Wavefunction)):
        raise InvalidTypeError(
            f"packet must be a mottle.GaussianPacket or mottle.Wavefunction, got {type(packet).__name__}"
        )
    packet.validate(system.grid)


def warn_if_coarse(system: System, packet, step: float, potential: np.ndarray) -> None:
    """Warn when the phase a step puts on the populated wavenumbers, or the potential, exceeds pi.

    The kinetic phase is not checked where the step makes no splitting error: a kicked system whose
    static part is the kinetic energy alone (a kicked rotor: kicks are applied exactly, and
    ``potential`` is the felt static part, :func:`mottle.dynamics.drive.felt_potential`, without them).

    Only what the packet can reach counts: its band widened by the kinetic energy
    it can gain falling to the potential's floor, and the potential clipped at
    four times the packet's energy scale above that floor (a tall barrier is felt
    through its evanescent tail only, a harmonic well's walls far beyond the
    turning points not at all).
    """
    grid, model, hbar = system.grid, system.model, system.hbar
    band, floor, ceiling = _reach(system, packet, potential)
    kinetic_phase = (model.kinetic(band, grid.dx) - model.kinetic(0.0, grid.dx)) * step / hbar
    # Between kicks, a system whose static part is the kinetic energy alone (no potential, disorder,
    # nonlinearity or absorber: a kicked rotor) evolves exactly however long the step; the kicks
    # themselves are exact factors and not in ``potential``.
    from ..specs.potentials import Kicked, time_dependent_terms

    kicked = any(isinstance(term, Kicked) for term in time_dependent_terms(system.potential))
    flat = not potential.size or not np.ptp(potential)  # the realized static potential, disorder included
    free = kicked and flat and system.nonlinearity == 0.0 and system.absorber is None
    if kinetic_phase > limits.PHASE_PER_STEP and not free:
        limit = _three_digits(step * limits.PHASE_PER_STEP / kinetic_phase, math.floor)
        warnings.warn(
            f"step {step} is too coarse: the kinetic phase per step reaches {kinetic_phase:.3g} rad at "
            f"|k| = {band:.3g}, the largest wavenumber this run populates "
            f"(keep it below pi: step <= {limit:.3g})",
            UnderResolvedWarning,
            stacklevel=3,
        )
    span = float(np.max(np.minimum(potential, ceiling)) - floor) if potential.size else 0.0
    potential_phase = span * step / hbar
    if potential_phase > limits.PHASE_PER_STEP:
        limit = _three_digits(step * limits.PHASE_PER_STEP / potential_phase, math.floor)
        warnings.warn(
            f"step {step} is too coarse: the potential phase per step reaches {potential_phase:.3g} rad "
            f"across the potential's range {span:.3g} that the packet feels (keep it below pi: "
            f"step <= {limit:.3g})",
            UnderResolvedWarning,
            stacklevel=3,
        )
    if system.absorber is not None:
        energy = packet.mean_kinetic(model, grid.dx)
        design = system.absorber.design_energy(model, grid.dx)
        if system.absorber.strength is None and energy < limits.ABSORBER_ENERGY_MARGIN * design:
            wide_enough = _three_digits(system.absorber.width_for(energy, model, grid.dx), math.ceil)
            warnings.warn(
                f"absorber width {system.absorber.width} reflects more than 1e-3 of a packet of mean energy "
                f"{energy:.3g}: its design energy is {design:.3g}; use width >= "
                f"{wide_enough:.3g} to absorb it cleanly",
                UnderResolvedWarning,
                stacklevel=3,
            )


def _three_digits(value: float, direction) -> float:
    """``value`` to three significant digits, rounded by ``direction`` (math.floor or math.ceil), so
    that a suggested step or width printed with ``:.3g`` is itself on the safe side of the limit."""
    scale = 10.0 ** (math.floor(math.log10(value)) - 2)
    nudge = 1e-12 if direction is math.ceil else -1e-12  # keep rounding noise on the safe side too
    return direction(value / scale * (1.0 + nudge)) * scale


def _reach(system: System, packet, potential: np.ndarray) -> tuple[float, float, float]:
    """(largest |k| the run populates, potential floor, the ceiling above which V is not felt)."""
    grid, model = system.grid, system.model
    psi = packet.values(grid)
    weight = np.abs(np.fft.fft(psi)) ** 2
    k = np.abs(np.asarray(grid.k))
    if isinstance(packet, GaussianPacket):
        band = abs(packet.wavenumber) + 5.0 * packet.wavenumber_spread
    else:
        order = np.argsort(k)
        cumulative = np.cumsum(weight[order]) / np.sum(weight)
        band = float(k[order][min(np.searchsorted(cumulative, 1.0 - 1e-12), k.size - 1)])
    band = min(band, grid.k_max)
    if not potential.size:
        return band, 0.0, 0.0
    density = np.abs(psi) ** 2
    support = density > 1e-10 * density.max()
    kinetic = lambda wavenumber: float(model.kinetic(wavenumber, grid.dx) - model.kinetic(0.0, grid.dx))  # noqa: E731
    top = kinetic(band) + float(np.max(potential[support]))  # the most energy the packet carries
    floor = float(np.min(potential))
    gain = max(top - floor, 0.0)
    # The fastest the packet can move: its band, or what falling to the floor gives it.
    energies = np.asarray(model.kinetic(k, grid.dx)) - model.kinetic(0.0, grid.dx)
    reachable = k[energies <= gain]
    band = max(band, float(reachable.max()) if reachable.size else 0.0)
    return min(band, grid.k_max), floor, floor + 4.0 * gain


def initial_phase_space(system: System, packet) -> tuple[float, float]:
    """The packet's ``<x>`` and ``<p>``, where the classical particle starts."""
    if isinstance(packet, GaussianPacket):
        return packet.center, system.hbar * packet.wavenumber
    psi = packet.values(system.grid)
    rho = np.abs(psi) ** 2 * system.grid.dx
    phi = np.abs(np.fft.fft(psi)) ** 2
    return float(np.sum(rho * system.grid.x)), float(system.hbar * np.sum(phi * system.grid.k) / np.sum(phi))


def check_system(system) -> None:
    if not isinstance(system, System):
        raise InvalidTypeError(f"system must be a mottle.System, got {type(system).__name__}")


def prepare_single_run(system, packet, duration, step, order, seed, index, snapshots, detector, splitting):
    """Validate a single run's arguments (shared by the core's and the reference's ``propagate``).

    Returns ``(packet, arguments, potential)``: the packet resolved to realization
    ``index``'s, the :class:`RunArguments` and the potential realized.
    """
    check_system(system)
    if nd.is_box(system):
        nd.check_run(system, packet)
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    if hasattr(packet, "packet") and not isinstance(packet, (GaussianPacket, Wavefunction)):
        packet.validate(system.grid)
        packet = packet.packet(seed, index)  # RandomPacket / PacketList: realization `index`'s packet
    check_packet(system, packet)
    arguments = run_arguments(system, duration, step, snapshots, detector, order, splitting)
    check_snapshot_memory(system.grid, len(arguments.pauses))

    from .realize import realize

    potential = realize(system, seed, index)
    from .drive import felt_potential

    felt = felt_potential(system, potential)
    if nd.is_box(system):
        nd.warn_if_coarse(system, packet, arguments.step, felt)
    else:
        warn_if_coarse(system, packet, arguments.step, felt)
    return packet, arguments, potential


def propagate(
    system: System,
    packet,
    duration: float,
    step: float,
    order: int = 2,
    seed: int = 0,
    index: int = 0,
    snapshots=(),
    detector=None,
    splitting: str | None = None,
    precision: str = "double",
    classical: bool = True,
) -> Run:
    """Propagate ``packet`` in ``system`` for ``duration`` in steps of about ``step``.

    The disorder (if any) is realization ``index`` of ``seed``, the one
    :func:`mottle.realize` returns. ``order=2`` is Strang splitting, ``order=4``
    the Blanes-Moan composition (``splitting="yoshida"`` picks Yoshida's).
    A ``duration`` that is not a whole number of steps runs ``ceil(duration / step)``
    equal steps (``Run.step``; :class:`mottle.errors.StepChangedWarning` when it is more
    than 1% shorter than ``step``). Snapshots are at their exact times: one between two
    step boundaries is taken on a copy advanced by one shorter step from the boundary
    before it, while the run goes on with its one step. ``detector=(left, right)`` must
    lie inside the box. The GIL is released while the core runs and Ctrl-C stops it
    within a fraction of a second.
    """
    _checks.choice("precision", precision, PRECISIONS)
    packet, arguments, potential = prepare_single_run(
        system, packet, duration, step, order, seed, index, snapshots, detector, splitting
    )
    bounds = arguments.bounds
    grid = system.grid
    psi0 = packet.values(grid).astype(np.complex128).ravel()
    from .drive import is_driven

    # The classical trajectory moves in the static potential on a periodic 1D grid only.
    classical = classical and not is_driven(system) and grid.ndim == 1
    start = initial_phase_space(system, packet) if classical else None
    drive = _requests.drive(system, arguments.step, arguments.steps)
    out = _core.propagate_one(
        _requests.setup(system, arguments.step, arguments.splitting),
        _requests.run(arguments.steps, arguments.pauses, bounds, start, precision, offsets=arguments.offsets),
        system.absorption(),
        np.ravel(potential),
        psi0,
        None if drive is None else (drive, int(seed), int(index)),
    )
    last, seen = out["last"], out["observations"]
    absorbed = out["classical_absorbed"] != 0
    classical_position = np.where(absorbed, np.nan, out["classical_position"]) if classical else None
    classical_momentum = np.where(absorbed, np.nan, out["classical_momentum"]) if classical else None
    shape = grid.shape
    snapshots_out = out["snapshots"].reshape(-1, *shape)
    k: np.ndarray | tuple[np.ndarray, ...]
    if grid.ndim == 1:
        momentum_density = np.fft.fftshift(out["momentum_density"], axes=-1)
        k = np.fft.fftshift(np.asarray(grid.k)) + grid.shift(out["quasimomentum"])
    else:
        axes = tuple(range(1, grid.ndim + 1))
        momentum_density = np.fft.fftshift(out["momentum_density"].reshape(-1, *shape), axes=axes)
        k = tuple(np.fft.fftshift(np.asarray(axis)) for axis in grid.k)
    return Run(
        times=arguments.times,
        psi=out["psi"].reshape(shape),
        snapshots=snapshots_out,
        norm=float(last["norm"][0]),
        absorbed_left=float(last["absorbed_left"][0]),
        absorbed_right=float(last["absorbed_right"][0]),
        reflection=None if bounds is None else float(last["reflection"][0]),
        transmission=None if bounds is None else float(last["transmission"][0]),
        position=seen["position"],
        position_squared=seen["position_squared"],
        momentum=seen["momentum"],
        energy=seen["energy"],
        norms=seen["norm"],
        absorbed_lefts=seen["absorbed_left"],
        absorbed_rights=seen["absorbed_right"],
        reflections=None if bounds is None else seen["reflection"],
        transmissions=None if bounds is None else seen["transmission"],
        classical_position=classical_position,
        classical_momentum=classical_momentum,
        x=grid.x if grid.ndim == 1 else grid.axes,
        dx=grid.dx,
        step=arguments.step,
        participation=seen["participation"],
        momentum_density=momentum_density,
        k=k,
        momentum_squared=seen["momentum_squared"],
        quasimomentum=float(out["quasimomentum"]),
        absorbed_sides=float(last["absorbed_sides"][0]),
    )
