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
