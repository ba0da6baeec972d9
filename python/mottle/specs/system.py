"""A physical system: grid, kinetic model, potentials, disorder, absorbers, nonlinearity."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError
from .absorber import Absorber
from .disorder import Disorder
from .grid import Grid
from .models import Continuum, Lattice
from .potentials import Potential, _terms


@dataclass(frozen=True, eq=False)
class System:
    """Everything that defines the Hamiltonian of a run.

    ``i hbar dpsi/dt = [T + V(x) + V_disorder(x) - i W(x) + g |psi|**2] psi`` on the
    periodic ``grid``, with ``T`` from ``model``, ``V`` the deterministic
    ``potential``, ``V_disorder`` one realization of ``disorder``, ``W`` the
    ``absorber`` layers and ``g = nonlinearity`` (``g < 0`` focusing).
    Wavefunctions are normalized to 1, so for a condensate of N atoms with
    coupling g_1D use ``nonlinearity = N * g_1D`` (common practice).

    With absorbers, the 4th-order splittings stay 4th order outside the layers
    but are 2nd order inside them (the layers act only in the positive
    fractions of each step, or the negative ones would amplify the wave there);
    measured against ``scipy.sparse.linalg.expm_multiply`` the global slope is
    then 2. Prefer Strang with absorbers unless the layers are far from what
    you measure.
    """

    grid: Grid
    model: Continuum | Lattice = Continuum()  # noqa: RUF009 (frozen, so one shared default is safe)
    potential: Potential | None = None
    disorder: Disorder | None = None
    absorber: Absorber | None = None
    nonlinearity: float = 0.0

    def __post_init__(self) -> None:
        if not isinstance(self.grid, Grid):
            raise InvalidTypeError(f"grid must be a mottle.Grid, got {type(self.grid).__name__}")
        if not isinstance(self.model, (Continuum, Lattice)):
            raise InvalidTypeError(
                f"model must be mottle.Continuum or mottle.Lattice, got {type(self.model).__name__}"
            )
        if self.potential is not None:
            if isinstance(self.potential, Potential):
                for term in _terms(self.potential):
                    _checks.one_dimensional(f"the {type(term).__name__} potential", self.grid)
            if not isinstance(self.potential, Potential):
                raise InvalidTypeError(
                    f"potential must be a mottle potential (Barrier, Harmonic, Tabulated or a sum), "
                    f"got {type(self.potential).__name__}"
                )
            self.potential.validate(self.grid)
        if self.disorder is not None:
            if not isinstance(self.disorder, Disorder):
                raise InvalidTypeError(
                    f"disorder must be a mottle disorder model (WhiteNoise, BoxDisorder, GaussianDisorder, "
                    f"Speckle or a sum), got {type(self.disorder).__name__}"
                )
            # Every model works on 2D/3D grids too (a box region, or a slab along x).
            self.disorder.validate(self.grid)
            self.disorder.validate_model(self.model)
        if self.absorber is not None:
            if not isinstance(self.absorber, Absorber):
                raise InvalidTypeError(
                    f"absorber must be a mottle.Absorber, got {type(self.absorber).__name__}"
                )
            _checks.one_dimensional("Absorber", self.grid)
            if self.absorber.width >= 0.5 * self.grid.length:
                raise InvalidParameterError(
                    f"absorber width {self.absorber.width} leaves no room inside the box of length "
                    f"{self.grid.length}: use width < {0.5 * self.grid.length:g} (each layer)"
                )
            spacings = limits.ABSORBER_MIN_SPACINGS
            if self.absorber.width < spacings * self.grid.dx:
                raise InvalidParameterError(
                    f"absorber width {self.absorber.width} spans fewer than {spacings:g} grid spacings "
                    f"(dx = {self.grid.dx:.4g}): use width >= {spacings * self.grid.dx:.4g}"
                )
        object.__setattr__(self, "nonlinearity", _checks.real("nonlinearity", self.nonlinearity))

    @property
    def hbar(self) -> float:
        return self.model.hbar

    def static_potential(self) -> np.ndarray:
        """The deterministic part of the potential at the grid points."""
        if self.potential is None:
            return np.zeros(self.grid.shape)
        return np.asarray(self.potential.values(self.grid, self.model), dtype=float)

    def kinetic_table(self) -> np.ndarray:
        """Kinetic energy at the grid's wavenumbers, in FFT order."""
        return np.asarray(self.model.kinetic(self.grid.k, self.grid.dx), dtype=float)

    def absorption(self) -> np.ndarray:
        """``W(x) >= 0`` at the grid points (zeros without absorbers)."""
        if self.absorber is None:
            return np.zeros(self.grid.points)
        return self.absorber.values(self.grid, self.model)

    def layer_bounds(self) -> tuple[int, int]:
        """``(left_end, right_start)``: points ``< left_end`` and ``>= right_start`` are in the layers."""
        if self.absorber is None:
            return 0, self.grid.points
        x = self.grid.x
        left_end = int(np.searchsorted(x, self.grid.start + self.absorber.width, side="left"))
        right_start = int(np.searchsorted(x, self.grid.stop - self.absorber.width, side="right"))
        return left_end, right_start
