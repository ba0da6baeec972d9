"""Initial states: the minimum-uncertainty Gaussian packet and user wavefunctions."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning
from .grid import Grid
from .kinds import Kinded

_TAIL = limits.PACKET_TAIL


@dataclass(frozen=True)
class GaussianPacket(Kinded):
    """``psi0(x) = (2 pi s**2)**(-1/4) exp(-(x-x0)**2/(4 s**2) + i k0 (x-x0))``.

    ``center`` is x0, ``wavenumber`` k0 and ``width`` s the rms width of
    ``|psi|**2``, so that ``s * s_p = hbar/2`` with ``s_k = 1/(2 s)``. On the grid
    the distance ``x - x0`` is taken to the nearest periodic image, and the
    sampled packet is normalized so that ``sum |psi|**2 dx = 1`` exactly.
    """

    family = "packet"
    kind = "gaussian"

    center: float
    wavenumber: float
    width: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "center", _checks.real("packet center", self.center))
        object.__setattr__(self, "wavenumber", _checks.real("packet wavenumber", self.wavenumber))
        object.__setattr__(self, "width", _checks.positive("packet width", self.width))

    @property
    def wavenumber_spread(self) -> float:
        """rms width of ``|phi(k)|**2``, ``1 / (2 width)``."""
        return 0.5 / self.width

    def mean_kinetic(self, model, dx: float) -> float:
        """Mean kinetic energy above the band bottom (continuum: ``hbar**2 (k0**2 + s_k**2) / 2m``)."""
        hbar_sq_over_2m = model.hbar**2 / (2.0 * model.effective_mass(dx))
        return hbar_sq_over_2m * (self.wavenumber**2 + self.wavenumber_spread**2)

    def validate(self, grid: Grid) -> None:
        _checks.one_dimensional("GaussianPacket", grid)
        if not grid.contains(self.center):
            raise InvalidParameterError(
                f"packet center {self.center} lies outside the box [{grid.start}, {grid.stop})"
            )
        if 2.0 * _TAIL * self.width > grid.length:
            raise InvalidParameterError(
                f"packet width {self.width} is too wide for the box of length {grid.length}: "
                f"the packet needs {2 * _TAIL:g} widths, so use width <= {grid.length / (2 * _TAIL):g}"
            )
        reach = abs(self.wavenumber) + _TAIL * self.wavenumber_spread
        if reach > grid.k_max:
            raise InvalidParameterError(
                f"packet wavenumber {self.wavenumber} with spread {self.wavenumber_spread:.4g} reaches "
                f"|k| = {reach:.4g}, beyond the grid's largest wavenumber pi/dx = {grid.k_max:.4g}; "
                f"use more points (at least {math.ceil(reach * grid.length / math.pi)}) or a smaller |k0|"
            )
        edge = (0.5 * grid.length / self.width) ** 2 / 4.0
        # 18 is (17/2)**2 / 4 rounded down: a box of 17 widths passes.
        if edge < 18.0:
            warnings.warn(
                f"the packet (width {self.width}) still has amplitude {math.exp(-edge):.1e} half a box "
                f"away; a box longer than {17 * self.width:g} keeps it whole",
                UnderResolvedWarning,
                stacklevel=3,
            )

    def values(self, grid: Grid) -> np.ndarray:
        offset = np.asarray(grid.x) - self.center
        offset -= grid.length * np.round(offset / grid.length)
        psi = np.exp(-np.square(offset) / (4.0 * self.width**2) + 1j * self.wavenumber * offset)
        return psi / math.sqrt(np.sum(np.abs(psi) ** 2) * grid.dx)


@dataclass(frozen=True, eq=False)
class Wavefunction:
    """A user-supplied initial state at the grid points, normalized on the grid."""

    table: np.ndarray

    def __init__(self, values) -> None:
        array = np.asarray(values)
        if array.ndim != 1:
            raise InvalidParameterError(f"wavefunction must be one-dimensional, got shape {array.shape}")
        table = _checks.real_array("wavefunction", array, array.shape, dtype=np.complex128)
        if not np.any(table):
            raise InvalidParameterError("wavefunction is zero everywhere; it cannot be normalized")
        object.__setattr__(self, "table", table)

    def validate(self, grid: Grid) -> None:
        _checks.one_dimensional("Wavefunction", grid)
        if self.table.shape != (grid.points,):
            raise InvalidParameterError(
                f"wavefunction has shape {self.table.shape}; the grid needs ({grid.points},)"
            )

    def mean_kinetic(self, model, dx: float) -> float:
        phi = np.fft.fft(self.table)
        k = 2.0 * np.pi * np.fft.fftfreq(self.table.size, dx)
        weight = np.abs(phi) ** 2
        energy = model.kinetic(k, dx) - model.band_bottom(dx)
        return float(np.sum(weight * energy) / np.sum(weight))

    def values(self, grid: Grid) -> np.ndarray:
        return self.table / math.sqrt(np.sum(np.abs(self.table) ** 2) * grid.dx)


Packet = GaussianPacket | Wavefunction


@dataclass(frozen=True)
class Uniform:
    """A packet parameter drawn uniformly from ``[low, high)`` per realization."""

    low: float
    high: float

    def __post_init__(self) -> None:
        low = _checks.real("Uniform low", self.low)
        high = _checks.real("Uniform high", self.high)
        if not low < high:
            raise InvalidParameterError(f"Uniform needs low < high, got low={low}, high={high}")
        object.__setattr__(self, "low", low)
        object.__setattr__(self, "high", high)

    def extremes(self) -> tuple[float, float]:
        return self.low, self.high

    def middle(self) -> float:
        return 0.5 * (self.low + self.high)


@dataclass(frozen=True)
class Normal:
    """A packet parameter drawn from a normal distribution per realization.

    Validation checks the packets at ``mean +- 6 std`` (a draw beyond has
    probability 2e-9).
    """

    mean: float
    std: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "mean", _checks.real("Normal mean", self.mean))
        object.__setattr__(self, "std", _checks.positive("Normal std", self.std))

    def extremes(self) -> tuple[float, float]:
        return self.mean - 6.0 * self.std, self.mean + 6.0 * self.std

    def middle(self) -> float:
        return self.mean


def is_drawn(value) -> bool:
    """Whether ``value`` is drawn per realization (a :class:`Uniform` or :class:`Normal`), not fixed."""
    return isinstance(value, (Uniform, Normal))


def _extremes(value) -> tuple[float, ...]:
    return value.extremes() if is_drawn(value) else (float(value),)


@dataclass(frozen=True)
class RandomPacket:
    """A Gaussian packet whose ``center``, ``wavenumber`` and ``width`` may each be
    a number or drawn per realization (:class:`Uniform`, :class:`Normal`).

    The draws of realization ``r`` come from the counter-based stream keyed by
    (seed, r), so ``propagate(..., index=r)`` starts from the same packet as
    realization ``r`` of ``ensemble``. Every packet the distributions can reach
    (checked at their extremes) must fit the grid.
    """

    center: float | Uniform | Normal
    wavenumber: float | Uniform | Normal
    width: float | Uniform | Normal

    def __post_init__(self) -> None:
        for name in ("center", "wavenumber", "width"):
            value = getattr(self, name)
            if not is_drawn(value):
                object.__setattr__(self, name, _checks.real(f"packet {name}", value))
        if min(_extremes(self.width)) <= 0.0:
            raise InvalidParameterError(
                f"packet width {self.width} can reach widths <= 0; keep the whole distribution positive"
            )

    def corners(self) -> list[GaussianPacket]:
        return [
            GaussianPacket(c, k, s)
            for c in _extremes(self.center)
            for k in _extremes(self.wavenumber)
            for s in _extremes(self.width)
        ]

    def validate(self, grid: Grid) -> None:
        for packet in self.corners():
            packet.validate(grid)

    def mean_kinetic(self, model, dx: float) -> float:
        return min(packet.mean_kinetic(model, dx) for packet in self.corners())

    def packet(self, seed: int, index: int) -> GaussianPacket:
        """The packet of realization ``index`` of ``seed``."""
        from .. import _core, _requests

        center, wavenumber, width = _core.draw_packet(_requests.packets(None, self), seed, index)
        return GaussianPacket(center, wavenumber, width)


@dataclass(frozen=True)
class PacketList:
    """An explicit list of initial states; realization ``r`` starts from ``packets[r % len]``."""

    packets: tuple

    def __init__(self, packets) -> None:
        packets = tuple(packets)
        if not packets:
            raise InvalidParameterError("PacketList needs at least one packet")
        for packet in packets:
            if not isinstance(packet, (GaussianPacket, Wavefunction)):
                raise InvalidTypeError(
                    f"PacketList entries must be GaussianPacket or Wavefunction, got {type(packet).__name__}"
                )
        object.__setattr__(self, "packets", packets)

    def validate(self, grid: Grid) -> None:
        for packet in self.packets:
            packet.validate(grid)

    def mean_kinetic(self, model, dx: float) -> float:
        return min(packet.mean_kinetic(model, dx) for packet in self.packets)

    def packet(self, seed: int, index: int):
        return self.packets[index % len(self.packets)]
