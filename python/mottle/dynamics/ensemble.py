"""Ensembles: many realizations of disorder and initial packets, reduced to statistics.

Realizations run in fixed chunks of :data:`CHUNK`; a chunk's sums depend only
on its realizations, and chunks are folded in index order, so every aggregate
is bitwise the same for any thread count, task size or worker layout.
Memory stays O(threads x points x snapshots) plus the scalar samples,
independent of the number of realizations.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, fields
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import _checks, _core, _requests, limits
from ..analysis.statistics import Stat, stderr, stderr_from_sums
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning
from ..specs.packets import GaussianPacket, PacketList, RandomPacket, Wavefunction
from ..specs.system import System
from .propagate import (
    check_system,
    detector_bounds,
    pauses_for,
    resolve_splitting,
    steps_for,
    warn_if_coarse,
)
from .realize import realize

if TYPE_CHECKING:
    from .._core import _EnsembleRun, _Packets, _Setup, _Term

CHUNK: int = _core.CHUNK
"""Realizations per chunk: the unit of work and of reproducible reduction."""

_SCALARS = ("transmission", "reflection", "norm", "absorbed_left", "absorbed_right")
_PER_SNAPSHOT = ("position", "position_squared", "participation")
_PER_MODE = ("spectrum",)
_MAX_MODES = limits.SPECTRUM_MODES
_PROFILES = ("density", "density_squared", "log_density", "log_density_squared", "momentum")


@dataclass
class EnsemblePartial:
    """Realizations ``start .. start + count`` of an ensemble, as chunks not yet folded.

    Plain numpy arrays only, so it pickles (a Dask task returns one).
    """

    start: int
    chunks: list = field(default_factory=list)
    seed: int = 0
    times: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_wavenumbers: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_energies: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def count(self) -> int:
        return sum(int(chunk["count"]) for chunk in self.chunks)


class _Fold:
    """Folds chunks in index order: samples concatenated, profiles summed."""

    def __init__(self) -> None:
        self.samples: dict[str, list] = {name: [] for name in _SCALARS + _PER_SNAPSHOT + _PER_MODE}
        self.sums: dict[str, np.ndarray] | None = None
        self.next_start = 0
        self.count = 0

    def add(self, chunk: dict) -> None:
        if int(chunk["start"]) != self.next_start:
            raise InvalidParameterError(
                f"chunks must be folded in index order: expected one starting at {self.next_start}, "
                f"got {int(chunk['start'])}"
            )
        for name in self.samples:
            self.samples[name].append(np.asarray(chunk[name]))
        if self.sums is None:
            self.sums = {name: np.array(chunk[name], dtype=float, copy=True) for name in _PROFILES}
        else:
            for name in _PROFILES:
                np.add(self.sums[name], chunk[name], out=self.sums[name])
        self.count += int(chunk["count"])
        self.next_start += int(chunk["count"])

    def transmission(self) -> np.ndarray:
        return np.concatenate(self.samples["transmission"]) if self.samples["transmission"] else np.zeros(0)


@dataclass(frozen=True, eq=False)
class EnsembleResult:
    """Statistics of an ensemble of runs.

    ``transmission`` and ``reflection`` are :class:`Stat` records over
    realizations (``.mean``, ``.stderr``, ``.typical = exp<ln T>``...);
    ``samples`` holds the per-realization values in index order
    (``transmission``, ``reflection``, ``norm``, ``absorbed_left``,
    ``absorbed_right``; ``position``, ``position_squared`` and ``participation``
    as ``(count, snapshots)``). Profiles are means over realizations at each
    snapshot: ``density`` (``<|psi|^2>``), ``log_density`` (``<ln |psi|^2>``, the
    density floored at 1e-300 first), their standard errors, and ``momentum``
    (``<|phi(k)|^2>`` at the increasing wavenumbers ``k``, normalized so that
    ``sum momentum dk = norm``). ``second_moment`` is the mean over realizations
    of ``<(x - <x>)^2>`` and ``participation`` the mean inverse participation
    ratio ``sum |psi|^4 dx / (sum |psi|^2 dx)^2`` (1/length), per snapshot.
    """

    count: int
    seed: int
    times: np.ndarray
    x: np.ndarray
    k: np.ndarray
    samples: dict
    density: np.ndarray
    density_stderr: np.ndarray
    log_density: np.ndarray
    log_density_stderr: np.ndarray
    momentum: np.ndarray
    spectrum_wavenumbers: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_energies: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def spectrum(self) -> Spectrum | None:
        """Energy-resolved transmission T(k) over the packet's band, from the same runs.

        ``None`` when the run has no detector or the detector's right side is not
        free (potential or disorder there); see :class:`Spectrum`.
        """
        if self.spectrum_wavenumbers.size == 0:
            return None
        return Spectrum.of(self.spectrum_wavenumbers, self.spectrum_energies, self.samples["spectrum"])

    @property
    def transmission(self) -> Stat:
        return Stat.of(self.samples["transmission"])

    @property
    def reflection(self) -> Stat:
        return Stat.of(self.samples["reflection"])

    @property
    def norm(self) -> Stat:
        return Stat.of(self.samples["norm"])

    @property
    def position(self) -> np.ndarray:
        return np.mean(self.samples["position"], axis=0)

    @property
    def second_moment(self) -> np.ndarray:
        variance = self.samples["position_squared"] - self.samples["position"] ** 2
        return np.mean(variance, axis=0)

    @property
    def participation(self) -> np.ndarray:
        return np.mean(self.samples["participation"], axis=0)

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Every field as a numpy array (samples prefixed ``samples/``), for stores."""
        arrays: dict[str, np.ndarray] = {}
        for item in fields(self):
            value = getattr(self, item.name)
            if item.name == "samples":
                arrays.update({f"samples/{name}": np.asarray(v) for name, v in value.items()})
            else:
                arrays[item.name] = np.asarray(value)
        return arrays

    @classmethod
    def from_arrays(cls, arrays: dict) -> EnsembleResult:
        """The inverse of :meth:`to_arrays` (exact)."""
        samples = {
            key.split("/", 1)[1]: np.asarray(v) for key, v in arrays.items() if key.startswith("samples/")
        }
        values: dict[str, Any] = {}
        for item in fields(cls):
            if item.name == "samples":
                continue
            value = np.asarray(arrays[item.name])
            values[item.name] = int(value) if item.name in ("count", "seed") else value
        return cls(samples=samples, **values)


def _finish(fold: _Fold, seed: int, times: np.ndarray, system: System, modes_info) -> EnsembleResult:
    count = fold.count
    if count == 0 or fold.sums is None:
        raise InvalidParameterError("an ensemble needs at least one realization")
    samples = {name: np.concatenate(values) for name, values in fold.samples.items()}
    snapshots = times.size
    for name in _PER_SNAPSHOT:
        samples[name] = samples[name].reshape(count, snapshots)
    modes = modes_info[0].size
    samples["spectrum"] = samples["spectrum"].reshape(count, modes)
    sums = fold.sums

    density, density_stderr = stderr_from_sums(sums["density"], sums["density_squared"], count)
    log_density, log_density_stderr = stderr_from_sums(
        sums["log_density"], sums["log_density_squared"], count
    )
    momentum = np.fft.fftshift(sums["momentum"] / count, axes=-1)
    return EnsembleResult(
        count=count,
        seed=seed,
        times=times,
        x=np.asarray(system.grid.x),
        k=np.fft.fftshift(np.asarray(system.grid.k)),
        samples=samples,
        density=density,
        density_stderr=density_stderr,
        log_density=log_density,
        log_density_stderr=log_density_stderr,
        momentum=momentum,
        spectrum_wavenumbers=np.asarray(modes_info[0], dtype=float),
        spectrum_energies=np.asarray(modes_info[1], dtype=float),
    )


@dataclass(frozen=True)
class Spectrum:
    """Energy-resolved transmission ``T(k)`` from time-dependent runs.

    The wave at a point ``x_R`` on the free side (a quarter of the way
    from the detector's right edge to the right absorbing layer) is recorded at every
    step and Fourier-transformed in time: right of the sample the transmitted
    wave is free, so ``F(E) = phi0(k) t(k) e^{i k x_R} / v(k)`` and
    ``T(k) = |F|**2 v**2 / |phi0(k)|**2``. This is exact once the whole
    transmitted wave has crossed ``x_R`` (an absorber may swallow it afterwards);
    cut short, it underestimates ``T`` at the slowest wavenumbers, so run until
    the slowest resolved component (``wavenumbers.min()``) has crossed (a
    warning names the duration); in a disordered sample, narrow resonances
    release their wave slowly, so extend the run until ``T(k)`` stops
    changing (measured: 2% short at the warning's duration, 0.3% at 1.4x it).
    The step must keep the kinetic phase per step below 2 pi at the grid's
    largest wavenumber, or modes alias (warned). The band is the packet's
    (``|k - k0| <= 3.5 sigma_k``, right-moving), on the grid's wavenumbers.
    ``mean``/``stderr`` are over realizations, ``log_mean``/``log_stderr``
    those of ``ln T`` (typical transmission ``exp(log_mean)``).
    """

    wavenumbers: np.ndarray
    energies: np.ndarray
    mean: np.ndarray
    stderr: np.ndarray
    log_mean: np.ndarray
    log_stderr: np.ndarray
    samples: np.ndarray

    @classmethod
    def of(cls, wavenumbers, energies, samples) -> Spectrum:
        samples = np.asarray(samples, dtype=float)
        logs = np.log(np.maximum(samples, 1e-300))
        return cls(
            wavenumbers=np.asarray(wavenumbers),
            energies=np.asarray(energies),
            mean=np.mean(samples, axis=0),
            stderr=stderr(samples),
            log_mean=np.mean(logs, axis=0),
            log_stderr=stderr(logs),
            samples=samples,
        )


def _packet_band(packet, grid) -> tuple[float, float]:
    """The wavenumbers one packet carries: k0 +- 3.5 sigma_k, or where |phi(k)|**2 > 1e-3 of its peak."""
    if isinstance(packet, GaussianPacket):
        reach = limits.SPECTRUM_BAND * packet.wavenumber_spread
        return packet.wavenumber - reach, packet.wavenumber + reach
    weight = np.abs(np.fft.fft(packet.values(grid))) ** 2
    strong = grid.k[weight >= limits.SPECTRUM_WEIGHT * weight.max()]
    return float(strong.min()), float(strong.max())


def _band_modes(system: System, packet) -> np.ndarray:
    """FFT indices of the right-moving grid wavenumbers in the packet's band."""
    grid, model = system.grid, system.model
    if isinstance(packet, RandomPacket):
        # Draws fill the whole range between the extreme packets.
        corners = [_packet_band(corner, grid) for corner in packet.corners()]
        intervals = [(min(low for low, _ in corners), max(high for _, high in corners))]
    else:
        entries = packet.packets if isinstance(packet, PacketList) else (packet,)
        intervals = [_packet_band(entry, grid) for entry in entries]
    k = np.asarray(grid.k)
    inside = np.zeros(k.size, dtype=bool)
    for low, high in intervals:
        inside |= (k >= low) & (k <= high)
    inside &= (k > 0.0) & (model.velocity(k, grid.dx) > 0.0)
    modes = np.flatnonzero(inside)
    modes = modes[np.argsort(k[modes])]
    if modes.size > _MAX_MODES:
        modes = modes[np.linspace(0, modes.size - 1, _MAX_MODES).round().astype(int)]
    return modes


def _spectrum_problems(system, packet, step, duration, x_probe, slowest) -> list[str]:
    """The two ways a time-resolved spectrum goes wrong, both measured on a barrier."""
    model, grid = system.model, system.grid
    problems = []
    top = float(np.max(model.kinetic(grid.k, grid.dx)) - model.band_bottom(grid.dx))
    if top * step / system.hbar >= limits.SPECTRUM_PHASE_PER_STEP:
        # Modes whose kinetic phases per step differ by 2 pi share a quasi-energy of the
        # discrete-time evolution; the sample's sharp features scatter into them and the
        # time transform cannot tell them apart (measured: 3e-3 errors in T(k)).
        problems.append(
            f"step {step} is too long for the energy-resolved transmission: the kinetic phase per step "
            f"reaches {top * step / system.hbar:.3g} rad at the grid's largest wavenumber; keep it below "
            f"2 pi (step < {2 * math.pi * system.hbar / top:.3g}) or result.spectrum aliases"
        )
    centers = [p.center for p in getattr(packet, "corners", lambda: [packet])() if hasattr(p, "center")]
    if centers:
        # Measured on free packets: 1.5x the naive arrival time still left 2e-4 errors.
        needed = 2.0 * (x_probe - min(centers)) / slowest
        if duration < needed:
            problems.append(
                f"duration {duration} may end before the slowest resolved wavenumber has crossed the "
                f"spectrum's probe at x = {x_probe:.4g}; result.spectrum is then too low at the band's slow "
                f"edge: use duration >= {needed:.4g}"
            )
    return problems


def _spectrum_config(system: System, packet, bounds, step: float, duration: float, wanted):
    """What the core needs to resolve the transmission in energy, or None.

    ``wanted=None`` resolves it where it can be done well and skips it silently
    otherwise; ``True`` insists (errors without a free right side, warns when
    under-resolved); ``False`` skips it.
    """
    if wanted is False:
        return None
    if bounds is None or bounds[1] >= system.grid.points:
        if wanted:
            raise InvalidParameterError("spectrum=True needs a detector (or disorder to default it to)")
        return None
    right_start = system.layer_bounds()[1]
    # The free side starts past the detector, the last nonzero potential value and the disorder.
    nonzero = np.flatnonzero(system.static_potential())
    edge = max(bounds[1], int(nonzero[-1]) + 1 if nonzero.size else 0)
    if system.disorder is not None:
        edge = max(edge, int(np.searchsorted(system.grid.x, system.disorder.stop, side="left")))
    # A cell-averaged edge spills into at most the next point; potential farther right
    # would make the spectrum describe a different sample than the detector counts.
    if edge >= right_start or edge > bounds[1] + 2:
        if wanted:
            raise InvalidParameterError(
                "spectrum=True needs a free right side: no potential or disorder between the detector's "
                "right edge and the right absorbing layer"
            )
        return None
    # Record a quarter of the way from the detector's edge to the absorbing layer: next to
    # a sharp edge of the sample the grid's spectral Laplacian leaves a non-propagating near
    # field at the same energy (measured: 2.5e-3 in T one grid point from a barrier's edge);
    # farther on, the run must last longer for the slow components to arrive.
    probe = edge + (right_start - edge) // 4
    modes = _band_modes(system, packet)
    if modes.size == 0:
        return None
    k = np.asarray(system.grid.k)[modes]
    # The second probe a quarter wavelength of the fastest mode further on, to
    # separate the transmitted wave from what the absorber sends back.
    offset = max(1, round(np.pi / (2.0 * k.max()) / system.grid.dx))
    probes = [int(probe), int(min(probe + offset, system.grid.points - 1))]
    if probes[1] == probes[0]:
        return None
    energies = np.asarray(system.model.kinetic(k, system.grid.dx), dtype=float)
    velocities = np.asarray(system.model.velocity(k, system.grid.dx), dtype=float)
    problems = _spectrum_problems(system, packet, step, duration, system.grid.x[probe], velocities.min())
    if problems and not wanted:
        return None
    for problem in problems:
        warnings.warn(problem, UnderResolvedWarning, stacklevel=4)
    return _requests.spectrum(
        probes, [float(system.grid.x[p]) for p in probes], modes.tolist(), k.tolist(), energies, velocities
    )


@dataclass(frozen=True, eq=False)
class _Plan:
    """Everything a call to the core needs, validated once."""

    setup: _Setup
    run: _EnsembleRun
    kinetic: np.ndarray
    absorption: np.ndarray
    static: np.ndarray
    disorder: list[_Term]
    packets: _Packets
    times: np.ndarray
    seed: int
    modes_info: tuple


def _default_detector(system: System, detector):
    if detector is None and system.disorder is not None:
        return (system.disorder.start, system.disorder.stop)
    return detector


def plan(
    system,
    packet,
    duration,
    step,
    seed=0,
    order=2,
    detector=None,
    snapshots=(),
    precision="double",
    splitting=None,
    spectrum=None,
) -> _Plan:
    """Validate an ensemble's arguments before anything large is allocated."""
    check_system(system)
    if not isinstance(packet, (GaussianPacket, Wavefunction, RandomPacket, PacketList)):
        raise InvalidTypeError(
            "packet must be a GaussianPacket, Wavefunction, RandomPacket or PacketList, "
            f"got {type(packet).__name__}"
        )
    packet.validate(system.grid)
    duration = _checks.positive("duration", duration)
    step = _checks.positive("step", step)
    seed = _checks.integer("seed", seed, minimum=0)
    splitting = resolve_splitting(order, splitting)
    _checks.choice("precision", precision, ("double", "single"))
    steps = steps_for(duration, step)
    pauses = pauses_for(snapshots, step, steps)
    bounds = detector_bounds(system, _default_detector(system, detector))
    first = packet if isinstance(packet, (GaussianPacket, Wavefunction)) else packet.packet(seed, 0)
    warn_if_coarse(system, first, step, realize(system, seed, 0))
    if spectrum not in (None, True, False):
        raise InvalidTypeError(f"spectrum must be None, True or False, got {spectrum!r}")
    spectrum = _spectrum_config(system, packet, bounds, step, duration, spectrum)
    k = np.asarray(system.grid.k)
    modes_info = (
        (np.zeros(0), np.zeros(0))
        if spectrum is None
        else (k[spectrum["modes"]], np.asarray(spectrum["energies"]))
    )
    return _Plan(
        setup=_requests.setup(system, step, splitting),
        run=_requests.ensemble_run(steps, pauses, bounds, seed, precision, spectrum),
        kinetic=system.kinetic_table(),
        absorption=system.absorption(),
        static=system.static_potential(),
        disorder=_requests.disorder_terms(system.disorder),
        packets=_requests.packets(system.grid, packet),
        times=np.asarray(pauses, dtype=float) * step,
        seed=seed,
        modes_info=modes_info,
    )


def _run_chunks(plan: _Plan, start: int, count: int, threads: int) -> list:
    run = _requests.share(plan.run, start, count, threads)
    return _core.ensemble_chunks(
        plan.setup, run, plan.kinetic, plan.absorption, plan.static, plan.disorder, plan.packets
    )


def ensemble(
    system: System,
    packet,
    duration: float,
    step: float,
    realizations: int,
    seed: int = 0,
    order: int = 2,
    detector=None,
    snapshots=(),
    threads: int | None = None,
    target_stderr: float | None = None,
    precision: str = "double",
    progress=None,
    splitting: str | None = None,
    spectrum: bool | None = None,
) -> EnsembleResult:
    """Propagate ``realizations`` realizations and reduce them to statistics.

    Realization ``r`` uses disorder realization ``r`` of ``seed`` and, for a
    :class:`RandomPacket` or :class:`PacketList`, packet ``r``; it equals
    ``propagate(system, packet, ..., seed=seed, index=r)``. ``detector=(left, right)``
    defaults to the disorder region. With ``target_stderr``, chunks run until
    the transmission's standard error falls below it (checked after every
    chunk, so the stopping point does not depend on ``threads``) or
    ``realizations`` is reached. ``precision="single"`` propagates in f32
    (probabilities still summed in f64); it loses about 1e-7 of the
    probability per step to single-precision FFT rounding (measured), so
    relative errors grow like ~2e-7 x steps: 1e-4 after 1000 steps.
    ``progress(done, total)`` is called between chunks. ``spectrum`` (see
    :class:`Spectrum`): ``None`` resolves the transmission in energy when the
    run allows it cleanly, ``True`` insists and warns when it is
    under-resolved, ``False`` skips it. Ctrl-C stops within a second.
    """
    realizations = _checks.integer("realizations", realizations, minimum=1)
    threads = _checks.threads(threads)
    if target_stderr is not None:
        target_stderr = _checks.positive("target_stderr", target_stderr)
    prepared = plan(
        system, packet, duration, step, seed, order, detector, snapshots, precision, splitting, spectrum
    )
    if target_stderr is not None and prepared.run["detector"] is None:
        raise InvalidParameterError("target_stderr needs a detector (or disorder to default it to)")
    fold = _Fold()
    wave = CHUNK * max(2 * threads, 1)
    start = 0
    while start < realizations:
        count = min(wave, realizations - start)
        for chunk in _run_chunks(prepared, start, count, threads):
            fold.add(chunk)
            if progress is not None:
                progress(fold.count, realizations)
            if target_stderr is not None and fold.count >= 2:
                transmission = fold.transmission()
                if stderr(transmission) < target_stderr:
                    return _finish(fold, prepared.seed, prepared.times, system, prepared.modes_info)
        start += count
    return _finish(fold, prepared.seed, prepared.times, system, prepared.modes_info)


def ensemble_partial(
    system: System,
    packet,
    duration: float,
    step: float,
    start: int,
    count: int,
    seed: int = 0,
    order: int = 2,
    detector=None,
    snapshots=(),
    threads: int | None = None,
    precision: str = "double",
    splitting: str | None = None,
    spectrum: bool | None = None,
) -> EnsemblePartial:
    """Realizations ``start .. start + count`` (``start`` a multiple of :data:`CHUNK`), unfolded.

    :func:`merge_partials` of consecutive partials equals :func:`ensemble` on
    the same realizations, bit for bit.
    """
    start = _checks.integer("start", start, minimum=0)
    count = _checks.integer("count", count, minimum=1)
    if start % CHUNK:
        raise InvalidParameterError(f"start {start} must be a multiple of mottle.CHUNK = {CHUNK}")
    prepared = plan(
        system, packet, duration, step, seed, order, detector, snapshots, precision, splitting, spectrum
    )
    return EnsemblePartial(
        start=start,
        chunks=list(_run_chunks(prepared, start, count, _checks.threads(threads))),
        seed=prepared.seed,
        times=prepared.times,
        spectrum_wavenumbers=prepared.modes_info[0],
        spectrum_energies=prepared.modes_info[1],
    )


def merge_partials(partials, system: System, seed: int | None = None, times=None) -> EnsembleResult:
    """Fold consecutive partials (in index order, from realization 0) into a result.

    ``seed`` and ``times`` default to those the partials carry.
    """
    ordered = sorted(partials, key=lambda p: p.start)
    if not ordered:
        raise InvalidParameterError("merge_partials needs at least one partial")
    fold = _Fold()
    for partial in ordered:
        for chunk in partial.chunks:
            fold.add(chunk)
    first = ordered[0]
    seed = first.seed if seed is None else seed
    times = first.times if times is None else np.asarray(times, dtype=float)
    return _finish(fold, seed, times, system, (first.spectrum_wavenumbers, first.spectrum_energies))
