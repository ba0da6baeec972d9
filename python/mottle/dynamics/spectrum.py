"""Energy-resolved transmission from time-dependent runs: which wavenumbers, where to record,
whether the run resolves them, and the :class:`Spectrum` the ensemble's ``result.spectrum`` is.

The core's half is ``rust/src/spectrum.rs`` (the time transform at the probes).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from .. import _requests, limits
from ..analysis.statistics import stderr
from ..errors import InvalidParameterError, UnderResolvedWarning
from ..specs.packets import GaussianPacket, PacketList, RandomPacket
from ..specs.system import System

_MAX_MODES = limits.SPECTRUM_MODES

NEGLIGIBLE_POTENTIAL = 1e-12
"""Past the detector, ``|V| < NEGLIGIBLE_POTENTIAL x E`` counts as free space for ``result.spectrum``,
with ``E`` the lowest resolved kinetic energy above the band bottom: such a tail (a Gaussian's
1e-100) reflects an amplitude of order ``|V| / E``, far below what the spectrum resolves."""

SETTLED = 1e-2
"""``result.spectrum`` warns when ``T(k)`` (the mean over realizations) changed by more than this over
the run's last quarter; the duration it names is the one after which the change still to come,
extrapolated from the run's third and last quarters, falls below it."""


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
    entries: list = (
        list(packet.corners())
        if isinstance(packet, RandomPacket)
        else list(packet.packets)
        if isinstance(packet, PacketList)
        else [packet]
    )
    centers = [p.center for p in entries if hasattr(p, "center")]
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


def spectrum_config(system: System, packet, bounds, step: float, duration: float, wanted):
    """What the core needs to resolve the transmission in energy, or None.

    ``wanted=None`` resolves it where it can be done well and skips it silently
    otherwise; ``True`` insists (errors without a free right side, warns when
    under-resolved); ``False`` skips it.
    """
    if wanted is False:
        return None
    from .drive import is_driven

    if is_driven(system):
        # T(E) from the time transform needs a static Hamiltonian (energy is not conserved otherwise).
        if wanted:
            raise InvalidParameterError(
                "spectrum=True needs a static, periodic system: drop the time-dependent terms or the twist"
            )
        return None
    if bounds is None or bounds[1] >= system.grid.points:
        if wanted:
            raise InvalidParameterError("spectrum=True needs a detector (or disorder to default it to)")
        return None
    grid, model = system.grid, system.model
    right_start = system.layer_bounds()[1]
    modes = _band_modes(system, packet)
    if modes.size == 0:
        return None
    k = np.asarray(grid.k)[modes]
    # Potential far below the packet's energy scatters nothing the spectrum resolves.
    scale = float(np.min(model.kinetic(k, grid.dx)) - model.band_bottom(grid.dx))
    negligible = NEGLIGIBLE_POTENTIAL * scale
    static = system.static_potential()
    felt = np.flatnonzero(np.abs(static) > negligible)
    # The free side starts past the detector, the last potential value felt and the disorder.
    edge = max(bounds[1], int(felt[-1]) + 1 if felt.size else 0)
    if system.disorder is not None:
        edge = max(edge, int(np.searchsorted(grid.x, system.disorder.stop, side="left")))
    # A cell-averaged edge spills into at most the next point; potential farther right
    # would make the spectrum describe a different sample than the detector counts.
    if edge >= right_start or edge > bounds[1] + 2:
        if wanted:
            detector_edge = float(grid.x[min(bounds[1], grid.points - 1)])
            beyond = felt[felt >= bounds[1] + 2]
            if system.disorder is not None and system.disorder.stop > detector_edge:
                where = f"disorder reaches x = {system.disorder.stop:.6g}"
            else:
                worst = int(beyond[np.argmax(np.abs(static[beyond]))])
                where = (
                    f"the potential is {static[worst]:.3g} at x = {grid.x[worst]:.6g} (nonzero from "
                    f"x = {grid.x[beyond[0]]:.6g} to {grid.x[beyond[-1]]:.6g})"
                )
            raise InvalidParameterError(
                f"spectrum=True needs a free right side: {where}, past the detector's right edge "
                f"x = {detector_edge:.6g} and before the right absorbing layer; |V| below "
                f"{NEGLIGIBLE_POTENTIAL:g} x the lowest resolved energy ({negligible:.3g}) is ignored. "
                "Move the detector's right edge past it, or pass spectrum=False"
            )
        return None
    # Record a quarter of the way from the detector's edge to the absorbing layer: next to
    # a sharp edge of the sample the grid's spectral Laplacian leaves a non-propagating near
    # field at the same energy (measured: 2.5e-3 in T one grid point from a barrier's edge);
    # farther on, the run must last longer for the slow components to arrive.
    probe = edge + (right_start - edge) // 4
    # The second probe a quarter wavelength of the fastest mode further on, to
    # separate the transmitted wave from what the absorber sends back.
    offset = max(1, round(np.pi / (2.0 * k.max()) / grid.dx))
    probes = [int(probe), int(min(probe + offset, grid.points - 1))]
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
        probes, [float(grid.x[p]) for p in probes], modes.tolist(), k.tolist(), energies, velocities
    )


def settling_problem(samples: np.ndarray, settling: np.ndarray, wavenumbers, duration: float) -> str | None:
    """Whether ``T(k)`` still changes at the end of the run, and the duration that would do.

    ``samples`` is ``T(k)`` per realization (``count x modes``) from the whole run, ``settling`` the same
    from its first half and first three quarters (``count x 2 modes``). The travel-time warning sees
    only when the slowest free wave arrives; a narrow resonance releases its wave over its lifetime,
    and ``T`` from a run that ends too early misses the tail. Over each later quarter the change of
    ``T`` shrinks by a ratio ``r`` (``exp(-Gamma duration / 4 hbar)`` for a resonance of width Gamma);
    the change still to come is extrapolated geometrically, ``|d| r / (1 - r)``, and the duration
    named is the one after which it falls below :data:`SETTLED`. The check looks back a quarter of
    the run, so a run of the named duration may still warn (measured on a double-barrier resonance:
    T off by 0.10 at the travel-time duration, 2.2e-3 at the named one, which warned again).
    """
    samples = np.asarray(samples, dtype=float)
    if samples.size == 0 or not math.isfinite(duration):
        return None
    count, modes = samples.shape
    cuts = np.concatenate(
        [np.asarray(settling, dtype=float).reshape(count, 2, modes), samples[:, None]], axis=1
    )
    # Where a drawn packet carries (almost) no weight its T is noise, not a transmission: skip those.
    valid = np.all(np.isfinite(cuts) & (cuts <= 1.1), axis=1)
    counted = valid.sum(axis=0)
    means = np.where(valid[:, None], cuts, 0.0).sum(axis=0) / np.maximum(counted, 1)
    third = np.where(counted > 0, np.abs(means[1] - means[0]), 0.0)
    last = np.where(counted > 0, np.abs(means[2] - means[1]), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(third > 0.0, last / third, np.inf)
    geometric = ratio < 1.0
    with np.errstate(invalid="ignore"):
        to_come = np.where(geometric, last * ratio / np.where(geometric, 1.0 - ratio, 1.0), last)
    unsettled = np.flatnonzero(last > SETTLED)
    if unsettled.size == 0:
        return None
    quarter = duration / 4.0
    needed = 0.0
    for m in unsettled:
        if geometric[m] and ratio[m] > 0.0:
            # |d| r^(n+1) / (1 - r) <= SETTLED after n more quarters.
            more = math.log(SETTLED * (1.0 - ratio[m]) / (last[m] * ratio[m])) / math.log(ratio[m])
            needed = max(needed, duration + math.ceil(max(more, 1.0)) * quarter)
        else:
            needed = max(needed, 2.0 * duration)
    worst = int(unsettled[np.argmax(to_come[unsettled])])
    return (
        f"result.spectrum has not settled by the end of the run: T(k) at k = {wavenumbers[worst]:.4g} "
        f"changed by {last[worst]:.2g} over the run's last quarter and would change by about "
        f"{to_come[worst]:.2g} more (a narrow resonance releasing its wave slowly); "
        f"use duration >= {needed:.4g}"
    )
