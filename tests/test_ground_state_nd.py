"""Ground states on 2D and 3D grids: the harmonic oscillator's levels, the product of 1D ground
states, the 2D Thomas-Fermi limit, and the state as a packet that stays put."""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo


def test_the_2d_anisotropic_oscillator_has_energy_half_the_sum_of_its_frequencies():
    # E0 = hbar (omega_x + omega_y) / 2 (Cohen-Tannoudji, Diu & Laloe (1977), ch. V, in 2D).
    grid = mo.Grid(points=(64, 64), length=(16.0, 20.0))
    system = mo.System(grid, potential=mo.Harmonic((1.0, 0.6)))
    state = mo.ground_state(system, tolerance=1e-10)
    assert state.table.shape == grid.shape
    assert abs(state.energy - 0.8) < 1e-9 and abs(state.chemical_potential - 0.8) < 1e-9


def test_a_3d_oscillator_has_energy_three_halves():
    grid = mo.Grid(points=(32, 32, 32), length=(14.0, 14.0, 14.0))
    state = mo.ground_state(mo.System(grid, potential=mo.Harmonic(1.0)), tolerance=1e-9)
    # E0 = 3 hbar omega / 2 (the same source); measured 1e-13 off on 32 points a side.
    assert abs(state.energy - 1.5) < 1e-10


@pytest.mark.filterwarnings("ignore:the ground state's momentum density")  # the barrier's sharp edges
def test_a_separable_2d_ground_state_is_the_product_of_the_1d_ones():
    # Without interaction a separable trap's ground state factorizes (common practice), here on the
    # same grids as the 1D searches, to the tolerance.
    x, y = mo.Grid(64, 16.0), mo.Grid(48, 24.0)
    box = mo.Grid(points=(64, 48), length=(16.0, 24.0))
    trap = mo.Harmonic(1.0) + mo.Barrier(0.5, 0.0, 1.0)
    one = mo.ground_state(mo.System(x, potential=trap), tolerance=1e-11)
    other = mo.ground_state(mo.System(y, potential=mo.Harmonic(0.5)), tolerance=1e-11)
    both = mo.ground_state(
        mo.System(box, potential=mo.Harmonic((1.0, 0.5)) + mo.Barrier(0.5, 0.0, 1.0)), tolerance=1e-11
    )
    product = np.multiply.outer(one.values(x), other.values(y))
    assert np.max(np.abs(np.abs(both.values(box)) - np.abs(product))) < 1e-8
    assert abs(both.energy - (one.energy + other.energy)) < 1e-9


def test_a_2d_condensate_approaches_thomas_fermi():
    # 2D Gross-Pitaevskii, isotropic trap, norm 1: mu_TF = sqrt(g m omega^2 / pi) (Pitaevskii &
    # Stringari, Bose-Einstein Condensation (2003), ch. 11, in 2D), approached from below by the
    # kinetic correction, a few per cent at mu / (hbar omega) ~ 13.
    grid = mo.Grid(points=(112, 112), length=(16.0, 16.0))  # the Thomas-Fermi radius is 5
    system = mo.System(grid, potential=mo.Harmonic(1.0), nonlinearity=500.0)
    state = mo.ground_state(system, tolerance=1e-9)
    thomas_fermi = math.sqrt(500.0 / math.pi)
    assert 0.0 < (state.chemical_potential - thomas_fermi) / thomas_fermi < 0.05


def test_the_2d_ground_state_as_a_packet_stays_put():
    grid = mo.Grid(points=(48, 48), length=(14.0, 14.0))
    system = mo.System(grid, potential=mo.Harmonic((1.0, 0.8)), nonlinearity=5.0)
    state = mo.ground_state(system, tolerance=1e-11)
    run = mo.propagate(system, state, 2.0, 0.002, order=4, snapshots=[2.0])
    # An eigenstate of H (GP included) only turns its phase: |psi|^2 is stationary, to the splitting
    # error (order 4, h = 0.002) and the tolerance.
    assert np.max(np.abs(np.abs(run.snapshots[0]) ** 2 - np.abs(state.values(grid)) ** 2)) < 1e-8


def test_a_2d_state_the_box_holds_is_refused_naming_the_faces():
    grid = mo.Grid(points=(32, 32), length=(4.0, 4.0))
    with pytest.raises(mo.errors.InvalidParameterError, match="box edges"):
        mo.ground_state(mo.System(grid, potential=mo.Harmonic(0.1)))
