"""Random potentials: each confined to ``[start, stop)`` and summable with ``+``.

Realization ``index`` of seed ``seed`` is generated in the Rust core from a
counter-based stream keyed by (seed, index, term) alone; :func:`mottle.realize`
returns exactly what a run used. Every model states its correlation
``C(x) = <V(x0) V(x0 + x)>`` and power spectrum ``C~(q) = integral C(x) exp(-i q x) dx``
(both analytic; the Born predictions use them).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError
from .grid import Grid
from .kinds import Kinded

_MIN_POINTS_PER_CORRELATION = limits.POINTS_PER_CORRELATION


class Disorder(Kinded):
    """Base of the random models; ``a + b`` is their sum (independent terms).

    A model is a frozen dataclass with a ``kind``: it is registered (:mod:`mottle.specs.kinds`), and
    the study files, the store and the request for the core follow from its fields.
    """

    family = "disorder"

    start: float
    stop: float

    def __add__(self, other: object) -> DisorderSum:
        if not isinstance(other, Disorder):
            return NotImplemented
        return DisorderSum(_terms(self) + _terms(other))

    @property
    def terms(self) -> tuple[Disorder, ...]:
        return (self,)

    def correlation(self, x, dx: float | None = None) -> np.ndarray:
        raise NotImplementedError

    def power_spectrum(self, q, dx: float | None = None) -> np.ndarray:
        raise NotImplementedError

    def validate(self, grid: Grid) -> None:
        _checks.one_dimensional(f"disorder ({type(self).__name__})", grid)
        if self.start < grid.start or self.stop > grid.stop:
            raise InvalidParameterError(
                f"{type(self).__name__} region [{self.start}, {self.stop}) must lie inside the box "
                f"[{grid.start}, {grid.stop})"
            )
        ell = getattr(self, "correlation_length", None)
        if ell is not None and ell < _MIN_POINTS_PER_CORRELATION * grid.dx:
            raise InvalidParameterError(
                f"{type(self).__name__} correlation_length {ell} is not resolved by the grid spacing "
                f"{grid.dx:.4g}: use correlation_length >= {_MIN_POINTS_PER_CORRELATION * grid.dx:.4g} or "
                f"at least {math.ceil(_MIN_POINTS_PER_CORRELATION * grid.length / ell)} points"
            )
        if not np.any((grid.x >= self.start) & (grid.x < self.stop)):
            raise InvalidParameterError(
                f"{type(self).__name__} region [{self.start}, {self.stop}) holds no grid point"
            )

    def validate_model(self, model) -> None:
        """Checks that need the kinetic model; the default has none."""


def _terms(model: Disorder) -> tuple[Disorder, ...]:
    return model.terms


def _region(model) -> None:
    start = _checks.real("start", model.start)
    stop = _checks.real("stop", model.stop)
    if not start < stop:
        raise InvalidParameterError(f"disorder region needs start < stop, got start={start}, stop={stop}")
    object.__setattr__(model, "start", start)
    object.__setattr__(model, "stop", stop)


def _need_dx(name: str, dx: float | None) -> float:
    if dx is None:
        raise InvalidParameterError(f"{name} is defined per grid point: pass the grid spacing dx")
    return _checks.positive("dx", dx)


@dataclass(frozen=True)
class DisorderSum(Disorder):
    parts: tuple[Disorder, ...]

    @property
    def terms(self):
        return self.parts

    @property
    def start(self):  # type: ignore[override]
        return min(term.start for term in self.parts)

    @property
    def stop(self):  # type: ignore[override]
        return max(term.stop for term in self.parts)

    def correlation(self, x, dx=None):
        return sum(term.correlation(x, dx) for term in self.parts)

    def power_spectrum(self, q, dx=None):
        return sum(term.power_spectrum(q, dx) for term in self.parts)

    def validate(self, grid):
        for term in self.parts:
            term.validate(grid)

    def validate_model(self, model):
        for term in self.parts:
            term.validate_model(model)


@dataclass(frozen=True)
class WhiteNoise(Disorder):
    """Gaussian white noise, ``<V(x) V(x')> = strength * delta(x - x')``.

    On the grid each point gets an independent normal value of variance
    ``strength / dx`` (so that ``strength = variance * dx``).
    """

    kind = "white-noise"

    strength: float
    start: float
    stop: float

    def __post_init__(self):
        object.__setattr__(self, "strength", _checks.positive("WhiteNoise strength", self.strength))
        _region(self)

    def variance(self, dx: float) -> float:
        return self.strength / dx

    def correlation(self, x, dx=None):
        x = np.asarray(x, dtype=float)
        peak = np.inf if dx is None else self.strength / dx
        return np.where(x == 0.0, peak, 0.0)

    def power_spectrum(self, q, dx=None):
        return np.full_like(np.asarray(q, dtype=float), self.strength)


@dataclass(frozen=True)
class BoxDisorder(Disorder):
    """Independent values uniform in ``[-width/2, width/2]`` at each grid point.

    On a lattice this is the Anderson model; the variance is ``width**2 / 12``.
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

    def correlation(self, x, dx=None):
        x = np.asarray(x, dtype=float)
        return np.where(x == 0.0, self.variance(), 0.0)

    def power_spectrum(self, q, dx=None):
        # Per-point variance s**2 on spacing dx is white noise of strength s**2 dx
        # (common practice; docs/validation.md, pitfall 3).
        dx = _need_dx("BoxDisorder power_spectrum", dx)
        return np.full_like(np.asarray(q, dtype=float), self.variance() * dx)

    def validate(self, grid: Grid) -> None:
        if grid.ndim == 1:
            super().validate(grid)
            return
        # On a 2D/3D grid, start/stop make a slab along axis 0 across the whole box
        # (what the quasi-1D transfer matrices of mottle.lyapunov(..., width=M) read).
        axis = grid.axes[0]
        low, high = np.ravel(grid.start)[0], np.ravel(grid.stop)[0]
        if self.start < low or self.stop > high:
            raise InvalidParameterError(
                f"BoxDisorder slab [{self.start}, {self.stop}) along x must lie inside the box "
                f"[{low}, {high}) along x"
            )
        if not np.any((axis >= self.start) & (axis < self.stop)):
            raise InvalidParameterError(f"BoxDisorder slab [{self.start}, {self.stop}) holds no grid point")


@dataclass(frozen=True)
class GaussianDisorder(Disorder):
    """Gaussian-correlated disorder, ``C(x) = rms**2 exp(-x**2 / (2 correlation_length**2))``.

    Generated by spectral filtering of white noise, with zero mean.
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

    def correlation(self, x, dx=None):
        x = np.asarray(x, dtype=float)
        return self.rms**2 * np.exp(-np.square(x) / (2.0 * self.correlation_length**2))

    def power_spectrum(self, q, dx=None):
        q = np.asarray(q, dtype=float)
        ell = self.correlation_length
        return self.rms**2 * math.sqrt(2.0 * math.pi) * ell * np.exp(-np.square(q * ell) / 2.0)


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

    def correlation(self, x, dx=None):
        u = np.asarray(x, dtype=float) / self.correlation_length
        return self.strength**2 * np.sinc(u / np.pi) ** 2

    def power_spectrum(self, q, dx=None):
        ql = np.abs(np.asarray(q, dtype=float)) * self.correlation_length
        return np.where(
            ql < 2.0, math.pi * self.strength**2 * self.correlation_length * (1.0 - ql / 2.0), 0.0
        )


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

    def correlation(self, x, dx=None):
        raise self._no_moments("correlation function")

    def power_spectrum(self, q, dx=None):
        raise self._no_moments("power spectrum")

    def validate_model(self, model):
        if model.kind != "lattice":
            raise InvalidParameterError(
                f"CauchyDisorder is defined on lattice sites only, but the model is {model.kind!r}: "
                "use model=mottle.Lattice(...)"
            )


# The public models: mottle's namespace takes them from here.
__all__ = ["BoxDisorder", "CauchyDisorder", "GaussianDisorder", "Speckle", "WhiteNoise"]
