"""Complex absorbing layers at both ends of the periodic box.

The layers add ``-i W(x)`` to the potential with the transmission-free profile
of Manolopoulos, J. Chem. Phys. 117, 9552 (2002), eq. (2.13) there:
``W = E_min f(y)``, ``y = c (x - x1) / width``, ``f = a y - b y**3 + 4/(c-y)**2 - 4/(c+y)**2``,
``c = 2.62206``, ``a = 1 - 16/c**3``, ``b = (1 - 17/c**3)/c**2``, where x1 is the
inner edge of the layer and ``E_min = (hbar**2/2m) (2 pi / width)**2``. The
profile diverges at the box end; on the grid the outermost point is
evaluated half a spacing inside it. Reflection falls fast with energy:
about 7e-3 at E = E_min, 4e-4 at 2 E_min and 3e-6 at 10 E_min (re-computed
values for this profile, see docs/validation.md). Widen the layer to lower E_min:
``E_min`` scales as ``1/width**2``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError, InvalidTypeError
from .grid import Grid

_C = 2.62206
_A = 1.0 - 16.0 / _C**3
_B = (1.0 - 17.0 / _C**3) / _C**2


def _profile(y: np.ndarray) -> np.ndarray:
    return _A * y - _B * y**3 + 4.0 / (_C - y) ** 2 - 4.0 / (_C + y) ** 2


@dataclass(frozen=True)
class Absorber:
    """Absorbing layers of ``width`` at both box ends.

    On a 2D/3D grid the layers lie on both faces of every axis (``axes=None``), or of the axes
    listed in ``axes`` only: ``axes=(0,)`` absorbs at the two ends of axis 0 and leaves the
    transverse boundaries periodic, the geometry of a slab. Where layers of two axes meet (the
    box's edges and corners) their ``W`` add. The probability absorbed is counted on each side of
    axis 0 (``absorbed_left``, ``absorbed_right``) and on the other faces together
    (``absorbed_sides``).

    ``strength`` scales the profile (an energy). By default it is the layer's
    design energy ``E_min = (hbar**2/2m) (2 pi/width)**2``, for which the profile
    reflects less than 1e-3 of any wave with energy above ``2 E_min``; a run
    whose packet is slower than that gets an :class:`UnderResolvedWarning`
    naming the width that would do.
    """

    width: float
    strength: float | None = None
    axes: tuple[int, ...] | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "width", _checks.positive("absorber width", self.width))
        if self.strength is not None:
            object.__setattr__(self, "strength", _checks.positive("absorber strength", self.strength))
        if self.axes is not None:
            try:
                axes = tuple(self.axes)
            except TypeError:
                raise InvalidTypeError(f"absorber axes must be a tuple of axes, got {self.axes!r}") from None
            if not axes or any(isinstance(a, bool) or not isinstance(a, int) or a < 0 for a in axes):
                raise InvalidParameterError(
                    f"absorber axes must be distinct axis numbers 0, 1 or 2, got {self.axes!r}"
                )
            if len(set(axes)) != len(axes):
                raise InvalidParameterError(f"absorber axes must be distinct, got {self.axes!r}")
            object.__setattr__(self, "axes", tuple(sorted(axes)))

    def absorbing_axes(self, grid: Grid) -> tuple[int, ...]:
        """The axes whose two faces carry a layer (every axis of the grid by default)."""
        if self.axes is None:
            return tuple(range(grid.ndim))
        if max(self.axes) >= grid.ndim:
            raise InvalidParameterError(
                f"absorber axes {self.axes} include an axis the {grid.ndim}D grid does not have: "
                f"use axes among {tuple(range(grid.ndim))}"
            )
        return self.axes

    def design_energy(self, model, dx: float) -> float:
        """``E_min``, above which the default profile absorbs without reflecting."""
        hbar_sq_over_2m = model.hbar**2 / (2.0 * model.effective_mass(dx))
        return hbar_sq_over_2m * (2.0 * math.pi / self.width) ** 2

    def width_for(self, energy: float, model, dx: float) -> float:
        """The layer width whose ``2 E_min`` equals ``energy``."""
        hbar_sq_over_2m = model.hbar**2 / (2.0 * model.effective_mass(dx))
        return 2.0 * math.pi * math.sqrt(2.0 * hbar_sq_over_2m / energy)

    def values(self, grid: Grid, model) -> np.ndarray:
        """``W(x) >= 0`` at the grid points (zero outside the layers), of the grid's shape."""
        if grid.ndim == 1:
            return self._along(np.asarray(grid.x), grid.start, grid.stop, grid.dx, model)
        total = np.zeros(grid.shape)
        for a in self.absorbing_axes(grid):
            start, stop, dx = (np.atleast_1d(v)[a] for v in (grid.start, grid.stop, grid.dx))
            profile = self._along(grid.axes[a], float(start), float(stop), float(dx), model)
            view = [1] * grid.ndim
            view[a] = grid.shape[a]
            total = total + profile.reshape(view)
        return total

    def _along(self, x: np.ndarray, start: float, stop: float, dx: float, model) -> np.ndarray:
        """The 1D profile on the coordinates ``x`` of a box ``[start, stop)`` of spacing ``dx``."""
        strength = self.strength if self.strength is not None else self.design_energy(model, dx)
        depth = np.maximum(x - (stop - self.width), (start + self.width) - x)
        inside = depth > 0.0
        y_max = _C * (1.0 - 0.5 * dx / self.width)
        y = np.minimum(_C * depth[inside] / self.width, y_max)
        values = np.zeros(x.size)
        values[inside] = strength * _profile(y)
        return values
