"""Packets whose evolution is known in closed form: the free Gaussian and the coherent state.

Both propagators are held to the same formulas, the pure-numpy reference first
in the chain of trust and the core beside it.
"""

import numpy as np
import pytest

import mottle as mo
from mottle.analysis.exact import coherent_state_center, free_gaussian_width, leapfrog_center

PROPAGATORS = pytest.mark.parametrize(
    "propagate", [mo.reference.propagate, mo.propagate], ids=["reference", "core"]
)
pytestmark = pytest.mark.filterwarnings("error::mottle.UnderResolvedWarning")


@PROPAGATORS
@pytest.mark.parametrize(("hbar", "mass"), [(1.0, 1.0), (0.5, 2.0), (1.7, 3.0)])
def test_free_gaussian_spreads_and_moves_as_in_closed_form(propagate, hbar, mass):
    # Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_I:
    # sigma(t) = sigma0 sqrt(1 + (hbar t / 2 m sigma0**2)**2), centre x0 + hbar k0 t / m.
    # Without a potential the kinetic factor is exact, so only rounding is left.
    width, wavenumber, start = 1.0, 2.0, -15.0
    system = mo.System(mo.Grid(512, 100.0), model=mo.Continuum(hbar=hbar, mass=mass))
    times = np.arange(1, 9) * 1.0
    run = propagate(system, mo.GaussianPacket(start, wavenumber, width), 8.0, 0.05, snapshots=times)
    np.testing.assert_allclose(run.width, free_gaussian_width(times, width, hbar, mass), rtol=1e-9)
    np.testing.assert_allclose(run.position, start + hbar * wavenumber / mass * times, rtol=1e-9)
    np.testing.assert_allclose(run.momentum, hbar * wavenumber, rtol=1e-9)
    # <E> = hbar**2 (k0**2 + s_k**2) / 2m with s_k = 1/(2 sigma0), constant.
    np.testing.assert_allclose(
        run.energy, hbar**2 * (wavenumber**2 + 0.25 / width**2) / (2 * mass), rtol=1e-9
    )
    assert abs(run.norm - 1.0) < 1e-12


COHERENT = [
    # hbar, mass, frequency, box length, x0, the two steps
    (1.0, 1.0, 1.0, 20.0, 3.0, (0.02, 0.01)),
    (0.5, 2.0, 1.5, 12.0, 2.0, (0.01, 0.005)),
]


@PROPAGATORS
@pytest.mark.parametrize(("hbar", "mass", "frequency", "length", "start", "steps"), COHERENT)
def test_coherent_state_oscillates_rigidly(propagate, hbar, mass, frequency, length, start, steps):
    # Cohen-Tannoudji et al., complement G_V: a Gaussian of width sqrt(hbar / 2 m w) in the well
    # 1/2 m w**2 x**2 keeps its width and its centre follows x0 cos(w t) + p0/(m w) sin(w t).
    width = np.sqrt(hbar / (2 * mass * frequency))
    wavenumber = 1.0
    momentum = hbar * wavenumber
    system = mo.System(mo.Grid(256, length), model=mo.Continuum(hbar, mass), potential=mo.Harmonic(frequency))
    packet = mo.GaussianPacket(start, wavenumber, width)
    times = np.arange(1, 61) * 0.1
    amplitude = np.hypot(start, momentum / (mass * frequency))
    errors = []
    for step in steps:
        run = propagate(system, packet, 6.0, step, snapshots=times)
        exact = coherent_state_center(times, start, momentum, frequency, mass)
        # The Strang error: for a quadratic potential <x>, <p> follow the Stormer-Verlet map
        # exactly (mottle/exact.py), x_n = x0 cos(n theta) + p0 h / (m sin theta) sin(n theta)
        # with theta/h = w (1 + (w h)**2/24 + ...) and h/sin(theta) = (1 + (w h)**2/8 + ...)/w:
        # the centre lags by amplitude * w t (w h)**2/24 and the amplitude is off by (w h)**2/8.
        bound = amplitude * (frequency * step) ** 2 * (frequency * times / 24.0 + 1.0 / 8.0)
        assert np.all(np.abs(run.position - exact) <= 1.05 * bound + 1e-10)
        # ... and the scheme's own orbit is reproduced to rounding and the grid's spectral error.
        verlet = leapfrog_center(np.round(times / step), step, start, momentum, frequency, mass)
        np.testing.assert_allclose(run.position, verlet, rtol=0, atol=1e-10 * amplitude)
        # The width is that of the exact coherent state up to the splitting's O((w h)**2).
        assert np.max(np.abs(run.width / width - 1.0)) < 0.25 * (frequency * step) ** 2
        errors.append(np.max(np.abs(run.position - exact)))
        # Ehrenfest: in a quadratic well <x> obeys Newton's equation, so the classical particle
        # started at (<x>, <p>) runs beside it; its force comes from the piecewise-linear
        # interpolant of V on the grid, good to well under one spacing.
        assert np.max(np.abs(run.classical_position - run.position)) < system.grid.dx
    # Halving the step quarters the error: it is the Strang error and nothing else.
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.02)
