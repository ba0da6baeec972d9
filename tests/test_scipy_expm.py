"""Both propagators against SciPy's matrix exponential of the same discretized Hamiltonian.

``scipy.sparse.linalg.expm_multiply`` (Al-Mohy & Higham, SIAM J. Sci. Comput. 33, 488 (2011))
computes ``exp(-i H t / hbar) psi0`` without any splitting, so what is left between it and a
split-step run is the splitting error alone: O(h**2) for Strang, O(h**4) for Blanes-Moan.
"""

import functools

import numpy as np
import pytest
from scipy.sparse.linalg import expm_multiply

import mottle as mo

PROPAGATORS = pytest.mark.parametrize(
    "propagate", [mo.reference.propagate, mo.propagate], ids=["reference", "core"]
)
pytestmark = pytest.mark.filterwarnings("error::mottle.UnderResolvedWarning")


def l2(psi, dx):
    return float(np.sqrt(np.sum(np.abs(psi) ** 2) * dx))


@functools.cache
def smooth_well(points=64):
    grid = mo.Grid(points, 16.0)
    bump = 0.6 * np.exp(-((np.asarray(grid.x) - 0.5) ** 2) / 2.0)
    system = mo.System(grid, potential=mo.Harmonic(1.0) + mo.Tabulated(bump))
    return system, mo.GaussianPacket(-2.0, 1.0, 0.5**0.5)


@functools.cache
def exact(system, packet, duration):
    """exp(-i H t / hbar) psi0 (cached: the same targets serve both propagators)."""
    hamiltonian = mo.reference.hamiltonian_matrix(system)
    psi0 = packet.values(system.grid).astype(complex)
    return expm_multiply(-1j * hamiltonian * duration / system.hbar, psi0)


def test_hamiltonian_matrix_is_the_fourier_kinetic_plus_the_potential():
    # H psi = ifft(T fft(psi)) + V psi, checked on random vectors, and H is Hermitian without absorbers.
    system, _ = smooth_well()
    hamiltonian = mo.reference.hamiltonian_matrix(system)
    rng = np.random.default_rng(1)
    psi = rng.normal(size=64) + 1j * rng.normal(size=64)
    direct = np.fft.ifft(system.kinetic_table() * np.fft.fft(psi)) + system.static_potential() * psi
    np.testing.assert_allclose(hamiltonian @ psi, direct, atol=1e-11)
    np.testing.assert_allclose(hamiltonian, hamiltonian.conj().T, atol=1e-12)


@PROPAGATORS
@pytest.mark.parametrize("points", [64, 128])
def test_split_step_converges_to_the_matrix_exponential(propagate, points):
    system, packet = smooth_well(points)
    duration = 2.0
    target = exact(system, packet, duration)
    dx = system.grid.dx
    # Blanes-Moan at h = T/256 leaves an error ~ C h**4 of about 1e-12 here.
    fourth = propagate(system, packet, duration, duration / 256, order=4).psi
    assert l2(fourth - target, dx) < 1e-10
    # Strang: the distance to the exact solution is the O(h**2) splitting error, quartering with
    # each halving of h and equal to its Richardson estimate (4/3)|psi_h - psi_h/2|.
    coarse = propagate(system, packet, duration, duration / 128).psi
    fine = propagate(system, packet, duration, duration / 256).psi
    errors = l2(coarse - target, dx), l2(fine - target, dx)
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.01)
    assert errors[0] == pytest.approx(4.0 / 3.0 * l2(coarse - fine, dx), rel=0.01)
    assert 1e-6 < errors[1] < 1e-4


@functools.cache
def absorbing_box():
    system = mo.System(mo.Grid(128, 40.0), potential=mo.Barrier(0.3, 2.0, 4.0), absorber=mo.Absorber(8.0))
    return system, mo.GaussianPacket(0.0, 2.0, 1.5)


@PROPAGATORS
def test_strang_with_absorbers_converges_to_the_non_hermitian_exponential(propagate):
    # With absorbers H = F^-1 T F + V - i W: the packet runs into the right layer and is mostly absorbed.
    system, packet = absorbing_box()
    grid = system.grid
    duration = 8.0
    target = exact(system, packet, duration)
    remaining = l2(target, grid.dx) ** 2
    assert remaining < 0.5
    errors = []
    for steps in (400, 800):
        run = propagate(system, packet, duration, duration / steps)
        errors.append(l2(run.psi - target, grid.dx))
        assert run.norm + run.absorbed_left + run.absorbed_right == pytest.approx(1.0, abs=1e-12)
        assert run.norm == pytest.approx(remaining, abs=2 * errors[-1])
        assert run.absorbed_right > 20 * run.absorbed_left
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.05)
    assert errors[1] < 1e-4


def tight_binding_matrix(points, hopping, onsite):
    """H = -J sum_j (|j><j+1| + |j+1><j|) + sum_j V_j |j><j| on a ring, written out site by site."""
    matrix = np.diag(np.asarray(onsite, dtype=complex))
    for j in range(points):
        matrix[j, (j + 1) % points] -= hopping
        matrix[(j + 1) % points, j] -= hopping
    return matrix


@PROPAGATORS
def test_lattice_agrees_with_the_tight_binding_matrix_built_site_by_site(propagate):
    # The lattice kinetic energy -2 J cos(k a) is nearest-neighbour hopping -J in real space
    # (Ashcroft & Mermin, Solid State Physics (1976), ch. 10, the tight-binding s band).
    rng = np.random.default_rng(3)
    grid = mo.Grid(96, 48.0)
    onsite = rng.uniform(-0.5, 0.5, size=96)
    system = mo.System(grid, model=mo.Lattice(hopping=0.9), potential=mo.Tabulated(onsite))
    hamiltonian = tight_binding_matrix(96, 0.9, onsite)
    np.testing.assert_allclose(mo.reference.hamiltonian_matrix(system), hamiltonian, atol=1e-12)
    packet = mo.GaussianPacket(-8.0, 1.5, 2.0)
    duration = 6.0
    target = expm_multiply(-1j * hamiltonian * duration, packet.values(grid).astype(complex))
    run = propagate(system, packet, duration, duration / 600, order=4)
    assert l2(run.psi - target, grid.dx) < 1e-10
    assert l2(target - packet.values(grid), grid.dx) > 0.5
