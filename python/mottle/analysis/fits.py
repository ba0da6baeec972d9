"""Localization lengths fitted from transport data, with error bars; bootstrap intervals.

Every length here is the **amplitude** localization length ``xi``:
``|psi| ~ exp(-|x|/xi)``, ``gamma = 1/xi``, ``<ln T> ~ -2 L/xi`` and
``<ln |psi|**2> ~ -2 |x|/xi`` on a localized state's tails.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning
from .statistics import Stat, stderr

_NOISE_FLOOR_LOG = limits.LOG_NOISE_FLOOR


@dataclass(frozen=True)
class LocalizationFit:
    """A straight-line fit ``y = intercept + slope * x`` read as a localization length.

    ``localization_length`` is the amplitude ``xi`` (``|psi| ~ exp(-|x|/xi)``)
    and ``stderr`` its first-order standard error, ``2 slope_stderr / slope**2``.
    ``chi_squared`` over ``degrees_of_freedom`` near 1 says the line and the
    error bars fit each other (NaN where the errors are not per-point variances).
    """

    localization_length: float
    stderr: float
    slope: float
    slope_stderr: float
    intercept: float
    intercept_stderr: float
    chi_squared: float
    degrees_of_freedom: int

    @property
    def lyapunov(self) -> float:
        """``gamma = 1/xi``."""
        return 1.0 / self.localization_length

    @property
    def lyapunov_stderr(self) -> float:
        return self.stderr / self.localization_length**2

    def line(self, x) -> np.ndarray:
        """The fitted line at ``x``."""
        return self.intercept + self.slope * np.asarray(x, dtype=float)

    def __str__(self) -> str:
        return f"xi = {self.localization_length:.6g} ± {self.stderr:.2g}"


def _length(slope: float, slope_stderr: float, sign: float, what: str) -> tuple[float, float]:
    """``xi = 2 / (sign * slope)`` and its error; refuse a slope of the wrong sign."""
    rate = sign * slope
    if not rate > 0.0:
        raise InvalidParameterError(
            f"{what} has slope {slope:.4g} ± {slope_stderr:.2g}, which does not decay: no localization length"
        )
    return 2.0 / rate, 2.0 * slope_stderr / rate**2


def _mean_and_stderr(entry, index: int) -> tuple[float, float]:
    if isinstance(entry, Stat):
        return entry.mean, entry.stderr
    values = np.asarray(entry, dtype=float)
    if values.ndim != 1 or values.size < 2:
        raise InvalidTypeError(
            f"log_transmission[{index}] must be a mottle.Stat or a 1-D array of at least 2 samples of ln T, "
            f"got {type(entry).__name__} of shape {values.shape}"
        )
    return float(np.mean(values)), stderr(values)


def fit_log_transmission(lengths, log_transmission) -> LocalizationFit:
    """``xi`` from ``<ln T>`` against the sample length ``L``: ``<ln T> = a - 2 L / xi``.

    ``lengths`` are the sample lengths; ``log_transmission[i]`` is a
    :class:`Stat` of ``ln T`` at ``lengths[i]`` (its ``mean`` and ``stderr``,
    e.g. ``spectrum.log_transmission[0]`` from :func:`mottle.transmission_spectrum`)
    or the samples of ``ln T`` themselves. Weighted least squares with weights
    ``1/stderr**2``; the intercept is free (boundary effects), and the errors
    are the covariance of the fit with the given error bars taken as exact.
    Needs at least two lengths, ideally all well beyond ``xi``.
    """
    lengths = np.asarray(lengths, dtype=float)
    if lengths.ndim != 1 or lengths.size < 2:
        raise InvalidParameterError(
            f"fit_log_transmission needs at least 2 lengths, got shape {lengths.shape}"
        )
    if not np.all(np.isfinite(lengths)):
        raise InvalidParameterError("lengths must be finite")
    if np.unique(lengths).size < 2:
        raise InvalidParameterError(
            f"lengths must hold at least two different values, got {lengths.tolist()}"
        )
    entries = list(log_transmission)
    if len(entries) != lengths.size:
        raise InvalidParameterError(
            f"log_transmission has {len(entries)} entries for {lengths.size} lengths; give one per length"
        )
    pairs = [_mean_and_stderr(entry, i) for i, entry in enumerate(entries)]
    means = np.array([p[0] for p in pairs])
    errors = np.array([p[1] for p in pairs])
    if not np.all(np.isfinite(means)) or not np.all(np.isfinite(errors) & (errors > 0.0)):
        raise InvalidParameterError(
            f"every <ln T> needs a finite mean and a finite stderr > 0, got means {means.tolist()} and "
            f"stderrs {errors.tolist()} (a Stat of one realization has no stderr)"
        )
    fit = line_fit(lengths, means, errors)
    _length(fit.slope, fit.slope_stderr, -1.0, "<ln T> against L")
    return fit


def line_fit(x, y, errors=None) -> LocalizationFit:
    """Least squares of ``y = intercept + slope * x``, read as ``xi = -2 / slope``.

    With ``errors`` (standard errors of ``y``, all > 0) the fit is weighted by
    ``1/errors**2`` and its covariance takes those errors as exact; without,
    it is unweighted and the errors come from the scatter about the line (NaN
    for two points). A slope that does not fall gives ``xi = inf`` (NaN error):
    :func:`fit_log_transmission` refuses it, a report shows it. The one
    weighted line fit of mottle.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    weights = np.ones_like(x) if errors is None else 1.0 / np.asarray(errors, dtype=float) ** 2
    design = np.stack([np.ones_like(x), x], axis=1)
    inverse = np.linalg.inv(design.T @ (design * weights[:, None]))
    intercept, slope = inverse @ (design.T @ (weights * y))
    residuals = y - (intercept + slope * x)
    chi_squared = float(np.sum(weights * residuals**2))
    if errors is None:
        scale = chi_squared / (x.size - 2) if x.size > 2 else math.nan
        covariance = inverse * scale
        chi_squared = math.nan
    else:
        covariance = inverse
    slope, slope_stderr = float(slope), math.sqrt(covariance[1, 1])
    decaying = slope < 0.0
    return LocalizationFit(
        localization_length=-2.0 / slope if decaying else math.inf,
        stderr=2.0 * slope_stderr / slope**2 if decaying else math.nan,
        slope=slope,
        slope_stderr=slope_stderr,
        intercept=float(intercept),
        intercept_stderr=math.sqrt(covariance[0, 0]),
        chi_squared=chi_squared,
        degrees_of_freedom=x.size - 2,
    )


@dataclass(frozen=True)
class TailFit:
    """``xi`` from both exponential tails of ``<ln |psi|**2>``: ``left`` (rising, slope ``+2/xi``)
    and ``right`` (falling, slope ``-2/xi``), each a :class:`LocalizationFit`."""

    left: LocalizationFit
    right: LocalizationFit

    def _weights(self) -> np.ndarray:
        errors = np.array([self.left.stderr, self.right.stderr])
        if not np.all(errors > 0.0):
            return np.ones(2)  # exact tails: a plain average
        return errors**-2.0

    @property
    def localization_length(self) -> float:
        """The two sides' lengths averaged with inverse-variance weights."""
        values = np.array([self.left.localization_length, self.right.localization_length])
        weights = self._weights()
        return float(np.sum(weights * values) / np.sum(weights))

    @property
    def stderr(self) -> float:
        """Standard error of :attr:`localization_length` (the sides taken as independent)."""
        weights = self._weights()
        errors = np.array([self.left.stderr, self.right.stderr])
        return float(math.sqrt(np.sum((weights * errors) ** 2)) / np.sum(weights))


def _window(x: np.ndarray, window, side: str) -> np.ndarray:
    try:
        low, high = window
    except (TypeError, ValueError):
        raise InvalidTypeError(f"{side} must be a pair (start, stop) of positions, got {window!r}") from None
    low = _checks.real(f"{side} start", low)
    high = _checks.real(f"{side} stop", high)
    mask = (x >= low) & (x < high)
    if np.count_nonzero(mask) < 3:
        raise InvalidParameterError(
            f"{side} window [{low}, {high}) holds {np.count_nonzero(mask)} grid points; use >= 3"
        )
    return mask


def _slope_weights(x: np.ndarray) -> np.ndarray:
    """``w`` with ``slope = sum(w * y)`` for the least-squares line through ``(x, y)``."""
    centered = x - np.mean(x)
    return centered / np.sum(centered**2)


def log_density_tails(result, left, right, snapshot: int = -1, partials=None) -> TailFit:
    """``xi`` from the exponential tails of an ensemble's mean log-density at one snapshot.

    ``result.log_density[snapshot]`` is ``<ln |psi(x)|**2>``; on a localized
    state's tails it is ``c + 2 x/xi`` left of the centre and ``c - 2 x/xi``
    right of it. The slope is fitted by least squares on the grid points in
    the windows ``left = (start, stop)`` and ``right = (start, stop)``.

    Error bars: neighbouring points of one realization are strongly
    correlated, which ``result`` alone cannot resolve. Pass ``partials`` (the
    :class:`mottle.EnsemblePartial` objects ``result`` was merged from, from
    :func:`mottle.ensemble_partial`) for batch-means errors: each chunk of
    ``mottle.CHUNK`` realizations is fitted alone and the spread of the chunk
    slopes gives the error (use at least ~8 chunks). Without them the error is
    the bound ``sum |w_i| stderr_i`` (``slope = sum w_i y_i``), which holds for
    any correlation and is usually several times too large. Windows that reach
    below ``exp(-64)`` of the peak density (double-precision rounding noise of
    a split-step run) raise an :class:`UnderResolvedWarning`.
    """
    snapshot = _checks.integer("snapshot", snapshot, minimum=-len(result.times))
    if snapshot >= len(result.times):
        raise InvalidParameterError(f"snapshot {snapshot} is out of range for {len(result.times)} snapshots")
    x = np.asarray(result.x)
    profile = np.asarray(result.log_density[snapshot])
    errors = np.asarray(result.log_density_stderr[snapshot])
    peak = float(np.log(np.max(result.density[snapshot])))
    batches = None
    if partials is not None:
        chunks = [chunk for partial in sorted(partials, key=lambda p: p.start) for chunk in partial.chunks]
        counts = np.array([int(chunk["count"]) for chunk in chunks])
        if counts.sum() != result.count:
            raise InvalidParameterError(
                f"partials hold {counts.sum()} realizations but the result has {result.count}: "
                f"pass the partials it was merged from"
            )
        if len(chunks) < 2:
            raise InvalidParameterError("batch errors need at least two chunks of realizations")
        batches = (np.stack([np.asarray(chunk["log_density"][snapshot]) for chunk in chunks]), counts)
    fits = []
    for side, window, sign in (("left", left, 1.0), ("right", right, -1.0)):
        mask = _window(x, window, side)
        if np.min(profile[mask]) < peak + _NOISE_FLOOR_LOG:
            warnings.warn(
                f"the {side} window reaches <ln|psi|^2> = {np.min(profile[mask]):.1f}, "
                f"more than 64 below the peak's {peak:.1f}: split-step densities there are rounding noise; "
                "move the window inward",
                UnderResolvedWarning,
                stacklevel=2,
            )
        weights = _slope_weights(x[mask])
        slope = float(np.sum(weights * profile[mask]))
        intercept = float(np.mean(profile[mask]) - slope * np.mean(x[mask]))
        if batches is None:
            slope_stderr = float(np.sum(np.abs(weights) * errors[mask]))
        else:
            sums, counts = batches
            chunk_slopes = (sums[:, mask] @ weights) / counts
            share = counts / counts.sum()
            spread = np.sum(share**2 * (chunk_slopes - slope) ** 2) * len(counts) / (len(counts) - 1)
            slope_stderr = float(math.sqrt(spread))
        xi, xi_stderr = _length(slope, slope_stderr, sign, f"the {side} tail of <ln|psi|^2>")
        fits.append(
            LocalizationFit(
                localization_length=xi,
                stderr=xi_stderr,
                slope=slope,
                slope_stderr=slope_stderr,
                intercept=intercept,
                intercept_stderr=math.nan,
                chi_squared=math.nan,
                degrees_of_freedom=int(np.count_nonzero(mask)) - 2,
            )
        )
    return TailFit(left=fits[0], right=fits[1])


def bootstrap_interval(
    samples,
    statistic=np.mean,
    confidence_level: float = 0.95,
    resamples: int = 9999,
    seed: int = 0,
    method: str = "BCa",
) -> tuple[float, float]:
    """A bootstrap confidence interval ``(low, high)`` of ``statistic`` over realizations.

    ``scipy.stats.bootstrap`` with ``resamples`` resamples drawn from
    ``numpy.random.default_rng(seed)`` (so the interval repeats), ``method``
    ``"BCa"`` (default), ``"percentile"`` or ``"basic"``. ``statistic`` takes an
    array (and, to be vectorized, an ``axis`` keyword), e.g. ``np.mean`` or
    ``lambda s, axis=-1: 1 / np.mean(s, axis=axis)`` for ``xi = 1/<gamma>``.
    """
    try:
        from scipy import stats
    except ImportError:  # pragma: no cover - scipy is a test dependency
        raise ImportError("bootstrap intervals need scipy: pip install scipy") from None
    values = np.asarray(samples, dtype=float)
    if values.ndim != 1 or values.size < 2:
        raise InvalidParameterError(
            f"bootstrap needs a 1-D sample of at least 2 values, got shape {values.shape}"
        )
    if not np.all(np.isfinite(values)):
        raise InvalidParameterError("bootstrap samples must be finite")
    confidence_level = _checks.real("confidence_level", confidence_level)
    if not 0.0 < confidence_level < 1.0:
        raise InvalidParameterError(f"confidence_level must lie in (0, 1), got {confidence_level}")
    resamples = _checks.integer("resamples", resamples, minimum=10)
    seed = _checks.integer("seed", seed, minimum=0)
    _checks.choice("method", method, ("BCa", "percentile", "basic"))
    result = stats.bootstrap(
        (values,),
        statistic,
        n_resamples=resamples,
        confidence_level=confidence_level,
        method=method,
        rng=np.random.default_rng(seed),
    )
    return float(result.confidence_interval.low), float(result.confidence_interval.high)
