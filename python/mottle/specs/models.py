"""Kinetic-energy models: the continuum and the tight-binding lattice."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _checks
from .kinds import Kinded


@dataclass(frozen=True)
class Continuum(Kinded):
    """A particle of mass ``mass`` with kinetic energy ``hbar**2 k**2 / (2 mass)``."""

    hbar: float = 1.0
    mass: float = 1.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "hbar", _checks.positive("hbar", self.hbar))
        object.__setattr__(self, "mass", _checks.positive("mass", self.mass))

    family = "model"
    kind = "continuum"

    def kinetic(self, k, dx: float):
        """Kinetic energy at wavenumber ``k`` (``dx`` is unused in the continuum)."""
        return self.hbar**2 * np.square(k) / (2.0 * self.mass)

    def velocity(self, k, dx: float):
        """Group velocity ``hbar k / mass``."""
        return self.hbar * np.asarray(k) / self.mass

    def effective_mass(self, dx: float) -> float:
        return self.mass

    def band_bottom(self, dx: float) -> float:
        return 0.0

    def band(self, dx: float) -> tuple[float, float]:
        """The kinetic energies a propagating wave can have: ``(0, inf)``."""
        return 0.0, np.inf

    def wavenumber(self, energy, dx: float):
        """The positive wavenumber of kinetic energy ``energy`` inside :meth:`band`."""
        return np.sqrt(2.0 * self.mass * np.asarray(energy, dtype=float)) / self.hbar


@dataclass(frozen=True)
class Lattice(Kinded):
    """Tight binding on the grid's sites: kinetic energy ``-2 J cos(k a)``, ``a = dx``.

    Potentials are sampled at the sites (with on-site disorder this is the
    Anderson model). Near the band bottom the lattice acts as a continuum of
    mass ``hbar**2 / (2 J a**2)``; that mass is used where a model needs one
    (the harmonic potential, the absorber's design energy).
    """

    hopping: float = 1.0
    hbar: float = 1.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "hopping", _checks.positive("hopping", self.hopping))
        object.__setattr__(self, "hbar", _checks.positive("hbar", self.hbar))

    family = "model"
    kind = "lattice"

    def kinetic(self, k, dx: float):
        return -2.0 * self.hopping * np.cos(np.asarray(k) * dx)

    def velocity(self, k, dx: float):
        """Group velocity ``2 J a sin(k a) / hbar``."""
        return 2.0 * self.hopping * dx * np.sin(np.asarray(k) * dx) / self.hbar

    def effective_mass(self, dx: float) -> float:
        return self.hbar**2 / (2.0 * self.hopping * dx * dx)

    def band_bottom(self, dx: float) -> float:
        return -2.0 * self.hopping

    def band(self, dx: float) -> tuple[float, float]:
        """The kinetic energies a propagating wave can have: ``(-2 J, 2 J)``."""
        return -2.0 * self.hopping, 2.0 * self.hopping

    def wavenumber(self, energy, dx: float):
        """The wavenumber in ``(0, pi/a)`` of kinetic energy ``energy`` inside :meth:`band`."""
        return np.arccos(-np.asarray(energy, dtype=float) / (2.0 * self.hopping)) / dx


Model = Continuum | Lattice
