"""Momentum-space signatures of weak and strong localization in an ensemble's mean momentum density.

A packet launched at ``k0`` inside the disorder scatters elastically onto
the energy shell: ``<|phi(k)|**2>`` builds a background around ``+-k0``. Two
interference effects sit on it: coherent backscattering (CBS), a peak at
``-k0`` that appears after the transport time, and coherent forward
scattering (CFS), a peak at ``+k0`` that appears around the localization
(Heisenberg) time; in 1D each reaches about twice its background (Karpiuk et
al., Phys. Rev. Lett. 109, 190601 (2012); Jendrzejewski et al., Phys. Rev.
Lett. 109, 195302 (2012)). In 1D the peaks and the background are both about
``1/xi`` wide, so the contrast depends on where the background is read;
compare contrasts measured with the same windows.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .. import _checks, limits
from ..errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning


@dataclass(frozen=True)
class MomentumPeaks:
    """The peaks of ``<|phi(k)|**2>`` at ``-k0`` (backscattering) and ``+k0`` (forward).

    For each: ``*_peak``, the mean density within ``width`` of ``-+k0``;
    ``*_background``, the mean density on the flanks ``inner <= |k -+ k0| <= outer``;
    ``*_contrast = peak / background - 1`` (1 where the peak doubles its
    background); ``*_position``, the centroid of ``density - background`` over
    ``|k -+ k0| < inner`` (where the peak is; compare with ``-+k0`` in units of
    ``bin_width``, the grid's ``dk``).
    """

    wavenumber: float
    time: float
    bin_width: float
    backscattering_peak: float
    backscattering_background: float
    backscattering_position: float
    forward_peak: float
    forward_background: float
    forward_position: float

    @property
    def backscattering_contrast(self) -> float:
        return self.backscattering_peak / self.backscattering_background - 1.0

    @property
    def forward_contrast(self) -> float:
        return self.forward_peak / self.forward_background - 1.0


def coherent_peaks(result, wavenumber: float, background, snapshot: int = -1, width: float | None = None):
    """Measure the coherent backscattering peak at ``-k0`` and the forward peak at ``+k0``
    in ``result.momentum[snapshot]`` (an :class:`mottle.EnsembleResult`).

    ``wavenumber`` is ``k0``; ``background = (inner, outer)`` the distances from
    ``-+k0`` between which the background is averaged (both flanks, so that a
    linear slope cancels); ``width`` the half-width of the peak window
    (default: half a grid bin, the single bin nearest ``-+k0``). Returns a
    :class:`MomentumPeaks`.
    """
    for name in ("k", "momentum", "times"):
        if not hasattr(result, name):
            raise InvalidTypeError(f"result must be a mottle.EnsembleResult, got {type(result).__name__}")
    wavenumber = _checks.positive("wavenumber", abs(_checks.real("wavenumber", wavenumber)))
    snapshot = _checks.integer("snapshot", snapshot, minimum=-len(result.times))
    if snapshot >= len(result.times):
        raise InvalidParameterError(f"snapshot {snapshot} is out of range for {len(result.times)} snapshots")
    k = np.asarray(result.k)
    density = np.asarray(result.momentum[snapshot])
    bin_width = float(k[1] - k[0])
    try:
        inner, outer = background
    except (TypeError, ValueError):
        raise InvalidTypeError(
            f"background must be a pair (inner, outer) of distances in k, got {background!r}"
        ) from None
    inner = _checks.positive("background inner", inner)
    outer = _checks.positive("background outer", outer)
    width = 0.5 * bin_width if width is None else _checks.positive("width", width)
    if not width < inner < outer:
        raise InvalidParameterError(
            f"need width < inner < outer for the peak and background windows, got width={width:g}, "
            f"inner={inner:g}, outer={outer:g}"
        )
    if wavenumber + outer > k[-1]:
        raise InvalidParameterError(
            f"k0 + outer = {wavenumber + outer:g} lies beyond the grid's largest wavenumber {k[-1]:g}"
        )
    if wavenumber - outer < 0.0:
        raise InvalidParameterError(
            f"the background windows around -k0 and +k0 overlap at k = 0: use outer < k0 = {wavenumber:g}"
        )

    def measure(center: float) -> tuple[float, float, float]:
        distance = np.abs(k - center)
        peak_window = distance <= width
        flank = (distance >= inner) & (distance <= outer)
        if np.count_nonzero(flank) < 2:
            raise InvalidParameterError(
                f"the background window [{inner:g}, {outer:g}] holds no grid wavenumber "
                f"(dk = {bin_width:.4g})"
            )
        peak = float(np.mean(density[peak_window]))
        level = float(np.mean(density[flank]))
        near = distance < inner
        excess = np.clip(density[near] - level, 0.0, None)
        position = float(np.sum(excess * k[near]) / np.sum(excess)) if np.any(excess > 0) else center
        return peak, level, position

    back = measure(-wavenumber)
    forward = measure(wavenumber)
    return MomentumPeaks(
        wavenumber=wavenumber,
        time=float(result.times[snapshot]),
        bin_width=bin_width,
        backscattering_peak=back[0],
        backscattering_background=back[1],
        backscattering_position=back[2],
        forward_peak=forward[0],
        forward_background=forward[1],
        forward_position=forward[2],
    )


def momentum_tails(result, window, snapshot: int = -1):
    """The localization length in momentum from the tails of an ensemble's mean momentum distribution.

    Fits ``ln <|phi|**2>`` against ``|n|``, both sides pooled, for ``window[0] <= |n| <= window[1]``,
    where ``n = k L / (2 pi)`` counts momentum states (``p = hbar n`` on the kicked rotor's grid of
    length ``2 pi``; with a twist ``n + beta``), by :func:`mottle.analysis.fits.line_fit`. Convention:
    ``<|phi_n|**2> ~ exp(-2 |n| / l)``, so the returned :class:`~mottle.LocalizationFit`'s
    ``localization_length`` is ``l`` in momentum states. The mean distribution's tails are about
    twice as long as the Floquet states' (Shepelyansky, Physica D 28, 103 (1987)): compare with
    ``D / hbar**2`` for ``l`` of the mean, ``D / (2 hbar**2)`` for the eigenstates. Points at zero
    density are left out; check the fit on two windows (the tails must be straight in between).
    """
    from .fits import line_fit

    momentum = np.asarray(getattr(result, "momentum", None), dtype=float)
    if momentum.ndim != 2:
        raise InvalidTypeError(f"momentum_tails needs an EnsembleResult, got {type(result).__name__}")
    try:
        low, high = (float(w) for w in window)
    except (TypeError, ValueError):
        raise InvalidTypeError(f"window must be a pair (low, high) of |n|, got {window!r}") from None
    if not 0.0 <= low < high:
        raise InvalidParameterError(f"window ({low:g}, {high:g}) must have 0 <= low < high")
    snapshot = _checks.integer("snapshot", snapshot, minimum=-momentum.shape[0])
    if snapshot >= momentum.shape[0]:
        raise InvalidParameterError(f"snapshot {snapshot} is past the last of {momentum.shape[0]}")
    length = np.asarray(result.x).size * float(np.asarray(result.x)[1] - np.asarray(result.x)[0])
    n = np.abs(np.asarray(result.k, dtype=float)) * length / (2.0 * np.pi)
    density = momentum[snapshot]
    chosen = (n >= low) & (n <= high) & (density > 0.0)
    if np.count_nonzero(chosen) < 3:
        raise InvalidParameterError(
            f"window ({low:g}, {high:g}) holds {np.count_nonzero(chosen)} momentum states with density > 0; "
            "it needs at least 3"
        )
    logs = np.log(density[chosen])
    peak = float(np.log(np.max(density)))
    if float(np.min(logs)) < peak + limits.LOG_NOISE_FLOOR:
        warnings.warn(
            f"the window reaches ln<|phi|^2> = {float(np.min(logs)):.1f}, more than "
            f"{-limits.LOG_NOISE_FLOOR:g} below the peak's {peak:.1f}: split-step densities there are "
            "rounding noise; move the window inward",
            UnderResolvedWarning,
            stacklevel=2,
        )
    return line_fit(n[chosen], logs)
