"""The pure-numpy split-step propagator on 2D and 3D grids: the oracle of the N-d core.

Like :mod:`mottle.dynamics.reference` it is written to be read, not to be fast;
it shares that module's splitting coefficients and run conventions, written out
here for a box:

* ``psi`` is an array of the grid's shape (axis 0 first, C order) with
  ``sum |psi|**2 dV = 1``, ``dV = prod(dx)``.
* One step of length ``h`` of a splitting with potential fractions ``a_0..a_m``
  and kinetic fractions ``b_0..b_{m-1}`` is
  ``V(a_m h) K(b_{m-1} h) ... V(a_1 h) K(b_0 h) V(a_0 h)`` (rightmost first), with
  ``K(f h) psi = ifftn(exp(-i T(k) f h / hbar) fftn(psi))`` and
  ``V(f h) psi = exp(-i (V + g |psi|**2) f h / hbar) psi``, ``|psi|`` taken at the
  start of the factor (exact: the factor keeps ``|psi|``). Every step is applied
  whole (the closing ``V(a_m h)`` of one step and the opening ``V(a_0 h)`` of the
  next are not merged: the same map, to rounding).
* ``T(k) = sum_a T_a(k_a)``, each axis the model's 1D dispersion at its spacing:
  ``hbar**2 |k|**2 / 2m`` in the continuum, ``-2 J sum_a cos(k_a dx_a)`` on the
  lattice (the square/cubic tight-binding band), ``k_a = 2 pi fftfreq(N_a, dx_a)``.
* A snapshot at time ``t`` between two step boundaries is a copy advanced by one
  shorter step from the boundary before it (:func:`mottle.dynamics.propagate.pauses_for`).
* Expectation values are normalized by the probability in the box; ``<p>`` and
  ``<T>`` come from ``|fftn(psi)|**2``.

Static real potentials (the system's, plus one disorder realization where the
disorder can be realized on the box), the cubic nonlinearity ``g |psi|**2`` and
the splittings Strang, Yoshida and Blanes-Moan; no absorbing layers, no
time-dependent terms, no classical particle.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .. import _checks
from ..errors import InvalidParameterError
from ..specs.models import Continuum, Lattice
from ..specs.packets import GaussianPacket, Wavefunction
from ..specs.potentials import time_dependent_terms
from ..specs.system import System
from .propagate import check_packet, check_system, pauses_for, resolve_splitting, steps_for
from .reference import coefficients


@dataclass(frozen=True, eq=False)
class BoxRun:
    """The outcome of one run of the N-d reference.

    ``psi`` is the state at the end (the grid's shape); ``snapshots`` has one such
    array per time in ``times``. Per snapshot: ``norms`` (``sum |psi|**2 dV``),
    ``position`` and ``position_squared`` (``<x_a>``, ``<x_a**2>``: shape
    ``(snapshots, ndim)``), ``momentum`` (``<p_a>``, same shape) and ``energy``
    (``<T> + <V> + (g/2) <|psi|**2>``). ``axes`` and ``dx`` are the grid's, ``step``
    the step used.
    """

    times: np.ndarray
    psi: np.ndarray
    snapshots: np.ndarray
    norm: float
    norms: np.ndarray
    position: np.ndarray
    position_squared: np.ndarray
    momentum: np.ndarray
    energy: np.ndarray
    axes: tuple[np.ndarray, ...]
    dx: tuple[float, ...]
    step: float

    @property
    def width(self) -> np.ndarray:
        """rms width of ``|psi|**2`` along each axis at the snapshots, shape ``(snapshots, ndim)``."""
        return np.sqrt(np.maximum(self.position_squared - self.position**2, 0.0))


def _along(array: np.ndarray, axis: int, ndim: int) -> np.ndarray:
    """A 1D array along ``axis`` of an ``ndim``-axis array, to broadcast against it."""
    return array.reshape([-1 if b == axis else 1 for b in range(ndim)])


def _spacings(grid) -> tuple[float, ...]:
    return tuple(grid.dx) if grid.ndim > 1 else (grid.dx,)


def _wavenumbers(grid) -> tuple[np.ndarray, ...]:
    return tuple(grid.k) if grid.ndim > 1 else (np.asarray(grid.k),)


def kinetic_table(grid, model) -> np.ndarray:
    """``T(k)`` on the grid's wavenumbers (FFT order, the grid's shape), written out from the
    model's parameters: ``hbar**2 sum_a k_a**2 / 2m`` or ``-2 J sum_a cos(k_a dx_a)``."""
    ndim = grid.ndim
    table = np.zeros(grid.shape)
    for a, (k, dx) in enumerate(zip(_wavenumbers(grid), _spacings(grid), strict=True)):
        if isinstance(model, Continuum):
            along = model.hbar**2 * k**2 / (2.0 * model.mass)
        elif isinstance(model, Lattice):
            along = -2.0 * model.hopping * np.cos(k * dx)
        else:
            raise InvalidParameterError(f"no kinetic energy for model {model!r}")
        table = table + _along(along, a, ndim)
    return table


class _BoxPropagator:
    """The split-step map on a box: tables, and the factors of each fraction of a step."""

    def __init__(self, system: System, potential: np.ndarray, step: float, splitting: str) -> None:
        self.hbar = system.hbar
        self.step = step
        self.nonlinearity = system.nonlinearity
        self.potential = np.asarray(potential, dtype=float)
        self.kinetic = kinetic_table(system.grid, system.model)
        self.a, self.b = coefficients(splitting)
        self._kinetic_factors: dict[float, np.ndarray] = {}
        self._potential_factors: dict[float, np.ndarray] = {}

    def apply_kinetic(self, psi: np.ndarray, fraction: float) -> np.ndarray:
        if fraction not in self._kinetic_factors:
            angle = -self.kinetic * fraction * self.step / self.hbar
            self._kinetic_factors[fraction] = np.exp(1j * angle)
        return np.fft.ifftn(self._kinetic_factors[fraction] * np.fft.fftn(psi))

    def apply_potential(self, psi: np.ndarray, fraction: float) -> np.ndarray:
        if fraction not in self._potential_factors:
            angle = -self.potential * fraction * self.step / self.hbar
            self._potential_factors[fraction] = np.exp(1j * angle)
        density = np.abs(psi) ** 2
        psi = psi * self._potential_factors[fraction]
        if self.nonlinearity != 0.0:
            psi = psi * np.exp(-1j * self.nonlinearity * fraction * self.step / self.hbar * density)
        return psi

    def advance(self, psi: np.ndarray, steps: int) -> np.ndarray:
        a, b = self.a, self.b
        for _ in range(steps):
            for stage in range(len(b)):
                psi = self.apply_potential(psi, a[stage])
                psi = self.apply_kinetic(psi, b[stage])
            psi = self.apply_potential(psi, a[-1])
        return psi


def _observe(psi: np.ndarray, grid, system: System, potential: np.ndarray, kinetic: np.ndarray) -> dict:
    ndim, hbar = grid.ndim, system.hbar
    volume = math.prod(_spacings(grid))
    density = np.abs(psi) ** 2
    in_box = float(np.sum(density))
    spectrum = np.abs(np.fft.fftn(psi)) ** 2
    in_spectrum = float(np.sum(spectrum))
    position, position_squared, momentum = [], [], []
    for a, (x, k) in enumerate(zip(grid.axes, _wavenumbers(grid), strict=True)):
        x, k = _along(np.asarray(x), a, ndim), _along(k, a, ndim)
        position.append(float(np.sum(density * x)) / in_box)
        position_squared.append(float(np.sum(density * x**2)) / in_box)
        momentum.append(hbar * float(np.sum(spectrum * k)) / in_spectrum)
    interaction = 0.5 * system.nonlinearity * float(np.sum(density**2))
    energy = float(np.sum(spectrum * kinetic)) / in_spectrum
    energy += (float(np.sum(density * potential)) + interaction) / in_box
    return {
        "norm": in_box * volume,
        "position": position,
        "position_squared": position_squared,
        "momentum": momentum,
        "energy": energy,
    }


def _check_box_system(system: System) -> None:
    if system.grid.twisted:
        raise InvalidParameterError("the N-d reference has no twisted boundary: use quasimomentum=0")
    if system.absorber is not None:
        raise InvalidParameterError(
            "the N-d reference has no absorbing layers: use absorber=None (mottle.reference.propagate "
            "on a 1D grid has them)"
        )
    terms = time_dependent_terms(system.potential)
    if terms:
        raise InvalidParameterError(
            f"the N-d reference has no time-dependent terms (got {type(terms[0]).__name__}): "
            "use static potentials"
        )


def propagate(
    system: System,
    packet,
    duration: float,
    step: float,
    order: int = 2,
    snapshots=(),
    splitting: str | None = None,
    seed: int = 0,
    index: int = 0,
) -> BoxRun:
    """Propagate ``packet`` in ``system`` on its 2D or 3D grid (1D works too), in plain numpy.

    ``order``, ``splitting``, ``snapshots`` (times in ``(0, duration]``) and the step rule
    (``ceil(duration / step)`` equal steps) are those of :func:`mottle.propagate`; with
    disorder the potential is realization ``index`` of ``seed`` (:func:`mottle.realize`).
    See the module docstring for the conventions; :func:`mottle.reference.propagate` calls
    this on a 2D/3D grid.
    """
    check_system(system)
    _check_box_system(system)
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    grid = system.grid
    if hasattr(packet, "packet") and not isinstance(packet, (GaussianPacket, Wavefunction)):
        packet.validate(grid)
        packet = packet.packet(seed, index)  # a PacketList: realization `index`'s packet
    check_packet(system, packet)
    duration = _checks.positive("duration", duration)
    step = _checks.positive("step", step)
    splitting = resolve_splitting(order, splitting)
    steps, step = steps_for(duration, step)
    pauses, offsets, times = pauses_for(snapshots, step, steps)

    if system.disorder is None:
        potential = system.static_potential()
    else:
        from .realize import realize

        potential = np.asarray(realize(system, seed, index), dtype=float)
    if potential.shape != grid.shape:
        raise InvalidParameterError(f"the potential has shape {potential.shape}; the grid needs {grid.shape}")

    propagator = _BoxPropagator(system, potential, step, splitting)
    psi = np.asarray(packet.values(grid), dtype=np.complex128).reshape(grid.shape)
    kept, seen = [], []
    done = 0
    for pause, offset in zip(pauses, offsets, strict=True):
        psi = propagator.advance(psi, pause - done)
        done = pause
        now = psi
        if offset > 0.0:
            # Between step boundaries: a copy advanced by one shorter step; the run goes on.
            now = _BoxPropagator(system, potential, offset, splitting).advance(psi.copy(), 1)
        kept.append(now.copy())
        seen.append(_observe(now, grid, system, potential, propagator.kinetic))
    psi = propagator.advance(psi, steps - done)
    last = _observe(psi, grid, system, potential, propagator.kinetic)

    def column(name: str) -> np.ndarray:
        return np.array([observation[name] for observation in seen], dtype=float)

    ndim = grid.ndim
    return BoxRun(
        times=times,
        psi=psi,
        snapshots=np.array(kept, dtype=np.complex128).reshape((len(kept), *grid.shape)),
        norm=last["norm"],
        norms=column("norm"),
        position=column("position").reshape(len(seen), ndim),
        position_squared=column("position_squared").reshape(len(seen), ndim),
        momentum=column("momentum").reshape(len(seen), ndim),
        energy=column("energy"),
        axes=tuple(grid.axes),
        dx=_spacings(grid),
        step=step,
    )
