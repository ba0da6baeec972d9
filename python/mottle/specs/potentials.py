"""Deterministic potentials, summable with ``+``.

Each is evaluated on a grid by :meth:`values`. A barrier's value at a point is
its height times the fraction of the point's cell ``[x - dx/2, x + dx/2)``
that it covers, so that its area (height x width) is exact on any grid; this
makes the transmission converge smoothly as the grid is refined.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError, InvalidTypeError
from .grid import Grid
from .kinds import Kinded
from .models import Continuum, Lattice


class Potential(Kinded):
    """Base of the deterministic potentials; ``a + b`` is their sum.

    A potential is a frozen dataclass with a ``kind``: it is registered (:mod:`mottle.specs.kinds`)
    and the study files follow from its fields.
    """

    family = "potential"

    def values(self, grid: Grid, model: Continuum | Lattice) -> np.ndarray:
        raise NotImplementedError

    def __add__(self, other: object) -> PotentialSum:
        if not isinstance(other, Potential):
            return NotImplemented
        return PotentialSum(_terms(self) + _terms(other))

    def validate(self, grid: Grid) -> None:
        """Checks that need the grid; the default has none."""


def _terms(potential: Potential) -> tuple[Potential, ...]:
    return potential.terms if isinstance(potential, PotentialSum) else (potential,)


@dataclass(frozen=True)
class PotentialSum(Potential):
    terms: tuple[Potential, ...]

    def values(self, grid, model):
        return sum((term.values(grid, model) for term in self.terms), np.zeros(grid.points))

    def validate(self, grid):
        for term in self.terms:
            term.validate(grid)


@dataclass(frozen=True)
class Barrier(Potential):
    """A rectangular barrier (or well, if ``height < 0``) of ``height`` on ``[left, right)``."""

    kind = "barrier"

    height: float
    left: float
    right: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "height", _checks.real("height", self.height))
        left = _checks.real("left", self.left)
        right = _checks.real("right", self.right)
        if not left < right:
            raise InvalidParameterError(f"barrier left={left} must be < right={right}")
        object.__setattr__(self, "left", left)
        object.__setattr__(self, "right", right)

    def values(self, grid, model):
        lower = grid.x - 0.5 * grid.dx
        upper = grid.x + 0.5 * grid.dx
        covered = np.clip(np.minimum(upper, self.right) - np.maximum(lower, self.left), 0.0, None)
        return self.height * covered / grid.dx

    def validate(self, grid):
        if self.right <= grid.start or self.left >= grid.stop:
            raise InvalidParameterError(
                f"barrier [{self.left}, {self.right}) lies outside the box [{grid.start}, {grid.stop})"
            )


@dataclass(frozen=True)
class Harmonic(Potential):
    """``(1/2) mass frequency**2 (x - center)**2`` (lattice: the band-bottom mass)."""

    kind = "harmonic"

    frequency: float
    center: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "frequency", _checks.positive("frequency", self.frequency))
        object.__setattr__(self, "center", _checks.real("center", self.center))

    def values(self, grid, model):
        mass = model.effective_mass(grid.dx)
        return 0.5 * mass * self.frequency**2 * np.square(grid.x - self.center)


@dataclass(frozen=True, eq=False)
class Tabulated(Potential):
    """Potential values given at the grid points (an array of shape ``(points,)``)."""

    kind = "tabulated"

    table: np.ndarray = field(metadata={"key": "values", "type": "values"})

    def __init__(self, values) -> None:
        if isinstance(values, (str, bytes)):
            raise InvalidTypeError(f"Tabulated values must be an array of numbers, got {values!r}")
        array = np.asarray(values)
        if array.ndim != 1:
            raise InvalidParameterError(f"Tabulated values must be one-dimensional, got shape {array.shape}")
        object.__setattr__(self, "table", _checks.real_array("Tabulated values", array, array.shape))

    def values(self, grid, model):
        return self.table.copy()

    @classmethod
    def from_entry(cls, entry, tables):
        """A study file names its table by the SHA-256 the study loaded it under."""
        return cls(tables[entry["values"]["sha256"]])

    def validate(self, grid):
        if self.table.shape != (grid.points,):
            raise InvalidParameterError(
                f"Tabulated values have shape {self.table.shape}; the grid needs ({grid.points},)"
            )
