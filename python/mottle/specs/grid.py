"""The periodic grid every propagation lives on."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError, InvalidTypeError

# A run holds about a dozen complex buffers of the grid's size (state, scratch,
# phase tables, snapshots in flight); refuse grids that could not fit.
_BYTES_PER_POINT = 16 * 12


def _memory_bytes() -> int:
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return 8 << 30


@dataclass(frozen=True)
class Grid:
    """A periodic box of ``points`` equally spaced points over ``length``.

    ``x_j = center - length/2 + j*length/points`` for ``j = 0 .. points-1``;
    wavenumbers in FFT order, ``k = 2*pi*fftfreq(points, dx)``. Any
    ``points >= 16`` works; sizes with small prime factors (powers of two) are
    fastest. In the lattice model the points are the sites, spacing ``dx``.

    **2D and 3D.** ``points=(Nx, Ny)`` or ``(Nx, Ny, Nz)`` makes a box:
    ``length`` a tuple of the same length (or one number for every axis),
    ``center`` likewise (default the origin). Along each axis ``a`` the points
    are ``axes[a] = center[a] - length[a]/2 + j*dx[a]``; arrays on the grid have
    shape ``shape = points`` (axis 0 first, C order), ``dx``, ``start``,
    ``stop``, ``k_max`` and ``k`` are tuples with one entry per axis. A 1D
    grid has ``ndim = 1``, ``shape = (points,)`` and ``axes = (x,)``, with
    ``dx`` a number and ``k`` an array as before. Twisted boundaries are 1D
    only.

    ``quasimomentum = beta`` in ``[0, 1)`` twists the boundary,
    ``psi(x + length) = exp(2 pi i beta) psi(x)``: the wavenumbers become
    ``k + 2 pi beta / length`` (:attr:`momenta` in units of ``hbar``), and a run's
    wavefunction (``Run.psi``, snapshots) is the periodic part
    ``u(x) = exp(-2 pi i beta x / length) psi(x)``, which is what lives on the
    periodic grid (``|u| = |psi|``). ``beta`` may be drawn per realization,
    ``quasimomentum=mo.Uniform(0, 1)``, keyed by (seed, index) like disorder.
    """

    points: int
    length: float
    center: float = 0.0
    quasimomentum: float = 0.0

    def __new__(cls, points: Any = None, *args: Any, **kwargs: Any) -> Grid:
        # A tuple of points is a 2D/3D box: the private subclass _BoxGrid, still a Grid.
        if cls is Grid and isinstance(points, (tuple, list)):
            return object.__new__(_BoxGrid)
        return object.__new__(cls)

    ndim = 1
    """Number of axes (1 here; 2 or 3 for a box)."""

    @property
    def shape(self) -> tuple[int, ...]:
        """Shape of an array on the grid, ``(points,)``."""
        return (self.points,)

    @property
    def size(self) -> int:
        """Number of grid points."""
        return self.points

    @property
    def axes(self) -> tuple[np.ndarray, ...]:
        """The coordinates along each axis, ``(x,)`` in 1D."""
        return (self.x,)

    def __post_init__(self) -> None:
        points = _checks.integer("points", self.points, minimum=16)
        length = _checks.positive("length", self.length)
        center = _checks.real("center", self.center)
        need = points * _BYTES_PER_POINT
        have = _memory_bytes()
        if need > have:
            raise InvalidParameterError(
                f"points={points} needs about {need / 2**30:.1f} GiB for one run, more than this "
                f"machine's {have / 2**30:.1f} GiB; use at most {have // _BYTES_PER_POINT} points"
            )
        object.__setattr__(self, "points", points)
        object.__setattr__(self, "length", length)
        object.__setattr__(self, "center", center)
        object.__setattr__(self, "quasimomentum", _quasimomentum(self.quasimomentum))

    @property
    def dx(self) -> float:
        """Grid spacing ``length / points`` (the lattice constant in the lattice model)."""
        return self.length / self.points

    @property
    def start(self) -> float:
        """Position of the first point, ``center - length/2``."""
        return self.center - 0.5 * self.length

    @property
    def stop(self) -> float:
        """Right end of the periodic box (one spacing past the last point)."""
        return self.center + 0.5 * self.length

    @cached_property
    def x(self) -> np.ndarray:
        """Positions of the grid points (read-only)."""
        x = self.start + np.arange(self.points) * self.dx
        x.setflags(write=False)
        return x

    @cached_property
    def k(self) -> np.ndarray:
        """Wavenumbers in FFT order (read-only)."""
        k = 2.0 * np.pi * np.fft.fftfreq(self.points, self.dx)
        k.setflags(write=False)
        return k

    @property
    def twisted(self) -> bool:
        """Whether the boundary is twisted (a nonzero or drawn quasimomentum)."""
        from .packets import is_drawn

        return is_drawn(self.quasimomentum) or self.quasimomentum != 0.0

    def shift(self, beta: float | None = None) -> float:
        """``2 pi beta / length``, the twist's shift of the wavenumbers (``beta`` by default the grid's
        fixed quasimomentum; a drawn one must be given)."""
        from .packets import is_drawn

        if beta is None:
            if is_drawn(self.quasimomentum):
                raise InvalidParameterError("a drawn quasimomentum has no single shift: pass beta")
            beta = self.quasimomentum
        return 2.0 * np.pi * float(beta) / self.length

    @property
    def k_max(self) -> float:
        """The largest wavenumber the grid represents, ``pi / dx``."""
        return np.pi / self.dx

    def contains(self, position: float) -> bool:
        return self.start <= position < self.stop


_AXIS_NAMES = ("x", "y", "z")


def _axis(a: int) -> str:
    return f"along {_AXIS_NAMES[a]}"


def _per_axis(name: str, value: Any, ndim: int, check) -> tuple:
    """One value per axis from a tuple/list of ``ndim`` entries (or one number for every axis)."""
    if isinstance(value, (tuple, list, np.ndarray)):
        values = tuple(value)
        if len(values) != ndim:
            raise InvalidParameterError(
                f"{name} has {len(values)} entries but points has {ndim} (one per axis "
                f"{', '.join(_AXIS_NAMES[:ndim])}); got {name}={value!r}"
            )
    else:
        values = (value,) * ndim
    return tuple(check(f"{name}[{a}] ({_axis(a)})", v) for a, v in enumerate(values))


def shape_mismatch(have: tuple[int, ...], need: tuple[int, ...]) -> str:
    """`` (axis 1, along y, has 16 points, not 32)`` for the first axis where an array's shape
    differs from the grid's (or the count of axes; ``""`` when they agree)."""
    if len(have) != len(need):
        return f" ({len(have)} axes, not {len(need)})"
    for a, (h, n) in enumerate(zip(have, need, strict=True)):
        if h != n:
            return f" (axis {a}, {_axis(a)}, has {h} points, not {n})"
    return ""


@dataclass(frozen=True, repr=False)
class _BoxGrid(Grid):
    """A 2D or 3D periodic box; made by ``Grid(points=(Nx, Ny[, Nz]), ...)`` (see :class:`Grid`)."""

    points: tuple[int, ...]  # type: ignore[assignment]
    length: tuple[float, ...]  # type: ignore[assignment]
    center: tuple[float, ...] = 0.0  # type: ignore[assignment]
    quasimomentum: float = 0.0

    def __post_init__(self) -> None:
        if not isinstance(self.points, (tuple, list)):
            raise InvalidTypeError(f"points of a 2D/3D grid must be a tuple, got {self.points!r}")
        ndim = len(self.points)
        if ndim == 1:
            raise InvalidParameterError(
                f"points={self.points!r} has one axis: a 1D grid takes an integer, points={self.points[0]!r}"
            )
        if ndim not in (2, 3):
            raise InvalidParameterError(
                f"points={tuple(self.points)!r} has {ndim} axes; grids have 1, 2 or 3 axes "
                "(an integer, (Nx, Ny) or (Nx, Ny, Nz))"
            )
        points = tuple(
            _checks.integer(f"points[{a}] ({_axis(a)})", n, minimum=16) for a, n in enumerate(self.points)
        )
        length = _per_axis("length", self.length, ndim, _checks.positive)
        center = _per_axis("center", self.center, ndim, _checks.real)
        if _quasimomentum(self.quasimomentum) != 0.0:
            _checks.one_dimensional("a twisted boundary (quasimomentum)", points)
        size = math.prod(points)
        need = size * _BYTES_PER_POINT
        have = _memory_bytes()
        if need > have:
            raise InvalidParameterError(
                f"points={points} ({size} points) needs about {need / 2**30:.1f} GiB for one run, more "
                f"than this machine's {have / 2**30:.1f} GiB; use at most {have // _BYTES_PER_POINT} "
                f"points in all (e.g. fewer points {_axis(int(np.argmax(points)))})"
            )
        object.__setattr__(self, "points", points)
        object.__setattr__(self, "length", length)
        object.__setattr__(self, "center", center)
        object.__setattr__(self, "quasimomentum", 0.0)

    def __repr__(self) -> str:
        return (
            f"Grid(points={self.points!r}, length={self.length!r}, center={self.center!r}, "
            f"quasimomentum={self.quasimomentum!r})"
        )

    @property
    def ndim(self) -> int:  # type: ignore[override]
        return len(self.points)

    @property
    def shape(self) -> tuple[int, ...]:
        return self.points

    @property
    def size(self) -> int:
        return math.prod(self.points)

    @property
    def dx(self) -> tuple[float, ...]:  # type: ignore[override]
        """Grid spacing along each axis."""
        return tuple(length / n for length, n in zip(self.length, self.points, strict=True))

    @property
    def start(self) -> tuple[float, ...]:  # type: ignore[override]
        return tuple(c - 0.5 * length for c, length in zip(self.center, self.length, strict=True))

    @property
    def stop(self) -> tuple[float, ...]:  # type: ignore[override]
        return tuple(c + 0.5 * length for c, length in zip(self.center, self.length, strict=True))

    @cached_property
    def axes(self) -> tuple[np.ndarray, ...]:
        """The coordinates along each axis (read-only arrays)."""
        out = []
        for start, dx, n in zip(self.start, self.dx, self.points, strict=True):
            x = start + np.arange(n) * dx
            x.setflags(write=False)
            out.append(x)
        return tuple(out)

    @property
    def x(self) -> np.ndarray:
        _checks.one_dimensional("Grid.x (use Grid.axes)", self)
        raise AssertionError  # unreachable

    @cached_property
    def k(self) -> tuple[np.ndarray, ...]:  # type: ignore[override]
        """Wavenumbers along each axis, in FFT order (read-only arrays)."""
        out = []
        for dx, n in zip(self.dx, self.points, strict=True):
            k = 2.0 * np.pi * np.fft.fftfreq(n, dx)
            k.setflags(write=False)
            out.append(k)
        return tuple(out)

    @property
    def twisted(self) -> bool:
        return False

    def shift(self, beta: float | None = None) -> float:
        _checks.one_dimensional("Grid.shift (a twisted boundary)", self)
        raise AssertionError  # unreachable

    @property
    def k_max(self) -> tuple[float, ...]:  # type: ignore[override]
        """The largest wavenumber along each axis, ``pi / dx``."""
        return tuple(np.pi / dx for dx in self.dx)

    def contains(self, position) -> bool:
        """Whether a point (one coordinate per axis) lies inside the box."""
        return all(lo <= p < hi for lo, p, hi in zip(self.start, position, self.stop, strict=True))


def _quasimomentum(value):
    """A fixed ``beta`` in ``[0, 1)`` or a :class:`~mottle.Uniform` draw inside ``[0, 1]``."""
    from .packets import Normal, Uniform

    if isinstance(value, Uniform):
        if value.low < 0.0 or value.high > 1.0:
            raise InvalidParameterError(
                f"quasimomentum {value!r} must be drawn inside [0, 1]: use e.g. mottle.Uniform(0, 1)"
            )
        return value
    if isinstance(value, Normal):
        raise InvalidParameterError(
            f"quasimomentum {value!r}: use a number in [0, 1) or mottle.Uniform(0, 1)"
        )
    beta = _checks.real("quasimomentum", value)
    if not 0.0 <= beta < 1.0:
        raise InvalidParameterError(
            f"quasimomentum {beta} must lie in [0, 1) (beta and beta + 1 are the same)"
        )
    return beta
