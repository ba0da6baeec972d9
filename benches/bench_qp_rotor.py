"""The quasi-periodic kicked rotor's Anderson transition, located from the scaling of <p**2>.

H = p**2/2 + K cos(theta) [1 + eps cos(w2 t + p2) cos(w3 t + p3)] sum_n delta(t - n), hbar_eff = 2.89,
w2 = 2 pi sqrt(5), w3 = 2 pi sqrt(13), the phases p2, p3 and the quasimomentum drawn per realization
(Casati, Guarneri & Shepelyansky, Phys. Rev. Lett. 62, 345 (1989): a 1D simulation of the 3D Anderson
model). At the critical point <p**2> grows as t**(2/3); below it saturates (exponent -> 0), above it
diffuses (exponent -> 1). The exponent alpha(K) fitted over the last decade of kicks crosses 2/3 at the
finite-time estimate of K_c, with an error bar from a bootstrap over realizations.

Published: K_c ~ 6.4 (Chabe et al., Phys. Rev. Lett. 101, 255702 (2008); Lemarie et al., Phys. Rev. A
80, 043626 (2009)), on the path of the (K, eps) plane that those experiments scan, eps = 0.1 + 0.7 (K - 4)
/ 4 from (4, 0.1) to (8, 0.8) (the path from memory). The same scan at fixed eps = 0.8 is printed
beside it: there the transition comes at smaller K (more modulation, more diffusion).

Scale with MOTTLE_BENCH_QP_REALIZATIONS (default 128), MOTTLE_BENCH_QP_KICKS (default 1000).
"""

from __future__ import annotations

import math
import os
import warnings

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record

TWO_PI = 2.0 * math.pi
POINTS = 2048
HBAR = 2.89
OMEGAS = (TWO_PI * math.sqrt(5.0), TWO_PI * math.sqrt(13.0))
REALIZATIONS = int(os.environ.get("MOTTLE_BENCH_QP_REALIZATIONS", "128"))
KICKS = int(os.environ.get("MOTTLE_BENCH_QP_KICKS", "1000"))
TIMES = np.unique(np.round(np.geomspace(KICKS / 10.0, KICKS, 10)))
START = mo.Wavefunction(np.full(POINTS, 1.0 / math.sqrt(TWO_PI), dtype=complex))
PHASE = mo.Uniform(0.0, TWO_PI)
SCANS = {
    "experiments' path eps(K)": (lambda k: 0.1 + 0.7 * (k - 4.0) / 4.0, (5.6, 6.0, 6.4, 6.8, 7.2)),
    "fixed eps = 0.8": (lambda k: 0.8, (3.6, 4.0, 4.4, 4.8, 5.2)),
}
RESULTS: dict[str, list[np.ndarray]] = {}


def system(kick: float, epsilon: float) -> mo.System:
    """K (1 + eps c2 c3) = K (1 - eps) + (K eps / 2) [(1 + cos(a)) + (1 + cos(b))], a, b = w2 t + p2 +- (w3 t
    + p3): three kicks, two of them modulated (see mo.Kicked); a and b are again independent and uniform."""
    half = mo.Cosine(kick * epsilon / 2.0, 1.0)
    potential = (
        mo.Kicked(mo.Cosine(kick * (1.0 - epsilon), 1.0), 1.0)
        + mo.Kicked(mo.Modulated(half, 1.0, OMEGAS[0] + OMEGAS[1], PHASE), 1.0)
        + mo.Kicked(mo.Modulated(half, 1.0, OMEGAS[0] - OMEGAS[1], PHASE), 1.0)
    )
    grid = mo.Grid(POINTS, TWO_PI, quasimomentum=mo.Uniform(0.0, 1.0))
    return mo.System(grid, mo.Continuum(hbar=HBAR), potential=potential)


def momentum_squared(kick: float, epsilon: float) -> np.ndarray:
    """<p**2> at TIMES, one row per realization."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)  # plane waves fill the box by design
        result = mo.ensemble(
            system(kick, epsilon), START, float(KICKS), 1.0, REALIZATIONS, snapshots=list(TIMES), seed=11
        )
    return result.samples["momentum_squared"]


def exponent(samples: np.ndarray) -> float:
    """d ln <p**2> / d ln t over TIMES (the last decade of kicks)."""
    return float(np.polyfit(np.log(TIMES), np.log(samples.mean(axis=0)), 1)[0])


def crossing(kicks, exponents) -> float:
    """Where alpha(K) crosses 2/3, by linear interpolation between the bracketing K (nan if it does not)."""
    for i in range(len(kicks) - 1):
        (k0, a0), (k1, a1) = (kicks[i], exponents[i]), (kicks[i + 1], exponents[i + 1])
        if (a0 - 2.0 / 3.0) * (a1 - 2.0 / 3.0) <= 0.0 and a1 != a0:
            return k0 + (2.0 / 3.0 - a0) * (k1 - k0) / (a1 - a0)
    return math.nan


@pytest.mark.parametrize("scan", list(SCANS))
def test_scan(benchmark, scan):
    epsilon, kicks = SCANS[scan]
    runs: list[np.ndarray] = []

    def sweep():
        runs.clear()
        runs.extend(momentum_squared(k, epsilon(k)) for k in kicks)

    benchmark.pedantic(sweep, rounds=1)
    record(f"qp rotor scan ({scan}), per realization-kick", benchmark, len(kicks) * REALIZATIONS * KICKS)
    RESULTS[scan] = runs


def test_figures():
    rng = np.random.default_rng(0)
    for scan, runs in RESULTS.items():
        kicks = SCANS[scan][1]
        alphas = [exponent(samples) for samples in runs]
        found = crossing(kicks, alphas)
        resampled = []
        for _ in range(200):
            rows = rng.integers(0, REALIZATIONS, REALIZATIONS)
            resampled.append(crossing(kicks, [exponent(samples[rows]) for samples in runs]))
        spread = float(np.nanstd(resampled))
        print(f"{scan}: K = {kicks}, alpha = {np.round(alphas, 3).tolist()}")
        print(f"{scan}: K_c = {found:.2f} +- {spread:.2f} ({REALIZATIONS} realizations, {KICKS} kicks)")
        figure(f"qp rotor K_c, {scan}", found, "6.4 +- 0.5" if "path" in scan else "report")
        figure(f"qp rotor K_c bootstrap error, {scan}", spread, "report")
    if TIMINGS:
        figure("qp rotor: realization-kicks per second", 1.0 / min(TIMINGS.values()), "report")
