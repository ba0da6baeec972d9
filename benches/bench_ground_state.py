"""Ground state of a 1D Gross-Pitaevskii trap: the core against a plain numpy imaginary-time loop.

N = 4096 points on [-20, 20), hbar = m = omega = 1, g = 500 (mu ~ 41 hbar omega). The core
(``mo.ground_state``, imaginary time then a Newton polish) runs to the residual tolerance 1e-10;
the numpy loop is what one writes by hand: Strang imaginary-time steps of dtau = 4e-3 from the
same Thomas-Fermi start, renormalized each step, stopped when the energy changes by less than
1e-10 per step. Its time and its chemical-potential error are printed beside the core's. Run
with ``pytest benches/bench_ground_state.py -s`` on a release build.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo
from conftest import figure
from mottle.dynamics.ground import initial_guess

G = 500.0
timings: dict[str, float] = {}
values: dict[str, float] = {}


def system() -> mo.System:
    return mo.System(mo.Grid(4096, 40.0), potential=mo.Harmonic(1.0), nonlinearity=G)


def numpy_imaginary_time(tau: float = 4e-3) -> float:
    trap = system()
    grid, potential = trap.grid, trap.static_potential()
    k2, dx = np.square(grid.k), grid.dx
    psi = initial_guess(trap, potential)
    psi /= math.sqrt(np.sum(psi**2) * dx)
    kinetic_factor = np.exp(-0.5 * tau * k2)
    last, mu = math.inf, math.nan
    for _ in range(200_000):
        psi *= np.exp(-0.5 * tau * (potential + G * psi**2))
        psi = np.fft.ifft(kinetic_factor * np.fft.fft(psi)).real
        psi *= np.exp(-0.5 * tau * (potential + G * psi**2))
        psi /= math.sqrt(np.sum(psi**2) * dx)
        base = (
            float(np.sum(psi * np.fft.ifft(0.5 * k2 * np.fft.fft(psi)).real) + np.sum(potential * psi**2))
            * dx
        )
        quartic = float(np.sum(psi**4)) * dx
        energy, mu = base + 0.5 * G * quartic, base + G * quartic
        if abs(energy - last) < 1e-10:
            break
        last = energy
    return mu


@pytest.mark.benchmark(group="ground state, GP trap N = 4096")
def test_core(benchmark):
    state = benchmark.pedantic(lambda: mo.ground_state(system()), rounds=3, iterations=1, warmup_rounds=1)
    timings["core"] = benchmark.stats.stats.min
    values["core"] = state.chemical_potential
    assert state.residual <= 1e-10 * state.scale


@pytest.mark.benchmark(group="ground state, GP trap N = 4096")
def test_numpy(benchmark):
    mu = benchmark.pedantic(numpy_imaginary_time, rounds=1, iterations=1)
    timings["numpy"] = benchmark.stats.stats.min
    values["numpy"] = mu


def test_figures():
    if set(timings) != {"core", "numpy"}:
        pytest.skip(
            "run the whole module: the comparison needs both benchmarks (and not --benchmark-disable)"
        )
    figure("ground state GP N=4096 to 1e-10: core seconds", timings["core"], "< 1 s")
    figure("ground state: numpy dE-stop loop / core time", timings["numpy"] / timings["core"], "—")
    figure(
        "ground state: numpy dE-stop loop relative mu error", abs(values["numpy"] / values["core"] - 1), "—"
    )
    assert timings["core"] < 1.0
