"""Classical particles from the packet's Wigner distribution beside the quantum packet."""

import math

import numpy as np
import pytest

import mottle as mo


def barrier_system(points=2048, length=409.6):
    """A smooth barrier V = exp(-x**2 / 8) (height 1, rms width 2) with absorbers at both ends."""
    grid = mo.Grid(points, length)
    values = np.exp(-np.square(grid.x) / 8.0)
    return mo.System(grid, potential=mo.Tabulated(values), absorber=mo.Absorber(40.0))


def packet_at(energy, width=15.0):
    return mo.GaussianPacket(-60.0, math.sqrt(2.0 * energy), width)


def test_free_wigner_ensemble_follows_the_quantum_density():
    # For a quadratic Hamiltonian the Wigner function moves classically (Moyal), so the free
    # Gaussian's |psi|^2 and the particles' density agree exactly, up to sampling: compare the
    # cumulative distributions (Kolmogorov-Smirnov distance, 99.9 % bound 1.95/sqrt(n)).
    grid = mo.Grid(2048, 204.8)
    system = mo.System(grid)
    packet = mo.GaussianPacket(-40.0, 1.0, 3.0)
    particles = 10000
    both = mo.quantum_classical(system, packet, 40.0, 0.05, particles, snapshots=(20.0, 40.0))
    for s in range(2):
        quantum = np.cumsum(np.abs(both.quantum.snapshots[s]) ** 2) * grid.dx
        classical = np.cumsum(both.classical.density[s]) * grid.dx
        assert classical[-1] == pytest.approx(1.0, abs=1e-12)  # nothing absorbed
        assert np.max(np.abs(classical - quantum)) < 1.95 / math.sqrt(particles)
    # the spread at t = 40: sigma(t) = sigma0 sqrt(1 + (hbar t / (2 m sigma0**2))**2)
    # (Cohen-Tannoudji, Diu & Laloe, complement G_I); sampling error sigma/sqrt(2n)
    width = 3.0 * math.sqrt(1.0 + (40.0 / 18.0) ** 2)
    assert np.std(both.classical.position) == pytest.approx(width, abs=4 * width / math.sqrt(2 * particles))


@pytest.mark.parametrize("energy", [0.7, 1.3])
def test_classical_particles_pass_only_above_the_barrier_while_the_quantum_packet_tunnels(energy):
    system = barrier_system()
    packet = packet_at(energy)
    both = mo.quantum_classical(system, packet, 260.0, 0.05, 2000, detector=(-10.0, 10.0))
    classical, quantum = both.classical, both.quantum
    # Energy spread hbar k0 / (2 width) = 0.04-0.05: the barrier top (1) is 6-7 spreads away.
    if energy < 1.0:
        assert classical.transmission.mean == 0.0
        assert classical.reflection.mean == 1.0
        assert quantum.transmission > 0.01  # tunnelling (WKB: about exp(-3.4) = 0.03)
    else:
        assert classical.transmission.mean == 1.0
        assert quantum.reflection > 0.01  # over-barrier reflection (2.8 % for this barrier)
    assert quantum.transmission + quantum.reflection == pytest.approx(1.0, abs=1e-6)
    # everything has left the box by the end, into the layers
    assert classical.absorbed_left + classical.absorbed_right == 1.0
    # The packet's T against the stationary T(k) averaged over its momentum distribution,
    # |phi(k)|^2 = N(k0, (1/(2 width))^2) (docs/validation.md, pitfall 4: 1e-3 or better).
    k = packet.wavenumber + np.linspace(-6, 6, 241) / (2 * packet.width)
    weights = np.exp(-0.5 * ((k - packet.wavenumber) * 2 * packet.width) ** 2)
    stationary = mo.transmission_spectrum(system, k**2 / 2).samples[0]
    assert quantum.transmission == pytest.approx(np.sum(weights * stationary) / np.sum(weights), abs=1e-3)
    assert "transmission" in both.table()


def test_classical_ensemble_repeats_and_draws_the_wigner_distribution():
    system = mo.System(mo.Grid(1024, 102.4, center=5.0), model=mo.Continuum(hbar=0.5, mass=2.0))
    packet = mo.GaussianPacket(-10.0, 2.0, 1.5)
    one = mo.classical_ensemble(system, packet, 0.1, 0.1, 50000, seed=3, index=4, threads=1)
    two = mo.classical_ensemble(system, packet, 0.1, 0.1, 50000, seed=3, index=4, threads=2)
    np.testing.assert_array_equal(one.position, two.position)
    np.testing.assert_array_equal(one.momentum, two.momentum)
    other = mo.classical_ensemble(system, packet, 0.1, 0.1, 100, seed=3, index=5)
    assert not np.array_equal(other.momentum, one.momentum[:100])
    # p ~ N(hbar k0, (hbar / (2 width))^2): mean 1, spread 1/6
    n = one.count
    assert np.mean(one.momentum) == pytest.approx(1.0, abs=5 * (1 / 6) / math.sqrt(n))
    assert np.std(one.momentum) == pytest.approx(1.0 / 6.0, rel=5 * math.sqrt(2 / n))
    # after t = 0.1 the positions moved by p t / m
    drift = np.mean(one.position) + 10.0
    assert drift == pytest.approx(0.05, abs=5 * 1.5 / math.sqrt(n))
    assert one.transmission is None


def test_classical_ensemble_refuses_bad_input():
    system = mo.System(mo.Grid(256, 25.6))
    packet = mo.GaussianPacket(0.0, 1.0, 1.0)
    with pytest.raises(mo.InvalidTypeError, match="GaussianPacket"):
        mo.classical_ensemble(system, mo.Wavefunction(np.ones(256)), 1.0, 0.1, 10)
    with pytest.raises(mo.InvalidParameterError, match="particles"):
        mo.classical_ensemble(system, packet, 1.0, 0.1, 0)
    with pytest.raises(mo.InvalidParameterError, match=r"leaves the box \[-12.8, 12.8\]"):
        mo.classical_ensemble(system, packet, 1.0, 0.1, 10, detector=(0.0, 900.0))
    with pytest.raises(mo.InvalidParameterError, match="detector"):
        mo.classical_ensemble(system, packet, 1.0, 0.1, 10, detector=(2.0, 1.0))
