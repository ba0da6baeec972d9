"""Quasi-1D transfer matrices (mo.lyapunov(..., width=M)): the core against the numpy oracle,
clean strips against the transverse band, the Anderson transition in 3D and localization in 2D,
threads, bad input."""

from __future__ import annotations

import math
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

import mottle as mo
from mottle.stationary import quasi1d


def anderson(dimensions: int, slices: int, disorder: float | None, transverse: int = 16) -> mo.System:
    """The Anderson model on a (slices, 16[, 16]) lattice, box disorder over every slice."""
    points = (slices,) + (transverse,) * (dimensions - 1)
    grid = mo.Grid(points=points, length=tuple(float(n) for n in points))
    box = None if disorder is None else mo.BoxDisorder(disorder, grid.start[0], grid.stop[0])
    return mo.System(grid, model=mo.Lattice(hopping=1.0), disorder=box)


@pytest.mark.parametrize(
    ("dimensions", "width", "disorder", "energy", "qr_interval", "blocks"),
    [(2, 5, 6.0, 0.3, 3, 2), (3, 3, 14.0, 0.0, 4, 1), (3, 4, 19.0, -1.1, 5, 3), (2, 16, 2.0, 0.0, 7, 1)],
)
def test_core_matches_the_numpy_oracle(dimensions, width, disorder, energy, qr_interval, blocks):
    # The pure-numpy recursion with numpy.roll neighbours and LAPACK Householder QR on the same
    # realization (quasi1d.reference_exponents; common practice: an obviously correct oracle).
    system = anderson(dimensions, 600, disorder)
    result = mo.lyapunov(
        system, energy, 3, seed=5, width=width, qr_interval=qr_interval, blocks=blocks, threads=1
    )
    for index in (0, 2):
        potential = quasi1d.bar_disorder(system, width, seed=5, index=index)
        assert potential.shape == (600,) + (width,) * (dimensions - 1)
        expected = quasi1d.reference_exponents(potential, energy, 1.0, qr_interval, blocks)
        np.testing.assert_allclose(result.spectra[index], expected, rtol=0, atol=1e-10)


def test_disorder_is_the_box_distribution():
    # Uniform on (-W/2, W/2): mean 0, variance W^2/12, within 5 standard errors (common practice).
    system = anderson(3, 5000, 14.0)
    values = quasi1d.bar_disorder(system, 8, seed=1, index=3).ravel()
    assert np.all(np.abs(values) < 7.0)
    variance = 14.0**2 / 12
    assert abs(values.mean()) < 5 * math.sqrt(variance / values.size)
    assert abs(values.var() - variance) < 5 * variance * math.sqrt(0.8 / values.size)
    other = quasi1d.bar_disorder(system, 8, seed=1, index=4)
    assert not np.array_equal(values, other.ravel())


def test_clean_strip_has_the_transverse_band_exponents():
    # Without disorder each transverse Fourier mode e_m = -2 cos(2 pi m / M) decouples and follows
    # psi[n+1] = ((e_m - E)/J) psi[n] - psi[n-1]: cosh(gamma) = |e_m - E| / 2 for a closed channel
    # (|e_m - E| > 2J), gamma = 0 for an open one (separation of variables; common practice).
    width, energy = 6, 2.5
    system = anderson(2, 20_000, None)
    result = mo.lyapunov(system, energy, 1, width=width, region=(-1e9, 1e9), blocks=1)
    modes = -2.0 * np.cos(2 * np.pi * np.arange(width) / width)
    x = np.abs(modes - energy)
    exact = np.sort(np.where(x > 2.0, np.arccosh(np.maximum(x, 2.0) / 2.0), 0.0))[::-1]
    np.testing.assert_allclose(result.exponents, exact, rtol=0, atol=2e-3)
    assert result.exponent.mean < 2e-3  # an open channel: gamma_min = 0


@pytest.mark.parametrize(("disorder", "grows"), [(14.0, True), (19.0, False)])
def test_anderson_transition_in_three_dimensions(disorder, grows):
    # Box disorder, E = 0, J = 1, periodic across: W_c = 16.54 and Lambda_c ~ 0.58, Lambda grows with
    # M below W_c and falls above it (Slevin & Ohtsuki, Phys. Rev. Lett. 82, 382 (1999)). The M = 4, 6
    # gaps are 6-8 % here; 5e4 slices give Lambda to ~1 %.
    system = anderson(3, 50_000, disorder)
    small = mo.lyapunov(system, 0.0, 1, width=4, seed=2)
    large = mo.lyapunov(system, 0.0, 1, width=6, seed=2)
    gap = large.Lambda.mean - small.Lambda.mean
    noise = math.hypot(small.Lambda.stderr, large.Lambda.stderr)
    assert (gap > 3 * noise) if grows else (gap < -3 * noise), (small.Lambda, large.Lambda)


def test_near_the_critical_point_lambda_is_the_critical_value():
    # At W_c = 16.54 Lambda_c ~ 0.58 (Slevin & Ohtsuki, Phys. Rev. Lett. 82, 382 (1999)); M = 6
    # has small corrections to scaling, so 5 % and 5 standard errors.
    result = mo.lyapunov(anderson(3, 50_000, 16.54), 0.0, 1, width=6, seed=4)
    assert abs(result.Lambda.mean - 0.58) < max(0.05 * 0.58, 5 * result.Lambda.stderr), result.Lambda


def test_two_dimensions_are_localized():
    # 2D, W = 6: all states localized, Lambda falls with M (Abrahams, Anderson, Licciardello &
    # Ramakrishnan, Phys. Rev. Lett. 42, 673 (1979)).
    system = anderson(2, 50_000, 6.0)
    narrow = mo.lyapunov(system, 0.0, 1, width=8, seed=3)
    wide = mo.lyapunov(system, 0.0, 1, width=16, seed=3)
    assert wide.Lambda.mean + 3 * math.hypot(wide.Lambda.stderr, narrow.Lambda.stderr) < narrow.Lambda.mean


def test_result_fields_and_error_bars():
    system = anderson(3, 2000, 16.5)
    result = mo.lyapunov(system, [0.0, 0.5], 2, width=4, blocks=4)
    assert isinstance(result, list) and len(result) == 2
    first = result[0]
    assert isinstance(first, mo.Quasi1DLyapunov)
    assert (first.dimensions, first.width, first.slices, first.channels) == (3, 4, 2000, 16)
    assert first.samples.shape == (2, 4) and first.spectra.shape == (2, 4, 16)
    assert np.all(np.diff(first.exponents) < 0)  # largest first
    gamma = first.exponent
    assert gamma.count == 8 and gamma.mean == pytest.approx(first.samples.mean())
    assert first.xi.mean == pytest.approx(1.0 / gamma.mean)
    assert first.Lambda.mean == pytest.approx(1.0 / (4 * gamma.mean))
    assert first.Lambda.stderr == pytest.approx(gamma.stderr / (4 * gamma.mean**2))
    assert "Lambda" in str(first)
    # One realization: the blocks still give an error bar (16 by default).
    single = mo.lyapunov(system, 0.0, 1, width=4)
    assert single.blocks == 16 and math.isfinite(single.Lambda.stderr)


def test_bitwise_the_same_for_any_threads():
    system = anderson(3, 700, 15.0)
    one = mo.lyapunov(system, 0.2, 5, seed=9, width=5, threads=1)
    two = mo.lyapunov(system, 0.2, 5, seed=9, width=5, threads=2)
    assert np.array_equal(one.spectra, two.spectra)
    # A region is the slices it holds: the first 300 slices.
    part = mo.lyapunov(system, 0.2, 1, seed=9, width=5, region=(-350.0, -50.0))
    assert part.slices == 300


def test_bad_input_is_refused():
    bar = anderson(3, 200, 16.0)
    with pytest.raises(
        mo.InvalidParameterError, match=r"does not fit the transverse box.*along y \(axis 1\)"
    ):
        mo.lyapunov(bar, 0.0, 1, width=17)
    flat = mo.Grid(points=(200, 20, 16), length=(200.0, 20.0, 32.0))
    with pytest.raises(mo.InvalidParameterError, match=r"16 points along z \(axis 2\)"):
        mo.lyapunov(mo.System(flat, model=mo.Lattice()), 0.0, 1, width=18, region=(-90.0, 90.0))
    with pytest.raises(mo.InvalidParameterError, match="one transverse spacing"):
        mo.lyapunov(mo.System(flat, model=mo.Lattice()), 0.0, 1, width=8, region=(-90.0, 90.0))
    line = mo.Grid(200, 200.0)
    chain = mo.System(line, model=mo.Lattice(), disorder=mo.BoxDisorder(1.0, -50.0, 50.0))
    with pytest.raises(mo.InvalidParameterError, match="needs a 2D or 3D grid"):
        mo.lyapunov(chain, 0.0, 1, width=4)
    continuum = mo.System(bar.grid, model=mo.Continuum(), disorder=bar.disorder)
    with pytest.raises(mo.InvalidParameterError, match="Lattice"):
        mo.lyapunov(continuum, 0.0, 1, width=4)
    for options, message in [
        ({"width": 0}, "width"),
        ({"width": 4, "qr_interval": 0}, "qr_interval"),
        ({"width": 4, "qr_interval": 150}, "qr_interval <= "),
        ({"width": 4, "blocks": 500}, "blocks=500 exceeds"),
        ({"width": 4, "region": (200.0, 300.0)}, "holds no grid point"),
        ({"qr_interval": 4}, "pass width=M"),
    ]:
        with pytest.raises(mo.InvalidParameterError, match=message):
            mo.lyapunov(bar, 0.0, 1, **options)
    with pytest.raises(mo.InvalidParameterError, match="whole number"):
        mo.lyapunov(bar, 0.0, 1, width=4.5)
    with pytest.raises(mo.InvalidTypeError, match="width"):
        mo.lyapunov(bar, 0.0, 1, width="4")
    with pytest.raises(mo.InvalidParameterError, match="finite"):
        mo.lyapunov(bar, math.nan, 1, width=4)
    with pytest.raises(mo.InvalidParameterError, match="nonlinearity"):
        mo.lyapunov(
            mo.System(bar.grid, model=mo.Lattice(), disorder=bar.disorder, nonlinearity=1.0), 0.0, 1, width=4
        )
    slab = mo.System(bar.grid, model=mo.Lattice(), disorder=mo.BoxDisorder(16.0, -50.0, 50.0))
    with pytest.raises(mo.InvalidParameterError, match="outside the BoxDisorder slab"):
        mo.lyapunov(slab, 0.0, 1, width=4, region=(-80.0, 0.0))
    assert mo.lyapunov(slab, 0.0, 1, width=4).slices == 100
    clean = mo.System(bar.grid, model=mo.Lattice())
    with pytest.raises(mo.InvalidParameterError, match="needs a region"):
        mo.lyapunov(clean, 0.0, 1, width=4)


INTERRUPTED = textwrap.dedent(
    """
    import signal
    import mottle as mo

    signal.signal(signal.SIGINT, signal.default_int_handler)
    grid = mo.Grid(points=(100_000, 16, 16), length=(1e5, 16.0, 16.0))
    system = mo.System(grid, model=mo.Lattice(), disorder=mo.BoxDisorder(16.5, grid.start[0], grid.stop[0]))
    print("ready", flush=True)
    try:
        mo.lyapunov(system, 0.0, 200, width=8, threads=2)  # about a minute
    except KeyboardInterrupt:
        print("interrupted", flush=True)
        raise
    print("finished", flush=True)
    """
)


def test_ctrl_c_stops_a_long_bar_within_a_second():
    process = subprocess.Popen(
        [sys.executable, "-c", INTERRUPTED], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    try:
        assert process.stdout is not None and process.stdout.readline().strip() == "ready"
        time.sleep(0.5)
        assert process.poll() is None
        sent = time.monotonic()
        process.send_signal(signal.SIGINT)
        out, err = process.communicate(timeout=10.0)
        elapsed = time.monotonic() - sent
    finally:
        if process.poll() is None:
            process.kill()
            process.communicate()
    assert "interrupted" in out, err
    assert "KeyboardInterrupt" in err
    assert elapsed < 1.5, f"took {elapsed:.2f} s to stop"
