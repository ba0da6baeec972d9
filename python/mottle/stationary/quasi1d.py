"""Quasi-1D transfer matrices: the smallest Lyapunov exponent of a 2D strip or a 3D bar.

The method of MacKinnon & Kramer (Z. Phys. B 53, 1 (1983)) on the Anderson
model: sites ``(n, j)`` with slice ``n`` along axis 0 and ``j`` across, hopping
``J`` to the nearest neighbours, on-site energies uniform in ``(-W/2, W/2)``
(:class:`~mottle.BoxDisorder`), periodic across. With
``-J (psi[n+1] + psi[n-1]) + H_n psi[n] = E psi[n]`` (the sign of the 1D
lattice, :mod:`mottle.stationary.localization`) a block of ``M'`` vectors
(``M' = M`` for a strip, ``M**2`` for a bar) is carried through the slices
by ``psi[n+1] = ((H_n - E)/J) psi[n] - psi[n-1]`` and re-orthonormalized
every ``qr_interval`` slices (modified Gram-Schmidt), summing ``ln R_ii``.
Column ``i``'s sum over the slices gives the ``i``-th Lyapunov exponent; the
``2 M'`` exponents come in pairs ``+-gamma``, the block holds the non-negative
half, and its last is the smallest positive one, ``gamma_min = 1/xi_M``.
``Lambda = xi_M / M`` (``M`` times the transverse spacing) is the scaling
variable: it grows with ``M`` on the metallic side of the Anderson transition
and falls on the insulating side.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import cast

import numpy as np

from .. import _checks, _core, _requests
from ..analysis.statistics import Stat
from ..errors import InvalidParameterError, InvalidTypeError
from ..specs.disorder import BoxDisorder
from ..specs.grid import _memory_bytes
from ..specs.models import Lattice
from ..specs.system import System

_AXES = ("x", "y", "z")
# Growth bound of the vectors between two re-orthonormalizations of the default qr_interval:
# their condition number stays below about e^24 ~ 3e10, which leaves ~6 digits of the smallest
# direction (common practice: orthonormalize every few to ten slices at strong disorder).
_DEFAULT_LOG_GROWTH = 24.0
_DEFAULT_BLOCKS_TOTAL = 16


def default_qr_interval(dimensions: int, disorder_width: float, energy: float, hopping: float) -> int:
    """The default slices between re-orthonormalizations: ``floor(24 / ln g)`` within ``[1, 16]``,
    where ``g = (|E| + W/2)/J + 2 (d - 1) + 1`` bounds a vector's growth per slice."""
    growth = (abs(energy) + 0.5 * disorder_width) / hopping + 2.0 * (dimensions - 1) + 1.0
    return int(min(16, max(1, math.floor(_DEFAULT_LOG_GROWTH / math.log(growth)))))


def _reciprocal(stat: Stat, scale: float) -> Stat:
    """The Stat of ``1 / (scale * x)`` from that of ``x``: the mean is ``1/(scale <x>)`` with the
    first-order error ``stderr(x) / (scale <x>**2)``; the log moments are exact."""
    mean = stat.mean
    factor = 1.0 / (scale * mean * mean)
    return Stat(
        mean=1.0 / (scale * mean),
        stderr=stat.stderr * factor,
        std=stat.std * factor,
        count=stat.count,
        log_mean=-math.log(scale) - stat.log_mean,
        log_stderr=stat.log_stderr,
    )


@dataclass(frozen=True, eq=False)
class Quasi1DLyapunov:
    """Lyapunov exponents of a strip (2D) or bar (3D) of ``width`` sites across, by transfer matrices.

    ``spectra[r, b, i]`` is the ``i``-th largest exponent of realization ``r``
    over block ``b`` of (nearly) equal numbers of slices, per unit length along
    axis 0 (per site divided by ``spacing``); ``samples = spectra[..., -1]`` are
    the smallest positive exponents. ``exponent`` is the :class:`~mottle.Stat`
    of ``gamma_min`` over every realization and block, ``xi = 1/gamma_min``
    (amplitude localization length of the bar, ``|psi| ~ exp(-x/xi)``) and
    ``Lambda = xi / (width * transverse_spacing)``, both with first-order error
    bars. Blocks much longer than ``xi`` are nearly independent, so with one
    realization the blocks still give an error bar; each block (and each
    realization) carries an O(xi/length) start bias, far below the noise for
    thousands of slices.
    """

    energy: float
    dimensions: int
    width: int
    slices: int
    qr_interval: int
    spacing: float
    transverse_spacing: float
    seed: int
    spectra: np.ndarray

    @property
    def channels(self) -> int:
        """Transverse sites per slice: ``width`` (strip) or ``width**2`` (bar)."""
        return int(self.spectra.shape[2])

    @property
    def realizations(self) -> int:
        return int(self.spectra.shape[0])

    @property
    def blocks(self) -> int:
        return int(self.spectra.shape[1])

    @property
    def samples(self) -> np.ndarray:
        """``gamma_min`` per realization and block, ``(realizations, blocks)``."""
        return self.spectra[:, :, -1]

    @property
    def exponents(self) -> np.ndarray:
        """The mean of each of the ``channels`` exponents, largest first."""
        return self.spectra.mean(axis=(0, 1))

    @property
    def exponent(self) -> Stat:
        """:class:`~mottle.Stat` of ``gamma_min`` (per unit length) over realizations and blocks."""
        return Stat.of(self.samples.ravel())

    @property
    def xi(self) -> Stat:
        """``xi_M = 1 / gamma_min``, a length along axis 0."""
        return _reciprocal(self.exponent, 1.0)

    @property
    def Lambda(self) -> Stat:
        """``Lambda = xi_M / (M * transverse spacing)``."""
        return _reciprocal(self.exponent, self.width * self.transverse_spacing)

    def __str__(self) -> str:
        shape = f"{self.width}" if self.dimensions == 2 else f"{self.width}x{self.width}"
        return (
            f"{self.dimensions}D, {shape} across, {self.slices} slices x {self.realizations} "
            f"realizations at E = {self.energy:g}: Lambda = {self.Lambda.mean:.5g} ± "
            f"{self.Lambda.stderr:.2g}, xi = {self.xi.mean:.5g} ± {self.xi.stderr:.2g}"
        )


def _spacings(grid) -> tuple[float, ...]:
    """The grid spacing along each axis (a tuple on a 2D/3D grid)."""
    return tuple(float(dx) for dx in np.ravel(grid.dx))


def _transverse(system: System, width) -> tuple[int, int, float]:
    """Check the grid, model and width: (dimensions, width, transverse spacing)."""
    grid = system.grid
    if grid.ndim not in (2, 3):
        raise InvalidParameterError(
            f"width={width!r} asks for a quasi-1D strip or bar, which needs a 2D or 3D grid "
            f"(mo.Grid(points=(L, N)) or (L, N, N), slices along x); this grid has {grid.ndim} axis"
        )
    if not isinstance(system.model, Lattice):
        raise InvalidParameterError(
            "the quasi-1D transfer matrices solve the Anderson (tight-binding) model: use "
            f"model=mottle.Lattice(hopping=J), not {type(system.model).__name__}"
        )
    width = _checks.integer("width", width, minimum=1)
    for axis in range(1, grid.ndim):
        points = grid.shape[axis]
        if width > points:
            raise InvalidParameterError(
                f"width {width} does not fit the transverse box: the grid has {points} points along "
                f"{_AXES[axis]} (axis {axis}); use width <= {points} or more points along {_AXES[axis]}"
            )
    dx = _spacings(grid)
    spacing = dx[1]
    if grid.ndim == 3 and not math.isclose(dx[2], spacing, rel_tol=1e-12):
        raise InvalidParameterError(
            f"a bar of width x width sites needs one transverse spacing, but dx along y is {spacing:g} "
            f"and along z {dx[2]:g}: make length / points equal on axes 1 and 2"
        )
    return grid.ndim, width, spacing


def _slices(system: System, region) -> tuple[int, float]:
    """The slices of the bar along axis 0 (count) and the box disorder's width on them."""
    grid = system.grid
    disorder = system.disorder
    if system.potential is not None:
        raise InvalidParameterError(
            "the quasi-1D transfer matrices take the Anderson model alone: the system has a potential "
            f"({type(system.potential).__name__}); use potential=None"
        )
    if disorder is not None and not isinstance(disorder, BoxDisorder):
        raise InvalidParameterError(
            "the quasi-1D transfer matrices draw one BoxDisorder (the Anderson model), got "
            f"{type(disorder).__name__}"
        )
    if disorder is not None and isinstance(disorder.start, tuple):
        raise InvalidParameterError(
            f"the quasi-1D transfer matrices draw every site of each slice: the BoxDisorder region "
            f"start={disorder.start!r}, stop={disorder.stop!r} is a box; use numbers start, stop (a slab "
            "along x across the bar)"
        )
    if region is None:
        if disorder is None:
            raise InvalidParameterError(
                "lyapunov(width=...) needs a region: the system has no disorder to default it to; "
                "pass region=(start, stop) along x"
            )
        start, stop = disorder.start, disorder.stop
    else:
        try:
            start, stop = region
        except (TypeError, ValueError):
            raise InvalidTypeError(f"region must be a pair (start, stop) along x, got {region!r}") from None
        start = _checks.real("region start", start)
        stop = _checks.real("region stop", stop)
    x = grid.axes[0]
    inside = (x >= start) & (x < stop)
    slices = int(np.count_nonzero(inside))
    if slices == 0:
        raise InvalidParameterError(
            f"region [{start}, {stop}) holds no grid point along x of the box "
            f"[{np.ravel(grid.start)[0]}, {np.ravel(grid.stop)[0]})"
        )
    if disorder is None:
        return slices, 0.0
    covered = (x >= disorder.start) & (x < disorder.stop)
    if np.any(inside & ~covered):
        raise InvalidParameterError(
            f"region [{start}, {stop}) reaches slices outside the BoxDisorder slab [{disorder.start}, "
            f"{disorder.stop}) along x: every slice of the bar is disordered, so keep the region inside it"
        )
    return slices, float(disorder.width)


def bar_request(
    system: System,
    energy: float,
    width,
    region=None,
    qr_interval: int | None = None,
    blocks: int = 1,
):
    """The checked core request for ``system`` as a strip or bar of ``width`` sites across."""
    dimensions, width, _ = _transverse(system, width)
    slices, disorder_width = _slices(system, region)
    hopping = float(cast("Lattice", system.model).hopping)  # a Lattice: checked by _transverse
    if qr_interval is None:
        qr_interval = default_qr_interval(dimensions, disorder_width, energy, hopping)
    qr_interval = _checks.integer("qr_interval", qr_interval, minimum=1)
    groups = -(-slices // qr_interval)
    blocks = _checks.integer("blocks", blocks, minimum=1)
    if blocks > groups:
        raise InvalidParameterError(
            f"blocks={blocks} exceeds the {groups} groups of qr_interval={qr_interval} slices in the "
            f"{slices} slices: use blocks <= {groups}"
        )
    return _requests.bar(dimensions, width, slices, hopping, disorder_width, energy, qr_interval, blocks)


def bar_lyapunov(
    system: System,
    energies: np.ndarray,
    realizations: int,
    seed: int,
    threads: int,
    region,
    width,
    qr_interval,
    blocks,
) -> list[Quasi1DLyapunov]:
    """:func:`mottle.lyapunov` with ``width=``: one :class:`Quasi1DLyapunov` per energy."""
    if blocks is None:
        blocks = max(1, -(-_DEFAULT_BLOCKS_TOTAL // realizations))
        # Never more blocks than groups of slices (a short bar).
        first = bar_request(system, float(energies[0]), width, region, qr_interval, 1)
        blocks = min(blocks, -(-first["slices"] // first["qr_interval"]))
    requests = [bar_request(system, float(e), width, region, qr_interval, blocks) for e in energies]
    channels = requests[0]["width"] ** (requests[0]["dimensions"] - 1)
    need = 8 * realizations * requests[0]["blocks"] * channels * len(requests)
    have = _memory_bytes()
    if need > have // 2:
        raise InvalidParameterError(
            f"{realizations} realizations x {requests[0]['blocks']} blocks x {channels} exponents need "
            f"{need / 2**30:.1f} GiB of results, more than half this machine's {have / 2**30:.1f} GiB; "
            "use fewer realizations or blocks"
        )
    dx = _spacings(system.grid)
    config = _requests.realizations(seed, realizations, threads)
    results = []
    for energy, request in zip(energies, requests, strict=True):
        spectra = _core.bar_exponents_of(request, config) / dx[0]
        results.append(
            Quasi1DLyapunov(
                energy=float(energy),
                dimensions=request["dimensions"],
                width=request["width"],
                slices=request["slices"],
                qr_interval=request["qr_interval"],
                spacing=dx[0],
                transverse_spacing=dx[1],
                seed=seed,
                spectra=spectra,
            )
        )
    return results


def bar_disorder(system: System, width, seed: int = 0, index: int = 0, region=None) -> np.ndarray:
    """The on-site energies of realization ``index`` of the bar: ``(slices, width[, width])``, the
    values the core's transfer matrices use (value ``n * M' + j`` of the box disorder's stream)."""
    request = bar_request(system, 0.0, width, region)
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    values = _core.bar_disorder_of(request, seed, index)
    shape = (request["slices"],) + (request["width"],) * (request["dimensions"] - 1)
    return values.reshape(shape)


def reference_exponents(
    potential: np.ndarray, energy: float, hopping: float, qr_interval: int, blocks: int = 1
) -> np.ndarray:
    """The pure-numpy oracle of the core's transfer matrices: ``(blocks, M')`` exponents per site.

    ``potential`` is ``(slices, M)`` (strip) or ``(slices, M, M)`` (bar). The
    same start as the core (``psi[0] = 1``, ``psi[-1][i, j] = cos(1 + 0.7 i +
    1.3 j + 0.37 i j)/2``, orthonormalized), the same recursion with the
    periodic neighbours taken by ``numpy.roll``, and Householder QR
    (``numpy.linalg.qr``) every ``qr_interval`` slices and after the last,
    blocks of whole groups split as the core splits them.
    """
    slices = potential.shape[0]
    transverse = potential.shape[1:]
    n = math.prod(transverse)
    i, j = np.indices((n, n), dtype=float)
    start = np.vstack([np.eye(n), 0.5 * np.cos(1.0 + 0.7 * i + 1.3 * j + 0.37 * i * j)])
    q, _ = np.linalg.qr(start)
    current, previous = q[:n], q[n:]
    groups = -(-slices // qr_interval)
    out = np.zeros((blocks, n))
    slice_ = 0
    for block in range(blocks):
        first, end = block * groups // blocks, (block + 1) * groups // blocks
        begin = slice_
        for _ in range(first, end):
            for eps in potential[slice_ : min(slice_ + qr_interval, slices)]:
                c = ((eps.reshape(n) - energy) / hopping)[:, None]
                shaped = current.reshape((*transverse, n))
                neighbours = np.zeros_like(shaped)
                for axis in range(len(transverse)):
                    neighbours += np.roll(shaped, 1, axis=axis) + np.roll(shaped, -1, axis=axis)
                neighbours = neighbours.reshape(n, n)
                current, previous = c * current - neighbours - previous, current
                slice_ += 1
            q, r = np.linalg.qr(np.vstack([current, previous]))
            out[block] += np.log(np.abs(np.diag(r)))
            current, previous = q[:n], q[n:]
        out[block] /= slice_ - begin
    return out
