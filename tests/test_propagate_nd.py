"""The split step on 2D and 3D grids: free spreading, the harmonic well, the lattice band, the
order of the splittings, the absorbers and the detector along axis 0, and ensembles that do not
depend on threads or chunks."""

from __future__ import annotations

import math

import numpy as np
import pytest

import mottle as mo
from mottle.errors import InvalidParameterError

BOX = mo.Grid(points=(128, 96), length=(80.0, 60.0))


def free_width(width: float, t, hbar: float = 1.0, mass: float = 1.0):
    """rms width of a free Gaussian |psi|^2: s(t)^2 = s^2 + (hbar t / (2 m s))^2 (Cohen-Tannoudji,
    Diu & Laloe, Quantum Mechanics (1977), complement G_I)."""
    return np.sqrt(width**2 + (hbar * np.asarray(t) / (2.0 * mass * width)) ** 2)


def test_a_free_2d_gaussian_spreads_along_each_axis_by_the_1d_formula():
    model = mo.Continuum(hbar=0.8, mass=1.7)
    packet = mo.GaussianPacket(center=(-5.0, 3.0), wavenumber=(1.2, -0.5), width=(2.0, 3.0))
    run = mo.propagate(mo.System(BOX, model=model), packet, 6.0, 0.05, snapshots=[2.0, 4.0, 6.0])
    width = np.sqrt(run.position_squared - run.position**2)
    for axis, s in enumerate((2.0, 3.0)):
        expected = free_width(s, run.times, hbar=0.8, mass=1.7)
        assert np.max(np.abs(width[:, axis] / expected - 1.0)) < 1e-10
    # The centre moves at hbar k / m along each axis (the same source).
    velocity = 0.8 * np.array([1.2, -0.5]) / 1.7
    assert np.allclose(run.position, np.array([-5.0, 3.0]) + np.outer(run.times, velocity), atol=1e-10)
    assert run.psi.shape == BOX.shape and run.snapshots.shape == (3, *BOX.shape)
    assert abs(run.norm - 1.0) < 1e-12


def test_a_free_3d_gaussian_spreads_along_each_axis_by_the_1d_formula():
    grid = mo.Grid(points=(32, 32, 40), length=(30.0, 36.0, 44.0))
    packet = mo.GaussianPacket(center=(0.0, 1.0, -1.0), wavenumber=(0.5, 0.0, 0.0), width=(1.5, 2.0, 2.5))
    run = mo.propagate(mo.System(grid), packet, 2.0, 0.05, snapshots=[1.0, 2.0])
    width = np.sqrt(run.position_squared - run.position**2)
    for axis, s in enumerate((1.5, 2.0, 2.5)):
        # Cohen-Tannoudji, Diu & Laloe (1977), complement G_I; 32 points of about one width apart
        # sample the packet to a few 1e-8 of its width (measured: 3e-8).
        assert np.max(np.abs(width[:, axis] / free_width(s, run.times) - 1.0)) < 1e-7


def test_a_2d_coherent_state_in_an_isotropic_well_keeps_its_width_and_oscillates():
    # Ground-state width of a harmonic well, s = sqrt(hbar / (2 m omega)), displaced by x0: the
    # centre follows x0 cos(omega t) and the width stays s (a coherent state; Cohen-Tannoudji, Diu &
    # Laloe (1977), complement G_V).
    omega, x0 = 0.5, 4.0
    s = math.sqrt(1.0 / (2.0 * omega))
    system = mo.System(mo.Grid(points=(128, 128), length=(40.0, 40.0)), potential=mo.Harmonic(omega))
    packet = mo.GaussianPacket(center=(x0, 0.0), wavenumber=(0.0, 0.0), width=s)
    times = np.linspace(1.0, 2.0 * math.pi / omega, 6)
    run = mo.propagate(system, packet, times[-1], 0.005, snapshots=times, order=4)
    # Order 4 at dt = 0.005: the splitting error is below 1e-8 here.
    assert np.max(np.abs(run.position[:, 0] - x0 * np.cos(omega * run.times))) < 1e-7
    assert np.max(np.abs(run.position[:, 1])) < 1e-10
    width = np.sqrt(run.position_squared - run.position**2)
    assert np.max(np.abs(width - s)) < 1e-7


def test_a_plane_wave_on_the_square_lattice_turns_at_the_band_energy():
    # Tight binding on a square lattice: E(k) = -2 t (cos kx a + cos ky a) (Ashcroft & Mermin, Solid
    # State Physics (1976), eq. 10.31 for the simple cubic lattice, here in 2D). A plane wave on the
    # grid is an exact eigenstate: after t it has turned by exp(-i E t / hbar).
    grid = mo.Grid(points=(16, 32), length=(16.0, 32.0))
    system = mo.System(grid, model=mo.Lattice(hopping=0.7))
    kx, ky = 2 * math.pi * 3 / 16, 2 * math.pi * 5 / 32
    x, y = np.meshgrid(*grid.axes, indexing="ij")
    psi = np.exp(1j * (kx * x + ky * y))
    run = mo.propagate(system, mo.Wavefunction(psi), 3.0, 0.1)
    energy = -2 * 0.7 * (math.cos(kx) + math.cos(ky))
    turned = run.psi / (psi / np.sqrt(np.sum(np.abs(psi) ** 2)))
    assert np.max(np.abs(turned - np.exp(-1j * energy * 3.0))) < 1e-12


@pytest.mark.filterwarnings("ignore::mottle.errors.UnderResolvedWarning")  # coarse steps on purpose
@pytest.mark.parametrize(("order", "slope"), [(2, 2.0), (4, 4.0)])
def test_the_splittings_keep_their_order_in_2d(order, slope):
    # Richardson's test of the global error against a run with a step eight times smaller (common
    # practice): error(dt) ~ dt^order.
    system = mo.System(mo.Grid(points=(64, 64), length=(30.0, 30.0)), potential=mo.Harmonic(0.4))
    packet = mo.GaussianPacket(center=(2.0, -1.0), wavenumber=(1.0, 0.5), width=1.5)
    duration = 2.0
    steps = [0.2, 0.1, 0.05]
    fine = mo.propagate(system, packet, duration, steps[-1] / 8, order=order).psi
    dv = np.prod(system.grid.dx)
    errors = [
        math.sqrt(
            np.sum(np.abs(mo.propagate(system, packet, duration, dt, order=order).psi - fine) ** 2) * dv
        )
        for dt in steps
    ]
    measured = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert abs(measured - slope) < 0.15, (errors, measured)


def test_slab_absorbers_count_what_leaves_through_each_end_of_axis_0():
    # Layers on axis 0 only: the transverse boundaries stay periodic and nothing leaves sideways.
    system = mo.System(BOX, absorber=mo.Absorber(10.0, axes=(0,)))
    packet = mo.GaussianPacket(center=(10.0, 0.0), wavenumber=(2.0, 1.0), width=3.0)
    run = mo.propagate(system, packet, 30.0, 0.02, detector=(-15.0, 15.0))
    assert run.absorbed_right > 0.9 and run.absorbed_sides == 0.0
    # Probability leaves only through the layers, and the accounting is exact.
    assert abs(run.norm + run.absorbed_left + run.absorbed_right - 1.0) < 1e-12
    # T counts the slab x_0 > right and what its layer absorbed; R the same on the left.
    x0 = BOX.axes[0]
    density = np.abs(run.psi) ** 2 * np.prod(BOX.dx)
    assert abs(run.transmission - (float(np.sum(density[x0 > 15.0])) + run.absorbed_right)) < 1e-12
    assert abs(run.reflection - (float(np.sum(density[x0 < -15.0])) + run.absorbed_left)) < 1e-12


def test_layers_on_every_face_count_the_sides_apart():
    system = mo.System(BOX, absorber=mo.Absorber(6.0))
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.5, 1.5), width=3.0)
    run = mo.propagate(system, packet, 40.0, 0.02)
    assert run.absorbed_sides > 0.1 and run.absorbed_right > 0.1
    total = run.norm + run.absorbed_left + run.absorbed_right + run.absorbed_sides
    assert abs(total - 1.0) < 1e-12


def test_the_momentum_density_has_the_grids_shape_and_its_integral_is_the_norm():
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.5, -0.5), width=(2.0, 3.0))
    run = mo.propagate(mo.System(BOX), packet, 1.0, 0.05, snapshots=[1.0])
    kx, ky = run.k
    assert np.all(np.diff(kx) > 0) and kx[BOX.shape[0] // 2] == 0.0
    density = run.momentum_density[0]
    dk = (kx[1] - kx[0]) * (ky[1] - ky[0])
    assert abs(np.sum(density) * dk - 1.0) < 1e-12
    i, j = np.unravel_index(np.argmax(density), density.shape)
    assert abs(kx[i] - 1.5) <= kx[1] - kx[0] and abs(ky[j] + 0.5) <= ky[1] - ky[0]
    assert np.allclose(run.momentum[0], [1.5, -0.5], atol=1e-10)


def test_an_ensemble_in_2d_is_the_same_for_any_threads_and_chunks():
    system = mo.System(BOX, potential=mo.Harmonic(0.1), absorber=mo.Absorber(8.0, axes=(0,)))
    packet = mo.GaussianPacket(center=(-5.0, 0.0), wavenumber=(1.0, 0.3), width=3.0)
    args = (system, packet, 1.0, 0.05)
    one = mo.ensemble(*args, 40, snapshots=[0.5, 1.0], threads=1, detector=(-10.0, 10.0))
    two = mo.ensemble(*args, 40, snapshots=[0.5, 1.0], threads=2, detector=(-10.0, 10.0))
    parts = [
        mo.ensemble_partial(*args, start, count, snapshots=[0.5, 1.0], detector=(-10.0, 10.0))
        for start, count in ((0, 16), (16, 24))
    ]
    merged = mo.merge_partials(parts, system)
    for other in (two, merged):
        for name, value in one.to_arrays().items():
            assert np.array_equal(value, other.to_arrays()[name], equal_nan=True), name
    assert one.density.shape == (2, *BOX.shape) and one.momentum.shape == (2, *BOX.shape)
    assert one.samples["position"].shape == (40, 2, 2)
    assert one.second_moment.shape == (2, 2)
    # A fixed packet in a fixed potential: every realization is the single run.
    run = mo.propagate(system, packet, 1.0, 0.05, snapshots=[0.5, 1.0], detector=(-10.0, 10.0))
    assert np.allclose(one.density, np.abs(run.snapshots) ** 2, rtol=0, atol=1e-13)
    assert np.allclose(one.momentum, run.momentum_density, rtol=0, atol=1e-13)


def test_the_store_form_of_a_2d_result_round_trips():
    system = mo.System(BOX)
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=3.0)
    result = mo.ensemble(system, packet, 0.5, 0.05, 16, snapshots=[0.5])
    again = mo.EnsembleResult.from_arrays(result.to_arrays())
    assert isinstance(again.k, tuple) and len(again.k) == 2
    for name, value in result.to_arrays().items():
        assert np.array_equal(value, again.to_arrays()[name], equal_nan=True), name


def test_the_radial_momentum_of_an_isotropic_packet_integrates_to_the_norm():
    # Shells of dk = 2 pi / 200, eight to the packet's momentum spread.
    grid = mo.Grid(points=(256, 256), length=(200.0, 200.0))
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(0.0, 0.0), width=2.0)
    result = mo.ensemble(mo.System(grid), packet, 0.1, 0.05, 16, snapshots=[0.1])
    q, n = result.radial_momentum()
    dq = q[1] - q[0]
    # 2 pi q n(q) dq summed over shells (midpoint rule), the shells reaching well past the packet's
    # momentum spread 1/(2 s) = 0.25: the norm, to the few lattice points of the inner shells
    # (measured: 4e-3).
    assert abs(np.sum(2 * math.pi * q * n[0] * dq) - 1.0) < 1e-2
    # The isotropic Gaussian n(k) = (2 s^2 / pi) exp(-2 s^2 k^2) (its Fourier transform; common practice).
    expected = 2 * 4.0 / math.pi * np.exp(-2 * 4.0 * q**2)
    assert np.max(np.abs(n[0] - expected)) < 2e-2 * expected.max()


def test_single_precision_in_2d_follows_double():
    system = mo.System(BOX, potential=mo.Harmonic(0.1))
    packet = mo.GaussianPacket(center=(-5.0, 0.0), wavenumber=(1.0, 0.3), width=3.0)
    double = mo.ensemble(system, packet, 2.0, 0.05, 16, snapshots=[2.0])
    single = mo.ensemble(system, packet, 2.0, 0.05, 16, snapshots=[2.0], precision="single")
    assert np.max(np.abs(single.density - double.density)) < 1e-5 * np.max(double.density)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (
            lambda: mo.propagate(
                mo.System(BOX),
                mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=3.0),
                1.0,
                0.1,
                detector=(-50.0, 10.0),
            ),
            "along axis 0",
        ),
        (
            lambda: mo.ensemble(
                mo.System(BOX),
                mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=3.0),
                1.0,
                0.1,
                4,
                spectrum=True,
            ),
            "no energy-resolved spectrum",
        ),
        (lambda: mo.System(BOX, absorber=mo.Absorber(5.0, axes=(2,))), "axis the 2D grid does not have"),
        (lambda: mo.System(BOX, absorber=mo.Absorber(35.0, axes=(1,))), "along axis 1"),
    ],
)
def test_what_a_2d_run_refuses_is_named(call, message):
    with pytest.raises(InvalidParameterError, match=message):
        call()


@pytest.mark.parametrize(
    ("grid", "model", "order"),
    [
        (mo.Grid(points=(64, 48), length=(36.0, 32.0)), mo.Continuum(hbar=0.9, mass=1.3), 2),
        (mo.Grid(points=(64, 48), length=(36.0, 32.0)), mo.Continuum(), 4),
        (mo.Grid(points=(32, 32), length=(32.0, 32.0)), mo.Lattice(hopping=1.0), 2),
        (mo.Grid(points=(32, 28, 28), length=(36.0, 32.0, 32.0)), mo.Continuum(), 4),
    ],
)
def test_the_core_follows_the_numpy_reference_in_2d_and_3d(grid, model, order):
    # The chain of trust: the pure-numpy split step on fftn (mottle.dynamics.reference_nd), the
    # same splitting, a harmonic well, a barrier slab and the nonlinearity.
    ndim = grid.ndim
    system = mo.System(
        grid,
        model=model,
        potential=mo.Harmonic(0.2) + mo.Barrier(0.3, 1.0, 3.0),
        nonlinearity=2.0,
    )
    packet = mo.GaussianPacket(center=(-2.0,) + (0.5,) * (ndim - 1), wavenumber=(0.8,) * ndim, width=1.8)
    core = mo.propagate(system, packet, 2.0, 0.05, order=order, snapshots=[1.0, 2.0])
    reference = mo.reference.propagate(system, packet, 2.0, 0.05, order=order, snapshots=[1.0, 2.0])
    assert np.max(np.abs(core.psi - reference.psi)) < 1e-10
    assert np.max(np.abs(core.snapshots - reference.snapshots)) < 1e-10
    assert np.allclose(core.position, reference.position, rtol=0, atol=1e-10)


def test_a_disordered_2d_ensemble_member_is_the_single_run_of_its_index():
    # Realization r of an ensemble is propagate(seed, index=r): the disorder drawn on the grid's
    # mesh from (seed, r) alone, whatever the threads.
    system = mo.System(
        BOX,
        disorder=mo.Speckle(0.3, 1.5, start=-10.0, stop=10.0),
        absorber=mo.Absorber(8.0, axes=(0,)),
    )
    packet = mo.GaussianPacket(center=(-16.0, 0.0), wavenumber=(1.5, 0.0), width=3.0)
    args = (system, packet, 16.0, 0.05)
    result = mo.ensemble(*args, 17, seed=5, snapshots=[8.0], threads=2)
    again = mo.ensemble(*args, 17, seed=5, snapshots=[8.0], threads=1)
    for name, value in result.to_arrays().items():
        assert np.array_equal(value, again.to_arrays()[name], equal_nan=True), name
    for index in (0, 16):
        # The ensemble's detector defaults to the disorder slab along axis 0.
        run = mo.propagate(*args, seed=5, index=index, snapshots=[8.0], detector=(-10.0, 10.0))
        # The same arithmetic in the same order: the same numbers.
        assert result.samples["transmission"][index] == run.transmission
        assert np.array_equal(result.samples["position"][index], run.position)
    assert 0.1 < result.transmission.mean < 0.99 and result.reflection.mean > 1e-3
    # Different realizations differ.
    assert np.ptp(result.samples["transmission"]) > 1e-3


def _outer(first, second):
    return np.multiply.outer(first, second)


@pytest.mark.parametrize(
    ("along_x", "along_y"),
    [
        # A kicked rotor along x (hbar_eff = 1.3, K = 2), free along y.
        (lambda: mo.Kicked(mo.Cosine(2.0, 1.0), 1.0), None),
        # A trap switched off at t = 1.5 along both axes, two frequencies.
        (lambda: mo.Switched(mo.Harmonic(0.7), off=1.5), lambda: mo.Switched(mo.Harmonic(0.4), off=1.5)),
        # A modulated standing wave along x.
        (lambda: mo.Modulated(mo.Cosine(0.8, 2.0), 0.5, 3.0, 0.2), None),
    ],
)
def test_time_dependent_terms_in_2d_are_the_product_of_two_1d_runs(along_x, along_y):
    # A separable Hamiltonian and a product state: the split step factorizes exactly, so the 2D run is
    # the outer product of the 1D runs along each axis (common practice; the 1D terms are checked in
    # tests/test_timedep.py), to rounding.
    model = mo.Continuum(hbar=1.3)
    line_x, line_y = mo.Grid(128, 2 * math.pi * 4), mo.Grid(64, 30.0)
    box = mo.Grid(points=(128, 64), length=(2 * math.pi * 4, 30.0))
    term = along_x()
    if along_y is None:
        potential_2d, system_y = term, mo.System(line_y, model=model)
    else:
        other = along_y()
        # The same terms on the box: each switched trap along its own axis (frequency 0 elsewhere is
        # not allowed, so the two 1D traps become one 2D trap of two frequencies).
        potential_2d = mo.Switched(mo.Harmonic((0.7, 0.4)), off=1.5)
        system_y = mo.System(line_y, model=model, potential=other)
    x_run = mo.propagate(
        mo.System(line_x, model=model, potential=term),
        mo.GaussianPacket(1.0, 0.5, 1.4),
        3.0,
        0.02,
        snapshots=[1.0, 3.0],
    )
    y_run = mo.propagate(system_y, mo.GaussianPacket(-1.0, 0.3, 1.7), 3.0, 0.02, snapshots=[1.0, 3.0])
    packet = mo.GaussianPacket(center=(1.0, -1.0), wavenumber=(0.5, 0.3), width=(1.4, 1.7))
    run = mo.propagate(
        mo.System(box, model=model, potential=potential_2d), packet, 3.0, 0.02, snapshots=[1.0, 3.0]
    )
    assert np.max(np.abs(run.psi - _outer(x_run.psi, y_run.psi))) < 1e-12
    for s in range(2):
        assert np.max(np.abs(run.snapshots[s] - _outer(x_run.snapshots[s], y_run.snapshots[s]))) < 1e-12
    assert np.allclose(run.momentum_squared[:, 0], x_run.momentum_squared, rtol=1e-11, atol=0)


def test_a_drawn_kick_phase_in_2d_is_keyed_by_seed_and_index():
    box = mo.Grid(points=(64, 32), length=(2 * math.pi, 12.0))
    system = mo.System(
        box,
        model=mo.Continuum(hbar=1.0),
        potential=mo.Kicked(mo.Cosine(1.5, 1.0, phase=mo.Uniform(0.0, 2 * math.pi)), 1.0),
    )
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(0.0, 0.0), width=(0.35, 0.7))
    result = mo.ensemble(system, packet, 5.0, 0.25, 18, seed=4, snapshots=[5.0])
    for index in (0, 17):
        run = mo.propagate(system, packet, 5.0, 0.25, seed=4, index=index, snapshots=[5.0])
        assert np.array_equal(result.samples["momentum_squared"][index], run.momentum_squared)
    # The phases differ between realizations: so do the momenta along x, not along y.
    spread = np.ptp(result.samples["mean_momentum"][:, 0, :], axis=0)
    assert spread[0] > 1e-3 and spread[1] < 1e-12
