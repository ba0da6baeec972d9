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
from . import nd
from .propagate import run_arguments, warn_if_coarse
from .realize import realize
from .spectrum import Spectrum, settling_problem, spectrum_config

if TYPE_CHECKING:
    from .._core import _BoxTerm, _Drive, _EnsembleRun, _Mesh, _Packets, _Setup, _Term

CHUNK: int = _core.CHUNK
"""Realizations per chunk: the unit of work and of reproducible reduction."""

_SCALARS = (
    "transmission",
    "reflection",
    "norm",
    "absorbed_left",
    "absorbed_right",
    "absorbed_sides",
    "quasimomentum",
)
_PER_AXIS = ("position", "position_squared", "mean_momentum", "momentum_squared")
_PER_SNAPSHOT = ("position", "position_squared", "participation", "mean_momentum", "momentum_squared")
_PER_MODE = ("spectrum", "spectrum_settling")
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
    step: float = math.nan
    duration: float = math.nan

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

    def reached(self, target_stderr: float | None) -> bool:
        """Whether the transmission's standard error is below ``target_stderr`` (None: never).

        The stopping rule of ``target_stderr``, checked after every chunk from two realizations
        on, in process and on a cluster alike.
        """
        return target_stderr is not None and self.count >= 2 and stderr(self.transmission()) < target_stderr


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
    ratio ``sum |psi|^4 dx / (sum |psi|^2 dx)^2`` (1/length), per snapshot;
    ``momentum_squared`` is ``<p^2>`` per snapshot as a :class:`Stat` over
    realizations (``samples["momentum_squared"]``, with ``samples["mean_momentum"]``).
    With a twisted boundary the per-realization ``<p>`` and ``<p^2>`` are at each
    realization's exact momenta ``hbar (n + beta) 2 pi / L``; the ``momentum``
    profile is accumulated by mode ``n``, so with a drawn ``beta`` bin ``n`` holds
    every momentum in ``[n, n + 1) 2 pi hbar / L`` and ``k`` are the bins' left
    edges plus the fixed ``beta`` (``+ 1/2``, the bins' centres, for a drawn one).
    ``step`` is the step the runs used (``duration / ceil(duration / step)``, see
    :func:`mottle.propagate`). With a spectrum, the runs warn
    (:class:`UnderResolvedWarning`) when ``T(k)`` has not settled by their end.

    On a 2D/3D grid the profiles have a leading snapshot axis and then the grid's shape, ``x`` and
    ``k`` are tuples of the axes (``k`` increasing, k = 0 at index ``N // 2``), the per-axis
    samples (``position``, ``position_squared``, ``mean_momentum``, ``momentum_squared``) are
    ``(count, snapshots, axes)``, ``second_moment`` is per snapshot and axis,
    ``samples["absorbed_sides"]`` holds what the layers across axis 0 took, and
    :meth:`radial_momentum` averages the momentum distribution over the angles.
    """

    count: int
    seed: int
    times: np.ndarray
    x: np.ndarray | tuple[np.ndarray, ...]
    k: np.ndarray | tuple[np.ndarray, ...]
    samples: dict
    density: np.ndarray
    density_stderr: np.ndarray
    log_density: np.ndarray
    log_density_stderr: np.ndarray
    momentum: np.ndarray
    spectrum_wavenumbers: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_energies: np.ndarray = field(default_factory=lambda: np.zeros(0))
    step: float = math.nan

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

    @property
    def momentum_squared(self) -> list[Stat]:
        """``<p^2>`` at each snapshot, a :class:`Stat` over realizations (``<|p|^2>``, summed over
        the axes, on a 2D/3D grid; ``samples["momentum_squared"]`` keeps them apart)."""
        values = np.asarray(self.samples["momentum_squared"], dtype=float)
        if values.ndim == 3:
            values = values.sum(axis=2)
        return [Stat.of(values[:, s]) for s in range(values.shape[1])]

    def radial_momentum(self, bins: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """On a 2D/3D grid: ``(q, n(q))``, the mean momentum distribution averaged over the angles
        at each snapshot, ``n(q)`` of shape ``(snapshots, bins)`` (see
        :func:`mottle.dynamics.nd.radial_momentum` for the bins)."""
        if not isinstance(self.k, tuple):
            raise InvalidParameterError("radial_momentum needs a 2D or 3D grid; in 1D use .momentum")
        return nd.radial_momentum(self.k, self.momentum, bins)

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Every field as a numpy array (samples prefixed ``samples/``), for stores."""
        arrays: dict[str, np.ndarray] = {}
        for item in fields(self):
            value = getattr(self, item.name)
            if item.name == "samples":
                arrays.update({f"samples/{name}": np.asarray(v) for name, v in value.items()})
            elif isinstance(value, tuple):  # the axes of a 2D/3D grid, one array each
                arrays.update({f"{item.name}/{a}": np.asarray(v) for a, v in enumerate(value)})
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
            if f"{item.name}/0" in arrays:  # axes of a 2D/3D grid
                axes = sorted(
                    (int(key.split("/", 1)[1]), key) for key in arrays if key.startswith(f"{item.name}/")
                )
                values[item.name] = tuple(np.asarray(arrays[key]) for _, key in axes)
                continue
            if item.name not in arrays:
                continue  # a field added since the store was written keeps its default
            value = np.asarray(arrays[item.name])
            if item.name in ("count", "seed"):
                values[item.name] = int(value)
            elif item.name == "step":
                values[item.name] = float(value)
            else:
                values[item.name] = value
        return cls(samples=samples, **values)


def _finish(
    fold: _Fold,
    seed: int,
    times: np.ndarray,
    system: System,
    modes_info,
    step: float = math.nan,
    duration: float = math.nan,
) -> EnsembleResult:
    count = fold.count
    if count == 0 or fold.sums is None:
        raise InvalidParameterError("an ensemble needs at least one realization")
    samples = {name: np.concatenate(values) for name, values in fold.samples.items()}
    snapshots = times.size
    grid = system.grid
    for name in _PER_SNAPSHOT:
        per_axis = grid.ndim > 1 and name in _PER_AXIS
        samples[name] = samples[name].reshape(count, snapshots, *((grid.ndim,) if per_axis else ()))
    if grid.ndim == 1:
        samples.pop("absorbed_sides")  # no other faces: the 1D samples stay as they were
    modes = modes_info[0].size
    samples["spectrum"] = samples["spectrum"].reshape(count, modes)
    # How T(k) settled over the run: checked here, not kept.
    settling = samples.pop("spectrum_settling").reshape(count, 2 * modes)
    if modes:
        problem = settling_problem(samples["spectrum"], settling, modes_info[0], duration)
        if problem is not None:
            warnings.warn(problem, UnderResolvedWarning, stacklevel=3)
    shape = (snapshots, *grid.shape)
    sums = {name: value.reshape(shape) for name, value in fold.sums.items()}

    density, density_stderr = stderr_from_sums(sums["density"], sums["density_squared"], count)
    log_density, log_density_stderr = stderr_from_sums(
        sums["log_density"], sums["log_density_squared"], count
    )
    momentum = np.fft.fftshift(sums["momentum"] / count, axes=tuple(range(1, grid.ndim + 1)))
    if grid.ndim == 1:
        x: Any = np.asarray(grid.x)
        k: Any = np.fft.fftshift(np.asarray(grid.k)) + _bin_shift(grid)
    else:
        x = tuple(np.asarray(axis) for axis in grid.axes)
        k = tuple(np.fft.fftshift(np.asarray(axis)) for axis in grid.k)
    return EnsembleResult(
        count=count,
        seed=seed,
        times=times,
        x=x,
        k=k,
        samples=samples,
        density=density,
        density_stderr=density_stderr,
        log_density=log_density,
        log_density_stderr=log_density_stderr,
        momentum=momentum,
        spectrum_wavenumbers=np.asarray(modes_info[0], dtype=float),
        spectrum_energies=np.asarray(modes_info[1], dtype=float),
        step=float(step),
    )


def _bin_shift(grid) -> float:
    """Where the momentum profile's bins sit: the fixed twist, or the bins' centres for a drawn one."""
    from ..specs.packets import is_drawn

    if not grid.twisted:
        return 0.0
    return grid.shift(0.5) if is_drawn(grid.quasimomentum) else grid.shift()


@dataclass(frozen=True, eq=False)
class _Plan:
    """Everything a call to the core needs, validated once."""

    setup: _Setup
    run: _EnsembleRun
    absorption: np.ndarray
    static: np.ndarray
    disorder: list[_Term]
    packets: _Packets
    times: np.ndarray
    seed: int
    modes_info: tuple
    step: float
    duration: float
    drive: _Drive | None = None
    mesh: tuple[_Mesh, list[_BoxTerm]] | None = None


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
    if isinstance(system, System) and nd.is_box(system):
        nd.check_run(system, packet, spectrum=spectrum)
    if not isinstance(packet, (GaussianPacket, Wavefunction, RandomPacket, PacketList)):
        raise InvalidTypeError(
            "packet must be a GaussianPacket, Wavefunction, RandomPacket or PacketList, "
            f"got {type(packet).__name__}"
        )
    arguments = run_arguments(system, duration, step, snapshots, detector, order, splitting, True)
    packet.validate(system.grid)
    seed = _checks.integer("seed", seed, minimum=0)
    _checks.choice("precision", precision, ("double", "single"))
    first = packet if isinstance(packet, (GaussianPacket, Wavefunction)) else packet.packet(seed, 0)
    from .drive import felt_potential

    if spectrum not in (None, True, False):
        raise InvalidTypeError(f"spectrum must be None, True or False, got {spectrum!r}")
    if nd.is_box(system):
        nd.warn_if_coarse(system, first, arguments.step, felt_potential(system, realize(system, seed, 0)))
        spectrum = None
    else:
        warn_if_coarse(system, first, arguments.step, felt_potential(system, realize(system, seed, 0)))
        spectrum = spectrum_config(
            system, packet, arguments.bounds, arguments.step, arguments.duration, spectrum
        )
    modes_info = (
        (np.zeros(0), np.zeros(0))
        if spectrum is None
        else (np.asarray(system.grid.k)[spectrum["modes"]], np.asarray(spectrum["energies"]))
    )
    return _Plan(
        setup=_requests.setup(system, arguments.step, arguments.splitting),
        run=_requests.ensemble_run(
            arguments.steps,
            arguments.pauses,
            arguments.bounds,
            seed,
            precision,
            spectrum,
            offsets=arguments.offsets,
        ),
        absorption=system.absorption(),
        static=np.ravel(system.static_potential()),
        disorder=[] if nd.is_box(system) else _requests.disorder_terms(system.disorder),
        mesh=(
            (_requests.mesh(system.grid), _requests.box_disorder_terms(system.disorder, system.grid))
            if nd.is_box(system) and system.disorder is not None
            else None
        ),
        packets=_requests.packets(system.grid, packet),
        times=arguments.times,
        seed=seed,
        modes_info=modes_info,
        step=arguments.step,
        duration=arguments.duration,
        drive=_requests.drive(system, arguments.step, arguments.steps),
    )


def _run_chunks(plan: _Plan, start: int, count: int, threads: int) -> list:
    run = _requests.share(plan.run, start, count, threads)
    return _core.ensemble_chunks(
        plan.setup, run, plan.absorption, plan.static, plan.disorder, plan.packets, plan.drive, plan.mesh
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
            if fold.reached(target_stderr):
                return _finish(
                    fold,
                    prepared.seed,
                    prepared.times,
                    system,
                    prepared.modes_info,
                    prepared.step,
                    prepared.duration,
                )
        start += count
    return _finish(
        fold, prepared.seed, prepared.times, system, prepared.modes_info, prepared.step, prepared.duration
    )


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
        step=prepared.step,
        duration=prepared.duration,
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
    modes_info = (first.spectrum_wavenumbers, first.spectrum_energies)
    return _finish(fold, seed, times, system, modes_info, first.step, first.duration)
