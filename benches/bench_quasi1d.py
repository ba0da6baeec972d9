"""Quasi-1D transfer matrices (``mo.lyapunov(..., width=M)``): the core against a numpy QR recursion,
and the crossing of Lambda = xi_M / M at the 3D Anderson transition.

1. A 3D bar of 8 x 8 sites, 10**4 slices, box disorder W = 16.5, E = 0, one
   realization on one thread: the core's time per slice against the fastest
   numpy recursion we wrote (in-place stencil on the 64 x 64 block, LAPACK
   Householder QR by ``numpy.linalg.qr`` every ``qr_interval`` slices, the same
   interval as the core), on the core's own realization, so the two exponents
   also agree.
2. The crossing: Lambda for M = 4, 6, 8 at W = 15.5 .. 17.5 (five values),
   ``MOTTLE_BENCH_SLICES`` slices per point in all (default 5*10**5, as
   ``MOTTLE_BENCH_REALIZATIONS`` realizations, default 10, on
   ``MOTTLE_BENCH_THREADS`` threads, default 2); a straight line through each
   M's Lambda(W), the crossing of each pair of lines, its spread from 2000
   redraws of the points within their error bars. Slevin & Ohtsuki (Phys. Rev.
   Lett. 82, 382 (1999)): W_c = 16.54, Lambda_c ~ 0.58; at these sizes
   corrections to scaling move the crossings by a few tenths.

Run with ``python -m pytest benches/bench_quasi1d.py -p no:cacheprovider -s`` on a release build.
"""

from __future__ import annotations

import math
import os
import time

import numpy as np
import pytest

import mottle as mo
from conftest import figure, record
from mottle.stationary import quasi1d

WIDTH = 8
SLICES = 10**4
DISORDER = 16.5
QR_INTERVAL = quasi1d.default_qr_interval(3, DISORDER, 0.0, 1.0)
CROSSING_SLICES = int(os.environ.get("MOTTLE_BENCH_SLICES", "500000"))
CROSSING_REALIZATIONS = int(os.environ.get("MOTTLE_BENCH_REALIZATIONS", "10"))
THREADS = int(os.environ.get("MOTTLE_BENCH_THREADS", "2"))
CROSSING_WIDTHS = (4, 6, 8)
CROSSING_DISORDER = (15.5, 16.0, 16.5, 17.0, 17.5)

timings: dict[str, float] = {}
estimates: dict[str, float] = {}


def bar(slices: int, disorder: float) -> mo.System:
    grid = mo.Grid(points=(slices, 16, 16), length=(float(slices), 16.0, 16.0))
    return mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(disorder, grid.start[0], grid.stop[0]))


def numpy_smallest_exponent(potential: np.ndarray, qr_interval: int) -> float:
    """gamma_min per site: psi[n+1] = (eps - E) psi[n] - A psi[n] - psi[n-1] on the (M*M, M*M) block,
    in place (the periodic neighbours as four shifted slice updates per axis), QR every qr_interval."""
    slices = potential.shape[0]
    m = potential.shape[1]
    n = m * m
    i, j = np.indices((n, n), dtype=float)
    q, _ = np.linalg.qr(np.vstack([np.eye(n), 0.5 * np.cos(1.0 + 0.7 * i + 1.3 * j + 0.37 * i * j)]))
    current, previous = np.ascontiguousarray(q[:n]), np.ascontiguousarray(q[n:])
    log = 0.0
    stacked = np.empty((2 * n, n))
    for start in range(0, slices, qr_interval):
        for eps in potential[start : start + qr_interval]:
            # previous <- eps * current - neighbours(current) - previous, in place
            c3, p3 = current.reshape(m, m, n), previous.reshape(m, m, n)
            np.negative(previous, out=previous)
            previous += eps.reshape(n, 1) * current
            p3[1:] -= c3[:-1]
            p3[0] -= c3[-1]
            p3[:-1] -= c3[1:]
            p3[-1] -= c3[0]
            p3[:, 1:] -= c3[:, :-1]
            p3[:, 0] -= c3[:, -1]
            p3[:, :-1] -= c3[:, 1:]
            p3[:, -1] -= c3[:, 0]
            current, previous = previous, current
        stacked[:n] = current
        stacked[n:] = previous
        q, r = np.linalg.qr(stacked)
        log += math.log(abs(r[-1, -1]))
        current, previous = np.ascontiguousarray(q[:n]), np.ascontiguousarray(q[n:])
    return log / slices


@pytest.mark.benchmark(group="quasi-1D, 3D bar 8x8, 1e4 slices, 1 thread")
def test_core(benchmark):
    system = bar(SLICES, DISORDER)
    options = {"seed": 0, "width": WIDTH, "qr_interval": QR_INTERVAL, "blocks": 1, "threads": 1}
    result = benchmark.pedantic(
        lambda: mo.lyapunov(system, 0.0, 1, **options),
        rounds=5,
        iterations=1,
        warmup_rounds=1,
    )
    record("quasi-1D core, per slice (M = 8, 3D)", benchmark, per=SLICES)
    timings["core"] = benchmark.stats.stats.min / SLICES
    estimates["core"] = float(result.samples[0, 0])


@pytest.mark.benchmark(group="quasi-1D, 3D bar 8x8, 1e4 slices, 1 thread")
def test_numpy(benchmark):
    potential = quasi1d.bar_disorder(bar(SLICES, DISORDER), WIDTH, seed=0, index=0)
    gamma = benchmark.pedantic(
        lambda: numpy_smallest_exponent(potential, QR_INTERVAL), rounds=2, iterations=1
    )
    record("quasi-1D numpy QR recursion, per slice (M = 8, 3D)", benchmark, per=SLICES)
    timings["numpy"] = benchmark.stats.stats.min / SLICES
    estimates["numpy"] = gamma


def test_core_against_numpy():
    if set(timings) != {"core", "numpy"}:
        pytest.fail("run the whole module: the ratio needs both benchmarks (and not --benchmark-disable)")
    ratio = timings["numpy"] / timings["core"]
    figure("quasi-1D, M = 8 bar: numpy QR recursion / core per slice", ratio, ">= 5")
    print(
        f"\nquasi-1D, 3D bar {WIDTH}x{WIDTH}, {SLICES} slices, W = {DISORDER}, qr_interval = {QR_INTERVAL}: "
        f"core {timings['core'] * 1e6:.2f} us/slice, numpy {timings['numpy'] * 1e6:.2f} us/slice, "
        f"ratio {ratio:.1f}; gamma_min core {estimates['core']:.12f}, numpy {estimates['numpy']:.12f}, "
        f"Lambda = {1 / (WIDTH * estimates['core']):.4f}"
    )
    # Same realization, same interval: Gram-Schmidt and Householder agree far below the noise.
    assert abs(estimates["core"] - estimates["numpy"]) < 1e-8 * estimates["core"]
    assert ratio >= 3.0  # a floor against regressions on a shared machine (target 5, README)


def test_crossing_at_the_anderson_transition():
    slices = CROSSING_SLICES // CROSSING_REALIZATIONS
    started = time.perf_counter()
    lambdas = np.zeros((len(CROSSING_WIDTHS), len(CROSSING_DISORDER)))
    errors = np.zeros_like(lambdas)
    for b, disorder in enumerate(CROSSING_DISORDER):
        system = bar(slices, disorder)
        for a, width in enumerate(CROSSING_WIDTHS):
            result = mo.lyapunov(system, 0.0, CROSSING_REALIZATIONS, seed=b, width=width, threads=THREADS)
            lambdas[a, b], errors[a, b] = result.Lambda.mean, result.Lambda.stderr
    seconds = time.perf_counter() - started
    w = np.array(CROSSING_DISORDER)

    def crossings(values: np.ndarray) -> dict[tuple[int, int], float]:
        lines = [np.polyfit(w, row, 1) for row in values]
        out = {}
        for a in range(len(CROSSING_WIDTHS)):
            for b in range(a + 1, len(CROSSING_WIDTHS)):
                (slope_a, cut_a), (slope_b, cut_b) = lines[a], lines[b]
                out[(CROSSING_WIDTHS[a], CROSSING_WIDTHS[b])] = (cut_b - cut_a) / (slope_a - slope_b)
        return out

    found = crossings(lambdas)
    rng = np.random.default_rng(0)
    redrawn = [crossings(lambdas + errors * rng.standard_normal(lambdas.shape)) for _ in range(2000)]
    lines = [
        f"\nLambda = xi_M / M, 3D box disorder, E = 0: {CROSSING_REALIZATIONS} x {slices} slices per point "
        f"({seconds:.0f} s, {THREADS} threads)"
    ]
    lines.append("   W    " + "  ".join(f"M = {m:<13}" for m in CROSSING_WIDTHS))
    for b, disorder in enumerate(CROSSING_DISORDER):
        cells = "  ".join(f"{lambdas[a, b]:.4f} ± {errors[a, b]:.4f}" for a in range(len(CROSSING_WIDTHS)))
        lines.append(f"  {disorder:5.2f}  {cells}")
    for pair, crossing in found.items():
        spread = float(np.std([r[pair] for r in redrawn]))
        estimates[f"crossing {pair}"] = crossing
        lines.append(f"  crossing M = {pair[0]}, {pair[1]}: W = {crossing:.2f} ± {spread:.2f}")
        figure(f"quasi-1D crossing of M = {pair[0]}, {pair[1]}: W", crossing, "16.54 ± 1")
    print("\n".join(lines))
    # Slevin & Ohtsuki, Phys. Rev. Lett. 82, 382 (1999): W_c = 16.54.
    for pair, crossing in found.items():
        assert abs(crossing - 16.54) < 1.0, (pair, crossing)
