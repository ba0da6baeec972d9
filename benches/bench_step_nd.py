"""Two and three dimensions: one step of the core (2D 512^2 and 3D 128^3, f64, one thread,
Strang, a harmonic well) against two FFTW transforms of the same size (pyFFTW, FFTW_MEASURE, one
thread: the floor a split step cannot beat) and the numpy reference; a 2D ensemble (32
realizations of 256^2) on 1 and 2 threads and in single precision; and peak memory of a 2D
ensemble for 2000 realizations against 50."""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, peak_bytes, record

CASES = {
    "2D 512^2": ((512, 512), (200.0, 200.0), 20),
    "3D 128^3": ((128, 128, 128), (60.0, 60.0, 60.0), 10),
}
STEP = 0.01


def case(name: str):
    points, length, steps = CASES[name]
    ndim = len(points)
    system = mo.System(mo.Grid(points=points, length=length), potential=mo.Harmonic(0.05))
    packet = mo.GaussianPacket(center=(-5.0,) + (0.0,) * (ndim - 1), wavenumber=(1.0,) * ndim, width=4.0)
    return system, packet, steps


@pytest.mark.parametrize("repeat", [1, 3])
@pytest.mark.parametrize("name", CASES)
def test_core(benchmark, name, repeat):
    # A run of 1x and of 3x the steps: their difference is the steps alone, without the run's setup
    # (tables, plans, the packet, the checks), which a short run would otherwise carry.
    system, packet, steps = case(name)
    steps *= repeat
    benchmark.pedantic(
        mo.propagate, args=(system, packet, steps * STEP, STEP), kwargs={"classical": False}, rounds=3
    )
    record(f"{name}: core run of {repeat}x", benchmark, 1)


@pytest.mark.parametrize("name", CASES)
def test_numpy_reference(benchmark, name):
    system, packet, _ = case(name)
    steps = 3
    benchmark.pedantic(mo.reference.propagate, args=(system, packet, steps * STEP, STEP), rounds=2)
    record(f"{name}: numpy reference step", benchmark, steps)


@pytest.mark.parametrize("name", CASES)
def test_two_fftw_transforms(benchmark, name):
    pyfftw = pytest.importorskip("pyfftw")
    system, packet, steps = case(name)
    buffer = pyfftw.empty_aligned(system.grid.shape, dtype="complex128")
    buffer[:] = packet.values(system.grid)
    flags = ("FFTW_MEASURE", "FFTW_DESTROY_INPUT")
    forward = pyfftw.FFTW(buffer, buffer, axes=tuple(range(buffer.ndim)), flags=flags, threads=1)
    backward = pyfftw.FFTW(
        buffer, buffer, axes=tuple(range(buffer.ndim)), direction="FFTW_BACKWARD", flags=flags, threads=1
    )

    def loop():
        for _ in range(steps):
            forward.execute()
            backward.execute()

    benchmark.pedantic(loop, rounds=3)
    record(f"{name}: two FFTW transforms", benchmark, steps)


ENSEMBLE = mo.System(
    mo.Grid(points=(256, 256), length=(100.0, 100.0)),
    potential=mo.Harmonic(0.02),
    absorber=mo.Absorber(10.0, axes=(0,)),
)
ENSEMBLE_PACKET = mo.GaussianPacket(center=(-10.0, 0.0), wavenumber=(1.0, 0.0), width=4.0)
ENSEMBLE_STEPS = 100


@pytest.mark.parametrize(("threads", "precision"), [(1, "double"), (2, "double"), (2, "single")])
def test_ensemble(benchmark, threads, precision):
    benchmark.pedantic(
        mo.ensemble,
        args=(ENSEMBLE, ENSEMBLE_PACKET, ENSEMBLE_STEPS * STEP, STEP, 32),
        kwargs={"threads": threads, "precision": precision},
        rounds=2,
    )
    record(f"2D ensemble 256^2: {threads} thread(s), {precision}", benchmark, 32 * ENSEMBLE_STEPS)


PEAK_SCRIPT = textwrap.dedent(
    """
    import json, resource, sys
    import mottle as mo
    system = mo.System(mo.Grid(points=(128, 128), length=(80.0, 80.0)), absorber=mo.Absorber(8.0, axes=(0,)))
    packet = mo.GaussianPacket(center=(-10.0, 0.0), wavenumber=(1.0, 0.0), width=4.0)
    mo.ensemble(system, packet, 0.02, 0.01, int(sys.argv[1]), snapshots=[0.02], threads=2)
    print(json.dumps(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024))
    """
)


def test_figures():
    for name, (_, _, steps) in CASES.items():
        core = (TIMINGS[f"{name}: core run of 3x"] - TIMINGS[f"{name}: core run of 1x"]) / (2 * steps)
        TIMINGS[f"{name}: core step"] = core
        figure(
            f"{name}: core / two FFTW transforms", core / TIMINGS[f"{name}: two FFTW transforms"], "<= 1.3"
        )
        figure(
            f"{name}: numpy reference / core",
            TIMINGS[f"{name}: numpy reference step"] / core,
            "(more is better)",
        )
    one = TIMINGS["2D ensemble 256^2: 1 thread(s), double"]
    two = TIMINGS["2D ensemble 256^2: 2 thread(s), double"]
    figure("2D ensemble: 1 thread / 2 threads", one / two, ">= 1.8")
    figure(
        "2D ensemble: double / single (2 threads)",
        two / TIMINGS["2D ensemble 256^2: 2 thread(s), single"],
        ">= 1.6",
    )
    extra = (peak_bytes(PEAK_SCRIPT, 2000) - peak_bytes(PEAK_SCRIPT, 50)) / 2**20
    figure("2D peak memory, 2000 minus 50 realizations (MiB)", extra, "<= 40")
    assert np.isfinite(extra)
