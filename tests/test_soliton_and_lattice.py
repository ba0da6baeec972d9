"""The focusing cubic NLS soliton, and the group velocity of the clean lattice."""

import numpy as np
import pytest

import mottle as mo
from mottle.analysis.exact import soliton

PROPAGATORS = pytest.mark.parametrize(
    "propagate", [mo.reference.propagate, mo.propagate], ids=["reference", "core"]
)
pytestmark = pytest.mark.filterwarnings("error::mottle.UnderResolvedWarning")


def soliton_run(propagate, amplitude, velocity, step, times=(5.0, 10.0, 20.0)):
    # mottle normalizes every initial state to 1 (Wavefunction included), while the soliton
    # A sech(A x) of i psi_t = -psi_xx/2 - |psi|**2 psi carries norm 2A. Rescaling psi by
    # 1/sqrt(2A) maps that equation to the one with g = -2A, so nonlinearity=-2A propagates
    # the unit-norm soliton of any amplitude (A = 1/2 is g = -1 itself).
    grid = mo.Grid(512, 100.0)
    system = mo.System(grid, nonlinearity=-2.0 * amplitude)
    x = np.asarray(grid.x)
    scale = 1.0 / np.sqrt(2.0 * amplitude)
    initial = mo.Wavefunction(soliton(x, 0.0, amplitude, velocity, -10.0))
    np.testing.assert_allclose(
        initial.values(grid), scale * soliton(x, 0.0, amplitude, velocity, -10.0), atol=1e-12
    )
    run = propagate(system, initial, times[-1], step, snapshots=times)
    exact = np.array([scale * soliton(x, t, amplitude, velocity, -10.0) for t in run.times])
    return run, exact


@PROPAGATORS
@pytest.mark.parametrize(("amplitude", "velocity"), [(0.5, 0.0), (0.5, 1.0), (1.0, 0.5)])
def test_bright_soliton_keeps_its_shape_phase_and_speed(propagate, amplitude, velocity):
    # Zakharov & Shabat, Sov. Phys. JETP 34, 62 (1972): psi = A sech(A x) exp(i A**2 t / 2) and its
    # Galilean boosts A sech(A (x - x0 - v t)) exp(i v x + i (A**2 - v**2) t / 2).
    errors = []
    for step in (0.01, 0.005):
        run, exact = soliton_run(propagate, amplitude, velocity, step)
        errors.append(np.max(np.abs(run.snapshots - exact)))
        shape = np.max(np.abs(np.abs(run.snapshots) - np.abs(exact)))
        # The splitting error is all there is, in shape and in phase: measured at t = 20 and
        # h = 0.01, 1.5e-6 for A = 1/2 and 1.3e-4 for A = 1 in the full psi, quartering with h/2.
        assert shape < 2e-5 * amplitude**2 * (step / 0.01) ** 2
        assert errors[-1] < 2e-4 * amplitude**2 * (step / 0.01) ** 2
        np.testing.assert_allclose(run.position, -10.0 + velocity * run.times, atol=1e-8)
        np.testing.assert_allclose(run.momentum, velocity, atol=1e-10)
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.05)


def test_without_the_cubic_term_the_same_state_spreads():
    # The check above can fail: the linear equation disperses the same initial state, whose
    # peak then drops by more than 20% by t = 20.
    grid = mo.Grid(512, 100.0)
    x = np.asarray(grid.x)
    run = mo.propagate(
        mo.System(grid), mo.Wavefunction(soliton(x, 0.0, 0.5, 0.0)), 20.0, 0.01, snapshots=(20.0,)
    )
    assert np.max(np.abs(run.snapshots[0])) < 0.8 * np.max(np.abs(soliton(x, 0.0, 0.5, 0.0)))


@pytest.mark.parametrize(
    "propagate",
    [
        mo.reference.propagate,
        mo.propagate,
    ],
    ids=["reference", "core"],
)
def test_soliton_energy(propagate):
    # With int sech**2 = 2, int sech**2 tanh**2 = 2/3 and int sech**4 = 4/3 (over A x), the
    # soliton of norm 2A has kinetic energy A**3/3 and interaction energy -(1/2)(4 A**3/3):
    # E / N = -A**2/6, plus v**2/2 for the boost.
    amplitude, velocity = 0.5, 1.0
    run, _ = soliton_run(propagate, amplitude, velocity, 0.01)
    np.testing.assert_allclose(run.energy, -(amplitude**2) / 6 + velocity**2 / 2, atol=1e-6)


@pytest.mark.parametrize(
    ("hopping", "hbar", "ka"),
    [(1.0, 1.0, np.pi / 2), (0.7, 1.3, 1.0), (1.0, 1.0, 2.5), (0.5, 1.0, -0.6)],
)
def test_lattice_packet_moves_at_the_group_velocity(hopping, hbar, ka):
    # Tight binding, E(k) = -2 J cos(k a): v = dE/(hbar dk) = 2 J a sin(k a) / hbar
    # (Ashcroft & Mermin, Solid State Physics (1976), eq. 12.1 with the band of ch. 10).
    # In a clean lattice k is conserved, so <x> moves at <v> over |phi(k)|**2 exactly:
    # for a Gaussian of rms s_k, <sin(k a)> = sin(k0 a) exp(-(s_k a)**2 / 2).
    grid = mo.Grid(1024, 1024.0)
    system = mo.System(grid, model=mo.Lattice(hopping=hopping, hbar=hbar))
    width = 20.0
    times = np.arange(1, 11) * 10.0
    run = mo.propagate(system, mo.GaussianPacket(0.0, ka, width), 100.0, 0.5, snapshots=times)
    group = 2.0 * hopping * grid.dx * np.sin(ka * grid.dx) / hbar
    spread = 0.5 / width
    np.testing.assert_allclose(run.position / times, group, rtol=1e-3)
    np.testing.assert_allclose(
        run.position / times, group * np.exp(-((spread * grid.dx) ** 2) / 2), rtol=1e-10
    )
    # The classical particle on the same band moves at v(k0) itself.
    np.testing.assert_allclose(run.classical_position / times, group, rtol=1e-9)


def test_lattice_group_velocity_with_a_lattice_constant_other_than_one():
    grid = mo.Grid(1024, 512.0)  # a = 0.5
    system = mo.System(grid, model=mo.Lattice(hopping=1.0))
    ka = np.pi / 2
    wavenumber = ka / grid.dx
    run = mo.propagate(system, mo.GaussianPacket(0.0, wavenumber, 10.0), 50.0, 0.5, snapshots=(50.0,))
    assert run.position[0] / 50.0 == pytest.approx(2.0 * 1.0 * grid.dx, rel=1e-3)
