"""Which 4th-order splitting is cheaper per unit of accuracy: Yoshida's triple
jump (3 kinetic stages a step) or Blanes-Moan's 6-stage method (6 stages)?

A packet in a smooth anharmonic well (harmonic plus a Gaussian bump), N = 1024,
against a reference from a 16x finer Blanes-Moan run. The figure is the ratio
of the work (seconds) each needs to reach the same error, from the measured
error at one step (errors scale as step**4) and the measured time per step.
"""

from __future__ import annotations

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record

GRID = mo.Grid(1024, 20.0)
BUMP = mo.Tabulated(0.8 * np.exp(-((GRID.x - 1.0) ** 2)))
SYSTEM = mo.System(GRID, potential=mo.Harmonic(0.5) + BUMP)
PACKET = mo.GaussianPacket(-3.0, 0.5, 1.0)
DURATION = 8.0
STEP = 0.1
ERRORS: dict[str, float] = {}


def final_state(splitting, step):
    return mo.propagate(SYSTEM, PACKET, DURATION, step, splitting=splitting, classical=False).psi


@pytest.fixture(scope="module")
def exact():
    return final_state("blanes-moan", STEP / 16)


@pytest.mark.benchmark(group="4th-order splittings")
@pytest.mark.parametrize("splitting", ["yoshida", "blanes-moan"])
def test_splitting(benchmark, exact, splitting):
    psi = benchmark.pedantic(final_state, args=(splitting, STEP), rounds=5)
    ERRORS[splitting] = float(np.sqrt(np.sum(np.abs(psi - exact) ** 2) * GRID.dx))
    record(f"splitting: {splitting}, per step", benchmark, round(DURATION / STEP))


def test_figures():
    yoshida, blanes_moan = ERRORS["yoshida"], ERRORS["blanes-moan"]
    figure(
        "error ratio Yoshida / Blanes-Moan, equal step",
        yoshida / blanes_moan,
        "> 10 (tests/test_convergence.py)",
    )
    cost = TIMINGS["splitting: blanes-moan, per step"] / TIMINGS["splitting: yoshida, per step"]
    figure("time per step Blanes-Moan / Yoshida", cost, "~2 (6 vs 3 stages)")
    # Same error: Yoshida needs a step smaller by (ratio)**(1/4), i.e. that many more steps.
    figure("work for equal error, Yoshida / Blanes-Moan", (yoshida / blanes_moan) ** 0.25 / cost, "> 1")
