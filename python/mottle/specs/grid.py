"""The periodic grid every propagation lives on."""

from __future__ import annotations

import os
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError

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
    """

    points: int
    length: float
    center: float = 0.0

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
    def k_max(self) -> float:
        """The largest wavenumber the grid represents, ``pi / dx``."""
        return np.pi / self.dx

    def contains(self, position: float) -> bool:
        return self.start <= position < self.stop
