"""Disorder on 2D and 3D grids against its model: moments and correlations within sampling error, the
speckle's exponential law, the 2D/3D power spectra against numerical Fourier transforms, box and slab
regions, and realizations keyed by (seed, index) alone with every 1D realization unchanged."""

from __future__ import annotations

import ast
import hashlib
import pathlib

import numpy as np
import pytest
from scipy import integrate, special

import mottle as mo
from mottle import _core, _requests
from mottle.specs import disorder as disorder_module
from mottle.specs import kinds

# Anisotropic spacings, so that an isotropic model is checked in position units along each axis.
GRID_2D = mo.Grid(points=(96, 80), length=(48.0, 32.0))  # dx = (0.5, 0.4)
GRID_3D = mo.Grid(points=(32, 32, 28), length=(16.0, 12.8, 14.0))  # dx = (0.5, 0.4, 0.5)
GRIDS = {2: GRID_2D, 3: GRID_3D}
REALIZATIONS = {2: 120, 3: 60}
ELL = 1.0  # correlation length: two spacings along the coarsest axis

# Lags in grid points: along each axis and along diagonals.
LAGS = {
    2: [(0, 0), (1, 0), (0, 1), (2, 0), (0, 3), (1, 1), (2, 2), (4, 0)],
    3: [(0, 0, 0), (1, 0, 0), (0, 1, 0), (0, 0, 2), (1, 1, 0), (0, 2, 2), (1, 1, 1), (3, 0, 0)],
}


def whole(model_class, *parameters, dimension, **keywords):
    """A model over the whole box of the grid of `dimension` axes."""
    grid = GRIDS[dimension]
    return model_class(*parameters, start=grid.start, stop=grid.stop, **keywords)


def realizations(model, dimension, seed=17, count=None):
    system = mo.System(GRIDS[dimension], disorder=model)
    count = REALIZATIONS[dimension] if count is None else count
    return np.stack([mo.realize(system, seed, r) for r in range(count)])


def lagged_products(values, lag):
    """Per-realization estimates of <V(r) V(r + lag)> over the pairs inside the box (zero-mean models;
    the fields are not periodic on the grid, so no pair wraps)."""
    head = (slice(None), *(slice(0, n - k) for n, k in zip(values.shape[1:], lag, strict=True)))
    tail = (slice(None), *(slice(k, n) for n, k in zip(values.shape[1:], lag, strict=True)))
    axes = tuple(range(1, values.ndim))
    return np.mean(values[head] * values[tail], axis=axes)


def distance(lag, grid):
    return float(np.sqrt(sum((k * dx) ** 2 for k, dx in zip(lag, grid.dx, strict=True))))


def assert_within_sampling_error(estimates, expected, sigmas=5.0):
    """The mean of independent per-realization estimates lies within `sigmas` standard errors (the
    realizations draw from independent streams, so their estimates are independent)."""
    mean = np.mean(estimates)
    stderr = np.std(estimates, ddof=1) / np.sqrt(estimates.size)
    assert abs(mean - expected) < sigmas * stderr + 1e-12, (mean, expected, stderr)


def cell_volume(grid):
    return float(np.prod(grid.dx))


# --- moments and correlations (the models' definitions; docs/validation.md) -----------------------


@pytest.mark.parametrize("dimension", [2, 3])
def test_white_noise_has_variance_strength_over_cell_volume_and_no_correlation(dimension):
    # <V(r) V(r')> = strength delta(r - r'): per site variance strength / dV (textbook definition).
    grid = GRIDS[dimension]
    model = whole(mo.WhiteNoise, 0.02, dimension=dimension)
    values = realizations(model, dimension)
    assert_within_sampling_error(np.mean(values, axis=tuple(range(1, values.ndim))), 0.0)
    for lag in LAGS[dimension]:
        expected = model.strength / cell_volume(grid) if not any(lag) else 0.0
        assert expected == pytest.approx(
            float(model.correlation(distance(lag, grid), grid.dx, dimension=dimension))
        )
        assert_within_sampling_error(lagged_products(values, lag), expected)


@pytest.mark.parametrize("dimension", [2, 3])
def test_box_disorder_is_uniform_per_site(dimension):
    # The Anderson model: independent uniforms on (-W/2, W/2), variance W**2/12 (textbook).
    grid = GRIDS[dimension]
    model = whole(mo.BoxDisorder, 1.5, dimension=dimension)
    values = realizations(model, dimension)
    assert values.min() > -0.75 and values.max() < 0.75
    assert_within_sampling_error(np.mean(values, axis=tuple(range(1, values.ndim))), 0.0)
    for lag in LAGS[dimension]:
        expected = float(model.correlation(distance(lag, grid), dimension=dimension))
        assert expected == (1.5**2 / 12.0 if not any(lag) else 0.0)
        assert_within_sampling_error(lagged_products(values, lag), expected)
    # The fourth moment of a uniform law, 9/5 of the squared variance (textbook).
    assert_within_sampling_error(np.mean(values**4, axis=tuple(range(1, values.ndim))), 1.5**4 / 80.0)


@pytest.mark.parametrize("dimension", [2, 3])
def test_gaussian_disorder_correlation(dimension):
    # C(r) = rms**2 exp(-r**2 / (2 l**2)), isotropic: along axes and diagonals alike (model definition).
    grid = GRIDS[dimension]
    model = whole(mo.GaussianDisorder, 0.3, ELL, dimension=dimension)
    values = realizations(model, dimension)
    assert_within_sampling_error(np.mean(values, axis=tuple(range(1, values.ndim))), 0.0)
    for lag in LAGS[dimension]:
        expected = 0.09 * np.exp(-(distance(lag, grid) ** 2) / (2.0 * ELL**2))
        assert float(model.correlation(distance(lag, grid), dimension=dimension)) == pytest.approx(expected)
        assert_within_sampling_error(lagged_products(values, lag), expected)
    # A Gaussian field: the fourth moment is 3 rms**4 (Isserlis' theorem).
    assert_within_sampling_error(np.mean(values**4, axis=tuple(range(1, values.ndim))), 3.0 * 0.3**4)


def speckle_field_correlation(u, dimension):
    """2 J1(u)/u (disc pupil) or 3 j1(u)/u (ball pupil), from scipy.special (Goodman, Speckle Phenomena
    in Optics, 2007, sec. 4.4)."""
    u = np.maximum(np.asarray(u, dtype=float), 1e-300)
    if dimension == 2:
        return np.where(u < 1e-8, 1.0, 2.0 * special.j1(u) / u)
    return np.where(u < 1e-8, 1.0, 3.0 * special.spherical_jn(1, u) / u)


@pytest.mark.parametrize("sign", [1, -1])
@pytest.mark.parametrize("dimension", [2, 3])
def test_speckle_correlation_is_the_squared_pupil_transform(dimension, sign):
    # C(r) = V**2 [2 J1(u)/u]**2 in 2D, V**2 [3 j1(u)/u]**2 in 3D, u = r/l (Goodman 2007, sec. 4.4).
    grid = GRIDS[dimension]
    model = whole(mo.Speckle, 0.2, ELL, dimension=dimension, sign=sign)
    # Fewer speckle grains fit in the 3D box: more realizations keep the standard error near 1.5 %.
    values = realizations(model, dimension, count=4 * REALIZATIONS[dimension] if dimension == 3 else None)
    assert_within_sampling_error(np.mean(values, axis=tuple(range(1, values.ndim))), 0.0)
    for lag in LAGS[dimension]:
        r = distance(lag, grid)
        expected = 0.04 * float(speckle_field_correlation(r / ELL, dimension)) ** 2
        assert float(model.correlation(r, dimension=dimension)) == pytest.approx(
            expected, rel=1e-9, abs=1e-15
        )
        assert_within_sampling_error(lagged_products(values, lag), expected)
    # The check has the power to tell the pupil's shape: at the longest lag the 1D law (a segment pupil,
    # sinc**2) lies more than 5 standard errors away.
    estimates = lagged_products(values, LAGS[dimension][-1])
    stderr = np.std(estimates, ddof=1) / np.sqrt(estimates.size)
    segment = float(mo.Speckle(0.2, ELL, 0.0, 1.0).correlation(distance(LAGS[dimension][-1], grid)))
    assert abs(np.mean(estimates) - segment) > 5.0 * stderr


@pytest.mark.parametrize("sign", [1, -1])
@pytest.mark.parametrize("dimension", [2, 3])
def test_speckle_intensity_is_exponential(dimension, sign):
    # Fully developed speckle: P(I > t <I>) = exp(-t), so <I**2> = 2 <I>**2 (Goodman 2007, sec. 3.2).
    model = whole(mo.Speckle, 0.2, ELL, dimension=dimension, sign=sign)
    values = realizations(model, dimension, seed=23)
    intensity = sign * values / 0.2 + 1.0  # I / <I>
    assert np.all(intensity >= 0.0)
    axes = tuple(range(1, values.ndim))
    assert_within_sampling_error(np.mean(intensity**2, axis=axes), 2.0)
    for t in (1.0, 3.0):
        assert_within_sampling_error(np.mean(intensity > t, axis=axes), np.exp(-t))


# --- the 2D/3D correlation formulas and power spectra ---------------------------------------------


def test_the_bessel_function_is_scipys():
    # mottle's J1 (trapezoidal rule on its integral) against scipy.special.j1.
    u = np.concatenate([np.linspace(0.0, 5.0, 101), np.linspace(5.0, 300.0, 400)])
    np.testing.assert_allclose(disorder_module._bessel_j1(u), special.j1(u), rtol=0, atol=1e-13)
    r = np.linspace(0.0, 40.0, 301)
    model = mo.Speckle(0.5, 1.3, -1.0, 1.0)
    for dimension in (2, 3):
        expected = 0.25 * speckle_field_correlation(r / 1.3, dimension) ** 2
        np.testing.assert_allclose(model.correlation(r, dimension=dimension), expected, rtol=0, atol=1e-14)


def hankel(function, q, dimension, upper):
    """C~(q) = integral C(r) exp(-i q.r) d^d r for an isotropic C: 2 pi integral C J0(qr) r dr in 2D,
    4 pi integral C sin(qr)/(qr) r**2 dr in 3D (textbook; scipy.integrate.quad). The inverse transform
    is the same integral over q divided by (2 pi)**d."""
    if dimension == 2:
        value, _ = integrate.quad(
            lambda r: 2.0 * np.pi * function(r) * special.j0(q * r) * r, 0.0, upper, limit=4000
        )
    else:
        value, _ = integrate.quad(
            lambda r: 4.0 * np.pi * function(r) * np.sinc(q * r / np.pi) * r * r, 0.0, upper, limit=800
        )
    return value


@pytest.mark.parametrize("dimension", [1, 2, 3])
@pytest.mark.parametrize("q", [0.0, 0.4, 1.1, 1.9, 2.6])
def test_gaussian_power_spectrum_is_the_transform_of_its_correlation(dimension, q):
    model = mo.GaussianDisorder(rms=0.3, correlation_length=0.7, start=0.0, stop=1.0)
    expected = 0.09 * (2.0 * np.pi * 0.49) ** (dimension / 2.0) * np.exp(-(q**2) * 0.49 / 2.0)
    assert float(model.power_spectrum(q, dimension=dimension)) == pytest.approx(expected, rel=1e-12)
    if dimension == 1:
        return
    value = hankel(lambda r: float(model.correlation(r, dimension=dimension)), q, dimension, 20.0)
    assert float(model.power_spectrum(q, dimension=dimension)) == pytest.approx(value, rel=1e-8, abs=1e-12)


@pytest.mark.parametrize("dimension", [2, 3])
@pytest.mark.parametrize("r", [0.0, 0.5, 1.0, 2.3, 4.0, 7.7])
def test_speckle_correlation_is_the_inverse_transform_of_its_power_spectrum(dimension, r):
    # The spectrum (the overlap of two pupils) has compact support q < 2/l, so its inverse transform is
    # a finite integral: (2 pi)**-d times the Hankel transform over q, against the Airy/j1 formula.
    model = mo.Speckle(strength=0.3, correlation_length=0.7, start=0.0, stop=1.0)
    support = 2.0 / 0.7
    value = hankel(lambda q: float(model.power_spectrum(q, dimension=dimension)), r, dimension, support)
    value /= (2.0 * np.pi) ** dimension
    expected = 0.09 * float(speckle_field_correlation(r / 0.7, dimension)) ** 2
    assert value == pytest.approx(expected, rel=1e-7, abs=1e-9)
    assert float(model.power_spectrum(support * 1.0001, dimension=dimension)) == 0.0


@pytest.mark.parametrize("dimension", [2, 3])
@pytest.mark.parametrize("q", [0.4, 1.1, 1.9, 2.6, 3.2])
def test_speckle_power_spectrum_is_the_transform_of_its_correlation(dimension, q):
    # The forward transform of the Airy/j1 formula (scipy.special), by scipy.integrate.quad: in 3D
    # (4 pi / q) integral C(r) r sin(qr) dr to infinity with the Fourier weight (QUADPACK's QAWF); in 2D
    # 2 pi integral C(r) J0(qr) r dr cut at r = 400, where the tail (C ~ r**-3) is below 1e-5.
    model = mo.Speckle(strength=0.3, correlation_length=0.7, start=0.0, stop=1.0)

    def correlation(r):
        return 0.09 * float(speckle_field_correlation(r / 0.7, dimension)) ** 2

    if dimension == 3:
        value, _ = integrate.quad(lambda r: correlation(r) * r, 0.0, np.inf, weight="sin", wvar=q, limlst=200)
        value *= 4.0 * np.pi / q
        tolerance = 1e-7
    else:
        value = hankel(correlation, q, 2, 400.0)
        tolerance = 1e-5
    assert float(model.power_spectrum(q, dimension=dimension)) == pytest.approx(value, abs=tolerance)


@pytest.mark.parametrize("dimension", [2, 3])
def test_speckle_power_spectrum_at_zero_is_the_integral_of_its_correlation(dimension):
    # C~(0) = integral C(r) d^d r: 4 pi l**2 V**2 in 2D, 6 pi**2 l**3 V**2 in 3D, by quadrature of the
    # Airy/j1 formula (scipy.integrate.quad; the tails decay as r**-3 and r**-4).
    model = mo.Speckle(strength=0.3, correlation_length=0.7, start=0.0, stop=1.0)
    value = hankel(
        lambda r: 0.09 * float(speckle_field_correlation(r / 0.7, dimension)) ** 2, 0.0, dimension, 3000.0
    )
    exact = 0.09 * (4.0 * np.pi * 0.49 if dimension == 2 else 6.0 * np.pi**2 * 0.343)
    assert float(model.power_spectrum(0.0, dimension=dimension)) == pytest.approx(exact, rel=1e-12)
    # The quadrature stops at r = 3000: the 2D tail beyond is about 8 l**3 V**2 / 3000
    # (C ~ 4 l**3 V**2 / (pi r**3) on average), 1.5e-4 of the total.
    assert value == pytest.approx(exact, rel=2e-3)


def test_white_and_box_power_spectra_in_d_dimensions():
    # White noise: C~ = strength; per-site variance s**2 on cells of volume dV: C~ = s**2 dV
    # (common practice).
    white = mo.WhiteNoise(0.02, 0.0, 1.0)
    box = mo.BoxDisorder(1.5, 0.0, 1.0)
    for dimension in (1, 2, 3):
        assert float(white.power_spectrum(0.7, dimension=dimension)) == 0.02
    assert float(box.power_spectrum(0.7, (0.5, 0.4), dimension=2)) == pytest.approx(1.5**2 / 12 * 0.2)
    assert float(box.power_spectrum(0.7, 0.5, dimension=3)) == pytest.approx(1.5**2 / 12 * 0.125)
    assert float(white.correlation(0.0, (0.5, 0.4, 0.5), dimension=3)) == pytest.approx(0.02 / 0.1)
    with pytest.raises(mo.InvalidParameterError, match="dx has 2 entries but dimension=3"):
        box.power_spectrum(0.7, (0.5, 0.4), dimension=3)
    with pytest.raises(mo.InvalidParameterError, match="dimension must be 1, 2 or 3"):
        box.power_spectrum(0.7, 0.5, dimension=4)
    with pytest.raises(mo.InvalidParameterError, match="pass the grid spacing dx"):
        box.power_spectrum(0.7, dimension=2)


# --- regions -----------------------------------------------------------------------------------------


def inside(grid, start, stop):
    masks = np.meshgrid(
        *[(axis >= lo) & (axis < hi) for axis, lo, hi in zip(grid.axes, start, stop, strict=True)],
        indexing="ij",
    )
    return np.logical_and.reduce(masks)


@pytest.mark.parametrize(
    "model",
    [
        mo.WhiteNoise(0.02, -5.0, 7.5),
        mo.BoxDisorder(1.0, -5.0, 7.5),
        mo.GaussianDisorder(0.3, ELL, -5.0, 7.5),
        mo.Speckle(0.2, ELL, -5.0, 7.5),
    ],
)
@pytest.mark.parametrize("dimension", [2, 3])
def test_numbers_make_a_slab_along_x_across_the_box(model, dimension):
    grid = GRIDS[dimension]
    values = mo.realize(mo.System(grid, disorder=model), 3, 1)
    assert values.shape == grid.shape
    slab = inside(grid, (-5.0, *grid.start[1:]), (7.5, *grid.stop[1:]))
    assert np.all(values[~slab] == 0.0)
    assert np.all(values[slab] != 0.0)


@pytest.mark.parametrize(
    "model_class, parameters",
    [
        (mo.WhiteNoise, (0.02,)),
        (mo.BoxDisorder, (1.0,)),
        (mo.GaussianDisorder, (0.3, ELL)),
        (mo.Speckle, (0.2, ELL)),
    ],
)
def test_tuples_make_a_box(model_class, parameters):
    for grid, start, stop in [
        (GRID_2D, (-3.0, 2.0), (10.0, 9.0)),
        (GRID_3D, (-2.0, -6.4, 0.0), (4.0, 1.0, 3.5)),
    ]:
        model = model_class(*parameters, start=start, stop=stop)
        values = mo.realize(mo.System(grid, disorder=model), 4, 2)
        box = inside(grid, start, stop)
        assert np.all(values[~box] == 0.0)
        assert np.all(values[box] != 0.0)


def test_cauchy_disorder_is_per_site_on_a_lattice_box():
    # Lorentzian quartiles at -width and +width (the Cauchy law; as tests/test_cauchy.py in 1D).
    grid = mo.Grid(points=(64, 64), length=(64.0, 64.0))
    model = mo.CauchyDisorder(0.7, start=(-32.0, -20.0), stop=(32.0, 20.0))
    values = mo.realize(mo.System(grid, model=mo.Lattice(), disorder=model), 1, 0)
    box = inside(grid, (-32.0, -20.0), (32.0, 20.0))
    assert np.all(values[~box] == 0.0)
    fraction = np.mean(values[box] < -0.7), np.mean(values[box] < 0.7)
    stderr = np.sqrt(3.0 / 16.0 / box.sum())
    assert abs(fraction[0] - 0.25) < 5 * stderr and abs(fraction[1] - 0.75) < 5 * stderr
    with pytest.raises(mo.InvalidParameterError, match="lattice sites only"):
        mo.System(grid, disorder=model)


@pytest.mark.parametrize(
    ("grid", "build", "error", "message"),
    [
        (
            GRID_2D,
            lambda: mo.BoxDisorder(1.0, (-3.0, -30.0), (3.0, 3.0)),
            mo.InvalidParameterError,
            r"region \[-30.0, 3.0\) along y must lie inside the box \[-16.0, 16.0\) along y",
        ),
        (
            GRID_3D,
            lambda: mo.WhiteNoise(0.1, (-3.0, 0.0, 0.0), (3.0, 1.0, 9.0)),
            mo.InvalidParameterError,
            "along z must lie inside the box",
        ),
        (
            GRID_2D,
            lambda: mo.BoxDisorder(1.0, -30.0, 3.0),
            mo.InvalidParameterError,
            "along x must lie inside the box",
        ),
        (
            GRID_2D,
            lambda: mo.Speckle(0.1, 1.0, (0.0, 0.0, 0.0), (1.0, 1.0, 1.0)),
            mo.InvalidParameterError,
            "has 3 entries but the grid has 2 axes",
        ),
        (
            GRID_3D,
            lambda: mo.Speckle(0.1, 1.0, (0.0, 0.0), (1.0, 1.0)),
            mo.InvalidParameterError,
            "has 2 entries but the grid has 3 axes",
        ),
        (
            GRID_3D,
            lambda: mo.BoxDisorder(1.0, (0.0, 0.05, 0.0), (1.0, 0.1, 1.0)),
            mo.InvalidParameterError,
            "along y holds no grid point",
        ),
        (
            GRID_2D,
            lambda: mo.GaussianDisorder(0.1, 0.7, -1.0, 1.0),
            mo.InvalidParameterError,
            "not resolved by the grid spacing 0.5 along x",
        ),
        (
            mo.Grid(256, 64.0),
            lambda: mo.BoxDisorder(1.0, (0.0, 0.0), (1.0, 1.0)),
            mo.InvalidParameterError,
            "on a 1D grid start and stop are numbers",
        ),
    ],
)
def test_regions_are_checked_against_the_grid(grid, build, error, message):
    with pytest.raises(error, match=message):
        mo.System(grid, disorder=build())


@pytest.mark.parametrize(
    ("build", "error", "message"),
    [
        (lambda: mo.BoxDisorder(1.0, (0.0, 0.0), 1.0), mo.InvalidTypeError, "two numbers"),
        (
            lambda: mo.BoxDisorder(1.0, (0.0, 0.0), (1.0, 1.0, 1.0)),
            mo.InvalidParameterError,
            "the same number",
        ),
        (
            lambda: mo.BoxDisorder(1.0, (0.0, 2.0), (1.0, 1.0)),
            mo.InvalidParameterError,
            "start < stop along y",
        ),
        (lambda: mo.BoxDisorder(1.0, (0.0, "a"), (1.0, 1.0)), mo.InvalidTypeError, r"start\[1\] \(along y\)"),
        (lambda: mo.BoxDisorder(1.0, (0.0,), (1.0,)), mo.InvalidParameterError, "2 or 3"),
    ],
)
def test_bad_box_regions(build, error, message):
    with pytest.raises(error, match=message):
        build()


def test_a_sum_spans_its_terms_and_keeps_its_first_term():
    a = mo.BoxDisorder(1.0, (-3.0, 2.0), (10.0, 9.0))
    b = mo.GaussianDisorder(0.3, ELL, -5.0, 7.5)
    # The slab term spans the box along y: unbounded there until a grid resolves it.
    assert (a + b).start == (-5.0, -np.inf) and (a + b).stop == (10.0, np.inf)
    assert (a + b).region(GRID_2D) == ((-5.0, -16.0), (10.0, 16.0))
    both = mo.realize(mo.System(GRID_2D, disorder=a + b), 3, 7)
    first = mo.realize(mo.System(GRID_2D, disorder=a), 3, 7)
    # The first term draws from the same stream alone or in a sum (purpose = its position).
    only_a = inside(GRID_2D, (7.5, 2.0), (10.0, 9.0))
    np.testing.assert_array_equal(both[only_a], first[only_a])
    assert not np.array_equal(both, first)


def test_the_quasi1d_transfer_matrices_refuse_a_box_region():
    grid = mo.Grid(points=(64, 16), length=(64.0, 16.0))
    system = mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, (-8.0, -8.0), (8.0, 8.0)))
    with pytest.raises(mo.InvalidParameterError, match="is a box; use numbers start, stop"):
        mo.lyapunov(system, 0.0, 1, width=4)


# --- realizations keyed by (seed, index) -------------------------------------------------------------


def every_model(dimension):
    grid = GRIDS[dimension]
    return (
        mo.WhiteNoise(0.02, grid.start, grid.stop)
        + mo.BoxDisorder(1.0, -4.0, 4.0)
        + mo.GaussianDisorder(0.3, ELL, grid.start, grid.stop)
        + mo.Speckle(0.2, ELL, -6.0, 6.0, sign=-1)
    )


@pytest.mark.parametrize("dimension", [2, 3])
def test_a_realization_depends_on_seed_and_index_alone(dimension):
    # mo.realize builds a fresh plan per call; the core's tests check a reused realizer and other
    # threads (rust/src/disorder/mesh.rs, realizations_depend_on_seed_and_index_alone).
    system = mo.System(GRIDS[dimension], disorder=every_model(dimension))
    target = mo.realize(system, 9, 5)
    for index in range(5):
        mo.realize(system, 9, index)
    assert np.array_equal(mo.realize(system, 9, 5), target)
    assert not np.array_equal(mo.realize(system, 9, 6), target)
    assert not np.array_equal(mo.realize(system, 10, 5), target)


def test_a_one_axis_mesh_gives_the_line_numbers():
    grid = mo.Grid(512, 128.0)
    model = mo.GaussianDisorder(0.7, 1.3, -60.0, 60.0) + mo.Speckle(0.4, 1.1, -30.0, 20.0, sign=-1)
    line = mo.realize(mo.System(grid, disorder=model), 7, 3)
    terms = _requests.box_disorder_terms(model, grid)
    mesh = _core.realize_mesh(_requests.mesh(grid), terms, np.zeros(512), 7, 3)
    assert np.array_equal(mesh, line)


# sha256 (first 16 hex digits) of mo.realize(...).tobytes() on 1D systems, computed on main at bb5511e
# before the N-d disorder was added: the 1D code path must keep every number.
LINE = mo.Grid(points=512, length=128.0)
LINE_MODELS = {
    "white": mo.WhiteNoise(0.3, -40.0, 40.0),
    "box": mo.BoxDisorder(1.5, -50.0, 30.0),
    "gauss": mo.GaussianDisorder(0.7, 1.3, -60.0, 60.0),
    "speckle": mo.Speckle(0.4, 1.1, -64.0, 64.0),
    "speckle-": mo.Speckle(0.4, 1.1, -30.0, 20.0, sign=-1),
    "sum": mo.GaussianDisorder(0.7, 1.3, -60.0, 60.0) + mo.BoxDisorder(1.5, -50.0, 30.0),
}
LINE_HASHES = {
    ("white", 0, 0): "0470d01f1957e99d",
    ("white", 7, 3): "698f5ec727d9ffa0",
    ("white", 123, 99): "9509873b1f8d0573",
    ("box", 0, 0): "5681add1a8107b93",
    ("box", 7, 3): "4754f96e8119859e",
    ("box", 123, 99): "32c40d289388b6b8",
    ("gauss", 0, 0): "86f738864b4bbe47",
    ("gauss", 7, 3): "2f6dd3de911d318d",
    ("gauss", 123, 99): "fc59a884466096cb",
    ("speckle", 0, 0): "b6cbe54f9d3d6c09",
    ("speckle", 7, 3): "f664c613fb73a713",
    ("speckle", 123, 99): "1be9548a25e94ede",
    ("speckle-", 0, 0): "ad2f1723cac18c9a",
    ("speckle-", 7, 3): "5667bfe54f9001d8",
    ("speckle-", 123, 99): "e9c0c38b4ba92994",
    ("sum", 0, 0): "7edb7cade2773743",
    ("sum", 7, 3): "450a2649bea4ff3c",
    ("sum", 123, 99): "3da94423b7fd9545",
    ("cauchy", 0, 0): "6fe8f18d5c4f78cf",
    ("cauchy", 7, 3): "4ea284bece1575e3",
}


def test_1d_realizations_are_unchanged():
    for (name, seed, index), expected in LINE_HASHES.items():
        if name == "cauchy":
            grid = mo.Grid(points=256, length=256.0)
            system = mo.System(grid, model=mo.Lattice(), disorder=mo.CauchyDisorder(0.5, -100.0, 100.0))
        else:
            system = mo.System(LINE, disorder=LINE_MODELS[name])
        values = mo.realize(system, seed, index)
        assert hashlib.sha256(values.tobytes()).hexdigest()[:16] == expected, (name, seed, index)


# --- the request -------------------------------------------------------------------------------------


def test_the_stub_describes_every_box_term_kind():
    # _core.pyi's _BoxTerm union: each registered disorder kind with its declared fields.
    tree = ast.parse(pathlib.Path(_core.__file__).with_name("_core.pyi").read_text())
    classes = {node.name: node for node in tree.body if isinstance(node, ast.ClassDef)}
    union = next(
        node.value
        for node in tree.body
        if isinstance(node, ast.Assign) and any(getattr(t, "id", "") == "_BoxTerm" for t in node.targets)
    )
    described = {}
    for name in (n.id for n in ast.walk(union) if isinstance(n, ast.Name)):
        fields = {
            item.target.id: ast.unparse(item.annotation)
            for item in classes[name].body
            if isinstance(item, ast.AnnAssign)
        }
        kind = ast.literal_eval(fields.pop("kind").removeprefix("Literal[").removesuffix("]"))
        assert fields["start"] == fields["stop"] == "list[float]"
        described[kind] = set(fields)
    declared = {
        kind: {f.attribute for f in kinds.spec_fields(cls)} for kind, cls in kinds.kinds("disorder").items()
    }
    assert described == declared


def test_a_bad_mesh_request_names_its_field():
    terms = _requests.box_disorder_terms(mo.BoxDisorder(1.0, -4.0, 4.0), GRID_2D)
    misspelt = r'grid mesh has no field "spacings" \(did you mean "spacing"\?\)'
    with pytest.raises(mo.InvalidTypeError, match=misspelt):
        _core.realize_mesh(
            {"shape": [96, 80], "spacings": [0.5, 0.4], "start": [0.0, 0.0]}, terms, np.zeros((96, 80)), 0, 0
        )
    with pytest.raises(mo.InvalidParameterError, match=r"base potential has shape \[4, 4\]"):
        _core.realize_mesh(_requests.mesh(GRID_2D), terms, np.zeros((4, 4)), 0, 0)
    with pytest.raises(mo.InvalidParameterError, match="needs 2 starts and stops"):
        _core.realize_mesh(_requests.mesh(GRID_2D), [{**terms[0], "start": [0.0]}], np.zeros((96, 80)), 0, 0)


def test_realize_on_a_box_without_disorder_is_the_static_potential():
    # What tests/test_grid_nd.py listed as refused before: realize and the disorder models on a box.
    assert np.array_equal(mo.realize(mo.System(GRID_2D)), np.zeros(GRID_2D.shape))
    assert mo.realize(mo.System(GRID_3D, disorder=mo.WhiteNoise(0.1, -5.0, 5.0))).shape == GRID_3D.shape


def test_a_padded_box_that_cannot_fit_is_refused_before_drawing(monkeypatch):
    # The sizes the core's FFTs use (rust/src/disorder.rs::tests::smooth_sizes), then the refusal on a
    # machine made to look small: the 3D speckle's periodic box is 14 MiB.
    assert [disorder_module._smooth_size(n) for n in (1000, 1001, 4097, 243, 1)] == [1000, 1024, 4320, 250, 2]
    monkeypatch.setattr(disorder_module, "_memory_bytes", lambda: 1 << 20)
    with pytest.raises(
        mo.InvalidParameterError, match=r"periodic box of \(96, 108, 90\) points, about 14 MiB"
    ):
        mo.System(GRID_3D, disorder=whole(mo.Speckle, 0.2, ELL, dimension=3))
    mo.System(GRID_3D, disorder=whole(mo.BoxDisorder, 1.0, dimension=3))  # per-site models need no box
