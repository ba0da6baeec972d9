"""Closed-form results that `mottle check` and the tests compare with; each names its source.

Plain numpy, independent of the propagators, so that the formulas themselves
are checked against the published numbers (tests/test_analytic.py) before
they judge anything.
"""

from __future__ import annotations

import numpy as np


def barrier_transmission(energy, height, width, hbar=1.0, mass=1.0):
    """Rectangular barrier of ``height`` V0 on ``0 < x < width`` a, stationary transmission T(E).

    Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33:
    E < V0: T = [1 + V0**2 sinh**2(kappa a) / (4 E (V0 - E))]**-1, kappa = sqrt(2m(V0 - E))/hbar;
    E > V0: T = [1 + V0**2 sin**2(q a) / (4 E (E - V0))]**-1, q = sqrt(2m(E - V0))/hbar;
    E = V0: T = [1 + m V0 a**2 / (2 hbar**2)]**-1 (the limit of both).
    """
    energy = np.asarray(energy, dtype=float)
    below = energy < height
    above = energy > height
    result = np.full(energy.shape, 1.0 / (1.0 + mass * height * width**2 / (2.0 * hbar**2)))
    e = energy[below]
    kappa = np.sqrt(2.0 * mass * (height - e)) / hbar
    result[below] = 1.0 / (1.0 + height**2 * np.sinh(kappa * width) ** 2 / (4.0 * e * (height - e)))
    e = energy[above]
    q = np.sqrt(2.0 * mass * (e - height)) / hbar
    result[above] = 1.0 / (1.0 + height**2 * np.sin(q * width) ** 2 / (4.0 * e * (e - height)))
    return result


def delta_transmission(energy, strength, hbar=1.0, mass=1.0):
    """``alpha delta(x)`` barrier: T = [1 + m alpha**2 / (2 hbar**2 E)]**-1 (Griffiths (2005), eq. 2.141)."""
    energy = np.asarray(energy, dtype=float)
    return 1.0 / (1.0 + mass * strength**2 / (2.0 * hbar**2 * energy))


def packet_average(function, wavenumber, width, spread_count=10.0, samples=4001):
    """``integral |phi(k)|**2 f(k) dk`` for the Gaussian packet of rms width ``width`` in x.

    ``|phi(k)|**2`` is the normal density of mean k0 and rms ``1/(2 width)``
    (the Fourier transform of psi0 ~ exp(-(x-x0)**2/(4 width**2) + i k0 x)). Simpson's rule
    over k0 +- ``spread_count`` rms widths; the tails beyond are below 1e-20.
    """
    spread = 0.5 / width
    k = np.linspace(wavenumber - spread_count * spread, wavenumber + spread_count * spread, samples)
    weight = np.exp(-0.5 * ((k - wavenumber) / spread) ** 2) / (np.sqrt(2.0 * np.pi) * spread)
    values = weight * function(k)
    h = k[1] - k[0]
    return h / 3.0 * (values[0] + values[-1] + 4.0 * values[1:-1:2].sum() + 2.0 * values[2:-1:2].sum())


def free_gaussian_width(time, width, hbar=1.0, mass=1.0):
    """rms width of |psi|**2 of a free minimum-uncertainty packet.

    sigma(t) = sigma0 sqrt(1 + (hbar t / (2 m sigma0**2))**2):

    Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_I.
    """
    return width * np.sqrt(1.0 + (hbar * np.asarray(time) / (2.0 * mass * width**2)) ** 2)


def coherent_state_center(time, position, momentum, frequency, mass=1.0):
    """<x>(t) = x0 cos(w t) + p0/(m w) sin(w t) (Cohen-Tannoudji et al., complement G_V)."""
    phase = frequency * np.asarray(time)
    return position * np.cos(phase) + momentum / (mass * frequency) * np.sin(phase)


def leapfrog_center(steps, step, position, momentum, frequency, mass=1.0):
    """<x> after n Strang steps in a harmonic well: the velocity-Verlet map, iterated exactly.

    For a quadratic potential the Ehrenfest equations close, and V(h/2) K(h) V(h/2)
    maps (<x>, <p>) by kick h/2, drift h, kick h/2. That linear map M has
    trace 2 - (w h)**2 and determinant 1, so
    M**n = cos(n theta) 1 + sin(n theta)/sin(theta) (M - cos(theta) 1), cos(theta) = 1 - (w h)**2 / 2:
    the exact solution with w replaced by theta/h
    (derived here; the classic modified-frequency result for the Stormer-Verlet scheme).
    """
    w, h = frequency, step
    matrix = np.array(
        [
            [1.0 - 0.5 * (w * h) ** 2, h / mass],
            [-mass * w**2 * h * (1.0 - 0.25 * (w * h) ** 2), 1.0 - 0.5 * (w * h) ** 2],
        ]
    )
    theta = np.arccos(1.0 - 0.5 * (w * h) ** 2)
    n = np.asarray(steps, dtype=float)[..., None, None]
    identity = np.eye(2)
    power = np.cos(n * theta) * identity + np.sin(n * theta) / np.sin(theta) * (
        matrix - np.cos(theta) * identity
    )
    return (power @ np.array([position, momentum]))[..., 0]


def soliton(x, time, amplitude, velocity=0.0, center=0.0):
    """Bright soliton of i psi_t = -psi_xx/2 - |psi|**2 psi (hbar = m = 1), boosted to ``velocity``.

    psi = A sech(A (x - x0 - v t)) exp(i v x + i (A**2 - v**2) t / 2): Zakharov & Shabat,
    Sov. Phys. JETP 34, 62 (1972), with the Galilean boost psi(x - v t, t) exp(i v x - i v**2 t / 2).
    Its norm is 2A.
    """
    return (
        amplitude
        / np.cosh(amplitude * (x - center - velocity * time))
        * np.exp(1j * velocity * x + 0.5j * (amplitude**2 - velocity**2) * time)
    )
