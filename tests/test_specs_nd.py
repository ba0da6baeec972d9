"""Initial states and static potentials on 2D and 3D grids: their values, their 1D results
unchanged, and their bad input (each message names the axis and what would be accepted)."""

import math
import re
import warnings

import numpy as np
import pytest

import mottle as mo
from mottle.errors import InvalidParameterError, InvalidTypeError, UnderResolvedWarning

pytestmark = pytest.mark.filterwarnings("error::mottle.UnderResolvedWarning")

BOX = mo.Grid(points=(96, 64), length=(30.0, 24.0), center=(1.0, -1.0))
CUBE = mo.Grid(points=(48, 32, 40), length=(24.0, 20.0, 24.0))


def _moments(psi: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """<x_a>, rms width along a, <k_a> and the norm, by direct sums on the grid."""
    density = np.abs(psi) ** 2
    volume = math.prod(grid.dx)
    spectrum = np.abs(np.fft.fftn(psi)) ** 2
    means, widths, wavenumbers = [], [], []
    for a, (x, k) in enumerate(zip(grid.axes, grid.k, strict=True)):
        shape = [-1 if b == a else 1 for b in range(grid.ndim)]
        x, k = x.reshape(shape), k.reshape(shape)
        mean = float(np.sum(density * x) * volume)
        means.append(mean)
        widths.append(math.sqrt(float(np.sum(density * (x - mean) ** 2) * volume)))
        wavenumbers.append(float(np.sum(spectrum * k) / np.sum(spectrum)))
    return np.array(means), np.array(widths), np.array(wavenumbers), float(np.sum(density) * volume)


@pytest.mark.parametrize(
    ("grid", "center", "wavenumber", "width"),
    [
        (BOX, (2.0, -3.0), (1.5, -0.7), (1.2, 0.9)),
        (BOX, (-5.0, -1.5), (0.0, 2.0), 1.1),  # one width: every axis
        (CUBE, (1.0, -2.0, 0.5), (0.8, 0.0, -1.2), (1.0, 0.8, 1.3)),
    ],
)
def test_packet_is_normalized_with_its_moments_along_each_axis(grid, center, wavenumber, width):
    # The Gaussian's moments (Cohen-Tannoudji, Diu & Laloe (1977), complement G_I): along each axis
    # <x_a> = x0_a, the rms width of |psi|**2 is the packet's width, <k_a> = k0_a; a product over the
    # axes, normalized so that sum |psi|**2 dV = 1 with dV = prod(dx).
    packet = mo.GaussianPacket(center=center, wavenumber=wavenumber, width=width)
    packet.validate(grid)
    psi = packet.values(grid)
    assert psi.shape == grid.shape and psi.dtype == np.complex128
    means, widths, wavenumbers, norm = _moments(psi, grid)
    assert norm == pytest.approx(1.0, abs=1e-14)
    np.testing.assert_allclose(means, center, rtol=0, atol=1e-12)
    expected_width = np.broadcast_to(width, (grid.ndim,))
    np.testing.assert_allclose(widths, expected_width, rtol=1e-12)
    np.testing.assert_allclose(wavenumbers, wavenumber, rtol=0, atol=1e-12)
    assert packet.width == tuple(expected_width)
    np.testing.assert_allclose(packet.wavenumber_spread, 0.5 / expected_width, rtol=1e-15)


def test_packet_is_the_product_of_the_1d_packets_along_the_axes():
    # The 1D convention per axis: on each axis grid the 1D packet, then the outer product.
    packet = mo.GaussianPacket(center=(2.0, -3.0), wavenumber=(1.5, -0.7), width=(1.2, 0.9))
    lines = [
        mo.Grid(n, length, center)
        for n, length, center in zip(BOX.points, BOX.length, BOX.center, strict=True)
    ]
    factors = [
        mo.GaussianPacket(c, k, s).values(line)
        for c, k, s, line in zip((2.0, -3.0), (1.5, -0.7), (1.2, 0.9), lines, strict=True)
    ]
    np.testing.assert_allclose(packet.values(BOX), np.outer(*factors), rtol=0, atol=1e-15)


def test_packet_near_the_edge_takes_the_nearest_periodic_image_per_axis():
    grid = mo.Grid(points=(64, 64), length=(20.0, 20.0))
    packet = mo.GaussianPacket(center=(9.5, -9.5), wavenumber=(0.0, 0.0), width=(1.0, 1.0))
    psi = packet.values(grid)
    # Wrapped: the corner (-10, 9.6875) is 0.5 and 0.8125 away through the boundaries.
    expected = np.exp(-(0.5**2) / 4.0 - 0.8125**2 / 4.0) / math.sqrt(2 * math.pi)
    assert abs(psi[0, -1]) == pytest.approx(expected, rel=1e-12)


def test_mean_kinetic_sums_the_axes_and_agrees_with_the_wavefunction_of_the_packet():
    # sum_a hbar**2 (k0_a**2 + s_k,a**2) / 2m_a, m_a the model's mass at the spacing along a; the
    # Wavefunction of the same values measures it from |fftn(psi)|**2.
    packet = mo.GaussianPacket(center=(0.0, 0.0, 0.0), wavenumber=(0.5, -0.3, 0.2), width=(1.0, 1.2, 1.4))
    model = mo.Continuum(hbar=0.8, mass=1.7)
    formula = sum(
        0.8**2 * (k**2 + 0.25 / s**2) / (2 * 1.7)
        for k, s in zip((0.5, -0.3, 0.2), (1.0, 1.2, 1.4), strict=True)
    )
    assert packet.mean_kinetic(model, CUBE.dx) == pytest.approx(formula, rel=1e-14)
    measured = mo.Wavefunction(packet.values(CUBE)).mean_kinetic(model, CUBE.dx)
    assert measured == pytest.approx(formula, rel=1e-10)
    lattice = mo.Lattice(hopping=1.3)
    mass = [lattice.effective_mass(dx) for dx in CUBE.dx]
    expected = sum(
        lattice.hbar**2 * (k**2 + 0.25 / s**2) / (2 * m)
        for k, s, m in zip((0.5, -0.3, 0.2), (1.0, 1.2, 1.4), mass, strict=True)
    )
    assert packet.mean_kinetic(lattice, CUBE.dx) == pytest.approx(expected, rel=1e-14)


def test_wavefunction_on_a_box_is_normalized_with_the_volume_element():
    rng = np.random.default_rng(4)
    table = rng.normal(size=BOX.shape) + 1j * rng.normal(size=BOX.shape)
    state = mo.Wavefunction(table)
    state.validate(BOX)
    psi = state.values(BOX)
    assert psi.shape == BOX.shape
    assert np.sum(np.abs(psi) ** 2) * math.prod(BOX.dx) == pytest.approx(1.0, abs=1e-13)
    np.testing.assert_allclose(psi / psi[0, 0], table / table[0, 0], rtol=1e-12)


def test_1d_packet_and_potentials_are_bitwise_unchanged():
    # The 1D formulas as they were before the N-d work, written out here: the same bits.
    grid = mo.Grid(300, 37.0, center=0.7)
    x, dx = np.asarray(grid.x), grid.dx
    packet = mo.GaussianPacket(1.3, -0.9, 1.4)
    offset = x - 1.3
    offset -= grid.length * np.round(offset / grid.length)
    psi = np.exp(-np.square(offset) / (4.0 * 1.4**2) + 1j * -0.9 * offset)
    np.testing.assert_array_equal(packet.values(grid), psi / math.sqrt(np.sum(np.abs(psi) ** 2) * dx))
    assert isinstance(packet.center, float) and packet.ndim == 1
    assert packet.wavenumber_spread == 0.5 / 1.4
    model = mo.Continuum(0.9, 1.3)
    assert packet.mean_kinetic(model, dx) == 0.9**2 / (2.0 * 1.3) * ((-0.9) ** 2 + (0.5 / 1.4) ** 2)
    table = np.exp(1j * x) * np.exp(-(x**2))
    np.testing.assert_array_equal(
        mo.Wavefunction(table).values(grid), table / math.sqrt(np.sum(np.abs(table) ** 2) * dx)
    )
    lower, upper = x - 0.5 * dx, x + 0.5 * dx
    barrier = 2.0 * np.clip(np.minimum(upper, 3.3) - np.maximum(lower, 1.1), 0.0, None) / dx
    np.testing.assert_array_equal(mo.Barrier(2.0, 1.1, 3.3).values(grid, model), barrier)
    harmonic = 0.5 * 1.3 * 0.7**2 * np.square(x - 0.4)
    np.testing.assert_array_equal(mo.Harmonic(0.7, 0.4).values(grid, model), harmonic)
    cosine = 0.3 * np.cos(1.5 * x + 0.2)
    np.testing.assert_array_equal(mo.Cosine(0.3, 1.5, 0.2).values(grid, model), cosine)
    total = mo.System(grid, model, potential=mo.Barrier(2.0, 1.1, 3.3) + mo.Harmonic(0.7, 0.4))
    np.testing.assert_array_equal(total.static_potential(), np.zeros(300) + barrier + harmonic)
    np.testing.assert_array_equal(mo.System(grid).static_potential(), np.zeros(300))
    np.testing.assert_array_equal(total.kinetic_table(), 0.9**2 * np.square(grid.k) / (2.0 * 1.3))


def test_harmonic_per_axis_and_isotropic():
    # V = (1/2) sum_a m_a w_a**2 (x_a - c_a)**2, written out at every point.
    x, y = np.meshgrid(*BOX.axes, indexing="ij")
    model = mo.Continuum(mass=1.7)
    well = mo.Harmonic((0.5, 1.5), center=(1.0, -2.0))
    expected = 0.5 * 1.7 * (0.5**2 * (x - 1.0) ** 2 + 1.5**2 * (y + 2.0) ** 2)
    np.testing.assert_allclose(well.values(BOX, model), expected, rtol=1e-14)
    isotropic = 0.5 * 1.7 * 0.8**2 * ((x - 0.5) ** 2 + (y - 0.5) ** 2)
    np.testing.assert_allclose(mo.Harmonic(0.8, 0.5).values(BOX, model), isotropic, rtol=1e-14)
    # On the lattice each axis has its band-bottom mass hbar**2 / (2 J dx_a**2).
    lattice = mo.Lattice(hopping=2.0)
    mass = [1.0 / (2 * 2.0 * dx**2) for dx in BOX.dx]
    expected = 0.5 * (mass[0] * 0.5**2 * (x - 1.0) ** 2 + mass[1] * 1.5**2 * (y + 2.0) ** 2)
    np.testing.assert_allclose(well.values(BOX, lattice), expected, rtol=1e-14)


def test_barrier_is_a_slab_across_axis_0_and_cosine_a_wave_along_it():
    model = mo.Continuum()
    line = mo.Grid(BOX.points[0], BOX.length[0], BOX.center[0])
    barrier = mo.Barrier(1.5, -2.05, 3.3)
    slab = barrier.values(CUBE, model)
    assert slab.shape == CUBE.shape
    profile = barrier.values(mo.Grid(CUBE.points[0], CUBE.length[0], CUBE.center[0]), model)
    np.testing.assert_array_equal(slab, np.broadcast_to(profile[:, None, None], CUBE.shape))
    # Its area along axis 0 is exact (cells covered in part), at every transverse position.
    np.testing.assert_allclose(slab.sum(axis=0) * CUBE.dx[0], 1.5 * 5.35, rtol=1e-13)
    wave = mo.Cosine(0.4, 2 * np.pi / 10.0, 0.3).values(BOX, model)
    expected = 0.4 * np.cos(2 * np.pi / 10.0 * BOX.axes[0] + 0.3)
    np.testing.assert_array_equal(wave, np.broadcast_to(expected[:, None], BOX.shape))
    np.testing.assert_array_equal(mo.Cosine(0.4, 2 * np.pi / 10.0, 0.3).values(line, model), expected)


def test_static_potential_has_the_grid_shape():
    table = np.arange(math.prod(BOX.shape), dtype=float).reshape(BOX.shape)
    system = mo.System(BOX, potential=mo.Tabulated(table) + mo.Harmonic(1.0) + mo.Barrier(1.0, 0.0, 2.0))
    total = system.static_potential()
    assert total.shape == BOX.shape
    model = system.model
    parts = table + mo.Harmonic(1.0).values(BOX, model) + mo.Barrier(1.0, 0.0, 2.0).values(BOX, model)
    np.testing.assert_allclose(total, parts, rtol=1e-15)
    for grid in (BOX, CUBE):
        free = mo.System(grid)
        np.testing.assert_array_equal(free.static_potential(), np.zeros(grid.shape))
        np.testing.assert_array_equal(free.absorption(), np.zeros(grid.size))  # flat, for the core


def test_a_packet_list_of_box_packets_works_on_the_box():
    first = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=1.0)
    second = mo.Wavefunction(first.values(BOX) * 2.0)
    packets = mo.PacketList([first, second])
    packets.validate(BOX)
    np.testing.assert_allclose(packets.packet(0, 1).values(BOX), first.values(BOX), rtol=0, atol=1e-15)


P, T = InvalidParameterError, InvalidTypeError
PACKET = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(1.0, 0.0), width=1.0)


@pytest.mark.parametrize(
    ("call", "kind", "words"),
    [
        # Packets: tuple lengths, per axis.
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (1.0, 0.0, 0.0), 1.0),
            P,
            "packet wavenumber has 3 entries but the packet center has 2: give 2 (one per axis x, y)",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), 1.0, 1.0),
            P,
            "packet wavenumber 1.0 is one number but the packet has 2 axes: give 2 entries (x, y)",
        ),
        (
            lambda: mo.GaussianPacket(0.0, (1.0, 0.0), 1.0),
            P,
            "packet wavenumber (1.0, 0.0) has 2 entries but the center 0.0 is one number",
        ),
        (
            lambda: mo.GaussianPacket(0.0, 1.0, (1.0, 2.0)),
            P,
            "packet width (1.0, 2.0) has 2 entries but the packet center 0.0 is one number",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (1.0, 0.0), (1.0, 1.0, 1.0)),
            P,
            "packet width has 3 entries but the packet center has 2",
        ),
        (
            lambda: mo.GaussianPacket((0.0,) * 4, (1.0,) * 4, 1.0),
            P,
            "has 4 entries; a packet has 1, 2 or 3 axes",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (1.0, 0.0), (1.0, 0.0)),
            P,
            "packet width[1] (along y) must be > 0, got 0.0",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (1.0, 0.0), (1.0, -1.0)),
            P,
            "packet width[1] (along y) must be > 0",
        ),
        (
            lambda: mo.GaussianPacket((0.0, math.nan), (1.0, 0.0), 1.0),
            P,
            "packet center[1] (along y) must be finite",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (1.0, "1"), 1.0),
            T,
            "packet wavenumber[1] (along y) must be a real number",
        ),
        # Packets on a grid.
        (
            lambda: mo.GaussianPacket(0.0, 1.0, 1.0).validate(BOX),
            P,
            "is one number (a 1D packet) but the grid has 2 axes, shape (96, 64)",
        ),
        (
            lambda: PACKET.validate(CUBE),
            P,
            "the packet has 2 axes (center (0.0, 0.0)) but the grid has 3, shape (48, 32, 40)",
        ),
        (
            lambda: PACKET.validate(mo.Grid(64, 10.0)),
            P,
            "but the grid has 1, shape (64,): give center, wavenumber and width 1 entries each "
            "(numbers on a 1D grid)",
        ),
        (lambda: PACKET.values(CUBE), P, "the packet has 2 axes"),
        (
            lambda: mo.GaussianPacket((0.0, 12.0), (0.0, 0.0), 1.0).validate(BOX),
            P,
            "packet center[1] (along y) 12.0 lies outside the box along y [-13.0, 11.0)",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0, 0.0), (0.0, 0.0, 0.0), (1.0, 1.0, 2.5)).validate(CUBE),
            P,
            "packet width[2] (along z) 2.5 is too wide for the box of length 24.0 along z",
        ),
        (
            lambda: mo.GaussianPacket((0.0, 0.0), (0.0, 8.0), 1.0).validate(BOX),
            P,
            "packet wavenumber[1] (along y) 8.0 with spread 0.5 reaches |k| = 10.5, beyond the grid's "
            "largest wavenumber along y pi/dx = 8.378; use more points along y (at least 81)",
        ),
        # Wavefunctions.
        (
            lambda: mo.Wavefunction(np.ones((96, 32))).validate(BOX),
            P,
            "wavefunction has shape (96, 32); the grid needs (96, 64) "
            "(axis 1, along y, has 32 points, not 64)",
        ),
        (
            lambda: mo.Wavefunction(np.ones((96, 64))).validate(CUBE),
            P,
            "the grid needs (48, 32, 40) (2 axes, not 3)",
        ),
        (
            lambda: mo.Wavefunction(np.ones(96)).validate(BOX),
            P,
            "wavefunction has shape (96,); the grid needs (96, 64) (1 axes, not 2)",
        ),
        # Potentials.
        (
            lambda: mo.System(CUBE, potential=mo.Harmonic((1.0, 2.0))),
            P,
            "Harmonic frequency (1.0, 2.0) has 2 entries but the grid has 3 axes (shape (48, 32, 40)): "
            "give 3 entries or one number",
        ),
        (
            lambda: mo.System(BOX, potential=mo.Harmonic(1.0, center=(0.0, 0.0, 0.0))),
            P,
            "Harmonic center (0.0, 0.0, 0.0) has 3 entries but the grid has 2 axes",
        ),
        (
            lambda: mo.System(mo.Grid(64, 10.0), potential=mo.Harmonic((1.0, 2.0))),
            P,
            "has 2 entries but the grid has 1 axis (shape (64,)): give one number",
        ),
        (lambda: mo.Harmonic((1.0, 0.0)), P, "frequency[1] (along y) must be > 0, got 0.0"),
        (
            lambda: mo.Harmonic((1.0, 1.0, 1.0, 1.0)),
            P,
            "Harmonic frequency (1.0, 1.0, 1.0, 1.0) has 4 entries: give one number, or one per axis",
        ),
        (lambda: mo.Harmonic(1.0, center=(0.0, math.inf)), P, "center[1] (along y) must be finite"),
        (
            lambda: mo.System(BOX, potential=mo.Barrier(1.0, 20.0, 22.0)),
            P,
            "barrier [20.0, 22.0) lies outside the box along x (axis 0, across which it is a slab) "
            "[-14.0, 16.0)",
        ),
        (
            lambda: mo.System(BOX, potential=mo.Tabulated(np.zeros((96, 60)))),
            P,
            "Tabulated values have shape (96, 60); the grid needs (96, 64) "
            "(axis 1, along y, has 60 points, not 64)",
        ),
        (
            lambda: mo.System(BOX, potential=mo.Tabulated(np.zeros((90, 64)))),
            P,
            "(axis 0, along x, has 90 points, not 96)",
        ),
        (
            lambda: mo.System(CUBE, potential=mo.Tabulated(np.zeros((48, 32)))),
            P,
            "the grid needs (48, 32, 40) (2 axes, not 3)",
        ),
        (
            lambda: mo.System(BOX, potential=mo.Tabulated(np.zeros(96))),
            P,
            "Tabulated values have shape (96,); the grid needs (96, 64)",
        ),
        # What stays 1D, with the shared message.
        (
            lambda: mo.System(mo.Grid(points=(32, 32), length=(8.0, 8.0), quasimomentum=0.25)),
            P,
            "a twisted boundary",
        ),
        (lambda: mo.System(BOX, absorber=mo.Absorber(0.5)), P, "grid spacings along axis 0"),
        (
            lambda: mo.RandomPacket((0.0, 0.0), (1.0, 0.0), 1.0),
            P,
            "RandomPacket center (0.0, 0.0) has one entry per axis, but RandomPacket is 1D only for now",
        ),
        (
            lambda: mo.RandomPacket(mo.Uniform(-1.0, 1.0), 1.0, 1.0).validate(BOX),
            P,
            "RandomPacket (use a PacketList of GaussianPackets) is 1D only for now",
        ),
    ],
)
def test_bad_input_names_the_axis_and_what_would_do(call, kind, words):
    with pytest.raises(kind, match=re.escape(words)):
        call()


def test_a_narrow_box_along_one_axis_warns_naming_it():
    packet = mo.GaussianPacket(center=(0.0, 0.0), wavenumber=(0.0, 0.0), width=(1.0, 1.3))
    with pytest.warns(
        UnderResolvedWarning, match=re.escape("width[1] (along y) 1.3) still has amplitude")
    ) as caught:
        packet.validate(mo.Grid(points=(64, 64), length=(20.0, 20.0)))
    assert "a box longer than 22.1 along y keeps it whole" in str(caught[0].message)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        packet.validate(mo.Grid(points=(64, 64), length=(20.0, 23.0)))
