"""Ground states of confining systems: :func:`ground_state` and the :class:`GroundState` it returns."""

from __future__ import annotations

import math
import warnings

import numpy as np

from .. import _checks, _core, _requests, limits
from ..errors import InvalidParameterError, InvalidTypeError, MottleError, UnderResolvedWarning
from ..specs.packets import GaussianPacket, Wavefunction
from ..specs.potentials import time_dependent_terms
from ..specs.system import System


class GroundState(Wavefunction):
    """A :class:`~mottle.Wavefunction` found by :func:`ground_state`, usable as any packet.

    ``energy`` is ``E = <T + V> + (g/2) sum |psi|**4 dx`` and ``chemical_potential``
    ``mu = <T + V + g |psi|**2>`` (equal when ``g = 0``); ``residual`` is
    ``||H psi - mu psi||`` (energy units, ``sum`` over the grid times ``dx``), ``scale`` the
    energy scale the tolerance is relative to, ``imaginary_steps`` and ``newton_iterations``
    what the search took, ``imaginary_step`` its last imaginary step.
    """

    energy: float
    chemical_potential: float
    residual: float
    scale: float
    imaginary_steps: int
    newton_iterations: int
    imaginary_step: float

    def __init__(self, values, out: dict) -> None:
        super().__init__(values)
        object.__setattr__(self, "energy", float(out["energy"]))
        object.__setattr__(self, "chemical_potential", float(out["chemical_potential"]))
        object.__setattr__(self, "residual", float(out["residual"]))
        object.__setattr__(self, "scale", float(out["scale"]))
        object.__setattr__(self, "imaginary_steps", int(out["steps"]))
        object.__setattr__(self, "newton_iterations", int(out["newton_iterations"]))
        object.__setattr__(self, "imaginary_step", float(out["imaginary_step"]))

    def __repr__(self) -> str:
        return (
            f"GroundState(points={self.table.size}, energy={self.energy:.12g}, "
            f"chemical_potential={self.chemical_potential:.12g}, residual={self.residual:.2e})"
        )


def initial_guess(system: System, potential: np.ndarray) -> np.ndarray:
    """The default start: the Thomas-Fermi profile ``sqrt(max(mu - V, 0) / g)`` (normalized) when
    ``g > 0`` and it spans at least 16 points, else the uniform state (both positive, so both
    overlap the positive ground state)."""
    grid, g = system.grid, system.nonlinearity
    uniform = np.ones(grid.shape)
    if g <= 0.0:
        return uniform
    floor = float(np.min(potential))
    volume = float(np.prod(np.atleast_1d(grid.dx)))  # the volume element (dx in 1D)
    mass = lambda mu: float(np.sum(np.maximum(mu - potential, 0.0))) * volume / g  # noqa: E731
    low, high = floor, floor + 1.0
    while mass(high) < 1.0 and high - floor < 1e300:
        high = floor + 2.0 * (high - floor)
    for _ in range(200):
        middle = 0.5 * (low + high)
        low, high = (middle, high) if mass(middle) < 1.0 else (low, middle)
    profile = np.sqrt(np.maximum(high - potential, 0.0) / g)
    return profile if np.count_nonzero(profile) >= 16 else uniform


def _start(system: System, initial, potential: np.ndarray) -> np.ndarray:
    if initial is None:
        return initial_guess(system, potential)
    if isinstance(initial, (GaussianPacket, Wavefunction)):
        initial.validate(system.grid)
        values = initial.values(system.grid)
    else:
        given = Wavefunction(initial)
        given.validate(system.grid)
        values = given.table
    return np.abs(np.asarray(values)).astype(np.float64)


def _check_confinement(system: System, psi: np.ndarray, tolerance: float) -> None:
    """Refuse a state the box holds; warn where its edges or its spectrum's top are not negligible."""
    density = np.abs(psi) ** 2
    peak = float(density.max())
    if density.ndim == 1:
        edge = max(float(density[0]), float(density[-1])) / peak
    else:  # the densest point on any face of the box
        faces = [np.take(density, end, axis=a) for a in range(density.ndim) for end in (0, -1)]
        edge = max(float(face.max()) for face in faces) / peak
    if edge > limits.GROUND_EDGE_DENSITY:
        raise InvalidParameterError(
            f"the ground state keeps {edge:.2g} of its peak density at the box edges "
            f"(more than {limits.GROUND_EDGE_DENSITY:g}): the periodic box confines it, not the potential; "
            "use a longer box or a potential that rises well above the chemical potential at its edges"
        )
    if edge > tolerance:
        warnings.warn(
            f"the ground state keeps {edge:.2g} of its peak density at the box edges: its periodic images "
            f"shift mu by about that fraction, more than the tolerance {tolerance:g}; lengthen the box",
            UnderResolvedWarning,
            stacklevel=3,
        )
    if psi.ndim == 1:
        spectrum = np.abs(np.fft.fft(psi)) ** 2
        k = np.abs(np.asarray(system.grid.k))
        top = spectrum[k >= 0.75 * float(k.max())].max() / float(spectrum.max())
    else:  # the top quarter of the wavenumbers along any axis
        spectrum = np.abs(np.fft.fftn(psi)) ** 2
        grids = np.meshgrid(*(np.abs(axis) for axis in system.grid.k), indexing="ij")
        near = np.zeros(psi.shape, dtype=bool)
        for a, along in enumerate(grids):
            near |= along >= 0.75 * float(np.max(np.abs(system.grid.k[a])))
        k = np.asarray([float(np.max(np.abs(axis))) for axis in system.grid.k])
        top = spectrum[near].max() / float(spectrum.max())
    if top > tolerance:
        warnings.warn(
            f"the ground state's momentum density reaches {top:.2g} of its peak in the top quarter of the "
            f"grid's wavenumbers (|k| >= {0.75 * k.max():.3g}): the grid under-resolves it; use more points",
            UnderResolvedWarning,
            stacklevel=3,
        )


def ground_state(
    system: System,
    tolerance: float = 1e-10,
    initial=None,
    *,
    seed: int = 0,
    index: int = 0,
    max_steps: int = 100_000,
) -> GroundState:
    """The ground state of ``H = T + V + g |psi|**2`` in ``system``, normalized to 1.

    Imaginary-time split steps with renormalization (the nonlinearity included: the
    Gross-Pitaevskii ground state for ``g = system.nonlinearity``), then a Newton polish
    (projected conjugate gradients preconditioned by the kinetic energy), stopped when the
    residual ``||H psi - mu psi||`` with the exact discretized ``H`` (kinetic part by FFT with
    the model's dispersion) is at most ``tolerance`` times the state's energy scale
    ``<T - T_min> + <V - V_min> + |g| sum |psi|**4 dx``. A stop on the energy change would not
    do: ``E`` is stationary at the ground state, ``mu`` is not, and the plain imaginary-time
    fixed point carries a ``mu`` error proportional to the step (tests/test_ground_state.py).

    ``initial`` (a :class:`~mottle.Wavefunction`, a :class:`~mottle.GaussianPacket` or an array)
    seeds the search through its modulus (the ground state is positive, so any nonzero modulus
    overlaps it); by default the Thomas-Fermi profile for ``g > 0``, else the uniform state.
    Static disorder is allowed: the potential is realization ``index`` of ``seed``, as in
    :func:`mottle.propagate`. Refused: absorbers, a system without a potential, and a state the
    box rather than the potential confines (density at the box edges above
    ``mottle.limits.GROUND_EDGE_DENSITY`` of its peak); warned: edges or the top of the spectrum
    above ``tolerance``. A search that does not converge within ``max_steps`` imaginary-time
    steps, or that stalls at the grid's rounding floor (about ``eps * rms(T)``, so over-resolved
    grids cannot reach tiny tolerances), raises :class:`~mottle.MottleError` saying how far it got.
    Time-dependent terms and twisted boundaries are refused. Ctrl-C stops it. On a 2D/3D grid the
    state has the grid's shape, ``dx`` above is the volume element and the edges are the box's faces.
    """
    if not isinstance(system, System):
        raise InvalidTypeError(f"system must be a mottle.System, got {type(system).__name__}")
    if system.absorber is not None:
        raise InvalidParameterError(
            "ground_state needs a closed system: this one has absorbers, which remove probability; "
            "build the trap without absorber=..."
        )
    if system.potential is None:
        raise InvalidParameterError(
            "ground_state needs a confining potential (e.g. mo.Harmonic): this system has none, and the "
            "ground state of the periodic box alone is the uniform state"
        )
    moving = time_dependent_terms(system.potential)
    if moving:
        raise InvalidParameterError(
            f"ground_state needs a static Hamiltonian: this potential has the time-dependent term(s) "
            f"{', '.join(type(term).__name__ for term in moving)}; pass the static trap alone"
        )
    if system.grid.twisted:
        raise InvalidParameterError(
            f"ground_state needs an untwisted box: the grid has quasimomentum {system.grid.quasimomentum!r}; "
            "use quasimomentum=0"
        )
    tolerance = _checks.positive("tolerance", tolerance)
    if tolerance >= 1.0:
        raise InvalidParameterError(f"tolerance must lie in (0, 1), got {tolerance}")
    max_steps = _checks.integer("max_steps", max_steps, minimum=1)
    from .realize import realize

    potential = realize(system, seed, index)
    start = _start(system, initial, potential)
    if not np.any(start):
        raise InvalidParameterError("initial state is zero everywhere; it cannot seed the search")
    out = _core.ground_state_of(
        _requests.ground(system, tolerance, max_steps), np.ravel(potential), np.ravel(start)
    )
    got = (
        f"residual ||H psi - mu psi|| = {out['residual']:.3g} ({out['residual'] / out['scale']:.3g} of the "
        f"state's energy scale {out['scale']:.4g}; tolerance {tolerance:g}) after {out['steps']} "
        f"imaginary-time steps (last step {out['imaginary_step']:.3g}) and {out['newton_iterations']} "
        f"Newton iterations; mu = {out['chemical_potential']:.10g}, E = {out['energy']:.10g}"
    )
    if out["stop"] == "step-cap":
        raise MottleError(f"ground_state did not converge within max_steps={max_steps}: {got}")
    if out["stop"] == "floor":
        floor = out["floor"] / out["scale"]
        raise MottleError(
            f"ground_state stalled at this grid's rounding floor: {got}. The kinetic table's rms times "
            f"machine epsilon is {floor:.2g} of the energy scale: use tolerance >= "
            f"{10 ** math.ceil(math.log10(10 * floor)):g} or fewer points"
        )
    psi = np.asarray(out["psi"]).reshape(system.grid.shape)
    _check_confinement(system, psi, tolerance)
    return GroundState(psi.astype(np.complex128), out)
