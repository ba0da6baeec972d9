"""Initial states: the minimum-uncertainty Gaussian packet and user wavefunctions."""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning
from .grid import _AXIS_NAMES, Grid, shape_mismatch
from .grid import _axis as _along
from .kinds import Kinded

_TAIL = limits.PACKET_TAIL


@dataclass(frozen=True)
class GaussianPacket(Kinded):
    """``psi0(x) = (2 pi s**2)**(-1/4) exp(-(x-x0)**2/(4 s**2) + i k0 (x-x0))``.

    ``center`` is x0, ``wavenumber`` k0 and ``width`` s the rms width of
    ``|psi|**2``, so that ``s * s_p = hbar/2`` with ``s_k = 1/(2 s)``. On the grid
    the distance ``x - x0`` is taken to the nearest periodic image, and the
    sampled packet is normalized so that ``sum |psi|**2 dx = 1`` exactly.

    **2D and 3D.** ``center=(x0, y0[, z0])`` and ``wavenumber=(kx, ky[, kz])`` make
    the product of one such Gaussian per axis, each with its own ``width``
    (a tuple, or one number for every axis: an isotropic packet), ``s`` along
    each axis again the rms width of ``|psi|**2`` along it. It goes on a grid
    with as many axes; :meth:`values` is an array of the grid's shape (axis 0
    first, C order) with ``sum |psi|**2 dV = 1``, ``dV = dx * dy [* dz]``.
    """

    family = "packet"
    kind = "gaussian"

    center: float
    wavenumber: float
    width: float

    def __post_init__(self) -> None:
        center: Any = self.center
        wavenumber: Any = self.wavenumber
        width: Any = self.width
        if _is_sequence(center) or _is_sequence(wavenumber):
            self._init_box(center, wavenumber, width)
            return
        if _is_sequence(width):
            raise InvalidParameterError(
                f"packet width {width!r} has {len(width)} entries but the packet center "
                f"{center!r} is one number: give center and wavenumber one entry per axis too"
            )
        object.__setattr__(self, "center", _checks.real("packet center", center))
        object.__setattr__(self, "wavenumber", _checks.real("packet wavenumber", wavenumber))
        object.__setattr__(self, "width", _checks.positive("packet width", width))

    def _init_box(self, center: Any, wavenumber: Any, width: Any) -> None:
        """A 2D/3D packet: one center, wavenumber and width per axis (a scalar width: every axis)."""
        if not _is_sequence(center):
            raise InvalidParameterError(
                f"packet wavenumber {wavenumber!r} has {len(wavenumber)} entries but the center "
                f"{center!r} is one number: give center=(x0, y0[, z0]), one entry per axis"
            )
        ndim = len(center)
        if ndim not in (2, 3):
            raise InvalidParameterError(
                f"packet center {tuple(center)!r} has {ndim} entries; a packet has 1, 2 or 3 axes "
                "(a number, (x0, y0) or (x0, y0, z0))"
            )
        object.__setattr__(self, "center", _axis_values("packet center", center, ndim, _checks.real))
        object.__setattr__(
            self, "wavenumber", _axis_values("packet wavenumber", wavenumber, ndim, _checks.real)
        )
        widths = width if _is_sequence(width) else (width,) * ndim
        object.__setattr__(self, "width", _axis_values("packet width", widths, ndim, _checks.positive))

    @property
    def ndim(self) -> int:
        """Number of axes of the packet (1 for numbers, else the length of ``center``)."""
        center: Any = self.center
        return len(center) if isinstance(center, tuple) else 1

    def per_axis(self) -> tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]:
        """``(center, wavenumber, width)``, each a tuple with one entry per axis (1D: 1-tuples)."""
        parameters: Any = (self.center, self.wavenumber, self.width)
        if self.ndim == 1:
            parameters = tuple((value,) for value in parameters)
        return parameters

    @property
    def wavenumber_spread(self) -> Any:
        """rms width of ``|phi(k)|**2``, ``1 / (2 width)`` (a tuple, one per axis, in 2D/3D)."""
        width: Any = self.width
        if isinstance(width, tuple):
            return tuple(0.5 / s for s in width)
        return 0.5 / width

    def mean_kinetic(self, model, dx) -> float:
        """Mean kinetic energy above the band bottom (continuum: ``hbar**2 (k0**2 + s_k**2) / 2m``;
        in 2D/3D, with ``dx`` one spacing per axis, the sum of that over the axes, each with the
        model's mass at its spacing)."""
        if self.ndim > 1:
            _, wavenumbers, widths = self.per_axis()
            return sum(
                model.hbar**2 / (2.0 * model.effective_mass(h)) * (k0**2 + (0.5 / s) ** 2)
                for h, k0, s in zip(dx, wavenumbers, widths, strict=True)
            )
        hbar_sq_over_2m = model.hbar**2 / (2.0 * model.effective_mass(dx))
        return hbar_sq_over_2m * (self.wavenumber**2 + self.wavenumber_spread**2)

    def validate(self, grid: Grid) -> None:
        if self.ndim != grid.ndim:
            raise InvalidParameterError(_axes_mismatch(self, grid))
        box: Any = grid
        axes = zip(
            *(_one_per_axis(getattr(box, name)) for name in ("start", "stop", "length", "k_max")),
            *self.per_axis(),
            strict=True,
        )
        for a, (start, stop, length, k_max, center, wavenumber, width) in enumerate(axes):
            # On a 1D grid the messages name no axis (and stay as they were).
            which, along = (f"[{a}] ({_along(a)})", f" {_along(a)}") if grid.ndim > 1 else ("", "")
            _validate_axis(start, stop, length, k_max, center, wavenumber, width, which, along)

    def values(self, grid: Grid) -> np.ndarray:
        if grid.ndim > 1:
            return self._box_values(grid)
        offset = np.asarray(grid.x) - self.center
        offset -= grid.length * np.round(offset / grid.length)
        psi = np.exp(-np.square(offset) / (4.0 * self.width**2) + 1j * self.wavenumber * offset)
        return psi / math.sqrt(np.sum(np.abs(psi) ** 2) * grid.dx)

    def _box_values(self, grid: Grid) -> np.ndarray:
        """The product over the axes of the 1D Gaussian along each, normalized on the box."""
        if self.ndim != grid.ndim:
            raise InvalidParameterError(_axes_mismatch(self, grid))
        box: Any = grid
        psi = np.ones(grid.shape, dtype=np.complex128)
        axes = zip(grid.axes, box.length, *self.per_axis(), strict=True)
        for a, (x, length, center, wavenumber, width) in enumerate(axes):
            offset = np.asarray(x) - center
            offset -= length * np.round(offset / length)
            factor = np.exp(-np.square(offset) / (4.0 * width**2) + 1j * wavenumber * offset)
            psi = psi * factor.reshape([-1 if b == a else 1 for b in range(grid.ndim)])
        return psi / math.sqrt(np.sum(np.abs(psi) ** 2) * math.prod(box.dx))


def _one_per_axis(value: Any) -> tuple:
    return value if isinstance(value, tuple) else (value,)


def _validate_axis(start, stop, length, k_max, center, wavenumber, width, which, along) -> None:
    """A packet's checks along one axis; ``which`` (``"[1] (along y)"``) and ``along``
    (``" along y"``) are empty on a 1D grid."""
    if not start <= center < stop:
        raise InvalidParameterError(
            f"packet center{which} {center} lies outside the box{along} [{start}, {stop})"
        )
    if 2.0 * _TAIL * width > length:
        raise InvalidParameterError(
            f"packet width{which} {width} is too wide for the box of length {length}{along}: "
            f"the packet needs {2 * _TAIL:g} widths, so use width <= {length / (2 * _TAIL):g}"
        )
    spread = 0.5 / width
    reach = abs(wavenumber) + _TAIL * spread
    if reach > k_max:
        raise InvalidParameterError(
            f"packet wavenumber{which} {wavenumber} with spread {spread:.4g} reaches "
            f"|k| = {reach:.4g}, beyond the grid's largest wavenumber{along} pi/dx = {k_max:.4g}; "
            f"use more points{along} (at least {math.ceil(reach * length / math.pi)}) or a smaller |k0|"
        )
    edge = (0.5 * length / width) ** 2 / 4.0
    # 18 is (17/2)**2 / 4 rounded down: a box of 17 widths passes.
    if edge < 18.0:
        warnings.warn(
            f"the packet (width{which} {width}) still has amplitude {math.exp(-edge):.1e} half a box "
            f"away{along}; a box longer than {17 * width:g}{along} keeps it whole",
            UnderResolvedWarning,
            stacklevel=4,  # the caller of the caller of validate, as before the N-d work
        )


def _is_sequence(value) -> bool:
    return isinstance(value, (tuple, list, np.ndarray))


def _axis_values(name: str, values, ndim: int, check) -> tuple[float, ...]:
    """``ndim`` checked numbers, one per axis, or an error naming the length expected."""
    if not _is_sequence(values):
        raise InvalidParameterError(
            f"{name} {values!r} is one number but the packet has {ndim} axes: give {ndim} entries "
            f"({', '.join(_AXIS_NAMES[:ndim])})"
        )
    values = tuple(values)
    if len(values) != ndim:
        raise InvalidParameterError(
            f"{name} has {len(values)} entries but the packet center has {ndim}: give {ndim} "
            f"(one per axis {', '.join(_AXIS_NAMES[:ndim])}); got {name.split()[-1]}={values!r}"
        )
    return tuple(check(f"{name}[{a}] ({_along(a)})", v) for a, v in enumerate(values))


def _axes_mismatch(packet: GaussianPacket, grid: Grid) -> str:
    if packet.ndim == 1:
        return (
            f"packet center {packet.center!r} is one number (a 1D packet) but the grid has {grid.ndim} "
            f"axes, shape {grid.shape}: give center, wavenumber (and width, or one width for every "
            f"axis) {grid.ndim} entries each"
        )
    return (
        f"the packet has {packet.ndim} axes (center {packet.center!r}) but the grid has {grid.ndim}, "
        f"shape {grid.shape}: give center, wavenumber and width {grid.ndim} entries each"
        + (" (numbers on a 1D grid)" if grid.ndim == 1 else "")
    )


@dataclass(frozen=True, eq=False)
class Wavefunction:
    """A user-supplied initial state at the grid points, normalized on the grid.

    ``values`` has the grid's shape: ``(points,)`` in 1D, ``(Nx, Ny[, Nz])`` on a
    2D/3D box (axis 0 first, C order), normalized so that ``sum |psi|**2 dV = 1``.
    """

    table: np.ndarray

    def __init__(self, values) -> None:
        array = np.asarray(values)
        if array.ndim not in (1, 2, 3):
            raise InvalidParameterError(
                f"wavefunction must have 1, 2 or 3 axes (the grid's shape), got shape {array.shape}"
            )
        table = _checks.real_array("wavefunction", array, array.shape, dtype=np.complex128)
        if not np.any(table):
            raise InvalidParameterError("wavefunction is zero everywhere; it cannot be normalized")
        object.__setattr__(self, "table", table)

    def validate(self, grid: Grid) -> None:
        if grid.ndim == 1:
            if self.table.shape != (grid.points,):
                raise InvalidParameterError(
                    f"wavefunction has shape {self.table.shape}; the grid needs ({grid.points},)"
                )
            return
        if self.table.shape != grid.shape:
            raise InvalidParameterError(
                f"wavefunction has shape {self.table.shape}; the grid needs {grid.shape}"
                + shape_mismatch(self.table.shape, grid.shape)
            )

    def mean_kinetic(self, model, dx) -> float:
        """Mean kinetic energy above the band bottom (in 2D/3D ``dx`` is one spacing per axis and the
        kinetic energy the sum over the axes)."""
        if self.table.ndim > 1:
            phi = np.fft.fftn(self.table)
            weight = np.abs(phi) ** 2
            energy = np.zeros(self.table.shape)
            for a, (n, h) in enumerate(zip(self.table.shape, dx, strict=True)):
                k = 2.0 * np.pi * np.fft.fftfreq(n, h)
                along = np.asarray(model.kinetic(k, h) - model.band_bottom(h), dtype=float)
                energy = energy + along.reshape([-1 if b == a else 1 for b in range(self.table.ndim)])
            return float(np.sum(weight * energy) / np.sum(weight))
        phi = np.fft.fft(self.table)
        k = 2.0 * np.pi * np.fft.fftfreq(self.table.size, dx)
        weight = np.abs(phi) ** 2
        energy = model.kinetic(k, dx) - model.band_bottom(dx)
        return float(np.sum(weight * energy) / np.sum(weight))

    def values(self, grid: Grid) -> np.ndarray:
        if grid.ndim > 1:
            box: Any = grid
            volume = math.prod(box.dx)
            return self.table / math.sqrt(np.sum(np.abs(self.table) ** 2) * volume)
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
            if _is_sequence(value):
                raise InvalidParameterError(
                    f"RandomPacket {name} {value!r} has one entry per axis, but RandomPacket is 1D only "
                    "for now: on a 2D/3D grid use GaussianPacket, or a PacketList of them"
                )
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
        _checks.one_dimensional("RandomPacket (use a PacketList of GaussianPackets)", grid)
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
