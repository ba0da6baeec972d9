"""Random potentials: each confined to ``[start, stop)`` and summable with ``+``.

Realization ``index`` of seed ``seed`` is generated in the Rust core from a
counter-based stream keyed by (seed, index, term) alone; :func:`mottle.realize`
returns exactly what a run used. Every model states its correlation
``C(x) = <V(x0) V(x0 + x)>`` and power spectrum ``C~(q) = integral C(x) exp(-i q x) dx``
(both analytic; the Born predictions use them).

**2D and 3D.** On a grid of ``ndim`` axes every model is isotropic with the
parameters it has in 1D. Its region is a box: ``start`` and ``stop`` tuples of
``ndim`` positions (the points with ``start[a] <= x_a < stop[a]`` on every axis
``a``), or two numbers, a slab ``[start, stop)`` along axis 0 across the whole
box. ``correlation(r, dimension=d)`` takes the distance ``r = |r|`` and
``power_spectrum(q, dimension=d)`` the wavenumber ``q = |q|``, with
``C~(q) = integral C(r) exp(-i q.r) d^d r``; ``dx`` there is one spacing per
axis (or one number for all).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError
from .grid import Grid, _memory_bytes
from .kinds import Kinded

_MIN_POINTS_PER_CORRELATION = limits.POINTS_PER_CORRELATION
_AXIS_NAMES = ("x", "y", "z")


class Disorder(Kinded):
    """Base of the random models; ``a + b`` is their sum (independent terms).

    A model is a frozen dataclass with a ``kind``: it is registered (:mod:`mottle.specs.kinds`), and
    the study files, the store and the request for the core follow from its fields.
    """

    family = "disorder"

    # A number (1D, or a slab along axis 0) or one position per axis (a box); see the module doc.
    start: float
    stop: float

    def __add__(self, other: object) -> DisorderSum:
        if not isinstance(other, Disorder):
            return NotImplemented
        return DisorderSum(_terms(self) + _terms(other))

    @property
    def terms(self) -> tuple[Disorder, ...]:
        return (self,)

    def correlation(self, x, dx: float | None = None, *, dimension: int = 1) -> np.ndarray:
        raise NotImplementedError

    def power_spectrum(self, q, dx: float | None = None, *, dimension: int = 1) -> np.ndarray:
        raise NotImplementedError

    def region(self, grid: Grid) -> tuple[tuple[float, ...], tuple[float, ...]]:
        """The region on ``grid`` as one ``(start, stop)`` pair of tuples, one entry per axis: a slab
        (numbers) spans the box along axes 1 and 2."""
        if isinstance(self.start, tuple):
            if len(self.start) != grid.ndim:
                raise InvalidParameterError(
                    f"{type(self).__name__} region start={self.start!r}, stop={self.stop!r} has "
                    f"{len(self.start)} entries but the grid has {grid.ndim} axes "
                    f"({', '.join(_AXIS_NAMES[: grid.ndim])}): give one position per axis, or two numbers "
                    "for a slab along x"
                )
            return self.start, tuple(self.stop)
        low, high = np.ravel(grid.start), np.ravel(grid.stop)
        return (self.start, *map(float, low[1:])), (self.stop, *map(float, high[1:]))

    def validate(self, grid: Grid) -> None:
        name = type(self).__name__
        if grid.ndim == 1:
            if isinstance(self.start, tuple):
                raise InvalidParameterError(
                    f"{name} region start={self.start!r}, stop={self.stop!r}: on a 1D grid start and stop "
                    "are numbers"
                )
            if self.start < grid.start or self.stop > grid.stop:
                raise InvalidParameterError(
                    f"{name} region [{self.start}, {self.stop}) must lie inside the box "
                    f"[{grid.start}, {grid.stop})"
                )
        starts, stops = self.region(grid)
        low, high, spacings = np.ravel(grid.start), np.ravel(grid.stop), np.ravel(grid.dx)
        for a, (start, stop, axis) in enumerate(zip(starts, stops, grid.axes, strict=True)):
            along = "" if grid.ndim == 1 else f" along {_AXIS_NAMES[a]}"
            if start < low[a] or stop > high[a]:
                raise InvalidParameterError(
                    f"{name} region [{start}, {stop}){along} must lie inside the box "
                    f"[{low[a]}, {high[a]}){along}"
                )
            ell = getattr(self, "correlation_length", None)
            need = _MIN_POINTS_PER_CORRELATION * spacings[a]
            if ell is not None and ell < need:
                length = high[a] - low[a]
                raise InvalidParameterError(
                    f"{name} correlation_length {ell} is not resolved by the grid spacing "
                    f"{spacings[a]:.4g}{along}: use correlation_length >= {need:.4g} or "
                    f"at least {math.ceil(_MIN_POINTS_PER_CORRELATION * length / ell)} points{along}"
                )
            if not np.any((axis >= start) & (axis < stop)):
                raise InvalidParameterError(f"{name} region [{start}, {stop}){along} holds no grid point")
        if grid.ndim > 1:
            self._check_padded_box(grid, starts, stops)

    def _check_padded_box(self, grid: Grid, starts, stops) -> None:
        """Refuse a correlated term whose periodic box (see ``_PADDING``) would not fit in memory."""
        padding = _PADDING.get(self.kind)
        if padding is None:
            return
        factor, lengths = padding
        ell = float(getattr(self, "correlation_length"))  # noqa: B009 (the padded kinds have one)
        shape = []
        for start, stop, axis, dx in zip(starts, stops, grid.axes, np.ravel(grid.dx), strict=True):
            points = int(np.count_nonzero((axis >= start) & (axis < stop)))
            shape.append(_smooth_size(factor * points + math.ceil(lengths * ell / dx)))
        need = _BYTES_PER_PADDED_POINT * math.prod(shape)
        have = _memory_bytes()
        if need > have:
            raise InvalidParameterError(
                f"{type(self).__name__} on this region is drawn on a periodic box of {tuple(shape)} points, "
                f"about {need / 2**20:.0f} MiB per thread, more than this machine's {have / 2**20:.0f} MiB: "
                "use a smaller region or grid"
            )

    def validate_model(self, model) -> None:
        """Checks that need the kinetic model; the default has none."""


def _terms(model: Disorder) -> tuple[Disorder, ...]:
    return model.terms


def _region(model) -> None:
    start, stop = model.start, model.stop
    if isinstance(start, (tuple, list, np.ndarray)) or isinstance(stop, (tuple, list, np.ndarray)):
        if not (isinstance(start, (tuple, list, np.ndarray)) and isinstance(stop, (tuple, list, np.ndarray))):
            raise InvalidTypeError(
                f"disorder region start={start!r}, stop={stop!r}: give two numbers (1D, or a slab along x) "
                "or two tuples of one position per axis (a box)"
            )
        start, stop = tuple(start), tuple(stop)
        if len(start) != len(stop) or not 2 <= len(start) <= 3:
            raise InvalidParameterError(
                f"disorder region start={start!r}, stop={stop!r}: a box has one start and one stop per "
                "axis, the same number of each (2 or 3)"
            )
        start = tuple(_checks.real(f"start[{a}] (along {_AXIS_NAMES[a]})", v) for a, v in enumerate(start))
        stop = tuple(_checks.real(f"stop[{a}] (along {_AXIS_NAMES[a]})", v) for a, v in enumerate(stop))
        for a, (low, high) in enumerate(zip(start, stop, strict=True)):
            if not low < high:
                raise InvalidParameterError(
                    f"disorder region needs start < stop along {_AXIS_NAMES[a]}, got start={low}, stop={high}"
                )
    else:
        start = _checks.real("start", start)
        stop = _checks.real("stop", stop)
        if not start < stop:
            raise InvalidParameterError(f"disorder region needs start < stop, got start={start}, stop={stop}")
    object.__setattr__(model, "start", start)
    object.__setattr__(model, "stop", stop)


# The periodic box of a correlated term on a 2D/3D grid, per axis: factor * (points of the region)
# + lengths * correlation_length / dx, rounded up to a fast FFT size (rust/src/disorder/mesh.rs). Its
# complex buffer (16 bytes a point) is allocated once per thread.
_PADDING = {"gaussian": (1, 10.0), "speckle": (2, 16.0)}
_BYTES_PER_PADDED_POINT = 16


def _smooth_size(minimum: int) -> int:
    """The least even size 2^a 3^b 5^c (a >= 1) at least ``minimum`` (rust/src/disorder.rs, smooth_size)."""
    half = max((minimum + 1) // 2, 1)
    best = 1 << (half - 1).bit_length()
    p3 = 1
    while p3 < best:
        p35 = p3
        while p35 < best:
            size = p35
            while size < half:
                size *= 2
            best = min(best, size)
            p35 *= 5
        p3 *= 3
    return 2 * best


def _dimension(value: object) -> int:
    dimension = _checks.integer("dimension", value, minimum=1)
    if dimension > 3:
        raise InvalidParameterError(f"dimension must be 1, 2 or 3, got {dimension}")
    return dimension


def _cell_volume(name: str, dx, dimension: int) -> float:
    """The volume of one cell: ``dx**dimension`` for one spacing, the product for one per axis."""
    if dx is None:
        raise InvalidParameterError(f"{name} is defined per grid point: pass the grid spacing dx")
    if isinstance(dx, (tuple, list, np.ndarray)):
        if len(dx) != dimension:
            raise InvalidParameterError(
                f"{name}: dx has {len(dx)} entries but dimension={dimension}; give one spacing per axis "
                "or one number"
            )
        return math.prod(_checks.positive(f"dx[{a}]", d) for a, d in enumerate(dx))
    return _checks.positive("dx", dx) ** dimension


def _bessel_j1(u: np.ndarray) -> np.ndarray:
    """The Bessel function ``J1(u)`` from its integral ``(1/2 pi) integral cos(t - u sin t) dt`` over a
    period by the trapezoidal rule, exact to rounding once the number of nodes exceeds ``|u|`` by a
    margin (the integrand is periodic and analytic; Trefethen & Weideman, SIAM Rev. 56, 385 (2014))."""
    u = np.abs(np.asarray(u, dtype=float))
    if u.size == 0:
        return u.copy()
    largest = float(np.max(u))
    nodes = int(largest + 10.0 * largest ** (1.0 / 3.0) + 40.0)
    total = np.zeros_like(u)
    for chunk in np.array_split(np.arange(nodes) * (2.0 * math.pi / nodes), max(1, nodes // 256)):
        total += np.cos(chunk - u[..., None] * np.sin(chunk)).sum(axis=-1)
    return total / nodes


def _airy(u: np.ndarray) -> np.ndarray:
    """``2 J1(u)/u``, 1 at ``u = 0``, the field correlation of a uniform disc pupil."""
    u = np.abs(np.asarray(u, dtype=float))
    small = u < 1e-3
    safe = np.where(small, 1.0, u)
    return np.where(small, 1.0 - u**2 / 8.0 + u**4 / 192.0, 2.0 * _bessel_j1(safe) / safe)


def _ball(u: np.ndarray) -> np.ndarray:
    """``3 j1(u)/u = 3 (sin u - u cos u) / u**3``, 1 at ``u = 0``, the field correlation of a uniform
    ball pupil (its Taylor series below ``u = 0.1``, where the difference loses digits)."""
    u = np.abs(np.asarray(u, dtype=float))
    small = u < 0.1
    safe = np.where(small, 1.0, u)
    series = 1.0 - u**2 / 10.0 + u**4 / 280.0 - u**6 / 15120.0
    return np.where(small, series, 3.0 * (np.sin(safe) - safe * np.cos(safe)) / safe**3)


@dataclass(frozen=True)
class DisorderSum(Disorder):
    parts: tuple[Disorder, ...]

    @property
    def terms(self):
        return self.parts

    @property
    def start(self):  # type: ignore[override]
        """The least start: a number when every term's region is a number, else per axis (a slab
        term reaching ``-inf`` along axes 1 and 2, where it spans the box)."""
        return _bound(self.parts, "start", min, -math.inf)

    @property
    def stop(self):  # type: ignore[override]
        """The greatest stop (see ``start``)."""
        return _bound(self.parts, "stop", max, math.inf)

    def region(self, grid):
        starts, stops = zip(*(term.region(grid) for term in self.parts), strict=True)
        return tuple(map(min, zip(*starts, strict=True))), tuple(map(max, zip(*stops, strict=True)))

    def correlation(self, x, dx=None, *, dimension=1):
        return sum(term.correlation(x, dx, dimension=dimension) for term in self.parts)

    def power_spectrum(self, q, dx=None, *, dimension=1):
        return sum(term.power_spectrum(q, dx, dimension=dimension) for term in self.parts)

    def validate(self, grid):
        for term in self.parts:
            term.validate(grid)

    def validate_model(self, model):
        for term in self.parts:
            term.validate_model(model)


def _bound(parts, name: str, pick, beyond: float):
    values = [getattr(term, name) for term in parts]
    if not any(isinstance(v, tuple) for v in values):
        return pick(values)
    ndim = max(len(v) for v in values if isinstance(v, tuple))
    boxes = [v if isinstance(v, tuple) else (v,) + (beyond,) * (ndim - 1) for v in values]
    return tuple(map(pick, zip(*boxes, strict=True)))


@dataclass(frozen=True)
class WhiteNoise(Disorder):
    """Gaussian white noise, ``<V(x) V(x')> = strength * delta(x - x')``.

    On the grid each point gets an independent normal value of variance
    ``strength / dx`` (so that ``strength = variance * dx``); in ``d``
    dimensions ``<V(r) V(r')> = strength * delta(r - r')``, variance
    ``strength / dV`` with ``dV`` the cell volume, and ``C~(q) = strength``.
    """

    kind = "white-noise"

    strength: float
    start: float
    stop: float

    def __post_init__(self):
        object.__setattr__(self, "strength", _checks.positive("WhiteNoise strength", self.strength))
        _region(self)

    def variance(self, dx, *, dimension: int = 1) -> float:
        return self.strength / _cell_volume("WhiteNoise variance", dx, _dimension(dimension))

    def correlation(self, x, dx=None, *, dimension=1):
        x = np.asarray(x, dtype=float)
        peak = np.inf if dx is None else self.variance(dx, dimension=dimension)
        return np.where(x == 0.0, peak, 0.0)

    def power_spectrum(self, q, dx=None, *, dimension=1):
        _dimension(dimension)
        return np.full_like(np.asarray(q, dtype=float), self.strength)


@dataclass(frozen=True)
class BoxDisorder(Disorder):
    """Independent values uniform in ``[-width/2, width/2]`` at each grid point.

    On a lattice this is the Anderson model; the variance is ``width**2 / 12``
    in any dimension, and ``C~(q) = variance * dV`` (``dV`` the cell volume).
    """

    kind = "box"

    width: float
    start: float
    stop: float

    def __post_init__(self):
        object.__setattr__(self, "width", _checks.positive("BoxDisorder width", self.width))
        _region(self)

    def variance(self, dx: float | None = None) -> float:
        return self.width**2 / 12.0

    def correlation(self, x, dx=None, *, dimension=1):
        _dimension(dimension)
        x = np.asarray(x, dtype=float)
        return np.where(x == 0.0, self.variance(), 0.0)

    def power_spectrum(self, q, dx=None, *, dimension=1):
        # Per-point variance s**2 on cells of volume dV is white noise of strength s**2 dV
        # (common practice; docs/validation.md, pitfall 3).
        volume = _cell_volume("BoxDisorder power_spectrum", dx, _dimension(dimension))
        return np.full_like(np.asarray(q, dtype=float), self.variance() * volume)


@dataclass(frozen=True)
class GaussianDisorder(Disorder):
    """Gaussian-correlated disorder, ``C(x) = rms**2 exp(-x**2 / (2 correlation_length**2))``.

    Generated by spectral filtering of white noise, with zero mean. In ``d``
    dimensions ``C(r) = rms**2 exp(-r**2 / (2 l**2))`` and
    ``C~(q) = rms**2 (2 pi l**2)**(d/2) exp(-q**2 l**2 / 2)``.
    """

    kind = "gaussian"

    rms: float
    correlation_length: float
    start: float
    stop: float

    def __post_init__(self):
        object.__setattr__(self, "rms", _checks.positive("GaussianDisorder rms", self.rms))
        object.__setattr__(
            self,
            "correlation_length",
            _checks.positive("GaussianDisorder correlation_length", self.correlation_length),
        )
        _region(self)

    def variance(self, dx: float | None = None) -> float:
        return self.rms**2

    def correlation(self, x, dx=None, *, dimension=1):
        _dimension(dimension)
        x = np.asarray(x, dtype=float)
        return self.rms**2 * np.exp(-np.square(x) / (2.0 * self.correlation_length**2))

    def power_spectrum(self, q, dx=None, *, dimension=1):
        dimension = _dimension(dimension)
        q = np.asarray(q, dtype=float)
        ell = self.correlation_length
        if dimension == 1:
            return self.rms**2 * math.sqrt(2.0 * math.pi) * ell * np.exp(-np.square(q * ell) / 2.0)
        prefactor = self.rms**2 * (2.0 * math.pi * ell**2) ** (dimension / 2.0)
        return prefactor * np.exp(-np.square(q * ell) / 2.0)


@dataclass(frozen=True)
class Speckle(Disorder):
    """Optical speckle: ``V = sign * strength * (I/<I> - 1)``.

    ``I = |E|**2`` for a complex Gaussian field ``E`` whose spectrum is flat on
    ``|q| < 1/correlation_length`` (a uniform pupil), and ``<I>`` is the ensemble
    mean, so ``V`` has zero mean, ``C(x) = strength**2 sinc(x/l)**2`` with
    ``sinc(u) = sin(u)/u``, and ``C~(q) = pi strength**2 l (1 - |q| l / 2)`` for
    ``|q| < 2/l``, zero beyond (Goodman, Speckle Phenomena in Optics, 2007).
    ``sign = +1`` is a repulsive (blue-detuned) speckle bounded below by
    ``-strength``; ``sign = -1`` an attractive one.

    In 2D the pupil is a disc and in 3D a ball of radius ``1/l``:
    ``C(r) = strength**2 [2 J1(u)/u]**2`` and ``strength**2 [3 j1(u)/u]**2``
    with ``u = r/l`` (Goodman 2007), and ``C~(q)`` is ``strength**2 (2 pi)**d``
    times the overlap of two pupils a distance ``q`` apart over the pupil's
    size squared: ``8 strength**2 l**2 [acos(t) - t sqrt(1 - t**2)]`` with
    ``t = q l / 2`` in 2D, ``(3 pi**2 / 8) strength**2 l**3 (4 + q l)(2 - q l)**2``
    in 3D, for ``q l < 2`` and zero beyond. ``V/strength + 1`` is exponentially
    distributed (fully developed speckle) in every dimension.
    """

    kind = "speckle"

    strength: float
    correlation_length: float
    start: float
    stop: float
    sign: int = 1

    def __post_init__(self):
        object.__setattr__(self, "strength", _checks.positive("Speckle strength", self.strength))
        object.__setattr__(
            self,
            "correlation_length",
            _checks.positive("Speckle correlation_length", self.correlation_length),
        )
        _checks.choice("Speckle sign", self.sign, (1, -1))
        object.__setattr__(self, "sign", int(self.sign))
        _region(self)

    def variance(self, dx: float | None = None) -> float:
        return self.strength**2

    def correlation(self, x, dx=None, *, dimension=1):
        dimension = _dimension(dimension)
        u = np.asarray(x, dtype=float) / self.correlation_length
        if dimension == 1:
            return self.strength**2 * np.sinc(u / np.pi) ** 2
        field = _airy(u) if dimension == 2 else _ball(u)
        return self.strength**2 * field**2

    def power_spectrum(self, q, dx=None, *, dimension=1):
        dimension = _dimension(dimension)
        ell = self.correlation_length
        ql = np.abs(np.asarray(q, dtype=float)) * ell
        s2 = self.strength**2
        if dimension == 1:
            return np.where(ql < 2.0, math.pi * s2 * ell * (1.0 - ql / 2.0), 0.0)
        inside = np.minimum(ql, 2.0)
        if dimension == 2:
            t = inside / 2.0
            overlap = 8.0 * s2 * ell**2 * (np.arccos(t) - t * np.sqrt(1.0 - t**2))
        else:
            overlap = 3.0 * math.pi**2 / 8.0 * s2 * ell**3 * (4.0 + inside) * (2.0 - inside) ** 2
        return np.where(ql < 2.0, overlap, 0.0)


@dataclass(frozen=True)
class CauchyDisorder(Disorder):
    """Cauchy (Lloyd) disorder: independent values at each site with the Lorentzian density
    ``(width/pi) / (v**2 + width**2)``, half-width at half-maximum ``width``.

    Lattice only: its variance is infinite, so it has no correlation function,
    no power spectrum and no Born prediction. Its Lyapunov exponent is known
    exactly at any strength instead (Ishii, Prog. Theor. Phys. Suppl. 53, 77
    (1973); Thouless, J. Phys. C 5, 77 (1972)): per site,
    ``cosh gamma = [sqrt((2J + E)**2 + width**2) + sqrt((2J - E)**2 + width**2)] / (4J)``.
    Values are drawn by the inverse distribution, ``width * tan(pi (u - 1/2))``.
    """

    kind = "cauchy"

    width: float
    start: float
    stop: float

    def __post_init__(self):
        object.__setattr__(self, "width", _checks.positive("CauchyDisorder width", self.width))
        _region(self)

    def _no_moments(self, what: str):
        return InvalidParameterError(
            f"CauchyDisorder has infinite variance, so no {what} (nor a Born prediction): "
            "mottle.lyapunov gives its exact gamma"
        )

    def correlation(self, x, dx=None, *, dimension=1):
        raise self._no_moments("correlation function")

    def power_spectrum(self, q, dx=None, *, dimension=1):
        raise self._no_moments("power spectrum")

    def validate_model(self, model):
        if model.kind != "lattice":
            raise InvalidParameterError(
                f"CauchyDisorder is defined on lattice sites only, but the model is {model.kind!r}: "
                "use model=mottle.Lattice(...)"
            )


# The public models: mottle's namespace takes them from here.
__all__ = ["BoxDisorder", "CauchyDisorder", "GaussianDisorder", "Speckle", "WhiteNoise"]
