"""One realization, N = 4096, Strang, f64: time per step of the core, the numpy
reference, and two numpy FFTs of the same size (the floor a split step cannot beat)."""

from __future__ import annotations

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record

POINTS = 4096
STEPS = 1000
STEP = 0.02
SYSTEM = mo.System(
    mo.Grid(POINTS, 800.0),
    potential=mo.Barrier(0.5, 0.0, 2.0) + mo.Harmonic(1e-4),
    absorber=mo.Absorber(60.0),
)
PACKET = mo.GaussianPacket(-100.0, 1.5, 10.0)


@pytest.mark.benchmark(group="single-run step, N=4096")
def test_core(benchmark):
    benchmark.pedantic(
        mo.propagate, args=(SYSTEM, PACKET, STEPS * STEP, STEP), kwargs={"classical": False}, rounds=5
    )
    record("step: mottle core", benchmark, STEPS)


@pytest.mark.benchmark(group="single-run step, N=4096")
def test_reference(benchmark):
    benchmark.pedantic(mo.reference.propagate, args=(SYSTEM, PACKET, 200 * STEP, STEP), rounds=3)
    record("step: mottle.reference (numpy)", benchmark, 200)


@pytest.mark.benchmark(group="single-run step, N=4096")
def test_two_numpy_ffts(benchmark):
    psi = PACKET.values(SYSTEM.grid)

    def loop():
        x = psi
        for _ in range(STEPS):
            x = np.fft.ifft(np.fft.fft(x))
        return x

    benchmark.pedantic(loop, rounds=5)
    record("step: two numpy FFTs", benchmark, STEPS)


def test_figures():
    core = TIMINGS["step: mottle core"]
    figure("reference / core (per step)", TIMINGS["step: mottle.reference (numpy)"] / core, ">= 5")
    figure("core / two numpy FFTs (per step)", core / TIMINGS["step: two numpy FFTs"], "<= 1.3")
