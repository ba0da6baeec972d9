"""Deterministic potentials, summable with ``+``.

Each is evaluated on a grid by :meth:`values`. A barrier's value at a point is
its height times the fraction of the point's cell ``[x - dx/2, x + dx/2)``
that it covers, so that its area (height x width) is exact on any grid; this
makes the transmission converge smoothly as the grid is refined.

On a 2D or 3D grid :meth:`values` is an array of the grid's shape (axis 0
first, C order). A :class:`Barrier` is then a slab across axis 0 (the same at
every transverse position), a :class:`Cosine` a standing wave along axis 0, a
:class:`Harmonic` well takes one frequency and centre per axis (or one for
every axis) and a :class:`Tabulated` table the grid's shape; the time-dependent
terms are 1D only so far.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError, InvalidTypeError
from .grid import Grid, shape_mismatch
from .grid import _axis as _along
from .kinds import Kinded
from .models import Continuum, Lattice
from .packets import is_drawn

if TYPE_CHECKING:
    from .._core import _Profile
    from .models import Model


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
        return sum((term.values(grid, model) for term in self.terms), np.zeros(grid.shape))

    def validate(self, grid):
        for term in self.terms:
            term.validate(grid)


@dataclass(frozen=True)
class Barrier(Potential):
    """A rectangular barrier (or well, if ``height < 0``) of ``height`` on ``[left, right)``.

    On a 2D/3D grid it is a slab: ``left <= x < right`` along axis 0, the same at every
    transverse position (each cell covered in part along axis 0 as in 1D)."""

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
        if grid.ndim > 1:
            profile = self._profile(grid.axes[0], grid.dx[0])
            return np.broadcast_to(profile.reshape((-1,) + (1,) * (grid.ndim - 1)), grid.shape).copy()
        return self._profile(grid.x, grid.dx)

    def _profile(self, x, dx):
        lower = x - 0.5 * dx
        upper = x + 0.5 * dx
        covered = np.clip(np.minimum(upper, self.right) - np.maximum(lower, self.left), 0.0, None)
        return self.height * covered / dx

    def validate(self, grid):
        if grid.ndim > 1:
            start, stop, along = grid.start[0], grid.stop[0], " along x (axis 0, across which it is a slab)"
        else:
            start, stop, along = grid.start, grid.stop, ""
        if self.right <= start or self.left >= stop:
            raise InvalidParameterError(
                f"barrier [{self.left}, {self.right}) lies outside the box{along} [{start}, {stop})"
            )


@dataclass(frozen=True)
class Harmonic(Potential):
    """``(1/2) mass frequency**2 (x - center)**2`` (lattice: the band-bottom mass).

    On a 2D/3D grid ``V = (1/2) sum_a mass_a frequency_a**2 (x_a - center_a)**2``:
    ``frequency`` and ``center`` are tuples with one entry per axis, or one number for
    every axis (an isotropic well); ``mass_a`` is the model's mass at the spacing along
    ``a`` (the continuum's mass; the lattice's band-bottom mass ``hbar**2 / (2 J dx_a**2)``).
    """

    kind = "harmonic"

    frequency: float
    center: float = 0.0

    def __post_init__(self) -> None:
        for name, check in (("frequency", _checks.positive), ("center", _checks.real)):
            value = getattr(self, name)
            if isinstance(value, (tuple, list, np.ndarray)):
                checked = tuple(value)
                if len(checked) not in (2, 3):
                    raise InvalidParameterError(
                        f"Harmonic {name} {checked!r} has {len(checked)} entries: give one number, or one "
                        "per axis of a 2D or 3D grid (2 or 3 entries)"
                    )
                checked = tuple(check(f"{name}[{a}] ({_along(a)})", v) for a, v in enumerate(checked))
                object.__setattr__(self, name, checked)
            else:
                object.__setattr__(self, name, check(name, value))

    def values(self, grid, model):
        if grid.ndim > 1:
            self.validate(grid)
            frequency, center = _every_axis(self.frequency, grid.ndim), _every_axis(self.center, grid.ndim)
            total = np.zeros(grid.shape)
            for a, (x, dx) in enumerate(zip(grid.axes, grid.dx, strict=True)):
                mass = model.effective_mass(dx)
                along = 0.5 * mass * frequency[a] ** 2 * np.square(x - center[a])
                total = total + along.reshape([-1 if b == a else 1 for b in range(grid.ndim)])
            return total
        if isinstance(self.frequency, tuple) or isinstance(self.center, tuple):
            self.validate(grid)  # one entry per axis on a 1D grid: refused, naming it
        mass = model.effective_mass(grid.dx)
        return 0.5 * mass * self.frequency**2 * np.square(grid.x - self.center)

    def validate(self, grid):
        for name in ("frequency", "center"):
            value = getattr(self, name)
            if isinstance(value, tuple) and len(value) != grid.ndim:
                raise InvalidParameterError(
                    f"Harmonic {name} {value!r} has {len(value)} entries but the grid has {grid.ndim} "
                    f"{'axes' if grid.ndim > 1 else 'axis'} (shape {grid.shape}): give "
                    + ("one number" if grid.ndim == 1 else f"{grid.ndim} entries or one number")
                )


def _every_axis(value, ndim: int) -> tuple[float, ...]:
    return tuple(value) if isinstance(value, tuple) else (value,) * ndim


@dataclass(frozen=True, eq=False)
class Tabulated(Potential):
    """Potential values given at the grid points (an array of the grid's shape: ``(points,)``,
    or ``(Nx, Ny[, Nz])`` on a 2D/3D grid, axis 0 first)."""

    kind = "tabulated"

    table: np.ndarray = field(metadata={"key": "values", "type": "values"})

    def __init__(self, values) -> None:
        if isinstance(values, (str, bytes)):
            raise InvalidTypeError(f"Tabulated values must be an array of numbers, got {values!r}")
        array = np.asarray(values)
        if array.ndim not in (1, 2, 3):
            raise InvalidParameterError(
                f"Tabulated values must have 1, 2 or 3 axes (the grid's shape), got shape {array.shape}"
            )
        object.__setattr__(self, "table", _checks.real_array("Tabulated values", array, array.shape))

    def values(self, grid, model):
        return self.table.copy()

    @classmethod
    def from_entry(cls, entry, tables):
        """A study file names its table by the SHA-256 the study loaded it under."""
        return cls(tables[entry["values"]["sha256"]])

    def validate(self, grid):
        if grid.ndim == 1:
            if self.table.shape != (grid.points,):
                raise InvalidParameterError(
                    f"Tabulated values have shape {self.table.shape}; the grid needs ({grid.points},)"
                )
            return
        if self.table.shape != grid.shape:
            raise InvalidParameterError(
                f"Tabulated values have shape {self.table.shape}; the grid needs {grid.shape}"
                + shape_mismatch(self.table.shape, grid.shape)
            )


def _phase(name: str, value):
    """A phase: a number, or a :class:`~mottle.Uniform` / :class:`~mottle.Normal` draw per realization."""
    return value if is_drawn(value) else _checks.real(name, value)


@dataclass(frozen=True)
class Cosine(Potential):
    """``amplitude cos(wavenumber x + phase)``: a standing wave, the kicked rotor's kick.

    ``phase`` may be drawn per realization (``phase=mo.Uniform(0, 2*math.pi)``) when
    the cosine is the profile of a time-dependent term (:class:`Kicked`,
    :class:`Modulated`, :class:`Switched`); a static cosine takes a number.
    On a periodic grid the cosine is periodic only when ``wavenumber * length``
    is a multiple of ``2 pi``; otherwise it jumps where the box wraps. On a 2D/3D
    grid it is a standing wave along axis 0 (``x`` the coordinate along axis 0),
    the same at every transverse position.
    """

    kind = "cosine"

    amplitude: float
    wavenumber: float
    phase: float = field(default=0.0, metadata={"type": "distribution"})

    def __post_init__(self) -> None:
        object.__setattr__(self, "amplitude", _checks.real("amplitude", self.amplitude))
        object.__setattr__(self, "wavenumber", _checks.real("wavenumber", self.wavenumber))
        object.__setattr__(self, "phase", _phase("phase", self.phase))

    def values(self, grid, model):
        if is_drawn(self.phase):
            raise InvalidParameterError(
                f"Cosine phase {self.phase!r} is drawn per realization: use a number, or make the cosine "
                "the profile of Kicked, Modulated or Switched"
            )
        if grid.ndim > 1:
            wave = self.amplitude * np.cos(self.wavenumber * grid.axes[0] + float(self.phase))
            return np.broadcast_to(wave.reshape((-1,) + (1,) * (grid.ndim - 1)), grid.shape).copy()
        return self.amplitude * np.cos(self.wavenumber * grid.x + float(self.phase))

    def validate(self, grid):
        if is_drawn(self.phase):
            self.values(grid, None)

    def profile_request(self, grid: Grid, model: Model) -> _Profile:
        """The core's description of this profile (a drawn phase is drawn there, per realization)."""
        from .. import _requests

        return _requests.cosine_profile(self.amplitude, self.wavenumber, self.phase)


class TimeDependent(Potential):
    """Base of the time-dependent terms ``e(t) V(x)`` (:class:`Kicked`, :class:`Modulated`,
    :class:`Switched`); they sum with the static potentials (``+``).

    :meth:`values` is a term's static part, zero: ``V(x)`` is :meth:`profile`. The wrapped
    ``potential`` must be static (a :class:`Cosine`, :class:`Harmonic`, ... or a sum of them).
    """

    potential: Potential

    def _shape(self) -> Potential:
        """The static ``V(x)`` this term scales."""
        return self.potential

    def _check_potential(self) -> None:
        if not isinstance(self._shape(), Potential) or any(
            isinstance(term, TimeDependent) for term in _terms(self._shape())
        ):
            raise InvalidTypeError(
                f"{type(self).__name__} needs a static mottle potential (Cosine, Harmonic, Barrier, Tabulated"
                f" or a sum), got {type(self.potential).__name__}"
            )

    def values(self, grid, model):
        return np.zeros(grid.shape)

    def profile(self, grid, model) -> np.ndarray:
        """``V(x)`` at the grid points (a drawn cosine phase is taken as its mean here)."""
        return np.asarray(
            sum(
                (_static_values(term, grid, model) for term in _terms(self._shape())),
                np.zeros(grid.shape),
            ),
            dtype=float,
        )

    def profile_request(self, grid: Grid, model: Model) -> _Profile:
        """The core's description of ``V(x)``: a drawn cosine by its parameters, else a table."""
        from .. import _requests

        shape = self._shape()
        if isinstance(shape, Cosine):
            return shape.profile_request(grid, model)
        if any(isinstance(t, Cosine) and is_drawn(t.phase) for t in _terms(shape)):
            raise InvalidParameterError(
                f"{type(self).__name__}: a drawn Cosine phase works for a lone Cosine profile; "
                "give each drawn cosine its own time-dependent term"
            )
        return _requests.table_profile(np.ravel(self.profile(grid, model)))

    def validate(self, grid):
        for term in _terms(self._shape()):
            if isinstance(term, Cosine):
                continue
            term.validate(grid)


def _static_values(term: Potential, grid, model) -> np.ndarray:
    if isinstance(term, Cosine) and is_drawn(term.phase):
        phase: Any = term.phase
        return Cosine(term.amplitude, term.wavenumber, phase.middle()).values(grid, model)
    return term.values(grid, model)


@dataclass(frozen=True)
class Kicked(TimeDependent):
    """``V(x) sum_n delta(t - t_n)`` with ``t_n = start + n period`` inside ``[0, duration)``.

    Each kick is applied exactly, as ``exp(-i V / hbar)``, between two kinetic
    factors, for every splitting. A kick at ``t = duration`` is not included, so
    with ``start = 0`` a run of duration ``n period`` is ``n`` times the map
    ``psi -> F K psi`` (the kick ``K``, then a free period ``F``); a snapshot at a
    kick's time sees the state just before that kick. The step must land on the
    kicks: ``period`` and ``start`` must be whole numbers of the run's step
    (a run that does not is refused, naming a step that does).

    A :class:`Modulated` ``potential`` modulates the kicks' strength: the kick at
    ``t_n`` is ``exp(-i (1 + depth cos(frequency t_n + phase)) V / hbar)``. The
    quasi-periodic kicked rotor, ``K (1 + eps cos(w2 t + p2) cos(w3 t + p3))``, is the
    sum ``Kicked(Cosine(K (1 - eps), 1), 1) + Kicked(Modulated(Cosine(K eps / 2, 1), 1,
    w2 + w3, pa), 1) + Kicked(Modulated(Cosine(K eps / 2, 1), 1, w2 - w3, pb), 1)``
    (``cos a cos b = [cos(a + b) + cos(a - b)] / 2``); with ``p2, p3`` uniform on the
    circle, ``pa = p2 + p3`` and ``pb = p2 - p3`` are again independent and uniform.
    """

    kind = "kicked"

    potential: Potential
    period: float
    start: float = 0.0

    def _shape(self) -> Potential:
        inner = self.potential
        return inner.potential if isinstance(inner, Modulated) else inner

    @property
    def modulation(self) -> Modulated | None:
        """The :class:`Modulated` strength of the kicks, or None (every kick the same)."""
        return self.potential if isinstance(self.potential, Modulated) else None

    def __post_init__(self) -> None:
        self._check_potential()
        object.__setattr__(self, "period", _checks.positive("period", self.period))
        start = _checks.real("start", self.start)
        if start < 0.0:
            raise InvalidParameterError(f"Kicked start={start} must be >= 0")
        object.__setattr__(self, "start", start)


@dataclass(frozen=True)
class Modulated(TimeDependent):
    """``V(x) (1 + depth cos(frequency t + phase))``.

    Each potential factor of the splitting evaluates it at its own time (the
    clock advances with the kinetic factors), so Strang stays order 2 and the
    4th-order schemes order 4 (``tests/test_timedep.py`` measures both).
    ``phase`` may be drawn per realization (``mo.Uniform(0, 2*math.pi)``).
    """

    kind = "modulated"

    potential: Potential
    depth: float
    frequency: float
    phase: float = field(default=0.0, metadata={"type": "distribution"})

    def __post_init__(self) -> None:
        self._check_potential()
        object.__setattr__(self, "depth", _checks.real("depth", self.depth))
        object.__setattr__(self, "frequency", _checks.real("frequency", self.frequency))
        object.__setattr__(self, "phase", _phase("phase", self.phase))


@dataclass(frozen=True)
class Switched(TimeDependent):
    """``V(x)`` only while ``on <= t < off`` (a quench; ``off = math.inf``: never off).

    ``on`` and ``off`` must fall on step boundaries: the core switches by whole step counts
    ``round(on / step)``, never by accumulated time (a run whose step does not land on them is
    refused, naming a step that does). ``off`` past the run's end means never off.
    """

    kind = "switched"

    potential: Potential
    on: float = 0.0
    off: float = math.inf

    def __post_init__(self) -> None:
        self._check_potential()
        on = _checks.real("on", self.on)
        if on < 0.0:
            raise InvalidParameterError(f"Switched on={on} must be >= 0")
        off = self.off
        if not (isinstance(off, (int, float)) and not isinstance(off, bool) and off == math.inf):
            off = _checks.real("off", off)
        if off < on:
            raise InvalidParameterError(f"Switched off={off} is before on={on}: use off >= on")
        object.__setattr__(self, "on", on)
        object.__setattr__(self, "off", float(off))


def time_dependent_terms(potential: Potential | None) -> tuple[TimeDependent, ...]:
    """The time-dependent terms of a potential (or a sum), in order."""
    if potential is None:
        return ()
    return tuple(term for term in _terms(potential) if isinstance(term, TimeDependent))
