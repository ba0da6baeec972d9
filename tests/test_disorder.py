"""Generated disorder against its model: values, variance and correlation within sampling error."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

import mottle as mo

GRID = mo.Grid(points=8192, length=2048.0)  # dx = 0.25
REALIZATIONS = 24


def region_values(model, seed=11, realizations=REALIZATIONS):
    system = mo.System(GRID, disorder=model)
    inside = (GRID.x >= model.start) & (GRID.x < model.stop)
    return np.stack([mo.realize(system, seed, r)[inside] for r in range(realizations)])


def lagged_covariance(values, lag_points):
    """Per-realization estimates of <V(x) V(x + lag)> (the models have zero mean)."""
    if lag_points == 0:
        return np.mean(values * values, axis=1)
    return np.mean(values[:, :-lag_points] * values[:, lag_points:], axis=1)


def assert_within_sampling_error(estimates, expected, sigmas=5.0):
    """The mean of independent per-realization estimates lies within `sigmas` standard errors."""
    mean = np.mean(estimates)
    stderr = np.std(estimates, ddof=1) / np.sqrt(estimates.size)
    assert abs(mean - expected) < sigmas * stderr + 1e-12, (mean, expected, stderr)


def test_realize_is_deterministic_distinct_and_confined():
    model = mo.GaussianDisorder(rms=0.3, correlation_length=1.0, start=-100.0, stop=100.0)
    system = mo.System(GRID, potential=mo.Barrier(2.0, 200.0, 210.0), disorder=model)
    first = mo.realize(system, seed=5, index=3)
    assert np.array_equal(first, mo.realize(system, seed=5, index=3))
    assert not np.array_equal(first, mo.realize(system, seed=5, index=4))
    assert not np.array_equal(first, mo.realize(system, seed=6, index=3))
    outside = (GRID.x < -100.0) | (GRID.x >= 100.0)
    np.testing.assert_array_equal(first[outside], system.static_potential()[outside])
    assert np.all(first[~outside] != 0.0)


def test_white_noise_has_variance_strength_over_dx_and_no_correlation():
    model = mo.WhiteNoise(strength=0.02, start=-500.0, stop=500.0)
    values = region_values(model)
    assert_within_sampling_error(lagged_covariance(values, 0), model.strength / GRID.dx)
    assert_within_sampling_error(lagged_covariance(values, 1), 0.0)
    # Gaussian values: Kolmogorov-Smirnov against the normal law (scipy.stats.kstest).
    sample = values[0] / np.sqrt(model.strength / GRID.dx)
    assert stats.kstest(sample, "norm").pvalue > 1e-3


def test_box_disorder_is_uniform_on_its_interval():
    model = mo.BoxDisorder(width=1.5, start=-500.0, stop=500.0)
    values = region_values(model)
    assert values.min() >= -0.75 and values.max() <= 0.75
    assert_within_sampling_error(lagged_covariance(values, 0), 1.5**2 / 12.0)
    assert_within_sampling_error(lagged_covariance(values, 1), 0.0)
    assert stats.kstest(values[0], "uniform", args=(-0.75, 1.5)).pvalue > 1e-3


@pytest.mark.parametrize("lag", [0.0, 0.5, 1.0, 2.0, 3.0])
def test_gaussian_disorder_correlation(lag):
    model = mo.GaussianDisorder(rms=0.2, correlation_length=1.0, start=-900.0, stop=900.0)
    values = region_values(model)
    expected = float(model.correlation(lag))
    assert_within_sampling_error(lagged_covariance(values, round(lag / GRID.dx)), expected)


def test_gaussian_disorder_values_are_gaussian():
    model = mo.GaussianDisorder(rms=0.2, correlation_length=1.0, start=-900.0, stop=900.0)
    values = region_values(model, realizations=4)
    # Correlated samples: thin to one value per 8 correlation lengths before the KS test.
    thinned = values[:, :: round(8.0 / GRID.dx)].ravel() / 0.2
    assert stats.kstest(thinned, "norm").pvalue > 1e-3


@pytest.mark.parametrize("lag", [0.0, 0.5, 1.0, 2.0, np.pi])
def test_speckle_correlation_is_sinc_squared(lag):
    model = mo.Speckle(strength=0.1, correlation_length=1.0, start=-900.0, stop=900.0)
    values = region_values(model)
    expected = float(model.correlation(lag))
    assert_within_sampling_error(lagged_covariance(values, round(lag / GRID.dx)), expected)


@pytest.mark.parametrize("sign", [1, -1])
def test_speckle_intensity_is_exponential(sign):
    # Fully developed speckle: P(I) = exp(-I/<I>)/<I> (Goodman, Speckle Phenomena in Optics, 2007, ch. 3).
    model = mo.Speckle(strength=0.1, correlation_length=1.0, start=-900.0, stop=900.0, sign=sign)
    values = region_values(model, realizations=6)
    intensity = sign * values / 0.1 + 1.0  # I / <I>
    assert np.all(intensity >= 0.0)
    thinned = intensity[:, :: round(6.0 / GRID.dx)].ravel()
    assert stats.kstest(thinned, "expon").pvalue > 1e-3
    assert_within_sampling_error(np.mean(values, axis=1), 0.0)


@pytest.mark.parametrize(
    "model",
    [
        mo.GaussianDisorder(rms=0.3, correlation_length=0.7, start=0.0, stop=1.0),
        mo.Speckle(strength=0.3, correlation_length=0.7, start=0.0, stop=1.0),
    ],
)
@pytest.mark.parametrize("q", [0.0, 0.5, 1.3, 2.5])
def test_power_spectrum_is_the_fourier_transform_of_the_correlation(model, q):
    # C~(q) = integral C(x) cos(qx) dx for an even C (numerical quadrature, scipy.integrate.quad).
    limit = 400.0 * model.correlation_length
    value, _ = integrate.quad(lambda x: 2.0 * model.correlation(x) * np.cos(q * x), 0.0, limit, limit=4000)
    assert float(model.power_spectrum(q)) == pytest.approx(value, abs=2e-3 * model.variance())


def test_sums_of_models_add_independent_terms():
    a = mo.BoxDisorder(width=1.0, start=-100.0, stop=0.0)
    b = mo.GaussianDisorder(rms=0.1, correlation_length=1.0, start=-50.0, stop=50.0)
    both = mo.realize(mo.System(GRID, disorder=a + b), 3, 7)
    first = mo.realize(mo.System(GRID, disorder=a), 3, 7)
    # The second term of a sum draws from its own stream, so it is not b alone at the same seed,
    # but the first term is unchanged by adding another.
    inside_a_only = (GRID.x >= -100.0) & (GRID.x < -50.0)
    np.testing.assert_array_equal(both[inside_a_only], first[inside_a_only])
    assert float((a + b).power_spectrum(0.0, GRID.dx)) == pytest.approx(
        float(a.power_spectrum(0.0, GRID.dx) + b.power_spectrum(0.0))
    )


@pytest.mark.parametrize(
    ("build", "message"),
    [
        (lambda: mo.GaussianDisorder(0.1, 0.3, 0.0, 10.0), "correlation_length 0.3 is not resolved"),
        (lambda: mo.Speckle(0.1, 0.3, 0.0, 10.0), "correlation_length 0.3 is not resolved"),
        (lambda: mo.BoxDisorder(1.0, -2000.0, 0.0), "must lie inside the box"),
        (lambda: mo.WhiteNoise(0.1, 0.0, 5000.0), "must lie inside the box"),
        (lambda: mo.BoxDisorder(1.0, 0.05, 0.2), "holds no grid point"),
    ],
)
def test_unresolved_or_outside_disorder_is_refused(build, message):
    with pytest.raises(mo.InvalidParameterError, match=message):
        mo.System(GRID, disorder=build())


@pytest.mark.parametrize(
    ("build", "message"),
    [
        (lambda: mo.BoxDisorder(-1.0, 0.0, 1.0), "width must be > 0"),
        (lambda: mo.WhiteNoise(float("nan"), 0.0, 1.0), "must be finite"),
        (lambda: mo.GaussianDisorder(0.1, 1.0, 5.0, 1.0), "start < stop"),
        (lambda: mo.Speckle(0.1, 1.0, 0.0, 10.0, sign=2), "sign must be one of"),
        (lambda: mo.Speckle("strong", 1.0, 0.0, 10.0), "must be a real number"),
    ],
)
def test_bad_disorder_parameters(build, message):
    with pytest.raises((ValueError, TypeError), match=message):
        build()
