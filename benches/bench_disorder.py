"""Disorder generation: time per site of the core against numpy generating the same model.

The core's time is measured where runs spend it: ``mo.lyapunov`` on a chain of
2**20 sites (lattice, dx = 1) with the disorder, less the same call on the
clean chain (the recursion alone), over 16 realizations on one thread. numpy
draws with its default generator (PCG64) and, for the correlated models, the
fastest spectral method we know in numpy: the random Fourier amplitudes drawn
directly, then one inverse real FFT for the Gaussian model (on a line padded
by ten correlation lengths, as the core does) and one inverse complex FFT over
the open pupil for speckle (padded to twice the region plus sixteen
correlation lengths, as the core). Ratios are measured in one run. Run with
``pytest benches/bench_disorder.py -s`` on a release build.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record

SITES = 2**20
GRID = mo.Grid(SITES + 2, float(SITES + 2))
START, STOP = float(GRID.x[1]), float(GRID.x[-1])
REALIZATIONS = 16
CORRELATION = 4.0
ENERGY = 0.5
MODELS = {
    "box": mo.BoxDisorder(1.0, START, STOP),
    "white noise": mo.WhiteNoise(0.1, START, STOP),
    "gaussian": mo.GaussianDisorder(0.3, CORRELATION, START, STOP),
    "speckle": mo.Speckle(0.3, CORRELATION, START, STOP),
}


def smooth(minimum: int) -> int:
    """The least even 2^a 3^b 5^c >= minimum (fast for numpy's pocketfft too)."""
    best = 1 << (minimum - 1).bit_length()
    p3 = 1
    while p3 < best:
        p35 = p3
        while p35 < best:
            size = 2 * p35
            while size < minimum:
                size *= 2
            best = min(best, size)
            p35 *= 5
        p3 *= 3
    return best


def numpy_realization(name: str, rng: np.random.Generator) -> np.ndarray:
    dx = GRID.dx
    if name == "box":
        return rng.uniform(-0.5, 0.5, SITES)
    if name == "white noise":
        return math.sqrt(0.1 / dx) * rng.standard_normal(SITES)
    if name == "gaussian":
        length = smooth(SITES + math.ceil(10 * CORRELATION / dx))
        q = 2 * np.pi * np.fft.rfftfreq(length, dx)
        spectrum = np.exp(-((q * CORRELATION) ** 2) / 4)
        weights = np.full(q.size, 2.0)
        weights[0] = weights[-1] = 1.0
        spectrum *= 0.3 / math.sqrt(np.sum(weights * spectrum**2))
        amplitudes = rng.standard_normal(q.size) + 1j * rng.standard_normal(q.size)
        amplitudes *= math.sqrt(0.5) * spectrum
        amplitudes[0] = spectrum[0] * rng.standard_normal()
        amplitudes[-1] = spectrum[-1] * rng.standard_normal()
        return np.fft.irfft(amplitudes, length)[:SITES] * length
    length = smooth(2 * SITES + math.ceil(16 * CORRELATION / dx))
    q = 2 * np.pi * np.fft.fftfreq(length, dx)
    open_modes = np.flatnonzero(np.abs(q) * CORRELATION < 1.0)
    amplitudes = np.zeros(length, complex)
    amplitudes[open_modes] = rng.standard_normal(open_modes.size) + 1j * rng.standard_normal(open_modes.size)
    field = np.fft.ifft(amplitudes)[:SITES] * (length * math.sqrt(0.5))
    return 0.3 * (np.abs(field) ** 2 / open_modes.size - 1.0)


def lyapunov(disorder):
    system = mo.System(GRID, model=mo.Lattice(), disorder=disorder)
    return mo.lyapunov(system, ENERGY, REALIZATIONS, threads=1, region=(START, STOP))


@pytest.mark.benchmark(group="disorder generation per site")
@pytest.mark.parametrize("name", [*MODELS, "clean"])
def test_core(benchmark, name):
    benchmark.pedantic(lyapunov, args=(MODELS.get(name),), rounds=3, iterations=1, warmup_rounds=1)
    record(f"disorder {name}: core lyapunov per site", benchmark, REALIZATIONS * SITES)


@pytest.mark.benchmark(group="disorder generation per site")
@pytest.mark.parametrize("name", list(MODELS))
def test_numpy(benchmark, name):
    rng = np.random.default_rng(0)

    def realizations():
        for _ in range(REALIZATIONS):
            numpy_realization(name, rng)

    benchmark.pedantic(realizations, rounds=3, iterations=1)
    record(f"disorder {name}: numpy per site", benchmark, REALIZATIONS * SITES)


@pytest.mark.parametrize("name", list(MODELS))
def test_numpy_reference_is_the_model(name):
    # The numpy generation draws the model the core does: the same variance within sampling error.
    model = MODELS[name]
    variance = model.variance(GRID.dx)
    inside = (GRID.x >= START) & (GRID.x < STOP)
    core = mo.realize(mo.System(GRID, disorder=model), 1, 0)[inside]
    for sample in (numpy_realization(name, np.random.default_rng(1)), core):
        # mean squares (every model has zero mean) over blocks of 64 correlation lengths
        blocks = np.mean(sample[: sample.size // 256 * 256].reshape(-1, 256) ** 2, axis=1)
        error = blocks.std(ddof=1) / math.sqrt(blocks.size)
        assert abs(blocks.mean() - variance) < 5 * error, (blocks.mean(), variance, error)


def test_ratios():
    needed = [f"disorder {n}: core lyapunov per site" for n in [*MODELS, "clean"]]
    needed += [f"disorder {n}: numpy per site" for n in MODELS]
    if any(name not in TIMINGS for name in needed):
        pytest.fail("run the whole module: the ratios need every benchmark (and not --benchmark-disable)")
    clean = TIMINGS["disorder clean: core lyapunov per site"]
    lines = [
        f"\ndisorder generation, {REALIZATIONS} x {SITES} sites, one thread, ns per site "
        f"(core: lyapunov with the disorder less the clean chain's {clean * 1e9:.2f} ns):"
    ]
    for name in MODELS:
        core = TIMINGS[f"disorder {name}: core lyapunov per site"] - clean
        numpy = TIMINGS[f"disorder {name}: numpy per site"]
        ratio = numpy / core
        lines.append(
            f"  {name:12} core {core * 1e9:7.2f}   numpy {numpy * 1e9:7.2f}   core is {ratio:5.1f}x faster"
        )
        figure(f"disorder {name}: numpy / core", numpy / core, "> 1")
    print("\n".join(lines))
