"""Transfer matrices: exact scattering cases, then a slow numpy oracle on the very realizations.

Chain of trust: closed forms (Griffiths; the single lattice impurity) judge the
stationary transmission; a plain numpy recursion, one cell at a time with
numpy's own trigonometric functions, judges the fast core on potentials from
``mottle.realize``; the published weak-disorder results follow in
test_localization_published.py.
"""

import math

import numpy as np
import pytest

import mottle as mo


def griffiths_barrier(energy, height, width, hbar=1.0, mass=1.0):
    """Rectangular barrier: Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33."""
    energy = np.asarray(energy, dtype=float)
    kinetic = 2.0 * mass * (height - energy + 0j) / hbar**2
    kappa_a = np.sqrt(kinetic) * width
    # sinh(i q a)^2 / (V0 - E) = sin(q a)^2 / (E - V0): one expression serves both sides.
    return np.real(1.0 / (1.0 + height**2 * np.sinh(kappa_a) ** 2 / (4.0 * energy * (height - energy))))


def aligned_barrier_system(points=1024, length=64.0, hbar=1.0, mass=1.0):
    """Barrier of height 1 on [0, 1) whose edges fall on cell boundaries x_j +- dx/2."""
    dx = length / points
    grid = mo.Grid(points, length, center=dx / 2)
    return mo.System(grid, model=mo.Continuum(hbar, mass), potential=mo.Barrier(1.0, 0.0, 1.0))


def test_rectangular_barrier_matches_griffiths_values():
    # Griffiths (2005), problem 2.33, V0 = a = 1: the values tabulated in docs/validation.md (10 digits).
    energies = [0.25, 0.5, 1.0, 1.5, 3.0]
    published = [0.2368027308, 0.4199743416, 2.0 / 3.0, 0.8090454696, 0.9666964295]
    spectrum = mo.transmission_spectrum(aligned_barrier_system(), energies)
    np.testing.assert_allclose(spectrum.samples[0], published, rtol=0, atol=1e-8)
    # and the closed form itself to rounding, away from E = V0 where it is 0/0
    closed = griffiths_barrier(np.array([0.25, 0.5, 1.5, 3.0]), 1.0, 1.0)
    np.testing.assert_allclose(spectrum.samples[0][[0, 1, 3, 4]], closed, rtol=1e-12)
    assert spectrum.log_transmission[0].mean == pytest.approx(math.log(published[0]), abs=1e-9)


def test_barrier_transmission_follows_hbar_and_mass():
    energies = np.array([0.3, 0.8, 1.7, 2.5])
    spectrum = mo.transmission_spectrum(aligned_barrier_system(hbar=0.7, mass=1.3), energies)
    np.testing.assert_allclose(
        spectrum.samples[0], griffiths_barrier(energies, 1.0, 1.0, 0.7, 1.3), rtol=1e-11
    )
    # the lead wavenumber k = sqrt(2 m E) / hbar
    np.testing.assert_allclose(spectrum.wavenumbers, np.sqrt(2 * 1.3 * energies) / 0.7, rtol=1e-14)


def test_lattice_single_impurity():
    # One site of potential u in a clean chain (E = -2J cos k): T = 1 / (1 + (u / (2 J sin k))**2).
    grid = mo.Grid(64, 64.0)
    values = np.zeros(64)
    values[30] = 0.7
    system = mo.System(grid, model=mo.Lattice(hopping=1.3), potential=mo.Tabulated(values))
    k = np.array([0.3, 1.0, 2.5])
    energies = -2.0 * 1.3 * np.cos(k)
    spectrum = mo.transmission_spectrum(system, energies)
    np.testing.assert_allclose(
        spectrum.samples[0], 1.0 / (1.0 + (0.7 / (2.0 * 1.3 * np.sin(k))) ** 2), rtol=1e-12
    )


def test_lattice_band_follows_the_sign_of_the_potential():
    # A raised plateau V = 1.5 moves the band to (-0.5, 3.5): at E = 1 (inside both the
    # leads' band and the plateau's) the wave passes, with Fabry-Perot reflections at the
    # plateau's ends (T = 0.556 for these 199 sites); a wrong sign of V or of E in the
    # recursion would put E = 1 outside the plateau's band, where T ~ 4**-199.
    grid = mo.Grid(256, 256.0)
    values = np.where((grid.x > -100) & (grid.x < 100), 1.5, 0.0)
    system = mo.System(grid, model=mo.Lattice(), potential=mo.Tabulated(values))
    assert mo.transmission_spectrum(system, 1.0).log_samples[0, 0] > -1.0
    clean = mo.System(grid, model=mo.Lattice(), potential=mo.Tabulated(np.full(256, 1.5)))
    inside, outside = mo.lyapunov(clean, [2.5, -1.0], 1, region=(-100.0, 100.0))
    assert abs(inside.mean) < 0.01  # a propagating wave does not grow
    assert outside.mean == pytest.approx(math.acosh(2.5 / 2.0), rel=0.02)  # E - V = -2.5: psi ~ lambda**n


# --- the numpy oracle: one cell at a time, with the textbook matrices ---


def oracle_log_growth(model, potential, energy, dx):
    """ln |v_end| / |v_start| as the core defines it (transfer.rs), with renormalization each cell."""
    log = 0.0
    if isinstance(model, mo.Lattice):
        cosine = -energy / (2.0 * model.hopping)
        psi, previous = 1.0, 0.0
        for v in potential:
            psi, previous = (v - energy) / model.hopping * psi - previous, psi
            size = math.hypot(psi, previous)
            log += math.log(size)
            psi, previous = psi / size, previous / size
        sine = math.sqrt(1.0 - cosine**2)
        return log + math.log(math.hypot(psi - cosine * previous, sine * previous))
    kappa = math.sqrt(2.0 * model.mass * abs(energy)) / model.hbar
    psi, slope = 0.0, kappa  # psi'/kappa = 1
    for v in potential:
        q2 = 2.0 * model.mass * (energy - v) / model.hbar**2
        q = np.sqrt(q2 + 0j)
        c = np.real(np.cos(q * dx))
        s = np.real(np.sin(q * dx) / q) if q != 0 else dx
        psi, slope = c * psi + s * slope, -q2 * s * psi + c * slope
        size = math.hypot(psi, slope / kappa)
        log += math.log(size)
        psi, slope = psi / size, slope / size
    return log + math.log(math.hypot(psi, slope / kappa))


def test_core_matches_the_oracle_on_realized_potentials():
    lattice = mo.System(
        mo.Grid(3000, 3000.0), model=mo.Lattice(hopping=0.9), disorder=mo.BoxDisorder(2.5, -1400.0, 1400.0)
    )
    continuum = mo.System(
        mo.Grid(4096, 409.6, center=3.0),
        model=mo.Continuum(hbar=0.8, mass=1.4),
        disorder=mo.GaussianDisorder(0.3, 0.5, -190.0, 190.0),
    )
    for system, energies in ((lattice, [-1.1, 0.4]), (continuum, [0.15, 0.9])):
        grid = system.grid
        first = int(np.searchsorted(grid.x, system.disorder.start))
        end = int(np.searchsorted(grid.x, system.disorder.stop))
        results = mo.lyapunov(system, energies, 3, seed=5)
        for index in range(3):
            potential = mo.realize(system, 5, index)[first:end]
            for result, energy in zip(results, energies, strict=True):
                expected = oracle_log_growth(system.model, potential, energy, grid.dx) / (
                    (end - first) * grid.dx
                )
                assert result.samples[index] == pytest.approx(expected, rel=1e-10, abs=1e-14)


def test_transmission_matches_the_oracle_and_the_lyapunov_exponent():
    # A long disordered lattice: ln T of each realization against a numpy
    # transfer-matrix product of the same realized potential, and -<ln T>/2L against gamma.
    grid = mo.Grid(2400, 2400.0)
    system = mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(2.0, -1100.0, 1100.0))
    spectrum = mo.transmission_spectrum(system, [0.3], realizations=4, seed=2)
    for index in range(4):
        v = mo.realize(system, 2, index)
        k = math.acos(-0.3 / 2.0)
        # psi[n] = A e^{ikn} + B e^{-ikn} on the left: propagate (psi[n], psi[n-1]) forward from the
        # incoming plus reflected wave and read the transmitted amplitude on the right.
        matrix, log = np.eye(2), 0.0
        for value in v[1:-1]:
            matrix = np.array([[value - 0.3, -1.0], [1.0, 0.0]]) @ matrix
            size = np.abs(matrix).max()
            log += math.log(size)
            matrix /= size
        # Left lead at sites (1, 0): psi = e^{ikn} + r e^{-ikn}; right lead at (N-1, N-2): t e^{ikn}.
        left = np.array([[np.exp(1j * k), np.exp(-1j * k)], [1.0, 1.0]])
        n = grid.points - 1
        right = np.array(
            [[np.exp(1j * k * n), np.exp(-1j * k * n)], [np.exp(1j * k * (n - 1)), np.exp(-1j * k * (n - 1))]]
        )
        # (t, 0) = m (1, r) with m = right^-1 M left; det m = det left / det right = 1 (det M = 1), so
        # t = det m / m[1, 1] = 1 / m[1, 1] without the cancellation of m00 - m01 m10 / m11.
        m = np.linalg.solve(right, matrix @ left)
        expected = -2.0 * (math.log(abs(m[1, 1])) + log)
        assert spectrum.log_samples[index, 0] == pytest.approx(expected, rel=1e-9)
    assert np.all(spectrum.log_samples < -10.0)


def test_results_repeat_for_any_thread_count():
    system = mo.System(
        mo.Grid(4096, 4096.0), model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, -2000.0, 2000.0)
    )
    one = mo.lyapunov(system, [0.5, 1.5], 40, seed=9, threads=1)
    two = mo.lyapunov(system, [0.5, 1.5], 40, seed=9, threads=2)
    for a, b in zip(one, two, strict=True):
        np.testing.assert_array_equal(a.samples, b.samples)
    # realization r of a shorter run is realization r of a longer one
    np.testing.assert_array_equal(mo.lyapunov(system, 0.5, 7, seed=9).samples, one[0].samples[:7])
    spectra = [
        mo.transmission_spectrum(system, [0.2, 1.0], 20, seed=9, threads=t).log_samples for t in (1, 2)
    ]
    np.testing.assert_array_equal(spectra[0], spectra[1])


def test_lyapunov_result_and_confidence_interval():
    system = mo.System(
        mo.Grid(20000, 20000.0), model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, -9000.0, 9000.0)
    )
    result = mo.lyapunov(system, 0.5, 40)
    assert isinstance(result.stat, mo.Stat)
    assert result.stat.count == 40 and result.samples.shape == (40,)
    assert result.length == pytest.approx(18000.0)
    assert result.localization_length == pytest.approx(1.0 / np.mean(result.samples))
    low, high = result.confidence_interval(of="localization_length")
    assert low < result.localization_length < high
    # the bootstrap interval of <gamma> is about +- 1.96 stderr wide
    low, high = result.confidence_interval()
    assert (high - low) / (2 * 1.96 * result.stderr) == pytest.approx(1.0, abs=0.2)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda s: mo.lyapunov(s, float("nan"), 4), "finite"),
        (lambda s: mo.lyapunov(s, 0.5, 0), "realizations"),
        (lambda s: mo.lyapunov(s, 0.5, 4, threads=0), "threads"),
        (lambda s: mo.lyapunov(s, 0.5, 4, region=(500.0, 600.0)), "no grid point"),
        (lambda s: mo.lyapunov(s, [], 4), "non-empty"),
        (lambda s: mo.transmission_spectrum(s, 2.5), "band"),
        (lambda s: mo.born_lyapunov(s, 2.0), "band"),
        (lambda s: mo.lyapunov(s, "0.5", 4), "number"),
    ],
)
def test_bad_input_is_refused_with_a_clear_message(call, message):
    system = mo.System(mo.Grid(256, 256.0), model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, -100.0, 100.0))
    with pytest.raises((mo.InvalidParameterError, mo.InvalidTypeError), match=message):
        call(system)


def test_systems_the_stationary_problem_cannot_take_are_refused():
    grid = mo.Grid(256, 25.6)
    nonlinear = mo.System(grid, disorder=mo.WhiteNoise(0.01, -10.0, 10.0), nonlinearity=-1.0)
    with pytest.raises(mo.InvalidParameterError, match="nonlinearity"):
        mo.lyapunov(nonlinear, 0.5, 2)
    to_the_end = mo.System(grid, disorder=mo.WhiteNoise(0.01, grid.start, 10.0))
    with pytest.raises(mo.InvalidParameterError, match="lead"):
        mo.transmission_spectrum(to_the_end, 0.5)
    with pytest.raises(mo.InvalidParameterError, match="region"):
        mo.lyapunov(mo.System(grid), 0.5, 2)
    with pytest.raises(mo.InvalidParameterError, match="propagating"):
        mo.transmission_spectrum(mo.System(grid, potential=mo.Barrier(1.0, -1.0, 1.0)), -0.2)
    with pytest.raises(mo.InvalidTypeError, match="System"):
        mo.lyapunov("system", 0.5, 2)
