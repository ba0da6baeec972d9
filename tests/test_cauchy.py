"""Cauchy (Lloyd) disorder: on-site values, the exact Lyapunov exponent, refusals, study files."""

import math

import numpy as np
import pytest

import mottle as mo

SITES = 2**20


def exact_gamma(energy: float, width: float, hopping: float = 1.0) -> float:
    """Lloyd model, per site: cosh gamma = [sqrt((2J+E)^2 + W^2) + sqrt((2J-E)^2 + W^2)] / 4J.

    Ishii, Prog. Theor. Phys. Suppl. 53, 77 (1973); Thouless, J. Phys. C 5, 77 (1972).
    """
    e, w = energy / hopping, width / hopping
    return math.acosh((math.hypot(2.0 + e, w) + math.hypot(2.0 - e, w)) / 4.0)


def lattice(width: float, points: int = SITES) -> mo.System:
    return mo.System(
        mo.Grid(points, float(points)),
        model=mo.Lattice(),
        disorder=mo.CauchyDisorder(width, -points / 2, points / 2),
    )


@pytest.mark.parametrize("width", [0.5, 2.0])
def test_lyapunov_matches_the_exact_formula(width):
    energies = [0.0, 1.5]
    results = mo.lyapunov(lattice(width), energies, realizations=4, seed=3)
    for energy, result in zip(energies, results, strict=True):
        exact = exact_gamma(energy, width)
        assert result.stat.mean == pytest.approx(exact, rel=0.01), (energy, width)
        # 4 x 1e6 sites: the mean's standard error (~2e-3 relative) stays well inside the tolerance.
        assert 3.0 * result.stat.stderr < 0.01 * exact


def test_values_are_lorentzian():
    width = 0.8
    system = lattice(width, points=2**16)
    values = mo.realize(system, seed=1, index=0)
    # The Lorentzian's quartiles are -width, 0, +width (binomial error ~2e-3 on 65536 values).
    for x, fraction in ((-width, 0.25), (0.0, 0.5), (width, 0.75)):
        assert np.mean(values < x) == pytest.approx(fraction, abs=0.01)
    assert np.all(np.isfinite(values))
    assert np.array_equal(values, mo.realize(system, seed=1, index=0))
    assert not np.array_equal(values, mo.realize(system, seed=1, index=1))


def test_moments_and_the_continuum_are_refused():
    disorder = mo.CauchyDisorder(1.0, 0.0, 10.0)
    with pytest.raises(mo.InvalidParameterError, match="infinite variance"):
        disorder.correlation([0.0, 1.0])
    with pytest.raises(mo.InvalidParameterError, match="infinite variance"):
        disorder.power_spectrum([1.0], dx=1.0)
    with pytest.raises(mo.InvalidParameterError, match="infinite variance"):
        mo.born_lyapunov(lattice(1.0, points=64), 0.0)
    with pytest.raises(mo.InvalidParameterError, match=r"lattice sites only.*'continuum'"):
        mo.System(mo.Grid(64, 64.0), disorder=disorder)
    with pytest.raises(mo.InvalidParameterError, match="width must be"):
        mo.CauchyDisorder(-1.0, 0.0, 10.0)


STUDY = """
[system]
points = 4096
length = 4096.0
model = "lattice"

[[system.disorder]]
kind = "cauchy"
width = 1.0
start = -2048.0
stop = 2048.0

[packet]
center = -1500.0
wavenumber = 1.0
width = 40.0

[run]
duration = 10.0
step = 0.1
realizations = 2

[sweep]
"system.disorder.0.width" = [0.5, 1.0]
"""


def test_a_study_file_declares_it():
    study = mo.studies.study.parse_study(STUDY, "cauchy.toml")
    systems = [point.system() for point in study.points]
    assert [s.disorder for s in systems] == [
        mo.CauchyDisorder(0.5, -2048.0, 2048.0),
        mo.CauchyDisorder(1.0, -2048.0, 2048.0),
    ]
    entry = study.canonical()["system"]["disorder"][0]
    assert entry == {"kind": "cauchy", "width": 1.0, "start": -2048.0, "stop": 2048.0}
    gamma = mo.lyapunov(systems[1], 0.0, realizations=2).stat.mean
    assert gamma == pytest.approx(exact_gamma(0.0, 1.0), rel=0.05)


def test_a_study_file_names_its_mistakes():
    with pytest.raises(mo.StudyError) as caught:
        mo.studies.study.parse_study(STUDY.replace("width = 1.0\nstart", "widht = 1.0\nstart"), "cauchy.toml")
    assert "cauchy.toml:9: system.disorder.0.widht: unknown key; did you mean 'width'?" in str(caught.value)
    continuum = STUDY.replace('model = "lattice"', 'model = "continuum"')
    where = r"cauchy\.toml:5: system\.model: CauchyDisorder is defined on lattice sites only"
    with pytest.raises(mo.StudyError, match=where):
        mo.studies.study.parse_study(continuum, "cauchy.toml")
