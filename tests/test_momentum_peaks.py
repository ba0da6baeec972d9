"""Coherent backscattering and forward scattering in the ensemble's mean momentum density."""

import numpy as np
import pytest

import mottle as mo


def momentum_result(k, momentum, times=(1.0,)):
    """An EnsembleResult carrying only a given momentum density (rows per snapshot)."""
    points = k.size
    zeros = np.zeros((len(times), points))
    return mo.EnsembleResult(
        count=1,
        seed=0,
        times=np.asarray(times),
        x=np.zeros(points),
        k=k,
        samples={},
        density=zeros,
        density_stderr=zeros,
        log_density=zeros,
        log_density_stderr=zeros,
        momentum=np.atleast_2d(momentum),
    )


def test_peaks_on_a_known_profile():
    # A flat background of 0.25 with Gaussian peaks doubling it at -k0 (shifted by a third of a bin)
    # and adding 40 % at +k0.
    k = np.linspace(-3.0, 3.0, 1201)
    dk = k[1] - k[0]
    width = 0.02
    profile = (
        0.25
        + 0.25 * np.exp(-0.5 * ((k + 1.0 - dk / 3) / width) ** 2)
        + 0.1 * np.exp(-0.5 * ((k - 1.0) / width) ** 2)
    )
    peaks = mo.coherent_peaks(momentum_result(k, profile), 1.0, background=(0.2, 0.4))
    assert peaks.backscattering_background == pytest.approx(0.25, rel=1e-12)
    assert peaks.backscattering_contrast == pytest.approx(np.exp(-0.5 * (dk / 3 / width) ** 2), rel=1e-6)
    assert peaks.forward_contrast == pytest.approx(0.4, rel=1e-6)
    assert peaks.backscattering_position == pytest.approx(-1.0 + dk / 3, abs=1e-6)
    assert peaks.forward_position == pytest.approx(1.0, abs=1e-9)
    assert peaks.bin_width == pytest.approx(dk)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"background": (0.4, 0.2)}, "inner < outer"),
        ({"background": (0.2, 1.5)}, "overlap"),
        ({"background": (0.2, 2.5)}, "largest wavenumber"),
        ({"background": 0.3}, "pair"),
        ({"background": (0.2, 0.4), "snapshot": 2}, "out of range"),
    ],
)
def test_peak_windows_are_checked(kwargs, message):
    k = np.linspace(-3.0, 3.0, 601)
    with pytest.raises((mo.InvalidParameterError, mo.InvalidTypeError), match=message):
        mo.coherent_peaks(momentum_result(k, np.ones(601)), 1.0, **kwargs)


def test_backscattering_then_forward_scattering_in_white_noise():
    # A packet at k0 = 1 inside white noise with xi = 10 (Born: gamma = D/(2 k**2)), so the localization
    # time is about xi / v = 10. After a few scattering times the mean momentum density shows the
    # coherent backscattering peak at -k0, and by t = 160 the coherent forward-scattering peak at +k0 has
    # grown to the same height (Karpiuk et al., Phys. Rev. Lett. 109, 190601 (2012); Jendrzejewski et
    # al., Phys. Rev. Lett. 109, 195302 (2012)); docs/validation.md: the peaks lie within one k-bin of -+k0.
    # The step keeps the largest kinetic phase on the grid below 2 pi: a longer one folds grid states of
    # high k onto the packet's energy shell, and the white noise couples them, which spoils the CFS peak.
    grid = mo.Grid(1024, 409.6)
    system = mo.System(grid, disorder=mo.WhiteNoise(0.2, -180.0, 180.0), absorber=mo.Absorber(20.0))
    assert 1.0 / mo.born_lyapunov(system, 0.5) == pytest.approx(10.0)
    assert (np.pi / grid.dx) ** 2 / 2 * 0.1 < 2 * np.pi
    packet = mo.GaussianPacket(0.0, 1.0, 15.0)
    result = mo.ensemble(system, packet, 160.0, 0.1, 384, snapshots=(20.0, 160.0), seed=0)
    early, late = (
        mo.coherent_peaks(result, 1.0, background=(0.25, 0.4), snapshot=s, width=0.02) for s in (0, 1)
    )
    assert abs(early.backscattering_position + 1.0) < early.bin_width
    assert early.backscattering_contrast > 1.5
    assert early.forward_contrast < 0.7 * early.backscattering_contrast
    assert late.forward_peak > 1.2 * early.forward_peak
    assert abs(late.forward_position - 1.0) < late.bin_width
    assert late.forward_contrast > 0.7 * late.backscattering_contrast
    assert late.time == 160.0
