"""2D and 3D grids: the box itself, its bad input, and the parts of mottle that refuse it so far."""

from __future__ import annotations

import pickle
import re

import numpy as np
import pytest

import mottle as mo
from mottle import _checks
from mottle.errors import InvalidParameterError, InvalidTypeError
from mottle.specs import grid as grid_module

ONE_D_ONLY = "is 1D only for now; 2D/3D grids are supported by"


def test_box_attributes_are_tuples_one_entry_per_axis():
    grid = mo.Grid(points=(64, 32), length=(20.0, 8.0), center=(1.0, -2.0))
    assert isinstance(grid, mo.Grid)
    assert grid.ndim == 2
    assert grid.shape == (64, 32)
    assert grid.size == 64 * 32
    assert grid.dx == (20.0 / 64, 8.0 / 32)
    assert grid.start == (-9.0, -6.0)
    assert grid.stop == (11.0, 2.0)
    assert grid.k_max == (np.pi / grid.dx[0], np.pi / grid.dx[1])
    assert len(grid.axes) == 2
    for axis, n, start, dx in zip(grid.axes, grid.shape, grid.start, grid.dx, strict=True):
        np.testing.assert_allclose(axis, start + dx * np.arange(n), rtol=0, atol=1e-14)
        assert not axis.flags.writeable
    assert isinstance(grid.k, tuple)
    for k, n, dx in zip(grid.k, grid.shape, grid.dx, strict=True):
        np.testing.assert_array_equal(k, 2 * np.pi * np.fft.fftfreq(n, dx))
    assert grid.contains((0.0, 0.0))
    assert not grid.contains((0.0, 2.0))  # the stop edge is outside, as in 1D
    assert not grid.twisted


def test_scalar_length_and_center_mean_every_axis():
    grid = mo.Grid(points=(16, 32, 16), length=4.0)
    assert grid.ndim == 3
    assert grid.length == (4.0, 4.0, 4.0)
    assert grid.center == (0.0, 0.0, 0.0)
    assert grid.dx == (0.25, 0.125, 0.25)
    assert mo.Grid([16, 32, 16], [4.0, 4.0, 4.0]) == grid  # a list of points is a box too


def test_box_repr_pickle_equality():
    grid = mo.Grid(points=(32, 16), length=(2.0, 1.0))
    assert repr(grid) == "Grid(points=(32, 16), length=(2.0, 1.0), center=(0.0, 0.0), quasimomentum=0.0)"
    again = pickle.loads(pickle.dumps(grid))
    assert again == grid and hash(again) == hash(grid) and type(again) is type(grid)
    assert grid != mo.Grid(points=(32, 16), length=(2.0, 1.5))


def test_one_dimensional_grid_is_unchanged():
    grid = mo.Grid(128, 10.0, center=1.0)
    assert type(grid) is mo.Grid
    assert repr(grid) == "Grid(points=128, length=10.0, center=1.0, quasimomentum=0.0)"
    assert isinstance(grid.points, int) and isinstance(grid.length, float)
    assert isinstance(grid.dx, float) and isinstance(grid.start, float)
    assert isinstance(grid.k, np.ndarray) and grid.k.shape == (128,)
    assert grid.ndim == 1 and grid.shape == (128,) and grid.size == 128
    assert len(grid.axes) == 1 and grid.axes[0] is grid.x
    assert pickle.loads(pickle.dumps(grid)) == grid


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"points": (64, 32), "length": (1.0, 2.0, 3.0)}, "length has 3 entries but points has 2"),
        ({"points": (64, 32, 32), "length": 1.0, "center": (0.0, 0.0)}, "center has 2 entries"),
        ({"points": (16, 16, 16, 16), "length": 1.0}, "has 4 axes; grids have 1, 2 or 3 axes"),
        ({"points": (64,), "length": 1.0}, "a 1D grid takes an integer, points=64"),
        ({"points": (64, 8), "length": 1.0}, "points[1] (along y) must be >= 16, got 8"),
        ({"points": (64, 64, 32), "length": (1.0, 1.0, -1.0)}, "length[2] (along z) must be > 0"),
        ({"points": (64, 64), "length": 1.0, "center": (0.0, np.inf)}, "center[1] (along y) must be finite"),
    ],
)
def test_bad_boxes_name_the_axis(kwargs, words):
    with pytest.raises(InvalidParameterError, match=re.escape(words)):
        mo.Grid(**kwargs)


def test_points_along_an_axis_must_be_integers():
    with pytest.raises(InvalidTypeError, match=r"points\[0\] \(along x\) must be an integer"):
        mo.Grid(points=("64", 64), length=1.0)


def test_a_box_that_does_not_fit_in_memory_says_what_it_needs(monkeypatch):
    monkeypatch.setattr(grid_module, "_memory_bytes", lambda: 1 << 30)  # a 1 GiB machine
    mo.Grid(points=(128, 128, 128), length=1.0)  # 2 M points, 0.4 GiB: fits
    with pytest.raises(InvalidParameterError, match=r"needs about 3\.0 GiB .* 1\.0 GiB") as caught:
        mo.Grid(points=(256, 256, 256), length=1.0)
    assert "(256, 256, 256)" in str(caught.value)


def test_twisted_boxes_are_refused_with_the_shared_message():
    with pytest.raises(InvalidParameterError, match=ONE_D_ONLY):
        mo.Grid(points=(64, 64), length=1.0, quasimomentum=0.25)
    with pytest.raises(InvalidParameterError, match=ONE_D_ONLY):
        mo.Grid(points=(64, 64), length=1.0, quasimomentum=mo.Uniform(0.0, 1.0))


def test_the_shared_check_passes_1d_and_names_what_refuses():
    _checks.one_dimensional("anything", mo.Grid(64, 1.0))
    _checks.one_dimensional("anything", (64,))
    with pytest.raises(InvalidParameterError, match=r"^widget is 1D only for now; .*shape \(32, 16\)\)$"):
        _checks.one_dimensional("widget", mo.Grid(points=(32, 16), length=1.0))


BOX = mo.Grid(points=(32, 32), length=(40.0, 40.0))
LINE = mo.Grid(512, 100.0)
PACKET = mo.GaussianPacket(center=0.0, wavenumber=1.0, width=3.0)


@pytest.mark.parametrize(
    ("what", "call"),
    [
        ("classical_ensemble", lambda: mo.classical_ensemble(mo.System(BOX), PACKET, 1.0, 0.1, 10)),
        ("transfer-matrix", lambda: mo.lyapunov(mo.System(BOX), 1.0, 2)),
        ("transfer-matrix", lambda: mo.transmission_spectrum(mo.System(BOX), [1.0])),
        ("RandomPacket", lambda: mo.RandomPacket(mo.Uniform(-1.0, 1.0), 1.0, 3.0).validate(BOX)),
        (r"Grid\.x", lambda: BOX.x),
        (r"Grid\.shift", lambda: BOX.shift(0.5)),
    ],
)
def test_one_dimensional_parts_refuse_a_box(what, call):
    with pytest.raises(InvalidParameterError, match=f"{what}.*{ONE_D_ONLY}"):
        call()


def test_the_same_calls_still_work_in_1d():
    # The refusals key on the grid alone: the 1D counterparts of the calls above run.
    system = mo.System(LINE, potential=mo.Barrier(0.1, 10.0, 12.0), absorber=mo.Absorber(10.0))
    run = mo.propagate(system, PACKET, 1.0, 0.1)
    assert run.psi.shape == (512,)
    assert mo.realize(system).shape == (512,)
