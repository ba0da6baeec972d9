"""Localization by transfer matrices: Lyapunov exponents, stationary transmission and Born predictions.

Conventions (the same everywhere in mottle):

- ``xi`` is the **amplitude** localization length: ``|psi| ~ exp(-|x|/xi)``,
  the Lyapunov exponent is ``gamma = 1/xi`` (per unit length, not per site),
  and ``<ln T> ~ -2 L / xi`` for a sample of length ``L >> xi``. Papers that
  write ``<ln T> = -L/xi`` use a length half as long.
- Lattice: ``-J (psi[n+1] + psi[n-1]) + V[n] psi[n] = E psi[n]`` (the kinetic
  energy ``-2 J cos(k a)``), sites ``a = grid.dx`` apart; the recursion is
  ``psi[n+1] = ((V[n] - E)/J) psi[n] - psi[n-1]``. A per-site exponent is
  divided by ``a``.
- Continuum: ``-(hbar**2/2m) psi'' + V psi = E psi`` with ``V`` constant in
  the cell ``[x_j - dx/2, x_j + dx/2)`` of each grid point, each cell crossed
  exactly. The cells are the grid's sampled potential, not the continuum
  field: for a correlated disorder the cell-averaged field has the power
  spectrum ``sinc(q dx/2)**2`` times the sampled one, which lowers a
  weak-disorder ``gamma`` by about ``(k dx)**2 / 3`` relative (0.5 % at
  ``k dx = 0.125``).
- The stationary problem is the linear, real Hamiltonian: absorbers are not
  part of it (leads replace them) and a nonlinear system is refused.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _checks, _core, _requests
from ..analysis.statistics import Stat, stderr
from ..errors import InvalidParameterError, InvalidTypeError
from ..specs.grid import _memory_bytes
from ..specs.system import System
from . import quasi1d


def _check_linear(system) -> None:
    if not isinstance(system, System):
        raise InvalidTypeError(f"system must be a mottle.System, got {type(system).__name__}")
    _checks.one_dimensional("the transfer-matrix method (lyapunov, transmission_spectrum)", system.grid)
    if system.nonlinearity != 0.0:
        raise InvalidParameterError(
            f"transfer matrices solve the linear stationary equation, but the system has nonlinearity="
            f"{system.nonlinearity}; use dataclasses.replace(system, nonlinearity=0.0) for its linear part"
        )


def _energies(values) -> tuple[np.ndarray, bool]:
    """The energies as a 1-D float array, and whether a single number was given."""
    if isinstance(values, (str, bytes)):
        raise InvalidTypeError(f"energy must be a number or a sequence of numbers, got {values!r}")
    scalar = np.ndim(values) == 0
    try:
        array = np.atleast_1d(np.asarray(values, dtype=float))
    except (TypeError, ValueError):
        raise InvalidTypeError(f"energy must be a number or a sequence of numbers, got {values!r}") from None
    if array.ndim != 1 or array.size == 0:
        raise InvalidParameterError(
            f"energies must be a number or a non-empty 1-D sequence, got shape {array.shape}"
        )
    if not np.all(np.isfinite(array)):
        raise InvalidParameterError(f"energies must be finite, got {array[~np.isfinite(array)][0]!r}")
    return array, scalar


def _check_memory(realizations: int, energies: int) -> None:
    need = 8 * realizations * energies
    have = _memory_bytes()
    if need > have // 2:
        raise InvalidParameterError(
            f"{realizations} realizations x {energies} energies need {need / 2**30:.1f} GiB of results, "
            f"more than half this machine's {have / 2**30:.1f} GiB; "
            f"use at most {have // 16 // energies} realizations"
        )


def _core_inputs(system: System, seed: int, realizations: int, threads: int) -> tuple:
    return (
        _requests.line(system.grid),
        _requests.disorder_terms(system.disorder),
        system.static_potential(),
        _requests.model(system.model),
        _requests.realizations(seed, realizations, threads),
    )


@dataclass(frozen=True, eq=False)
class Lyapunov:
    """The Lyapunov exponent ``gamma(E)`` of an ensemble, by transfer matrices.

    ``samples[r]`` is realization ``r``'s exponent over the region, per unit
    length: ``ln(|v_end| / |v_start|) / length`` for the solution that vanishes
    at the region's left edge (lattice ``v = (psi[n], psi[n-1])`` measured, inside
    the band ``E = -2J cos q``, by ``|v|**2 = (psi[n] - cos q psi[n-1])**2 +
    (sin q psi[n-1])**2``; continuum ``v = (psi, psi'/k)`` with
    ``k = sqrt(2m|E|)/hbar``: norms under which a clean cell is a rotation, so
    that weak disorder adds no phase-dependent bias). ``gamma`` is the
    amplitude decay rate: ``|psi| ~ exp(-gamma |x|)``, ``xi = 1/gamma`` and
    ``<ln T> ~ -2 gamma L``. Each sample carries an O(1/length) bias from the
    start and the norm; its spread is about ``sqrt(gamma / length)``.
    """

    energy: float
    samples: np.ndarray
    length: float
    seed: int

    @property
    def stat(self) -> Stat:
        """:class:`Stat` of ``gamma`` over realizations (``.mean``, ``.stderr``, ...)."""
        return Stat.of(self.samples)

    @property
    def mean(self) -> float:
        return float(np.mean(self.samples))

    @property
    def stderr(self) -> float:
        return self.stat.stderr

    @property
    def localization_length(self) -> float:
        """``xi = 1 / <gamma>`` (amplitude localization length)."""
        return 1.0 / self.mean

    @property
    def localization_length_stderr(self) -> float:
        """First-order error of ``1/<gamma>``: ``stderr(gamma) / <gamma>**2``."""
        return self.stderr / self.mean**2

    def confidence_interval(self, confidence_level: float = 0.95, of: str = "lyapunov", **options):
        """Bootstrap interval over realizations (``scipy.stats.bootstrap``, BCa) of
        ``<gamma>`` (``of="lyapunov"``) or of ``xi = 1/<gamma>`` (``of="localization_length"``);
        ``options`` go to :func:`mottle.bootstrap_interval`."""
        from ..analysis.fits import bootstrap_interval

        _checks.choice("of", of, ("lyapunov", "localization_length"))
        if of == "lyapunov":
            return bootstrap_interval(self.samples, np.mean, confidence_level, **options)
        return bootstrap_interval(
            self.samples, lambda s, axis=-1: 1.0 / np.mean(s, axis=axis), confidence_level, **options
        )

    def __str__(self) -> str:
        return (
            f"gamma({self.energy:g}) = {self.mean:.6g} ± {self.stderr:.2g} per length "
            f"(xi = {self.localization_length:.6g}, n={self.samples.size})"
        )


def _region_points(system: System, region, caller: str = "lyapunov") -> tuple[int, int]:
    grid = system.grid
    if region is None:
        if system.disorder is None:
            raise InvalidParameterError(
                f"{caller} needs a region: the system has no disorder to default it to; "
                "pass region=(start, stop)"
            )
        start, stop = system.disorder.start, system.disorder.stop
    else:
        try:
            start, stop = region
        except (TypeError, ValueError):
            raise InvalidTypeError(f"region must be a pair (start, stop), got {region!r}") from None
        start = _checks.real("region start", start)
        stop = _checks.real("region stop", stop)
    x = grid.x
    first = int(np.searchsorted(x, start, side="left"))
    end = int(np.searchsorted(x, stop, side="left"))
    if end <= first:
        raise InvalidParameterError(
            f"region [{start}, {stop}) holds no grid point of the box [{grid.start}, {grid.stop})"
        )
    return first, end


def lyapunov(
    system: System,
    energy,
    realizations: int,
    seed: int = 0,
    threads: int | None = None,
    region=None,
    width: int | None = None,
    qr_interval: int | None = None,
    blocks: int | None = None,
):
    """The Lyapunov exponent ``gamma(E)`` over the disorder region, per unit length.

    **Strips and bars** (``width=M``): on a 2D grid ``(L, N)`` or 3D grid
    ``(L, N, N)`` with ``model=mottle.Lattice(J)`` and one
    :class:`~mottle.BoxDisorder` (a slab along x; the Anderson model), the
    smallest positive Lyapunov exponent of the strip of ``M`` sites (2D) or
    bar of ``M x M`` sites (3D) across, periodic across, whose slices are the
    grid points along x in ``region`` (by default the disorder's slab), by the
    transfer matrices of MacKinnon & Kramer (Z. Phys. B 53, 1 (1983); see
    :mod:`mottle.stationary.quasi1d` for the conventions). ``M`` must fit the
    transverse box (``M <= N`` along y and z, an error names the axis; a grid
    has at least 16 points per axis, so a narrower bar is cut from the box and
    wraps at ``M``). ``qr_interval`` is the number of slices between two
    re-orthonormalizations (default from the growth per slice, see
    :func:`~mottle.stationary.quasi1d.default_qr_interval`; fewer is more
    accurate and slower); each realization is reported in ``blocks`` blocks of
    slices (default: enough for 16 estimates in all), which give error bars
    even from one realization. Returns a :class:`Quasi1DLyapunov` (``.exponent``,
    ``.xi``, ``.Lambda`` as :class:`Stat`), or a list for a sequence of
    energies; bitwise the same for any ``threads``.

    Transfer matrices through the total potential (deterministic part plus
    disorder realization ``r`` of ``seed``, exactly what
    ``mottle.realize(system, seed, r)`` returns) restricted to the grid points
    in ``region = (start, stop)``, by default the disorder's ``[start, stop)``.
    ``gamma`` is the **amplitude** decay rate: ``|psi| ~ exp(-gamma |x|)``, the
    localization length is ``xi = 1/gamma`` and ``<ln T> ~ -2 gamma L``.
    Returns a :class:`Lyapunov` (``.stat``, ``.samples`` in realization order,
    ``.localization_length``), or a list of them when ``energy`` is a sequence.
    Realizations run in parallel on ``threads`` (default: all cores); results
    do not depend on ``threads``. The GIL is released and Ctrl-C stops the run.
    """
    if width is not None or qr_interval is not None or blocks is not None:
        if width is None:
            raise InvalidParameterError(
                "qr_interval and blocks belong to the quasi-1D transfer matrices: pass width=M too"
            )
        if not isinstance(system, System):
            raise InvalidTypeError(f"system must be a mottle.System, got {type(system).__name__}")
        if system.nonlinearity != 0.0:
            raise InvalidParameterError(
                "transfer matrices solve the linear stationary equation, but the system has "
                f"nonlinearity={system.nonlinearity}"
            )
        energies, scalar = _energies(energy)
        realizations = _checks.integer("realizations", realizations, minimum=1)
        seed = _checks.integer("seed", seed, minimum=0)
        threads = _checks.threads(threads)
        bars = quasi1d.bar_lyapunov(
            system, energies, realizations, seed, threads, region, width, qr_interval, blocks
        )
        return bars[0] if scalar else bars
    _check_linear(system)
    energies, scalar = _energies(energy)
    realizations = _checks.integer("realizations", realizations, minimum=1)
    seed = _checks.integer("seed", seed, minimum=0)
    threads = _checks.threads(threads)
    first, end = _region_points(system, region)
    _check_memory(realizations, energies.size)
    line, terms, static, medium, config = _core_inputs(system, seed, realizations, threads)
    table = _core.lyapunov_exponents_of(line, terms, static, medium, (first, end), energies.tolist(), config)
    length = (end - first) * system.grid.dx
    results = [
        Lyapunov(energy=float(e), samples=np.ascontiguousarray(table[:, i]), length=length, seed=seed)
        for i, e in enumerate(energies)
    ]
    return results[0] if scalar else results


@dataclass(frozen=True, eq=False)
class TransmissionSpectrum:
    """Stationary transmission ``T(E)`` of each realization through the whole potential.

    ``log_samples[r, i] = ln T`` of realization ``r`` at ``energies[i]`` (kept
    as a logarithm: a long localized sample's ``T`` underflows, its ``ln T``
    does not); ``samples = exp(log_samples)``. ``wavenumbers`` are those of
    the left lead, where the wave comes in. Typical transmission is
    ``exp(<ln T>)``, mean transmission ``<T>``; in the localized regime
    ``<ln T> ~ -2 L / xi`` and ``var(ln T) -> -2 <ln T>`` (Anderson, Thouless,
    Abrahams & Fisher, Phys. Rev. B 22, 3519 (1980)).
    """

    energies: np.ndarray
    wavenumbers: np.ndarray
    log_samples: np.ndarray
    seed: int

    @property
    def count(self) -> int:
        return int(self.log_samples.shape[0])

    @property
    def samples(self) -> np.ndarray:
        """``T`` per realization and energy, ``(realizations, energies)``."""
        return np.exp(self.log_samples)

    @property
    def transmission(self) -> list[Stat]:
        """A :class:`Stat` of ``T`` per energy."""
        return [Stat.of(column) for column in self.samples.T]

    @property
    def log_transmission(self) -> list[Stat]:
        """A :class:`Stat` of ``ln T`` per energy (its ``.mean`` is ``<ln T>``)."""
        return [Stat.of(column) for column in self.log_samples.T]

    @property
    def mean(self) -> np.ndarray:
        """``<T>`` per energy."""
        return np.mean(self.samples, axis=0)

    @property
    def log_mean(self) -> np.ndarray:
        """``<ln T>`` per energy."""
        return np.mean(self.log_samples, axis=0)

    @property
    def log_stderr(self) -> np.ndarray:
        """Standard error of ``<ln T>`` per energy (NaN with one realization)."""
        return stderr(self.log_samples)

    @property
    def typical(self) -> np.ndarray:
        """Typical transmission ``exp(<ln T>)`` per energy."""
        return np.exp(self.log_mean)

    @property
    def log_variance(self) -> np.ndarray:
        """``var(ln T)`` per energy (unbiased; NaN with one realization)."""
        if self.count < 2:
            return np.full(self.energies.shape, np.nan)
        return np.var(self.log_samples, axis=0, ddof=1)

    @property
    def log_variance_ratio(self) -> np.ndarray:
        """``var(ln T) / (-2 <ln T>)`` per energy: tends to 1 deep in the localized
        regime (single-parameter scaling), slowly, from below at weak disorder."""
        return self.log_variance / (-2.0 * self.log_mean)

    def log_histogram(self, energy_index: int = 0, bins=30, density: bool = True):
        """Histogram of ``ln T`` over realizations at ``energies[energy_index]``:
        ``(values, edges)`` as from ``numpy.histogram`` (a probability density
        by default). Deep in the localized regime it approaches a Gaussian of
        mean ``<ln T>`` and variance ``-2 <ln T>``."""
        energy_index = _checks.integer("energy_index", energy_index, minimum=-self.energies.size)
        if energy_index >= self.energies.size:
            raise InvalidParameterError(
                f"energy_index {energy_index} is out of range for {self.energies.size} energies"
            )
        return np.histogram(self.log_samples[:, energy_index], bins=bins, density=density)


def _inside_band(model, energies: np.ndarray, dx: float, what: str) -> None:
    """Refuse kinetic energies outside the model's band, naming the first and the band."""
    bottom, top = model.band(dx)
    outside = (energies <= bottom) | (energies >= top)
    if np.any(outside):
        raise InvalidParameterError(
            f"{what} {energies[outside][0]!r} has no propagating wave: use energies strictly inside "
            f"the band ({bottom:g}, {top:g}) of {type(model).__name__}"
        )


def _lead_wavenumbers(system: System, energies: np.ndarray, lead: float, side: str) -> np.ndarray:
    model, dx = system.model, system.grid.dx
    kinetic = energies - lead
    _inside_band(model, kinetic, dx, f"energy minus the {side} lead's potential {lead:g},")
    return model.wavenumber(kinetic, dx)


def transmission_spectrum(
    system: System,
    energies,
    realizations: int = 1,
    seed: int = 0,
    threads: int | None = None,
    region=None,
) -> TransmissionSpectrum:
    """Stationary transmission ``T(E)`` per realization and energy through the potential.

    The potential of realization ``r`` (``mottle.realize(system, seed, r)``:
    deterministic part plus disorder) on the grid points of ``region =
    (start, stop)`` (``start <= x < stop``, as in :func:`lyapunov`; by default
    the whole box) is the sample; beyond its first and last points lie leads
    of constant potential equal to those points' (zero for a potential that
    vanishes there), and the wave comes in from the left:
    ``T = (v_right / v_left) |t|**2``. The end points belong to the leads, so
    the disorder must stay clear of them. Absorbers play no part (the leads
    replace them). Returns a :class:`TransmissionSpectrum` with ``Stat``
    records of ``T`` and ``ln T`` per energy.

    Sharp barriers: each grid point's value fills its cell ``[x_j - dx/2,
    x_j + dx/2)``, and continuum cells are crossed exactly (piecewise-constant
    potential), so ``T`` is exact for a barrier only when its edges lie on
    cell boundaries, i.e. half-way between grid points: place a barrier of
    width ``w`` at ``x_j - dx/2`` with ``w`` a whole number of ``dx``
    (``mottle.Barrier`` cell-averages an edge that falls inside a cell, which
    is a slightly different barrier: its ``T`` then differs from the
    textbook formula by about the fraction of a cell the edge moved).
    """
    _check_linear(system)
    energies, _ = _energies(energies)
    realizations = _checks.integer("realizations", realizations, minimum=1)
    seed = _checks.integer("seed", seed, minimum=0)
    threads = _checks.threads(threads)
    grid = system.grid
    if region is None:
        first, end = 0, grid.points
    else:
        first, end = _region_points(system, region, "transmission_spectrum")
        if end - first < 2:
            raise InvalidParameterError(
                f"region {tuple(region)} holds {end - first} grid point: the sample needs at least two "
                "(its first and last are the leads)"
            )
    x = grid.x
    if system.disorder is not None:
        for term in system.disorder.terms:
            # A disorder term partly inside the region is cut by it; its points must not be the leads.
            inside = (term.start < x[end - 1]) and (term.stop > x[first])
            if inside and (term.start <= x[first] or term.stop > x[end - 1]):
                raise InvalidParameterError(
                    f"{type(term).__name__} region [{term.start}, {term.stop}) reaches an end point of "
                    f"the sample [{x[first]:g}, {x[end - 1]:g}], which belongs to a lead: keep "
                    f"start > {x[first]:g} and stop <= {x[end - 1]:g}"
                )
    static = system.static_potential()
    wavenumbers = _lead_wavenumbers(system, energies, float(static[first]), "left")
    _lead_wavenumbers(system, energies, float(static[end - 1]), "right")
    _check_memory(realizations, energies.size)
    line, terms, static, medium, config = _core_inputs(system, seed, realizations, threads)
    table = _core.log_transmissions_of(line, terms, static, medium, (first, end), energies.tolist(), config)
    return TransmissionSpectrum(energies=energies, wavenumbers=wavenumbers, log_samples=table, seed=seed)


def born_lyapunov(system: System, energy):
    """The weak-disorder (Born) Lyapunov exponent ``gamma(E)`` per unit length, from the
    disorder's power spectrum ``C~(q) = integral C(x) exp(-i q x) dx``.

    Continuum: ``gamma = m**2 C~(2k) / (2 hbar**4 k**2)`` with ``k = sqrt(2 m E)/hbar``
    (the standard weak-disorder expansion, e.g. Lifshits, Gredeskul & Pastur,
    Introduction to the Theory of Disordered Systems (1988)). Lattice (Thouless,
    in Ill-Condensed Matter, Les Houches 1978, publ. 1979): per site
    ``gamma = S(2k) / (8 J**2 sin(k a)**2)`` with ``E = -2 J cos(k a)`` and
    ``S(q) = C~(q)/a`` the sites' spectrum; for uncorrelated on-site disorder
    ``S = <eps**2>`` and ``gamma = <eps**2> / (2 (4 J**2 - E**2))``. Divided by ``a``
    for a rate per length. ``gamma`` is the amplitude rate: ``xi = 1/gamma``.

    Only the disorder enters (the deterministic potential is ignored; ``E`` is
    measured from the clean band). Where it stops being valid: it is the
    first term in ``C~ / (E k)`` (continuum) or ``<eps**2> / J**2`` (lattice), so it
    needs ``gamma << k`` and ``rms << E``; it fails near band edges (continuum
    ``E -> 0``, lattice ``|E| -> 2J``, where ``gamma`` scales as ``W**(2/3)``),
    at the lattice band centre ``E = 0`` (the Kappus-Wegner anomaly, a few
    per cent) and weakly at ``|E| = J``; under strong disorder; and for
    speckle beyond ``k l = 1``, where ``C~(2k) = 0`` and ``gamma`` comes from
    higher orders (much smaller, but not zero), while below it odd orders
    change ``gamma`` with the sign of the speckle (average the two signs).
    Returns a float, or an array for a sequence of energies.
    """
    if not isinstance(system, System):
        raise InvalidTypeError(f"system must be a mottle.System, got {type(system).__name__}")
    if system.disorder is None:
        raise InvalidParameterError("born_lyapunov needs a system with disorder")
    energies, scalar = _energies(energy)
    model, dx = system.model, system.grid.dx
    _inside_band(model, energies, dx, "energy (the Born formula needs a propagating wave)")
    # gamma = C~(2k) / (2 (hbar v)**2): m**2 C~(2k) / (2 hbar**4 k**2) in the continuum, and
    # <eps**2> / (8 J**2 a sin**2(ka)) on the lattice (C~ = <eps**2> a for on-site disorder).
    k = model.wavenumber(energies, dx)
    spectrum = np.asarray(system.disorder.power_spectrum(2.0 * k, dx), dtype=float)
    gamma = spectrum / (2.0 * (model.hbar * model.velocity(k, dx)) ** 2)
    return float(gamma[0]) if scalar else gamma
