"""Runs on 2D and 3D grids: what they accept, the detector along axis 0, the coarse-step check and
the angle-averaged momentum distribution.

Arrays on a 2D/3D grid are in C order, axis 0 slowest; the core receives them flat. The detector
``(left, right)`` and the absorbing layers of :class:`mottle.Absorber` along axis 0 are whole slabs
of the transverse points, so on the flat array they are the contiguous ranges the 1D core counts.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from .. import limits
from ..errors import InvalidParameterError, UnderResolvedWarning


def is_box(system) -> bool:
    """Whether ``system`` lives on a 2D or 3D grid."""
    return system.grid.ndim > 1


def check_run(system, packet=None, *, spectrum=None) -> None:
    """Refuse, with the reason, what a run on a 2D/3D grid does not do (yet)."""
    from ..specs.packets import GaussianPacket, Wavefunction

    grid = system.grid
    what = f"a run on a {grid.ndim}D grid"
    if grid.twisted:
        raise InvalidParameterError(f"{what} has periodic boundaries: a quasimomentum needs a 1D grid")
    if spectrum:
        raise InvalidParameterError(f"{what} has no energy-resolved spectrum: use spectrum=None")
    if packet is not None and not isinstance(packet, (GaussianPacket, Wavefunction)):
        raise InvalidParameterError(
            f"{what} starts from a GaussianPacket or a Wavefunction, got {type(packet).__name__}"
        )


def detector_bounds(grid, detector: tuple[float, float] | None) -> tuple[int, int] | None:
    """Flat ``(left_end, right_start)`` of ``detector=(left, right)`` along axis 0: the slabs
    ``x_0 < left`` and ``x_0 > right`` across the whole box."""
    if detector is None:
        return None
    left, right = detector
    x = grid.axes[0]
    transverse = grid.size // grid.shape[0]
    left_end = int(np.searchsorted(x, left, side="left"))
    right_start = int(np.searchsorted(x, right, side="right"))
    return left_end * transverse, right_start * transverse


def warn_if_coarse(system, packet, step: float, potential: np.ndarray) -> None:
    """The 1D check of :func:`mottle.dynamics.propagate.warn_if_coarse` on a 2D/3D grid: warn when
    the kinetic phase a step puts on the wavenumbers the packet populates (per axis, summed), or the
    potential's phase across its range, exceeds pi."""
    grid, model, hbar = system.grid, system.model, system.hbar
    psi = packet.values(grid)
    weight = np.abs(np.fft.fftn(psi)) ** 2
    total = float(np.sum(weight))
    phase, bands = 0.0, []
    for a in range(grid.ndim):
        marginal = np.sum(weight, axis=tuple(b for b in range(grid.ndim) if b != a))
        k = np.abs(grid.k[a])
        order = np.argsort(k)
        cumulative = np.cumsum(marginal[order]) / total
        band = float(k[order][min(np.searchsorted(cumulative, 1.0 - 1e-12), k.size - 1)])
        bands.append(band)
        phase += float(model.kinetic(band, grid.dx[a]) - model.kinetic(0.0, grid.dx[a])) * step / hbar
    # As in 1D, a kicked system whose static part is the kinetic energy alone evolves exactly
    # between the kicks, however long the step.
    from ..specs.potentials import Kicked, time_dependent_terms

    kicked = any(isinstance(term, Kicked) for term in time_dependent_terms(system.potential))
    flat = not potential.size or not np.ptp(potential)
    free = kicked and flat and system.nonlinearity == 0.0 and system.absorber is None
    if phase > limits.PHASE_PER_STEP and not free:
        warnings.warn(
            f"step {step} is too coarse: the kinetic phase per step reaches {phase:.3g} rad at "
            f"|k| per axis = {tuple(round(b, 3) for b in bands)}, the largest wavenumbers this run "
            f"populates (keep it below pi: step <= {step * limits.PHASE_PER_STEP / phase:.3g})",
            UnderResolvedWarning,
            stacklevel=4,
        )
    if not potential.size:
        return
    # As in 1D: only the potential the packet can reach counts, clipped at four times the energy
    # it carries above the floor (a harmonic well's walls far beyond the turning points do not).
    density = np.abs(psi) ** 2
    support = density > 1e-10 * density.max()
    kinetic = sum(
        float(model.kinetic(band, grid.dx[a]) - model.kinetic(0.0, grid.dx[a]))
        for a, band in enumerate(bands)
    )
    floor = float(np.min(potential))
    gain = max(kinetic + float(np.max(potential[support])) - floor, 0.0)
    span = float(np.max(np.minimum(potential, floor + 4.0 * gain)) - floor)
    if span * step / hbar > limits.PHASE_PER_STEP:
        warnings.warn(
            f"step {step} is too coarse: the potential phase per step reaches {span * step / hbar:.3g} "
            f"rad across the potential's range {span:.3g} that the packet feels (keep it below pi: step <= "
            f"{hbar * limits.PHASE_PER_STEP / span:.3g})",
            UnderResolvedWarning,
            stacklevel=4,
        )


def radial_momentum(k: tuple[np.ndarray, ...], momentum: np.ndarray, bins: int | None = None):
    """The angle average of a momentum distribution on a 2D/3D grid.

    ``momentum`` has the grid's shape (or a leading snapshot axis), with k = 0 at the centre as in
    :attr:`mottle.EnsembleResult.momentum`; ``k`` are the increasing wavenumbers of each axis.
    Returns ``(q, n(q))``: the mean of ``n(k)`` over the shell ``|k|`` in each bin (edges from 0 to
    the largest |k| on the smallest axis, ``bins`` of them: by default one per spacing of the
    coarsest axis), ``q`` the bins' centres. ``2 pi q n(q) dq`` (2D) or ``4 pi q^2 n(q) dq`` (3D)
    summed is the norm, up to the corners beyond the last shell.
    """
    ndim = len(k)
    grids = np.meshgrid(*k, indexing="ij")
    radius = np.sqrt(sum(g**2 for g in grids))
    dk = max(float(axis[1] - axis[0]) for axis in k)
    top = min(float(np.max(np.abs(axis))) for axis in k)
    count = bins if bins is not None else max(int(top / dk), 1)
    if count < 1:
        raise InvalidParameterError(f"bins must be >= 1, got {bins}")
    edges = np.linspace(0.0, top, count + 1)
    which = np.digitize(radius.ravel(), edges) - 1
    inside = (which >= 0) & (which < count)
    members = np.bincount(which[inside], minlength=count).astype(float)
    values = np.asarray(momentum, dtype=float)
    lead = values.shape[: values.ndim - ndim]
    flat = values.reshape(*lead, -1)
    out = np.full((*lead, count), math.nan)
    for index in np.ndindex(*lead):
        sums = np.bincount(which[inside], weights=flat[index][inside], minlength=count)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[index] = np.where(members > 0, sums / np.maximum(members, 1.0), math.nan)
    return 0.5 * (edges[1:] + edges[:-1]), out
