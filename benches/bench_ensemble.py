"""Ensembles, N = 4096, 64 realizations, Strang, weak disorder: time per
realization-step of the core against a batched split step on FFTW (pyFFTW,
FFTW_MEASURE, the same threads, numpy doing the phase multiplications) and on
numpy's FFT; thread scaling; single against double precision; and peak memory
for 2000 realizations against 50."""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, peak_bytes, record

POINTS = 4096
REALIZATIONS = 64
STEPS = 200
STEP = 0.02
GRID = mo.Grid(POINTS, 800.0)
SYSTEM = mo.System(GRID, disorder=mo.GaussianDisorder(0.02, 1.0, 0.0, 200.0), absorber=mo.Absorber(60.0))
PACKET = mo.GaussianPacket(-100.0, 1.5, 10.0)
WORK = REALIZATIONS * STEPS


def run_core(threads, precision="double"):
    return mo.ensemble(SYSTEM, PACKET, STEPS * STEP, STEP, REALIZATIONS, threads=threads, precision=precision)


@pytest.mark.benchmark(group="ensemble realization-step")
@pytest.mark.parametrize("threads", [1, 2])
def test_core(benchmark, threads):
    benchmark.pedantic(run_core, args=(threads,), rounds=3)
    record(f"ensemble: mottle core, {threads} thread(s)", benchmark, WORK)


@pytest.mark.benchmark(group="ensemble realization-step")
def test_core_single(benchmark):
    benchmark.pedantic(run_core, args=(2, "single"), rounds=3)
    record("ensemble: mottle core, 2 threads, single", benchmark, WORK)


def batched_tables():
    potentials = np.stack([mo.realize(SYSTEM, 0, r) for r in range(REALIZATIONS)])
    absorption = SYSTEM.absorption()
    potential_factor = np.exp((-1j * potentials - absorption) * STEP)
    kinetic_factor = np.exp(-1j * SYSTEM.kinetic_table() * STEP) / POINTS
    psi = np.tile(PACKET.values(GRID), (REALIZATIONS, 1))
    return psi, potential_factor, kinetic_factor


@pytest.mark.benchmark(group="ensemble realization-step")
def test_pyfftw_batched(benchmark):
    pyfftw = pytest.importorskip("pyfftw")
    psi, potential_factor, kinetic_factor = batched_tables()
    buffer = pyfftw.empty_aligned(psi.shape, dtype="complex128")
    forward = pyfftw.FFTW(
        buffer, buffer, axes=(-1,), direction="FFTW_FORWARD", flags=("FFTW_MEASURE",), threads=2
    )
    backward = pyfftw.FFTW(
        buffer, buffer, axes=(-1,), direction="FFTW_BACKWARD", flags=("FFTW_MEASURE",), threads=2
    )

    def loop():
        buffer[:] = psi
        for _ in range(STEPS):
            np.multiply(buffer, potential_factor, out=buffer)
            forward.execute()
            np.multiply(buffer, kinetic_factor, out=buffer)
            backward.execute()

    benchmark.pedantic(loop, rounds=3)
    record("ensemble: pyFFTW batched, 2 threads", benchmark, WORK)


@pytest.mark.benchmark(group="ensemble realization-step")
def test_numpy_batched(benchmark):
    psi, potential_factor, kinetic_factor = batched_tables()

    def loop():
        x = psi.copy()
        for _ in range(STEPS // 4):
            x = np.fft.ifft(np.fft.fft(x * potential_factor, axis=-1) * (kinetic_factor * POINTS), axis=-1)

    benchmark.pedantic(loop, rounds=2)
    record("ensemble: numpy batched reference", benchmark, WORK / 4)


PEAK_SCRIPT = textwrap.dedent(
    """
    import json, resource, sys
    import mottle as mo
    grid = mo.Grid(4096, 800.0)
    system = mo.System(grid, disorder=mo.GaussianDisorder(0.02, 1.0, 0.0, 200.0), absorber=mo.Absorber(60.0))
    packet = mo.GaussianPacket(-100.0, 1.5, 10.0)
    mo.ensemble(system, packet, 0.2, 0.02, int(sys.argv[1]), snapshots=[0.2], threads=2)
    print(json.dumps(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024))
    """
)


def test_figures():
    core = TIMINGS["ensemble: mottle core, 2 thread(s)"]
    figure(
        "core / pyFFTW batched (per realization-step)",
        core / TIMINGS["ensemble: pyFFTW batched, 2 threads"],
        "<= 0.8",
    )
    figure("numpy batched / core", TIMINGS["ensemble: numpy batched reference"] / core, ">= 8")
    figure("1 thread / 2 threads", TIMINGS["ensemble: mottle core, 1 thread(s)"] / core, ">= 1.8")
    figure(
        "double / single (2 threads)", core / TIMINGS["ensemble: mottle core, 2 threads, single"], ">= 1.6"
    )
    extra = (peak_bytes(PEAK_SCRIPT, 2000) - peak_bytes(PEAK_SCRIPT, 50)) / 2**20
    figure("peak memory, 2000 minus 50 realizations (MiB)", extra, "<= 40")
