"""Every public constructor and call refuses bad input before allocating, naming the value.

Errors are mottle.InvalidParameterError (a ValueError) or mottle.InvalidTypeError (a
TypeError); each message names the offending value, which the tests check.
"""

import math
import re
import time
import tracemalloc
import warnings

import numpy as np
import pytest

import mottle as mo

GRID = mo.Grid(256, 64.0)
SYSTEM = mo.System(GRID)
PACKET = mo.GaussianPacket(-10.0, 1.0, 2.0)


def raises(kind, *fragments):
    """pytest.raises for ``kind`` whose message contains every fragment (literally)."""
    return pytest.raises(kind, match="".join(f"(?=[\\s\\S]*{re.escape(f)})" for f in fragments))


P = mo.InvalidParameterError
T = mo.InvalidTypeError


@pytest.mark.parametrize(
    ("make", "kind", "fragments"),
    [
        (lambda: mo.Grid(0, 10.0), P, ("points", "0")),
        (lambda: mo.Grid(-64, 10.0), P, ("points", "-64")),
        (lambda: mo.Grid(8, 10.0), P, ("points", "8", "16")),
        (lambda: mo.Grid(64.5, 10.0), P, ("points", "64.5")),
        (lambda: mo.Grid(math.inf, 10.0), P, ("points", "inf")),
        (lambda: mo.Grid(math.nan, 10.0), P, ("points", "nan")),
        (lambda: mo.Grid("64", 10.0), T, ("points", "'64'")),
        (lambda: mo.Grid(True, 10.0), T, ("points", "True")),
        (lambda: mo.Grid(64, 0.0), P, ("length", "0.0")),
        (lambda: mo.Grid(64, -3.0), P, ("length", "-3.0")),
        (lambda: mo.Grid(64, math.inf), P, ("length", "inf")),
        (lambda: mo.Grid(64, math.nan), P, ("length", "nan")),
        (lambda: mo.Grid(64, None), T, ("length", "None")),
        (lambda: mo.Grid(64, 10.0, center=math.nan), P, ("center", "nan")),
        (lambda: mo.Continuum(hbar=0.0), P, ("hbar", "0.0")),
        (lambda: mo.Continuum(mass=-1.0), P, ("mass", "-1.0")),
        (lambda: mo.Continuum(mass=math.inf), P, ("mass", "inf")),
        (lambda: mo.Lattice(hopping=0.0), P, ("hopping", "0.0")),
        (lambda: mo.Lattice(hopping=math.nan), P, ("hopping", "nan")),
        (lambda: mo.Lattice(hbar=-2.0), P, ("hbar", "-2.0")),
        (lambda: mo.Barrier(1.0, 2.0, 1.0), P, ("left=2.0", "right=1.0")),
        (lambda: mo.Barrier(1.0, 1.0, 1.0), P, ("left=1.0", "right=1.0")),
        (lambda: mo.Barrier(math.nan, 0.0, 1.0), P, ("height", "nan")),
        (lambda: mo.Barrier(1.0, -math.inf, 1.0), P, ("left", "inf")),
        (lambda: mo.Barrier("high", 0.0, 1.0), T, ("height", "'high'")),
        (lambda: mo.Harmonic(0.0), P, ("frequency", "0.0")),
        (lambda: mo.Harmonic(-1.0), P, ("frequency", "-1.0")),
        (lambda: mo.Harmonic(1.0, center=math.inf), P, ("center", "inf")),
        (lambda: mo.Tabulated(np.zeros((4, 4, 4, 4))), P, ("Tabulated", "1, 2 or 3 axes", "(4, 4, 4, 4)")),
        (lambda: mo.Tabulated(np.float64(3.0)), P, ("Tabulated", "()")),
        (lambda: mo.Tabulated([0.0, 1.0, math.nan, 0.0]), P, ("Tabulated", "nan", "index 2")),
        (lambda: mo.Tabulated([0.0, math.inf]), P, ("Tabulated", "inf", "index 1")),
        (lambda: mo.Tabulated("1, 2, 3"), T, ("Tabulated", "'1, 2, 3'")),
        (lambda: mo.Tabulated([1.0, 2.0 + 1.0j]), T, ("Tabulated", "complex")),
        (lambda: mo.Absorber(0.0), P, ("absorber width", "0.0")),
        (lambda: mo.Absorber(-5.0), P, ("absorber width", "-5.0")),
        (lambda: mo.Absorber(math.nan), P, ("absorber width", "nan")),
        (lambda: mo.Absorber(5.0, strength=0.0), P, ("absorber strength", "0.0")),
        (lambda: mo.Absorber(5.0, strength=math.inf), P, ("absorber strength", "inf")),
        (lambda: mo.GaussianPacket(0.0, 1.0, 0.0), P, ("packet width", "0.0")),
        (lambda: mo.GaussianPacket(0.0, 1.0, -1.0), P, ("packet width", "-1.0")),
        (lambda: mo.GaussianPacket(math.nan, 1.0, 1.0), P, ("packet center", "nan")),
        (lambda: mo.GaussianPacket(0.0, math.inf, 1.0), P, ("packet wavenumber", "inf")),
        (
            lambda: mo.Wavefunction(np.ones((3, 4, 2, 2))),
            P,
            ("wavefunction", "1, 2 or 3 axes", "(3, 4, 2, 2)"),
        ),
        (lambda: mo.Wavefunction([0.0, math.nan, 1.0]), P, ("wavefunction", "nan", "index 1")),
        (lambda: mo.Wavefunction(np.zeros(256)), P, ("wavefunction", "zero")),
    ],
)
def test_constructors_refuse_bad_values(make, kind, fragments):
    with raises(kind, *fragments):
        make()


@pytest.mark.parametrize(
    ("make", "kind", "fragments"),
    [
        (lambda: mo.System("grid"), T, ("grid", "str")),
        (lambda: mo.System(GRID, model="continuum"), T, ("model", "str")),
        (lambda: mo.System(GRID, potential=np.zeros(256)), T, ("potential", "ndarray")),
        (lambda: mo.System(GRID, absorber=10.0), T, ("absorber", "float")),
        (lambda: mo.System(GRID, nonlinearity=math.nan), P, ("nonlinearity", "nan")),
        # Tabulated values of the wrong length for the grid.
        (lambda: mo.System(GRID, potential=mo.Tabulated(np.zeros(100))), P, ("(100,)", "(256,)")),
        (
            lambda: mo.System(GRID, potential=mo.Harmonic(1.0) + mo.Tabulated(np.zeros(10))),
            P,
            ("(10,)", "(256,)"),
        ),
        # Absorbers wider than half the box, or narrower than the grid can resolve.
        (lambda: mo.System(GRID, absorber=mo.Absorber(32.0)), P, ("absorber width 32.0", "64.0")),
        (lambda: mo.System(GRID, absorber=mo.Absorber(40.0)), P, ("absorber width 40.0",)),
        (lambda: mo.System(GRID, absorber=mo.Absorber(0.5)), P, ("absorber width 0.5", "4 grid spacings")),
        (lambda: mo.System(GRID, potential=mo.Barrier(1.0, 100.0, 101.0)), P, ("[100.0, 101.0)", "outside")),
    ],
)
def test_system_refuses_inconsistent_parts(make, kind, fragments):
    with raises(kind, *fragments):
        make()


PROPAGATE_CASES = [
    (dict(system="system"), T, ("system", "str")),
    (dict(packet=(0.0, 1.0, 1.0)), T, ("packet", "tuple")),
    (dict(duration=0.0), P, ("duration", "0.0")),
    (dict(duration=-1.0), P, ("duration", "-1.0")),
    (dict(duration=math.inf), P, ("duration", "inf")),
    (dict(duration=math.nan), P, ("duration", "nan")),
    (dict(duration="1"), T, ("duration", "'1'")),
    (dict(step=0.0), P, ("step", "0.0")),
    (dict(step=-0.1), P, ("step", "-0.1")),
    (dict(step=math.nan), P, ("step", "nan")),
    (dict(step=math.inf), P, ("step", "inf")),
    (dict(detector=(0.0, 900.0)), P, ("detector (0, 900)", "[-32, 32]")),
    (dict(detector=(-40.0, 0.0)), P, ("detector (-40, 0)", "box [-32, 32]")),
    (dict(order=3), P, ("order", "3")),
    (dict(order=1), P, ("order", "1")),
    (dict(order=True), P, ("order", "True")),
    (dict(order="4"), P, ("order", "'4'")),
    (dict(splitting="leapfrog"), P, ("splitting", "'leapfrog'")),
    (dict(order=4, splitting="strang"), P, ("'strang'", "4")),
    (dict(detector=(5.0, -5.0)), P, ("left=5.0", "right=-5.0")),
    (dict(detector=(0.0, math.nan)), P, ("detector right", "nan")),
    (dict(detector=3.0), T, ("detector", "3.0")),
    (dict(snapshots=(0.5, 2.0)), P, ("snapshot", "2.0")),
    (dict(snapshots=(-0.5,)), P, ("snapshot", "-0.5")),
    (dict(snapshots=(0.5, 0.3)), P, ("snapshot", "0.5", "0.3")),
    (dict(snapshots=(math.nan,)), P, ("snapshot", "nan")),
    (dict(snapshots=None), T, ("snapshots", "None")),
    (dict(snapshots=["a"]), T, ("snapshots", "['a']")),
    (dict(snapshots="0.5"), T, ("snapshots", "'0.5'")),
    (dict(snapshots=[[0.5]]), P, ("snapshots", "(1, 1)")),
    (dict(seed=-1), P, ("seed", "-1")),
    (dict(index=1.5), P, ("index", "1.5")),
    # Packets that do not fit the grid: outside the box, wider than it, or beyond its band.
    (dict(packet=mo.GaussianPacket(40.0, 1.0, 2.0)), P, ("packet center 40.0", "[-32.0, 32.0)")),
    (dict(packet=mo.GaussianPacket(-32.5, 1.0, 2.0)), P, ("packet center -32.5",)),
    (dict(packet=mo.GaussianPacket(0.0, 1.0, 7.0)), P, ("packet width 7.0", "64.0")),
    (dict(packet=mo.GaussianPacket(0.0, 12.0, 2.0)), P, ("packet wavenumber 12.0", "pi/dx")),
    (dict(packet=mo.GaussianPacket(0.0, -11.9, 1.0)), P, ("packet wavenumber -11.9", "pi/dx")),
    (dict(packet=mo.Wavefunction(np.ones(100))), P, ("wavefunction", "(100,)", "(256,)")),
]


@pytest.mark.parametrize("propagate", [mo.propagate, mo.reference.propagate], ids=["core", "reference"])
@pytest.mark.parametrize(("overrides", "kind", "fragments"), PROPAGATE_CASES)
def test_propagate_refuses_bad_arguments(propagate, overrides, kind, fragments):
    arguments = dict(system=SYSTEM, packet=PACKET, duration=1.0, step=0.1)
    arguments.update(overrides)
    with raises(kind, *fragments):
        propagate(**arguments)


def test_core_refuses_an_unknown_precision():
    # (The reference runs in double precision only and has no such argument.)
    with raises(P, "precision", "'half'"):
        mo.propagate(SYSTEM, PACKET, 1.0, 0.1, precision="half")


def test_errors_are_value_and_type_errors():
    assert issubclass(mo.InvalidParameterError, ValueError)
    assert issubclass(mo.InvalidTypeError, TypeError)
    assert issubclass(mo.InvalidParameterError, mo.MottleError)
    with pytest.raises(ValueError):
        mo.Grid(0, 1.0)
    with pytest.raises(TypeError):
        mo.Grid("a", 1.0)


def test_a_grid_too_large_for_memory_fails_fast_without_allocating():
    tracemalloc.start()
    started = time.perf_counter()
    try:
        with raises(P, "points=1000000000000", "GiB"):
            mo.Grid(10**12, 1000.0)
        elapsed = time.perf_counter() - started
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert elapsed < 0.1
    assert peak < 1 << 20


def test_many_snapshots_of_a_big_grid_fail_before_the_run():
    # Keeping 10**5 snapshots of 2**16 points would need ~100 GiB: refused up front.
    system = mo.System(mo.Grid(2**16, 2**14))
    started = time.perf_counter()
    with raises(P, "snapshots", "GiB"):
        mo.propagate(
            system, mo.GaussianPacket(0.0, 1.0, 10.0), 1e4, 0.1, snapshots=np.arange(1, 100_001) * 0.1
        )
    assert time.perf_counter() - started < 5.0


def suggested_step(message):
    return float(re.search(r"step <= ([0-9.eE+-]+)\)", message).group(1))


@pytest.mark.parametrize(
    ("system", "packet", "step"),
    [
        # The kinetic phase at the packet's band edge exceeds pi.
        (mo.System(mo.Grid(512, 100.0)), mo.GaussianPacket(0.0, 5.0, 1.0), 0.5),
        # The potential's phase exceeds pi.
        (
            mo.System(mo.Grid(512, 100.0), potential=mo.Barrier(80.0, 0.0, 1.0)),
            mo.GaussianPacket(-20.0, 1.0, 3.0),
            0.05,
        ),
        # A step just above the limit (the band edge k0 + 5 sigma_k puts the kinetic phase at
        # pi (1 + 1e-6)), whose three-digit rounding would land on the wrong side.
        (
            mo.System(mo.Grid(512, 100.0)),
            mo.GaussianPacket(0.0, 5.0, 2.5 / ((2.0 * np.pi / 0.03 * (1 + 1e-6)) ** 0.5 - 5.0)),
            0.03,
        ),
    ],
)
def test_coarse_steps_warn_and_name_a_step_that_would_do(system, packet, step):
    for propagate in (mo.propagate, mo.reference.propagate):
        with pytest.warns(mo.UnderResolvedWarning, match=r"step .* too coarse") as record:
            propagate(system, packet, 10 * step, step)
        suggestions = [suggested_step(str(w.message)) for w in record if "too coarse" in str(w.message)]
        better = min(suggestions)
        assert better < step
        with warnings.catch_warnings():
            warnings.simplefilter("error", mo.UnderResolvedWarning)
            propagate(system, packet, 10 * better, better)


def test_a_packet_too_wide_for_its_box_is_warned_about_with_a_length_that_would_do():
    packet = mo.GaussianPacket(0.0, 1.0, 3.0)
    with pytest.warns(mo.UnderResolvedWarning, match=r"width 3\.0.* longer than ([0-9.]+)") as record:
        mo.propagate(mo.System(mo.Grid(256, 48.0)), packet, 1.0, 0.1)
    length = float(re.search(r"longer than ([0-9.]+)", str(record[0].message)).group(1))
    assert length > 48.0
    with warnings.catch_warnings():
        warnings.simplefilter("error", mo.UnderResolvedWarning)
        mo.propagate(mo.System(mo.Grid(512, length)), packet, 1.0, 0.1)


def test_a_single_snapshot_time_may_be_given_as_a_number():
    for propagate in (mo.propagate, mo.reference.propagate):
        np.testing.assert_array_equal(propagate(SYSTEM, PACKET, 1.0, 0.1, snapshots=0.5).times, [0.5])
