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
from .potentials import Potential


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
            # On 2D/3D grids each term checks itself (a time-dependent one refuses them so far).
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
            grid = self.grid
            for a in self.absorber.absorbing_axes(grid):
                length, dx = (float(np.atleast_1d(v)[a]) for v in (grid.length, grid.dx))
                where = "" if grid.ndim == 1 else f" along axis {a}"
                if self.absorber.width >= 0.5 * length:
                    raise InvalidParameterError(
                        f"absorber width {self.absorber.width} leaves no room inside the box of length "
                        f"{length}{where}: use width < {0.5 * length:g} (each layer)"
                    )
                spacings = limits.ABSORBER_MIN_SPACINGS
                if self.absorber.width < spacings * dx:
                    raise InvalidParameterError(
                        f"absorber width {self.absorber.width} spans fewer than {spacings:g} grid spacings"
                        f"{where} (dx = {dx:.4g}): use width >= {spacings * dx:.4g}"
                    )
        object.__setattr__(self, "nonlinearity", _checks.real("nonlinearity", self.nonlinearity))

    @property
    def hbar(self) -> float:
        return self.model.hbar

    def static_potential(self) -> np.ndarray:
        """The deterministic part of the potential at the grid points (an array of the grid's
        shape, zeros without a potential)."""
        if self.potential is None:
            return np.zeros(self.grid.shape)
        return np.asarray(self.potential.values(self.grid, self.model), dtype=float)

    def kinetic_table(self) -> np.ndarray:
        """Kinetic energy at the grid's wavenumbers, in FFT order.

        On a 2D/3D grid an array of the grid's shape, ``T(k) = sum_a T_a(k_a)``: each axis the
        model's 1D dispersion at its spacing (continuum ``hbar**2 |k|**2 / 2m``; lattice
        ``-2 J sum_a cos(k_a dx_a)``, the square/cubic tight-binding band)."""
        grid = self.grid
        if grid.ndim > 1:
            table = np.zeros(grid.shape)
            for a, (k, dx) in enumerate(zip(grid.k, grid.dx, strict=True)):  # type: ignore[call-overload]
                along = np.asarray(self.model.kinetic(k, dx), dtype=float)
                table = table + along.reshape([-1 if b == a else 1 for b in range(grid.ndim)])
            return table
        return np.asarray(self.model.kinetic(grid.k, grid.dx), dtype=float)

    def absorption(self) -> np.ndarray:
        """``W(x) >= 0`` at the grid points, flat in C order (zeros without absorbers)."""
        if self.absorber is None:
            return np.zeros(self.grid.size)
        return np.ravel(self.absorber.values(self.grid, self.model))

    def layer_bounds(self) -> tuple[int, int]:
        """``(left_end, right_start)``: flat points ``< left_end`` and ``>= right_start`` are in the
        layers at the two ends of axis 0 (whole slabs of the transverse points on a 2D/3D grid)."""
        grid = self.grid
        if self.absorber is None or 0 not in self.absorber.absorbing_axes(grid):
            return 0, grid.size
        x = grid.axes[0]
        start, stop = (float(np.atleast_1d(v)[0]) for v in (grid.start, grid.stop))
        left_end = int(np.searchsorted(x, start + self.absorber.width, side="left"))
        right_start = int(np.searchsorted(x, stop - self.absorber.width, side="right"))
        transverse = grid.size // grid.shape[0]
        return left_end * transverse, right_start * transverse
