"""The closed forms of mottle/exact.py against the published numbers, before they judge anything."""

import numpy as np
import pytest

from mottle.analysis.exact import (
    barrier_transmission,
    coherent_state_center,
    delta_transmission,
    free_gaussian_width,
    leapfrog_center,
    packet_average,
    soliton,
)


@pytest.mark.parametrize(
    ("energy", "expected"),
    [
        # Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33, V0 = a = 1
        # (values as tabulated in docs/validation.md).
        (0.25, 0.2368027308),
        (0.5, 0.4199743416),
        (1.0, 2.0 / 3.0),
        (1.5, 0.8090454696),
        (3.0, 0.9666964295),
    ],
)
def test_barrier_transmission_matches_griffiths_values(energy, expected):
    assert barrier_transmission(np.array([energy]), 1.0, 1.0)[0] == pytest.approx(expected, abs=1e-10)


def test_barrier_transmission_is_continuous_at_the_barrier_top():
    # The E = V0 limit of Griffiths problem 2.33, T = [1 + m V0 a**2 / (2 hbar**2)]**-1,
    # reached from both sides.
    near = barrier_transmission(np.array([1.0 - 1e-7, 1.0, 1.0 + 1e-7]), 1.0, 1.0, hbar=0.7, mass=1.3)
    assert np.ptp(near) < 1e-6
    assert near[1] == pytest.approx(1.0 / (1.0 + 1.3 * 1.0 / (2.0 * 0.7**2)), rel=1e-14)


def test_barrier_transmission_scales_with_hbar_and_mass():
    # Only 2 m E a**2 / hbar**2 and V0/E enter: rescaling m by s and hbar by sqrt(s) changes nothing.
    energies = np.array([0.3, 0.8, 1.7])
    plain = barrier_transmission(energies, 1.0, 1.0)
    scaled = barrier_transmission(energies, 1.0, 1.0, hbar=np.sqrt(2.5), mass=2.5)
    np.testing.assert_allclose(scaled, plain, rtol=1e-13)


def test_delta_transmission_matches_griffiths_values():
    # Griffiths (2005), eq. 2.141 with alpha = 1: E = 0.5 -> 0.5, E = 2 -> 0.8.
    np.testing.assert_allclose(delta_transmission(np.array([0.5, 2.0]), 1.0), [0.5, 0.8], rtol=1e-14)


def test_free_gaussian_width_value():
    # Cohen-Tannoudji, Diu & Laloe vol. 1, complement G_I: sigma0 = 1, t = 1 -> sqrt(5)/2 = 1.1180340.
    assert free_gaussian_width(1.0, 1.0) == pytest.approx(1.1180340, abs=1e-7)


def test_packet_average_of_polynomials():
    # The normal density's moments: <1> = 1, <k> = k0, <k**2> = k0**2 + s_k**2 with s_k = 1/(2 width).
    assert packet_average(lambda k: np.ones_like(k), 1.3, 7.0) == pytest.approx(1.0, abs=1e-13)
    assert packet_average(lambda k: k, 1.3, 7.0) == pytest.approx(1.3, rel=1e-13)
    assert packet_average(lambda k: k**2, 1.3, 7.0) == pytest.approx(1.3**2 + (0.5 / 7.0) ** 2, rel=1e-13)


def test_leapfrog_center_iterates_the_verlet_map_and_tends_to_the_exact_orbit():
    x, p, w, h = 1.2, -0.4, 1.7, 0.05
    for _ in range(37):
        p -= 0.5 * h * w**2 * x
        x += h * p
        p -= 0.5 * h * w**2 * x
    assert leapfrog_center(37, h, 1.2, -0.4, w) == pytest.approx(x, rel=1e-12)
    # cos(theta) = 1 - (w h)**2/2 gives theta/h = w (1 + (w h)**2/24 + ...): the orbit converges as h**2.
    errors = [
        abs(leapfrog_center(round(2.0 / h), h, 1.2, -0.4, w) - coherent_state_center(2.0, 1.2, -0.4, w))
        for h in (0.02, 0.01)
    ]
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.02)


def test_soliton_norm_and_equation():
    # Zakharov & Shabat (1972): |A sech(A x)|**2 integrates to 2A, and psi solves
    # i psi_t = -psi_xx/2 - |psi|**2 psi (checked here by finite differences, boosted).
    x = np.linspace(-40.0, 40.0, 16001)
    dx, dt, a, v = x[1] - x[0], 1e-4, 0.8, 0.6
    psi = soliton(x, 0.3, a, velocity=v, center=-1.0)
    assert np.sum(np.abs(psi) ** 2) * dx == pytest.approx(2 * a, rel=1e-10)
    psi_t = (soliton(x, 0.3 + dt, a, v, -1.0) - soliton(x, 0.3 - dt, a, v, -1.0)) / (2 * dt)
    psi_xx = (psi[2:] - 2 * psi[1:-1] + psi[:-2]) / dx**2
    residual = 1j * psi_t[1:-1] + 0.5 * psi_xx + np.abs(psi[1:-1]) ** 2 * psi[1:-1]
    assert np.max(np.abs(residual)) < 1e-4
