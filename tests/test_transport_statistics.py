"""Localization lengths from transport data: <ln T>(L), log-density tails, transmission statistics.

Every xi is the amplitude length: |psi| ~ exp(-|x|/xi), <ln T> ~ -2 L/xi.
"""

import math
import warnings

import numpy as np
import pytest

import mottle as mo


def anderson_slab(width, sites, margin=8):
    """A chain of ``sites`` disordered sites between clean leads."""
    grid = mo.Grid(sites + 2 * margin, float(sites + 2 * margin))
    return mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(width, -sites / 2, sites / 2))


def long_chain(width, points=2**18):
    grid = mo.Grid(points, float(points))
    return mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(width, grid.start + 1, grid.stop - 1))


def test_fit_recovers_an_exact_line_and_matches_numpy_weighted_least_squares():
    lengths = np.array([100.0, 200.0, 350.0, 500.0])
    errors = np.array([0.1, 0.2, 0.25, 0.4])
    means = 0.7 - 2.0 * lengths / 37.0
    stats = [mo.Stat(m, e, e * 10, 100, math.nan, math.nan) for m, e in zip(means, errors, strict=True)]
    fit = mo.fit_log_transmission(lengths, stats)
    assert fit.localization_length == pytest.approx(37.0, rel=1e-12)
    assert fit.intercept == pytest.approx(0.7, rel=1e-12)
    assert fit.chi_squared == pytest.approx(0.0, abs=1e-18)
    # the covariance with the error bars taken as exact, as numpy's weighted polyfit gives it
    noisy = means + np.array([0.05, -0.1, 0.2, -0.3])
    fit = mo.fit_log_transmission(
        lengths, [mo.Stat(m, e, 0, 9, 0, 0) for m, e in zip(noisy, errors, strict=True)]
    )
    coefficients, covariance = np.polyfit(lengths, noisy, 1, w=1.0 / errors, cov="unscaled")
    assert fit.slope == pytest.approx(coefficients[0], rel=1e-10)
    assert fit.slope_stderr == pytest.approx(math.sqrt(covariance[0, 0]), rel=1e-10)
    assert fit.stderr == pytest.approx(2.0 * fit.slope_stderr / fit.slope**2, rel=1e-12)
    assert fit.degrees_of_freedom == 2


def test_fit_refuses_what_it_cannot_fit():
    with pytest.raises(mo.InvalidParameterError, match="at least 2"):
        mo.fit_log_transmission([1.0], [np.zeros(3)])
    with pytest.raises(mo.InvalidParameterError, match="one per length"):
        mo.fit_log_transmission([1.0, 2.0], [np.zeros(3)])
    with pytest.raises(mo.InvalidParameterError, match="stderr"):
        mo.fit_log_transmission([1.0, 2.0], [mo.Stat.of([-1.0]), mo.Stat.of([-2.0])])
    with pytest.raises(mo.InvalidParameterError, match="does not decay"):
        mo.fit_log_transmission([1.0, 2.0], [np.array([-1.0, -1.1]), np.array([-0.5, -0.4])])
    with pytest.raises(mo.InvalidTypeError, match="Stat"):
        mo.fit_log_transmission([1.0, 2.0], [np.zeros((2, 2)), np.zeros(3)])


def test_localization_length_from_log_transmission_agrees_with_lyapunov():
    # <ln T> = a - 2 L / xi for L >> xi (Anderson, Thouless, Abrahams & Fisher, Phys. Rev. B 22, 3519
    # (1980)); the slab lengths run from 4.5 to 18 xi. Both xi come from the same kind of realizations.
    lengths = [400, 800, 1200, 1600]
    stats = [
        mo.transmission_spectrum(anderson_slab(1.0, n), 0.5, 400, seed=11).log_transmission[0]
        for n in lengths
    ]
    fit = mo.fit_log_transmission(lengths, stats)
    reference = mo.lyapunov(long_chain(1.0), 0.5, 16, seed=12)
    assert fit.stderr < 0.03 * fit.localization_length
    assert abs(fit.localization_length - reference.localization_length) < 3.0 * math.hypot(
        fit.stderr, reference.localization_length_stderr
    )
    assert fit.chi_squared < 4.0 * max(fit.degrees_of_freedom, 1)


def test_log_transmission_statistics_of_a_long_sample():
    # L = 18 xi: var(ln T) approaches -2 <ln T> (single-parameter scaling; Anderson, Thouless,
    # Abrahams & Fisher 1980; 15 % as in docs/validation.md), ln T is close to Gaussian, and the
    # typical transmission exp<ln T> lies far below the mean <T>.
    spectrum = mo.transmission_spectrum(anderson_slab(1.0, 1600), [0.5], 2000, seed=13)
    ratio = spectrum.log_variance_ratio[0]
    assert ratio == pytest.approx(1.0, abs=0.15)
    assert spectrum.typical[0] < 1e-3 * spectrum.mean[0]
    density, edges = spectrum.log_histogram(0, bins=24)
    assert np.sum(density * np.diff(edges)) == pytest.approx(1.0, rel=1e-12)
    centers = 0.5 * (edges[1:] + edges[:-1])
    mean, variance = spectrum.log_mean[0], spectrum.log_variance[0]
    normal = np.exp(-((centers - mean) ** 2) / (2 * variance)) / math.sqrt(2 * math.pi * variance)
    # within the sampling noise of 2000 samples in 24 bins (about 15 % of the peak)
    assert np.max(np.abs(density - normal)) < 0.15 * np.max(normal)
    assert spectrum.log_transmission[0].mean == pytest.approx(mean)
    with pytest.raises(mo.InvalidParameterError, match="out of range"):
        spectrum.log_histogram(3)


def test_bootstrap_interval_matches_normal_theory_and_repeats():
    samples = np.random.default_rng(1).normal(2.0, 0.5, 400)
    low, high = mo.bootstrap_interval(samples, seed=3)
    half = 1.96 * 0.5 / math.sqrt(400)
    assert (high - low) / 2 == pytest.approx(half, rel=0.1)
    assert low < np.mean(samples) < high
    assert mo.bootstrap_interval(samples, seed=3) == (low, high)
    low90, high90 = mo.bootstrap_interval(samples, confidence_level=0.9, method="percentile", seed=3)
    assert high90 - low90 < high - low
    with pytest.raises(mo.InvalidParameterError, match="confidence_level"):
        mo.bootstrap_interval(samples, confidence_level=1.5)
    with pytest.raises(mo.InvalidParameterError, match="at least 2"):
        mo.bootstrap_interval([1.0])


# --- the tails of <ln |psi|^2> ---


def synthetic_ensemble(xi, realizations, noise, rng, points=512):
    """A stand-in EnsembleResult whose realizations have exact tails ln|psi|^2 = c - 2|x|/xi plus a
    random offset and a random walk in |x| (the way a localized state fluctuates), and its chunks."""
    x = np.arange(points) - points / 2.0
    chunk_size = mo.CHUNK
    logs = np.empty((realizations, points))
    for r in range(realizations):
        walk = np.cumsum(rng.normal(0.0, noise, points // 2))
        steps = np.concatenate([walk[::-1], walk])
        logs[r] = -2.0 * np.abs(x) / xi + rng.normal(0.0, 1.0) + steps
    chunks = [
        {"count": len(block), "log_density": np.sum(block, axis=0)[None, :]}
        for block in (logs[i : i + chunk_size] for i in range(0, realizations, chunk_size))
    ]
    mean = logs.mean(axis=0)[None, :]
    stderr = (logs.std(axis=0, ddof=1) / math.sqrt(realizations))[None, :]
    result = mo.EnsembleResult(
        count=realizations,
        seed=0,
        times=np.array([1.0]),
        x=x,
        k=np.zeros(points),
        samples={},
        density=np.exp(mean),
        density_stderr=np.zeros((1, points)),
        log_density=mean,
        log_density_stderr=stderr,
        momentum=np.zeros((1, points)),
    )
    return result, [mo.EnsemblePartial(start=0, chunks=chunks)]


def test_tail_fit_recovers_exact_tails_and_calibrated_errors():
    rng = np.random.default_rng(7)
    exact, _ = synthetic_ensemble(12.0, 32, 0.0, rng)
    fit = mo.log_density_tails(exact, left=(-200, -20), right=(30, 150))
    assert fit.left.localization_length == pytest.approx(12.0, rel=1e-12)
    assert fit.right.localization_length == pytest.approx(12.0, rel=1e-12)
    # With noise: over many synthetic ensembles, the batch-means error matches the actual scatter
    # of the estimate, and the correlation-proof bound lies above it.
    estimates, batch_errors, bounds = [], [], []
    for _ in range(60):
        result, partials = synthetic_ensemble(12.0, 128, 0.3, rng)
        fit = mo.log_density_tails(result, left=(-200, -20), right=(30, 150), partials=partials)
        bound = mo.log_density_tails(result, left=(-200, -20), right=(30, 150))
        estimates.append(fit.right.localization_length)
        batch_errors.append(fit.right.stderr)
        bounds.append(bound.right.stderr)
        assert fit.right.localization_length == bound.right.localization_length
    scatter = np.std(estimates, ddof=1)
    assert np.mean(estimates) == pytest.approx(12.0, abs=3 * scatter / math.sqrt(60))
    assert np.mean(batch_errors) == pytest.approx(scatter, rel=0.25)
    assert np.mean(bounds) > scatter


def test_tail_fit_on_a_localized_packet_approaches_the_lyapunov_length():
    # A packet at E = 0 (k0 = pi/2, width 20 sites) in the Anderson chain with W = 4 stays localized;
    # <ln|psi|^2> falls off with slope -2/xi only far out: closer in, the many eigenstates between the
    # centre and x lift it (a correction of order sqrt(x)), so the fitted xi decreases towards
    # gamma(0)^-1 as the window moves out. The noise floor (64 below the peak) is not reached.
    grid = mo.Grid(1024, 1024.0)
    system = mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(4.0, grid.start + 1, grid.stop - 1))
    packet = mo.GaussianPacket(0.0, math.pi / 2, 20.0)
    partials = [
        mo.ensemble_partial(system, packet, 100.0, 0.1, start, 64, snapshots=(100.0,)) for start in (0, 64)
    ]
    result = mo.merge_partials(partials, system, 0, (100.0,))
    xi = mo.lyapunov(long_chain(4.0, points=2**16), 0.0, 16, seed=2).localization_length
    fits = []
    with warnings.catch_warnings():
        warnings.simplefilter("error", mo.UnderResolvedWarning)
        for inner, outer in ((40, 100), (80, 180), (120, 250)):
            fits.append(
                mo.log_density_tails(result, left=(-outer, -inner), right=(inner, outer), partials=partials)
            )
    lengths = [fit.localization_length for fit in fits]
    assert lengths[0] > lengths[1] > lengths[2] > 0.95 * xi
    assert lengths[2] == pytest.approx(xi, rel=0.2)
    for fit in fits:  # both sides agree within their batch errors
        assert abs(fit.left.localization_length - fit.right.localization_length) < 4 * math.hypot(
            fit.left.stderr, fit.right.stderr
        )
    with pytest.warns(mo.UnderResolvedWarning, match="rounding noise"):
        mo.log_density_tails(result, left=(-500, -300), right=(300, 500))
