"""Lyapunov exponents of the Anderson chain: the Rust core against numpy recursions.

10**6 sites x 100 realizations of box disorder (W = 1, E = 0.5, hopping 1), each
implementation generating its own disorder and renormalizing as it goes; numpy
is vectorized across the 100 realizations (one array operation per site for
all of them), in two versions: renormalized every site (the plain recursion)
and renormalized every 64 sites with in-place operations (the fastest numpy we
wrote). The core's time is split into the recursion alone (a clean chain) and
the disorder generation (the rest). Run with
``pytest benches/bench_lyapunov.py -s`` on a release build.
"""

from __future__ import annotations

import math
import os

import numpy as np
import pytest

import mottle as mo

SITES = 10**6
REALIZATIONS = 100
WIDTH = 1.0
ENERGY = 0.5
THREADS = int(os.environ.get("MOTTLE_BENCH_THREADS", "2"))
# numpy renormalizes every BLOCK sites: growth per site is below |V - E| + 1 <= 2, so 2**64 stays finite.
BLOCK = 64

timings: dict[str, float] = {}
estimates: dict[str, tuple[float, float]] = {}


def chain() -> mo.System:
    grid = mo.Grid(SITES + 2, float(SITES + 2))
    return mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(WIDTH, grid.x[1], grid.x[-1]))


def rust_lyapunov() -> np.ndarray:
    return mo.lyapunov(chain(), ENERGY, REALIZATIONS, seed=0, threads=THREADS).samples


def rust_recursion_only() -> np.ndarray:
    grid = mo.Grid(SITES + 2, float(SITES + 2))
    clean = mo.System(grid, model=mo.Lattice())
    return mo.lyapunov(clean, ENERGY, REALIZATIONS, threads=THREADS, region=(grid.x[1], grid.x[-1])).samples


def numpy_lyapunov_every_site(seed: int = 0) -> np.ndarray:
    """psi[n+1] = (V[n] - E) psi[n] - psi[n-1] on all realizations at once, renormalized each site."""
    rng = np.random.default_rng(seed)
    current = np.ones(REALIZATIONS)
    previous = np.zeros(REALIZATIONS)
    log = np.zeros(REALIZATIONS)
    for start in range(0, SITES, 16384):
        potential = rng.uniform(-WIDTH / 2, WIDTH / 2, size=(min(16384, SITES - start), REALIZATIONS))
        for row in potential:
            current, previous = (row - ENERGY) * current - previous, current
            size = np.hypot(current, previous)
            log += np.log(size)
            current, previous = current / size, previous / size
    cosine = -ENERGY / 2.0
    log += np.log(np.hypot(current - cosine * previous, math.sqrt(1 - cosine**2) * previous))
    return log / SITES


def numpy_lyapunov(seed: int = 0) -> np.ndarray:
    """The same recursion, psi[n+1] = (V[n] - E) psi[n] - psi[n-1], on all realizations at once."""
    rng = np.random.default_rng(seed)
    current = np.ones(REALIZATIONS)
    previous = np.zeros(REALIZATIONS)
    scratch = np.empty(REALIZATIONS)
    log = np.zeros(REALIZATIONS)
    for start in range(0, SITES, BLOCK * 256):
        count = min(BLOCK * 256, SITES - start)
        factors = rng.uniform(-WIDTH / 2, WIDTH / 2, size=(count, REALIZATIONS)) - ENERGY
        for first in range(0, count, BLOCK):
            for row in factors[first : first + BLOCK]:
                np.multiply(row, current, out=scratch)
                np.subtract(scratch, previous, out=previous)
                current, previous = previous, current
            size = np.hypot(current, previous)
            log += np.log(size)
            current /= size
            previous /= size
    # the same free-wave norm as the core (E = -2 cos q inside the band)
    cosine = -ENERGY / 2.0
    log += np.log(np.hypot(current - cosine * previous, math.sqrt(1 - cosine**2) * previous))
    return log / SITES


@pytest.mark.benchmark(group="lyapunov 1e6 sites x 100 realizations")
def test_rust(benchmark):
    samples = benchmark.pedantic(rust_lyapunov, rounds=3, iterations=1, warmup_rounds=1)
    timings["rust"] = benchmark.stats.stats.min
    estimates["rust"] = (float(np.mean(samples)), float(np.std(samples, ddof=1) / math.sqrt(samples.size)))


@pytest.mark.benchmark(group="lyapunov 1e6 sites x 100 realizations")
def test_rust_recursion_only(benchmark):
    benchmark.pedantic(rust_recursion_only, rounds=3, iterations=1, warmup_rounds=1)
    timings["recursion"] = benchmark.stats.stats.min


@pytest.mark.benchmark(group="lyapunov 1e6 sites x 100 realizations")
def test_numpy_every_site(benchmark):
    samples = benchmark.pedantic(numpy_lyapunov_every_site, rounds=1, iterations=1)
    timings["numpy every site"] = benchmark.stats.stats.min
    estimates["numpy every site"] = (
        float(np.mean(samples)),
        float(np.std(samples, ddof=1) / math.sqrt(samples.size)),
    )


@pytest.mark.benchmark(group="lyapunov 1e6 sites x 100 realizations")
def test_numpy(benchmark):
    samples = benchmark.pedantic(numpy_lyapunov, rounds=1, iterations=1)
    timings["numpy"] = benchmark.stats.stats.min
    estimates["numpy"] = (float(np.mean(samples)), float(np.std(samples, ddof=1) / math.sqrt(samples.size)))


def test_rust_is_faster_and_agrees():
    if set(timings) != {"rust", "recursion", "numpy", "numpy every site"}:
        pytest.fail(
            "run the whole module: the comparison needs every benchmark (and not --benchmark-disable)"
        )
    cells = SITES * REALIZATIONS
    rust = timings["rust"]
    lines = [f"\nlyapunov, {SITES:.0e} sites x {REALIZATIONS} realizations, {THREADS} threads:"]
    lines.append(
        f"  rust                   {rust:7.3f} s  {cells / rust / 1e6:6.0f} Msites/s "
        f"({cells / rust / THREADS / 1e6:.0f} per thread); recursion alone {timings['recursion']:.3f} s, "
        f"disorder generation the other {rust - timings['recursion']:.3f} s"
    )
    for name in ("numpy", "numpy every site"):
        label = "numpy, every 64 sites" if name == "numpy" else "numpy, every site"
        lines.append(
            f"  {label:22} {timings[name]:7.3f} s  {cells / timings[name] / 1e6:6.0f} Msites/s  "
            f"rust is {timings[name] / rust:.1f}x faster"
        )
    lines.append(f"  Thouless gamma = {WIDTH**2 / (24 * (4 - ENERGY**2)):.6f}")
    for name, (mean, error) in estimates.items():
        lines.append(f"  gamma ({name}) = {mean:.6f} +- {error:.1g}")
    print("\n".join(lines))
    # independent disorder streams: the estimates agree within their errors
    (mean, error), (other, other_error) = estimates["rust"], estimates["numpy"]
    assert abs(mean - other) < 4 * math.hypot(error, other_error)
    # Floors against regressions (the machine is shared, so with margin). The 20x target (README)
    # holds against the plain numpy recursion; against the best vectorized numpy (~13 ns per site
    # and realization) the core is now bound by the recursion and its passes over the 8 MB
    # potential of each realization, not by the disorder (about a tenth of the time, see the
    # printed split; benches/bench_disorder.py times each model).
    assert timings["numpy"] / rust >= 3.0
    assert timings["numpy every site"] / rust >= 12.0


@pytest.mark.benchmark(group="lyapunov continuum, white noise, 1e6 cells x 100 realizations")
def test_rust_continuum(benchmark):
    grid = mo.Grid(SITES + 2, 0.1 * (SITES + 2))
    system = mo.System(grid, disorder=mo.WhiteNoise(0.01, grid.x[1], grid.x[-1]))
    result = benchmark.pedantic(
        lambda: mo.lyapunov(system, 0.5, REALIZATIONS, threads=THREADS), rounds=2, iterations=1
    )
    seconds = benchmark.stats.stats.min
    cells = SITES * REALIZATIONS
    print(
        f"\nlyapunov continuum (white noise, dx = 0.1, E = 0.5): {seconds:.3f} s, "
        f"{cells / seconds / 1e6:.0f} Mcells/s ({cells / seconds / THREADS / 1e6:.0f} per thread); "
        f"gamma = {result.mean:.6f} +- {result.stderr:.1g}, Born {mo.born_lyapunov(system, 0.5):.6f}"
    )
