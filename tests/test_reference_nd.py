"""The pure-numpy reference on 2D and 3D grids (mottle.dynamics.reference_nd), first in the N-d
chain of trust: closed forms, the 1D reference it must reduce to, and the splittings' orders."""

import functools
import re

import numpy as np
import pytest

import mottle as mo
from mottle.analysis.exact import coherent_state_center, free_gaussian_width, leapfrog_center
from mottle.dynamics import reference_nd

pytestmark = pytest.mark.filterwarnings("error::mottle.UnderResolvedWarning")


@pytest.mark.parametrize(("hbar", "mass"), [(1.0, 1.0), (0.6, 1.7)])
def test_free_2d_gaussian_spreads_along_each_axis_as_in_closed_form(hbar, mass):
    # Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_I: along each
    # axis sigma(t)**2 = sigma0**2 + (hbar t / (2 m sigma0))**2 (sigma the rms width of |psi|**2,
    # the package's width), the centre at x0 + hbar k0 t / m; a product packet stays a product.
    # Without a potential the kinetic factor is exact, so only rounding is left.
    grid = mo.Grid(points=(128, 96), length=(48.0, 40.0), center=(1.0, -1.0))
    width, wavenumber, start = np.array([1.0, 1.6]), np.array([1.5, -0.8]), np.array([-4.0, 2.0])
    packet = mo.GaussianPacket(center=tuple(start), wavenumber=tuple(wavenumber), width=tuple(width))
    system = mo.System(grid, model=mo.Continuum(hbar=hbar, mass=mass))
    times = np.array([0.37, 1.0, 2.5, 4.0])  # 0.37 falls between two steps: one shorter step on a copy
    run = mo.reference.propagate(system, packet, 4.0, 0.1, snapshots=times)
    assert isinstance(run, reference_nd.BoxRun)
    assert run.psi.shape == grid.shape and run.snapshots.shape == (4, *grid.shape)
    expected = np.sqrt(width**2 + (hbar * times[:, None] / (2.0 * mass * width)) ** 2)
    np.testing.assert_allclose(run.width, expected, rtol=1e-10, atol=0)
    np.testing.assert_allclose(run.width, free_gaussian_width(times[:, None], width, hbar, mass), rtol=1e-10)
    np.testing.assert_allclose(run.position, start + hbar * wavenumber / mass * times[:, None], atol=1e-10)
    np.testing.assert_allclose(run.momentum, np.broadcast_to(hbar * wavenumber, (4, 2)), rtol=1e-10)
    # <E> = sum_a hbar**2 (k0_a**2 + 1/(4 sigma0_a**2)) / 2m, the packet's own mean_kinetic.
    energy = hbar**2 * np.sum(wavenumber**2 + 0.25 / width**2) / (2.0 * mass)
    np.testing.assert_allclose(run.energy, energy, rtol=1e-10)
    assert packet.mean_kinetic(system.model, grid.dx) == pytest.approx(energy, rel=1e-14)
    np.testing.assert_allclose(run.norms, 1.0, rtol=0, atol=1e-12)


def test_free_3d_gaussian_smoke():
    # The same closed form (Cohen-Tannoudji, complement G_I) along three axes of a 32**3 box.
    grid = mo.Grid(points=(32, 32, 32), length=24.0)
    width = np.array([1.0, 1.2, 1.4])
    packet = mo.GaussianPacket(center=(0.5, -0.5, 0.0), wavenumber=(0.5, 0.0, -1.0), width=tuple(width))
    run = mo.reference.propagate(mo.System(grid), packet, 1.0, 0.05, snapshots=[0.5, 1.0])
    assert run.snapshots.shape == (2, 32, 32, 32)
    times = run.times[:, None]
    np.testing.assert_allclose(run.width, np.sqrt(width**2 + (times / (2.0 * width)) ** 2), rtol=1e-10)
    np.testing.assert_allclose(
        run.position, np.array([0.5, -0.5, 0.0]) + np.array([0.5, 0.0, -1.0]) * times, atol=1e-10
    )
    assert abs(run.norm - 1.0) < 1e-12


@pytest.mark.parametrize("step", [0.02, 0.01])
def test_2d_coherent_state_keeps_its_width_and_its_centre_follows_the_classical_orbit(step):
    # Cohen-Tannoudji, complement G_V: in the isotropic well (1/2) m w**2 |x|**2 a Gaussian of width
    # sqrt(hbar / 2 m w) along each axis keeps its width and its centre follows
    # x0 cos(w t) + p0/(m w) sin(w t) along each axis. Strang is exact for <x>, <p> of a quadratic
    # potential up to its Stormer-Verlet orbit (mottle.analysis.exact.leapfrog_center), whose phase
    # lags by ~ w t (w h)**2 / 24 and amplitude is off by (w h)**2 / 8: the bound used below, as in
    # tests/test_free_and_harmonic.py for 1D.
    hbar, mass, frequency = 0.8, 1.3, 1.2
    width = np.sqrt(hbar / (2 * mass * frequency))
    grid = mo.Grid(points=(96, 96), length=(14.0, 14.0))
    system = mo.System(grid, model=mo.Continuum(hbar, mass), potential=mo.Harmonic(frequency))
    start, wavenumber = np.array([2.5, -1.5]), np.array([0.0, 1.0])
    packet = mo.GaussianPacket(center=tuple(start), wavenumber=tuple(wavenumber), width=width)
    times = np.arange(1, 51) * 0.1
    run = mo.reference.propagate(system, packet, 5.0, step, snapshots=times)
    for a in range(2):
        momentum = hbar * wavenumber[a]
        exact = coherent_state_center(times, start[a], momentum, frequency, mass)
        amplitude = np.hypot(start[a], momentum / (mass * frequency))
        bound = amplitude * (frequency * step) ** 2 * (frequency * times / 24.0 + 1.0 / 8.0)
        assert np.all(np.abs(run.position[:, a] - exact) <= 1.05 * bound + 1e-10)
        verlet = leapfrog_center(np.round(times / step), step, start[a], momentum, frequency, mass)
        np.testing.assert_allclose(run.position[:, a], verlet, rtol=0, atol=1e-10 * amplitude)
        assert np.max(np.abs(run.width[:, a] / width - 1.0)) < 0.25 * (frequency * step) ** 2


def _outer(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    return first[:, None] * second[None, :]


@pytest.mark.parametrize(
    "model", [mo.Continuum(0.9, 1.4), mo.Lattice(hopping=0.7)], ids=["continuum", "lattice"]
)
@pytest.mark.parametrize("splitting", ["strang", "blanes-moan"])
def test_a_separable_2d_run_is_the_product_of_two_1d_reference_runs(model, splitting):
    # Chain of trust: for H = H_x + H_y and a product state the split-step map factorizes exactly,
    # exp(-i(V_x + V_y) f h) exp(-i(T_x + T_y) f h) = the product of the two 1D maps, so the N-d
    # reference must equal the outer product of two runs of the 1D reference (mottle.reference on
    # 1D grids) to rounding. Axis 0 carries a barrier slab and a well, axis 1 a well.
    line_x, line_y = mo.Grid(128, 40.0, center=2.0), mo.Grid(64, 24.0)
    box = mo.Grid(points=(128, 64), length=(40.0, 24.0), center=(2.0, 0.0))
    frequencies = (0.3, 0.5) if isinstance(model, mo.Continuum) else (0.02, 0.04)
    barrier = mo.Barrier(0.4, 5.0, 6.5)
    x_system = mo.System(line_x, model, potential=mo.Harmonic(frequencies[0], 1.0) + barrier)
    y_system = mo.System(line_y, model, potential=mo.Harmonic(frequencies[1], -0.5))
    system = mo.System(
        box, model, potential=mo.Harmonic(frequencies, center=(1.0, -0.5)) + mo.Barrier(0.4, 5.0, 6.5)
    )
    packet_x, packet_y = mo.GaussianPacket(0.0, 1.0, 1.5), mo.GaussianPacket(1.0, -0.5, 1.2)
    packet = mo.GaussianPacket(center=(0.0, 1.0), wavenumber=(1.0, -0.5), width=(1.5, 1.2))
    options = {"splitting": splitting, "snapshots": [1.3, 3.0], "classical": False}
    along_x = mo.reference.propagate(x_system, packet_x, 3.0, 0.05, **options)
    along_y = mo.reference.propagate(y_system, packet_y, 3.0, 0.05, **options)
    run = mo.reference.propagate(system, packet, 3.0, 0.05, **options)
    np.testing.assert_allclose(run.psi, _outer(along_x.psi, along_y.psi), rtol=0, atol=1e-12)
    for s in range(2):
        expected = _outer(along_x.snapshots[s], along_y.snapshots[s])
        np.testing.assert_allclose(run.snapshots[s], expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(run.position[:, 0], along_x.position, rtol=0, atol=1e-11)
    np.testing.assert_allclose(run.position[:, 1], along_y.position, rtol=0, atol=1e-11)
    np.testing.assert_allclose(run.energy, along_x.energy + along_y.energy, rtol=1e-11)
    # The static potential is the sum of the two 1D ones, the slab the same at every y.
    np.testing.assert_allclose(
        system.static_potential(),
        x_system.static_potential()[:, None] + y_system.static_potential()[None, :],
        rtol=0,
        atol=1e-14,
    )


@pytest.mark.parametrize("splitting", ["strang", "yoshida", "blanes-moan"])
def test_on_a_1d_grid_it_is_the_1d_reference(splitting):
    # Chain of trust: the N-d code path on a 1D grid, nonlinear and with a potential, against the
    # 1D reference (which the Rust core and SciPy's expm_multiply check): the same map to rounding.
    grid = mo.Grid(256, 40.0)
    system = mo.System(grid, potential=mo.Harmonic(0.4) + mo.Cosine(0.2, 0.5), nonlinearity=-1.5)
    packet = mo.GaussianPacket(-2.0, 1.0, 1.5)
    one = mo.reference.propagate(system, packet, 2.0, 0.02, splitting=splitting, snapshots=[0.5, 1.01, 2.0])
    box = reference_nd.propagate(system, packet, 2.0, 0.02, splitting=splitting, snapshots=[0.5, 1.01, 2.0])
    np.testing.assert_allclose(box.psi, one.psi, rtol=0, atol=1e-12)
    np.testing.assert_allclose(box.snapshots, one.snapshots, rtol=0, atol=1e-12)
    np.testing.assert_allclose(box.energy, one.energy, rtol=1e-12)
    np.testing.assert_allclose(box.position[:, 0], one.position, rtol=0, atol=1e-12)


@pytest.mark.parametrize(
    "model", [mo.Continuum(0.7, 1.3), mo.Lattice(hopping=0.8, hbar=1.1)], ids=["continuum", "lattice"]
)
def test_a_nonlinear_plane_wave_turns_at_its_chemical_potential(model):
    # A plane wave A exp(i k.x) put into i hbar psi_t = T psi + g |psi|**2 psi turns at
    # hbar w = T(k) + g |A|**2 (substituted here; the uniform gas's mu = g n, Pitaevskii & Stringari
    # (2003)), |A|**2 = 1/area; T(k) = hbar**2 |k|**2 / 2m, or -2 J sum_a cos(k_a a) on the square
    # lattice (Ashcroft & Mermin (1976), ch. 10). Both factors of the split step are exact on it,
    # so only rounding is left.
    grid = mo.Grid(points=(32, 48), length=(16.0, 24.0))
    k = (2 * np.pi * 3 / 16.0, -2 * np.pi * 5 / 24.0)
    x, y = np.meshgrid(*grid.axes, indexing="ij")
    nonlinearity = 2.5
    system = mo.System(grid, model, nonlinearity=nonlinearity)
    run = mo.reference.propagate(system, mo.Wavefunction(np.exp(1j * (k[0] * x + k[1] * y))), 3.0, 0.1)
    area = 16.0 * 24.0
    if isinstance(model, mo.Continuum):
        kinetic = model.hbar**2 * (k[0] ** 2 + k[1] ** 2) / (2 * model.mass)
    else:
        kinetic = -2 * model.hopping * (np.cos(k[0] * grid.dx[0]) + np.cos(k[1] * grid.dx[1]))
    frequency = (kinetic + nonlinearity / area) / model.hbar
    expected = np.exp(1j * (k[0] * x + k[1] * y - frequency * 3.0)) / np.sqrt(area)
    np.testing.assert_allclose(run.psi, expected, rtol=0, atol=1e-12)


DURATION = 1.5


@functools.cache
def _convergence_problem():
    # A nonlinear anisotropic well with a bump: T, V and g|psi|**2 do not commute and nothing
    # separates. The reference solution is Blanes-Moan at a step 32 times finer than the finest
    # measured (its own error is then ~1e6 times below the smallest measured).
    grid = mo.Grid(points=(48, 48), length=(16.0, 16.0))
    x, y = np.meshgrid(*grid.axes, indexing="ij")
    bump = 0.5 * np.exp(-((x - 0.5) ** 2 + (y + 0.3) ** 2) / 2.0)
    system = mo.System(grid, potential=mo.Harmonic((1.0, 1.3)) + mo.Tabulated(bump), nonlinearity=2.0)
    packet = mo.GaussianPacket(center=(-1.0, 0.5), wavenumber=(0.5, -0.3), width=(0.8, 0.7))
    fine = mo.reference.propagate(system, packet, DURATION, DURATION / 2048, splitting="blanes-moan").psi
    return system, packet, fine


@pytest.mark.parametrize(
    ("splitting", "order", "counts"),
    [
        # Strang, SIAM J. Numer. Anal. 5, 506 (1968): global error O(h**2).
        ("strang", 2, (16, 32, 64)),
        # Yoshida, Phys. Lett. A 150, 262 (1990): O(h**4).
        ("yoshida", 4, (16, 32, 64)),
        # Blanes & Moan, J. Comput. Appl. Math. 142, 313 (2002): O(h**4).
        ("blanes-moan", 4, (16, 32, 64)),
    ],
)
def test_the_2d_reference_converges_at_the_splittings_order(splitting, order, counts):
    system, packet, fine = _convergence_problem()
    volume = np.prod(system.grid.dx)
    errors = []
    for count in counts:
        psi = mo.reference.propagate(system, packet, DURATION, DURATION / count, splitting=splitting).psi
        errors.append(float(np.sqrt(np.sum(np.abs(psi - fine) ** 2) * volume)))
    measured = float(np.polyfit(np.log(DURATION / np.asarray(counts)), np.log(errors), 1)[0])
    assert measured == pytest.approx(order, abs=0.2), (measured, errors)
    assert min(errors) > 1e-10  # far above rounding and the fine run's own error


def test_the_system_kinetic_table_is_the_references():
    # Two writings of T(k) = sum_a T_a(k_a): System.kinetic_table from the model's 1D dispersion per
    # axis, the reference's written out from hbar, mass and J.
    for model in (mo.Continuum(0.7, 2.0), mo.Lattice(hopping=1.3)):
        for grid in (mo.Grid(points=(32, 16), length=(8.0, 3.0)), mo.Grid(points=(16, 32, 16), length=2.0)):
            table = mo.System(grid, model).kinetic_table()
            assert table.shape == grid.shape
            np.testing.assert_allclose(table, reference_nd.kinetic_table(grid, model), rtol=1e-14, atol=1e-14)


BOX = mo.Grid(points=(64, 64), length=(20.0, 20.0))
PACKET = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=1.0)


@pytest.mark.parametrize(
    ("call", "words"),
    [
        (
            lambda: mo.reference.propagate(mo.System(BOX), PACKET, 1.0, 0.1, detector=(-1.0, 1.0)),
            "a detector is 1D only",
        ),
        (
            lambda: mo.reference.propagate(mo.System(BOX), mo.GaussianPacket(0.0, 1.0, 1.0), 1.0, 0.1),
            "a 1D packet) but the grid has 2 axes",
        ),
        (lambda: mo.reference.propagate(mo.System(BOX), PACKET, -1.0, 0.1), "duration must be > 0"),
        (lambda: mo.reference.propagate(mo.System(BOX), PACKET, 1.0, 0.1, order=3), "order must be 2 or 4"),
        (
            lambda: mo.reference.propagate(mo.System(BOX), PACKET, 1.0, 0.1, snapshots=[2.0]),
            "snapshot time 2.0",
        ),
        (
            lambda: mo.reference.propagate(mo.System(BOX), mo.Wavefunction(np.ones((64, 32))), 1.0, 0.1),
            "axis 1, along y, has 32 points, not 64",
        ),
        (
            lambda: reference_nd.propagate(
                mo.System(mo.Grid(64, 10.0), absorber=mo.Absorber(2.0)),
                mo.GaussianPacket(0.0, 1.0, 0.5),
                1.0,
                0.1,
            ),
            "no absorbing layers",
        ),
    ],
)
def test_bad_runs_are_refused_with_what_would_do(call, words):
    with pytest.raises((mo.InvalidParameterError, mo.InvalidTypeError), match=re.escape(words)):
        call()
