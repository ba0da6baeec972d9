"""Labelled access to a store: ``dataset()`` (xarray) and ``table()`` (pandas), and the report on them."""

from __future__ import annotations

import math

import numpy as np
import pytest
from synthetic import write_synthetic_store

import mottle as mo
from mottle.cli import report as reports
from mottle.cli.demo import STUDY as DEMO
from mottle.studies.store import StoredPoint
from mottle.studies.study import parse_study

# The demo's study with fewer realizations: the same sweep, seconds instead of a minute.
SMALL_DEMO = DEMO.replace("realizations = 192", "realizations = 4")


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo")
    study = parse_study(SMALL_DEMO, "demo.toml")
    return mo.run_study(study, root / "demo.mottle", progress=False, threads=2)


def test_the_demo_dataset_has_its_sweep_as_dimensions_and_the_stored_bits(demo_store):
    ds = demo_store.dataset()
    assert ds.transmission_mean.dims == ("strength", "stop")
    assert list(ds.strength.values) == [0.1, 0.2, 0.3]
    assert list(ds.stop.values) == [20.0, 40.0, 60.0, 80.0]
    by_values = {tuple(p.parameters.values()): p for p in demo_store.points}
    point = by_values[(0.2, 40.0)]
    assert ds.transmission_mean.sel(strength=0.2, stop=40.0).item() == point.result.transmission.mean
    for (strength, stop), stored in by_values.items():
        cell = ds.sel(strength=strength, stop=stop)
        t, r = stored.result.transmission, stored.result.reflection
        assert cell.transmission_stderr.item() == t.stderr
        assert cell.transmission_log_mean.item() == t.log_mean
        assert cell.transmission_log_stderr.item() == t.log_stderr
        assert cell.reflection_mean.item() == r.mean
        assert cell["count"].item() == stored.count == 4
        assert cell.seed.item() == stored.seed
        # Profiles: the stored arrays along time and x (or k), read when asked for.
        assert np.array_equal(cell.density.values, stored.result.density)
        assert np.array_equal(cell.momentum.values, stored.result.momentum)
        assert np.array_equal(cell.position.values, stored.result.position)
        assert np.array_equal(cell.second_moment.values, stored.result.second_moment)
    assert np.array_equal(ds.time.values, [100.0, 200.0])
    assert np.array_equal(ds.x.values, demo_store.points[0].result.x)
    table = demo_store.table()
    assert len(table) == 12 and list(table.columns[:3]) == ["index", "strength", "stop"]
    row = table[(table.strength == 0.2) & (table.stop == 40.0)].iloc[0]
    assert row.transmission_mean == point.result.transmission.mean


def test_profiles_are_read_only_when_their_values_are_asked_for(tmp_path, monkeypatch):
    path = write_synthetic_store(tmp_path / "s.mottle", 20, 30)
    store = mo.open_store(path)
    reads = []
    original = StoredPoint.arrays

    def counted(self):
        reads.append(self.index)
        return original(self)

    monkeypatch.setattr(StoredPoint, "arrays", counted)
    ds = store.dataset()
    assert reads == [0]  # the first point, for the axes
    assert ds.density.dims == ("rms", "wavenumber", "time", "x")
    assert ds.density.shape == (20, 30, 2, 16)
    chosen = ds.density.isel(rms=3, wavenumber=slice(5, 8))
    assert reads == [0]
    values = chosen.values
    assert sorted(reads[1:]) == [95, 96, 97]
    assert np.array_equal(values[1], store.points[96].arrays()["density"])
    table = store.table()
    assert len(table) == 600 and len(reads) == 5  # the table reads no arrays


def test_points_not_computed_are_nan(tmp_path):
    path = write_synthetic_store(tmp_path / "s.mottle", 4, 5, keep=[0, 7, 19])
    store = mo.open_store(path)
    ds = store.dataset()
    assert ds.computed.values.sum() == 3 and ds.computed.values[1, 2]
    mean = ds.transmission_mean.values
    assert np.isnan(mean).sum() == 17 and not np.isnan(mean[1, 2])
    assert np.isnan(ds["count"].values[0, 1]) and ds["count"].values[0, 0] == 4
    density = ds.density.values
    assert np.isnan(density[0, 1]).all() and np.isfinite(density[3, 4]).all()
    assert list(store.table()["index"]) == [0, 7, 19]
    assert store.missing[:3] == [1, 2, 3] and len(store.missing) == 17


ZIPPED = """\
[system]
points = 256
length = 100.0
absorber = { width = 15.0 }

[[system.disorder]]
kind = "gaussian"
rms = 0.1
correlation_length = 1.0
start = 0.0
stop = 10.0

[packet]
center = -20.0
wavenumber = 1.2
width = 4.0

[run]
duration = 5.0
step = 0.05
realizations = 4
seed = 3

[sweep]
"system.disorder.0.rms" = [0.1, 0.2]

[[sweep.zip]]
"system.disorder.0.stop" = [10.0, 20.0, 30.0]
"run.duration" = [5.0, 6.0, 7.0]
"""


def test_a_zipped_sweep_gives_a_point_dimension_with_the_values_along_it(tmp_path):
    study = parse_study(ZIPPED, "zip.toml")
    store = mo.run_study(study, tmp_path / "z.mottle", progress=False, threads=1)
    ds = store.dataset()
    assert ds.transmission_mean.dims == ("point",) and ds.sizes["point"] == 6
    assert list(ds.rms.values) == [0.1, 0.1, 0.1, 0.2, 0.2, 0.2]
    assert list(ds.stop.values) == [10.0, 20.0, 30.0] * 2
    assert list(ds.duration.values) == [5.0, 6.0, 7.0] * 2
    for point in store.points:
        assert ds.transmission_mean.values[point.index] == point.result.transmission.mean
        assert ds.rms.values[point.index] == point.parameters["system.disorder.0.rms"]
    # No snapshots: no profiles, the scalars all there.
    assert "density" not in ds


POINTS = ZIPPED.replace(
    '[sweep]\n"system.disorder.0.rms" = [0.1, 0.2]\n\n[[sweep.zip]]\n'
    '"system.disorder.0.stop" = [10.0, 20.0, 30.0]\n"run.duration" = [5.0, 6.0, 7.0]\n',
    '[[sweep.points]]\n"system.disorder.0.rms" = 0.1\n"system.disorder.0.stop" = 10.0\n\n'
    '[[sweep.points]]\n"system.disorder.0.rms" = 0.3\n"system.disorder.0.stop" = 25.0\n',
).replace("[run]", "[run]\nsnapshots = [5.0]")


def test_a_point_list_is_labelled_point_by_point_and_partial_stores_say_nan(tmp_path):
    study = parse_study(POINTS, "points.toml")
    store = mo.run_study(study, tmp_path / "p.mottle", progress=False, threads=1)
    ds = store.dataset()
    assert list(ds.rms.values) == [0.1, 0.3] and list(ds.stop.values) == [10.0, 25.0]
    assert ds.density.dims == ("point", "time", "x")
    assert np.array_equal(ds.density.values[1], store.points[1].result.density)
    assert store.swept_values([1]) == {"system.disorder.0.rms": [0.3], "system.disorder.0.stop": [25.0]}


RANDOM = ZIPPED.split("[sweep]")[0].replace(
    "center = -20.0\nwavenumber = 1.2",
    'kind = "random"\ncenter = { normal = [-20.0, 1.0] }\nwavenumber = 1.2',
) + (
    '[sweep]\n"packet.wavenumber" = [{ uniform = [1.0, 1.2] }, { uniform = [1.2, 1.4] }, 1.5]\n'
    '"system.disorder.0.stop" = [10.0, 20.0]\n'
)


def test_a_swept_distribution_is_labelled_and_the_report_does_not_crash(tmp_path):
    study = parse_study(RANDOM, "random.toml")
    store = mo.run_study(study, tmp_path / "r.mottle", progress=False, threads=1)
    ds = store.dataset()
    assert list(ds.wavenumber.values) == ["uniform(1, 1.2)", "uniform(1.2, 1.4)", "1.5"]
    cell = ds.transmission_mean.sel(wavenumber="uniform(1.2, 1.4)", stop=20.0).item()
    by_values = {(p.label(), p.index): p for p in store.points}
    (point,) = [p for (label, _), p in by_values.items() if label == "wavenumber=uniform(1.2, 1.4), stop=20"]
    assert cell == point.result.transmission.mean
    table = store.table()
    assert list(table["wavenumber"]) == ["uniform(1, 1.2)"] * 2 + ["uniform(1.2, 1.4)"] * 2 + ["1.5"] * 2
    written = reports.report(store, tmp_path / "figures")
    names = {path.name for path in written.files}
    assert "transmission_vs_stop.png" in names and "summary.txt" in names
    fits = written.fits
    assert [fit.label for fit in fits] == [
        "wavenumber=uniform(1, 1.2)",
        "wavenumber=uniform(1.2, 1.4)",
        "wavenumber=1.5",
    ]
    assert "wavenumber=uniform(1.2, 1.4)" in written.summary_text
    for fit in fits:
        assert all(math.isfinite(v) for v in fit.log_transmission)


def test_points_on_different_grids_keep_their_scalars_and_leave_profiles_out(tmp_path):
    text = ZIPPED.split("[sweep]")[0].replace("[run]", "[run]\nsnapshots = [5.0]")
    study = parse_study(text + '[sweep]\n"system.points" = [256, 512]\n', "grids.toml")
    store = mo.run_study(study, tmp_path / "g.mottle", progress=False, threads=1)
    ds = store.dataset()
    assert ds.transmission_mean.dims == ("points",) and list(ds.points.values) == [256, 512]
    assert "density" not in ds and "differ in grid" in ds.attrs["profiles"]
    assert [ds.transmission_mean.values[i] for i in range(2)] == [
        p.result.transmission.mean for p in store.points
    ]
    # The report still draws each point's own profiles.
    written = reports.report(store, tmp_path / "figures")
    assert {"density.png", "momentum.png"} <= {path.name for path in written.files}
