"""Coherent backscattering of a matter wave in 2D disorder: the peak at -k0 in the mean momentum
distribution (Cherroret, Karpiuk, Mueller, Gremaud & Miniatura, Phys. Rev. A 85, 011604 (2012)).

The bulk geometry the full contrast needs: a plane wave exp(i k0 x) with k0 on the grid, in a
periodic box filled with Gaussian disorder, measured after a few transport times. By reciprocity
each scattering path and its reverse interfere constructively at exactly -k0, so there the mean
momentum distribution approaches twice the diffusive ring's background (contrast -> 1); single
scattering, which has no reversed partner, has died out by then.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo

# k0 = 1 on a ring of radius 10 grid steps (2 pi / L = 0.1): the grid points (+-6, +-8), (+-8, +-6)
# and (0, +-10) lie on the ring exactly, and give the background away from +-k0.
RING = 10
LENGTH = 2.0 * math.pi * RING  # k0 = 2 pi RING / LENGTH = 1
POINTS = 128
RMS, CORRELATION = 0.26, 1.0
# Born approximation (hbar = m = 1, C(q) = rms^2 2 pi l^2 exp(-q^2 l^2 / 2) with q = 2 k0 sin(theta/2);
# common practice): 1/tau_s = 2 pi rms^2 l^2 e^{-a} I0(a) = 0.198 and 1/tau_tr = 2 pi rms^2 l^2
# e^{-a} (I0(a) - I1(a)) = 0.11 at a = (k0 l)^2 = 1, so tau_tr = 9 and k0 l_tr = 9: 2D localization
# (xi ~ l_tr exp(pi k0 l_tr / 2) ~ 10^7) is far. The run ends at 5.5 transport times.
DURATION = 50.0
REALIZATIONS = 256


@pytest.fixture(scope="module")
def mean_momentum():
    grid = mo.Grid(points=(POINTS, POINTS), length=(LENGTH, LENGTH))
    system = mo.System(grid, disorder=mo.GaussianDisorder(RMS, CORRELATION, grid.start, grid.stop))
    x, _ = np.meshgrid(*grid.axes, indexing="ij")
    wave = mo.Wavefunction(np.exp(1j * x))
    result = mo.ensemble(system, wave, DURATION, 0.1, REALIZATIONS, seed=1, snapshots=[DURATION])
    return result.momentum[-1], result.k


def test_the_backscattering_peak_doubles_the_ring_at_minus_k0(mean_momentum):
    momentum, (kx, ky) = mean_momentum
    centre = POINTS // 2
    assert kx[centre - RING] == pytest.approx(-1.0) and ky[centre] == 0.0
    ring = [(6, 8), (8, 6), (-6, 8), (-8, 6), (6, -8), (8, -6), (-6, -8), (-8, -6), (0, 10), (0, -10)]
    values = np.array([momentum[centre + i, centre + j] for i, j in ring])
    background = values.mean()
    peak = momentum[centre - RING, centre]
    # The ring is isotropic by now: its points agree within their noise (about 1/sqrt(256) each).
    assert np.max(np.abs(values / background - 1.0)) < 0.35
    # Cherroret et al. (2012): peak over background -> 2 in the bulk after a few transport times.
    assert 1.5 < peak / background < 2.2, peak / background
    # The peak is narrow: a few steps away from -k0 along the ring the background is back.
    aside = momentum[centre - 8, centre + 6] / background
    assert aside < 1.35
