"""Disorder generation on 2D and 3D grids: ``mo.realize`` per site against numpy drawing the same model.

``mo.realize`` builds its plan (FFT plans, filters, the speckle pupil) and a
fresh output array on every call, so its time is an upper bound on what a run
that plans once spends per realization: for the per-site models (box, white
noise) the fresh array's page faults are most of it, and the ratio says
little. numpy draws with its default generator (PCG64) and, for the
correlated models, the same spectral method on the same periodic box as the
core (rust/src/disorder/mesh.rs): the random Fourier amplitudes drawn directly,
then one ``numpy.fft.ifftn``. Ratios are measured in one run. Run with
``pytest benches/bench_disorder_nd.py -s`` on a release build.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record
from mottle.specs.disorder import _smooth_size

GRIDS = {
    "2D 512x512": mo.Grid(points=(512, 512), length=(256.0, 256.0)),
    "3D 64x64x64": mo.Grid(points=(64, 64, 64), length=(32.0, 32.0, 32.0)),
}
CORRELATION = 1.0  # two spacings
REALIZATIONS = 4


def models(grid):
    start, stop = grid.start, grid.stop
    return {
        "box": mo.BoxDisorder(1.0, start, stop),
        "white noise": mo.WhiteNoise(0.1, start, stop),
        "gaussian": mo.GaussianDisorder(0.3, CORRELATION, start, stop),
        "speckle": mo.Speckle(0.3, CORRELATION, start, stop),
    }


def numpy_realization(name, grid, rng):
    shape, dx = grid.shape, grid.dx
    if name == "box":
        return rng.uniform(-0.5, 0.5, shape)
    if name == "white noise":
        return math.sqrt(0.1 / math.prod(dx)) * rng.standard_normal(shape)
    factor, lengths = (1, 10.0) if name == "gaussian" else (2, 16.0)
    padded = [
        _smooth_size(factor * n + math.ceil(lengths * CORRELATION / d))
        for n, d in zip(shape, dx, strict=True)
    ]
    q2 = sum(
        np.square(2 * np.pi * np.fft.fftfreq(n, d)).reshape([-1 if a == b else 1 for b in range(len(shape))])
        for a, (n, d) in enumerate(zip(padded, dx, strict=True))
    )
    region = tuple(slice(0, n) for n in shape)
    if name == "gaussian":
        amplitude = np.exp(-q2 * CORRELATION**2 / 4)
        amplitude *= 0.3 / math.sqrt(np.sum(amplitude**2))
        noise = rng.standard_normal(padded) + 1j * rng.standard_normal(padded)
        field = np.fft.ifftn(amplitude * noise * math.sqrt(0.5)) * math.prod(padded)
        return math.sqrt(2.0) * field.real[region]
    open_modes = np.flatnonzero(q2.ravel() * CORRELATION**2 < 1.0)
    amplitudes = np.zeros(math.prod(padded), complex)
    amplitudes[open_modes] = rng.standard_normal(open_modes.size) + 1j * rng.standard_normal(open_modes.size)
    field = np.fft.ifftn(amplitudes.reshape(padded)) * (math.prod(padded) * math.sqrt(0.5))
    return 0.3 * (np.abs(field[region]) ** 2 / open_modes.size - 1.0)


CASES = [(grid, name) for grid in GRIDS for name in models(GRIDS[grid])]


@pytest.mark.benchmark(group="N-d disorder generation per site")
@pytest.mark.parametrize(("grid", "name"), CASES)
def test_core(benchmark, grid, name):
    system = mo.System(GRIDS[grid], disorder=models(GRIDS[grid])[name])

    def realizations():
        for index in range(REALIZATIONS):
            mo.realize(system, 1, index)

    benchmark.pedantic(realizations, rounds=3, iterations=1, warmup_rounds=1)
    record(f"nd disorder {grid} {name}: core per site", benchmark, REALIZATIONS * GRIDS[grid].size)


@pytest.mark.benchmark(group="N-d disorder generation per site")
@pytest.mark.parametrize(("grid", "name"), CASES)
def test_numpy(benchmark, grid, name):
    rng = np.random.default_rng(0)

    def realizations():
        for _ in range(REALIZATIONS):
            numpy_realization(name, GRIDS[grid], rng)

    benchmark.pedantic(realizations, rounds=3, iterations=1)
    record(f"nd disorder {grid} {name}: numpy per site", benchmark, REALIZATIONS * GRIDS[grid].size)


@pytest.mark.parametrize(("grid", "name"), CASES)
def test_numpy_reference_is_the_model(grid, name):
    # The numpy generation draws the model the core does: the same mean square within sampling error.
    model = models(GRIDS[grid])[name]
    variance = float(model.correlation(0.0, GRIDS[grid].dx, dimension=GRIDS[grid].ndim))
    core = mo.realize(mo.System(GRIDS[grid], disorder=model), 1, 0)
    for sample in (numpy_realization(name, GRIDS[grid], np.random.default_rng(1)), core):
        # mean squares over blocks of 4 planes along axis 0 (two correlation lengths thick)
        blocks = np.mean(sample.reshape(-1, 4 * math.prod(sample.shape[1:])) ** 2, axis=1)
        error = blocks.std(ddof=1) / math.sqrt(blocks.size)
        assert abs(blocks.mean() - variance) < 5 * error, (blocks.mean(), variance, error)


def test_ratios():
    needed = [f"nd disorder {g} {n}: {who} per site" for g, n in CASES for who in ("core", "numpy")]
    if any(name not in TIMINGS for name in needed):
        pytest.fail("run the whole module: the ratios need every benchmark (and not --benchmark-disable)")
    lines = [
        f"\nN-d disorder generation, {REALIZATIONS} realizations, mo.realize (plan included), ns per site:"
    ]
    for grid, name in CASES:
        core = TIMINGS[f"nd disorder {grid} {name}: core per site"]
        numpy = TIMINGS[f"nd disorder {grid} {name}: numpy per site"]
        lines.append(
            f"  {grid:12} {name:12} core {core * 1e9:7.2f} numpy {numpy * 1e9:7.2f} ratio {numpy / core:5.1f}"
        )
        figure(f"nd disorder {grid} {name}: numpy / core", numpy / core, "> 1")
    print("\n".join(lines))
