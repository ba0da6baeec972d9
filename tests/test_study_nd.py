"""Studies on a 2D grid: the study file's per-axis values, in process and on a Dask cluster with the
same numbers, the labelled dataset, and the report's images of the stored numbers."""

from __future__ import annotations

import numpy as np
import pytest

import mottle as mo
from mottle.cli import report as reports
from mottle.cli import report_nd
from mottle.studies.study import StudyError, parse_study

SLAB = """\
[study]
title = "a packet through a 2D slab"

[system]
points = [96, 64]
length = [80.0, 56.0]
absorber = { width = 10.0, axes = [0] }

[[system.potential]]
kind = "barrier"
height = 0.4
left = 0.0
right = 2.0

[packet]
center = [-15.0, 0.0]
wavenumber = [1.0, 0.2]
width = [4.0, 3.0]

[run]
duration = 12.0
step = 0.05
realizations = 32
snapshots = [6.0, 12.0]
detector = [-5.0, 5.0]

[sweep]
"system.potential.0.height" = [0.2, 0.4]
"""


@pytest.fixture(scope="module")
def in_process(tmp_path_factory):
    root = tmp_path_factory.mktemp("slab")
    return mo.run_study(parse_study(SLAB, "slab.toml"), root / "slab.mottle", progress=False, threads=2)


def test_a_2d_study_stores_what_the_api_computes(in_process):
    store = in_process
    assert store.complete and len(store.points) == 2
    point = store.points[1]
    system = mo.System(
        mo.Grid(points=(96, 64), length=(80.0, 56.0)),
        potential=mo.Barrier(0.4, 0.0, 2.0),
        absorber=mo.Absorber(10.0, axes=(0,)),
    )
    packet = mo.GaussianPacket(center=(-15.0, 0.0), wavenumber=(1.0, 0.2), width=(4.0, 3.0))
    direct = mo.ensemble(
        system, packet, 12.0, 0.05, 32, seed=point.seed, snapshots=[6.0, 12.0], detector=(-5.0, 5.0)
    )
    stored, computed = point.result.to_arrays(), direct.to_arrays()
    assert stored.keys() == computed.keys()
    for name in stored:
        assert np.array_equal(stored[name], computed[name], equal_nan=True), name
    # The barrier reflects: more at the higher one.
    assert store.points[1].result.reflection.mean > store.points[0].result.reflection.mean > 0.0


def test_the_dataset_of_a_2d_study_has_one_coordinate_per_axis(in_process):
    ds = in_process.dataset()
    assert ds.density.dims == ("height", "time", "x_0", "x_1")
    assert ds.momentum.dims == ("height", "time", "k_0", "k_1")
    assert ds.second_moment.dims == ("height", "time", "axis")
    result = in_process.points[0].result
    assert np.array_equal(ds.density.sel(height=0.2).values, result.density)
    assert np.array_equal(ds.x_1.values, result.x[1]) and np.array_equal(ds.k_0.values, result.k[0])


def test_a_dask_cluster_gives_the_same_numbers_in_2d(in_process, tmp_path):
    store = mo.run_study(
        parse_study(SLAB, "slab.toml"), tmp_path / "cluster.mottle", workers=2, progress=False
    )
    for ours, theirs in zip(in_process.points, store.points, strict=True):
        a, b = ours.result.to_arrays(), theirs.result.to_arrays()
        for name in a:
            assert np.array_equal(a[name], b[name], equal_nan=True), name


def test_the_report_draws_images_of_the_stored_numbers(in_process, tmp_path):
    written = reports.report(in_process, tmp_path / "figures")
    names = {path.name for path in written.files}
    assert {"density.png", "momentum.png", "radial_momentum.png"} <= names
    figure = report_nd.density_image_figure(in_process)
    image = figure.axes[0].images[0].get_array()
    assert np.array_equal(np.asarray(image), in_process.points[0].result.density[0].T)
    radial = report_nd.radial_momentum_figure(in_process)
    line = radial.axes[0].lines[1]
    q, n = in_process.points[1].result.radial_momentum()
    assert np.array_equal(line.get_ydata(), n[-1]) and np.array_equal(line.get_xdata(), q)


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (("points = [96, 64]", "points = [96, 64, 8, 8]"), r"one per axis \(2 or 3 of them\)"),
        (("wavenumber = [1.0, 0.2]", 'wavenumber = [1.0, "y"]'), "one per axis"),
        (("axes = [0]", "axes = [3]"), "axis the 2D grid does not have"),
        (("center = [-15.0, 0.0]", "center = [-15.0, 0.0, 1.0]"), "packet"),
    ],
)
def test_bad_per_axis_values_are_refused_with_their_line(change, message):
    with pytest.raises(StudyError, match=message) as error:
        parse_study(SLAB.replace(*change), "slab.toml")
    assert "slab.toml:" in str(error.value)


def test_a_disorder_box_in_a_study_file_is_the_apis_box(tmp_path):
    text = SLAB.replace(
        '[[system.potential]]\nkind = "barrier"\nheight = 0.4\nleft = 0.0\nright = 2.0\n',
        '[[system.disorder]]\nkind = "gaussian"\nrms = 0.1\ncorrelation_length = 2.0\n'
        "start = [-5.0, -10.0]\nstop = [5.0, 10.0]\n",
    ).split("[sweep]")[0]
    store = mo.run_study(parse_study(text, "box.toml"), tmp_path / "box.mottle", progress=False, threads=2)
    (point,) = store.points
    grid = mo.Grid(points=(96, 64), length=(80.0, 56.0))
    system = mo.System(
        grid,
        disorder=mo.GaussianDisorder(0.1, 2.0, start=(-5.0, -10.0), stop=(5.0, 10.0)),
        absorber=mo.Absorber(10.0, axes=(0,)),
    )
    packet = mo.GaussianPacket(center=(-15.0, 0.0), wavenumber=(1.0, 0.2), width=(4.0, 3.0))
    direct = mo.ensemble(
        system, packet, 12.0, 0.05, 32, seed=point.seed, snapshots=[6.0, 12.0], detector=(-5.0, 5.0)
    )
    assert np.array_equal(point.result.samples["transmission"], direct.samples["transmission"])
    assert np.array_equal(point.result.density, direct.density)


def test_a_2d_study_survives_a_killed_worker(in_process, tmp_path):
    # As tests/test_cli.py does in 1D: `mottle run --scheduler` on a cluster that loses a busy
    # worker finishes with the in-process numbers.
    import os
    import signal
    import subprocess
    import sys
    from pathlib import Path

    from clusters import busy_worker, forgiving_cluster
    from distributed import Client

    study = tmp_path / "slab.toml"
    study.write_text(SLAB)
    script = Path(sys.executable).with_name("mottle")
    command = [str(script)] if script.exists() else [sys.executable, "-m", "mottle.cli"]
    cluster = forgiving_cluster()
    with cluster, Client(cluster) as client:
        before = client.run(os.getpid)
        store = tmp_path / "killed.mottle"
        run = subprocess.Popen(
            [*command, "run", str(study), "--store", str(store), "--scheduler", cluster.scheduler_address],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        victim = busy_worker(client)
        assert victim is not None and run.poll() is None, "no task was seen running"
        os.kill(before[victim], signal.SIGKILL)
        _, err = run.communicate(timeout=300)
        assert run.returncode == 0, err
        assert before[victim] not in client.run(os.getpid).values()
    killed = mo.open_store(store)
    for ours, theirs in zip(in_process.points, killed.points, strict=True):
        a, b = ours.result.to_arrays(), theirs.result.to_arrays()
        for name in a:
            assert np.array_equal(a[name], b[name], equal_nan=True), name


def test_the_2d_example_loads_as_the_demos_slab():
    from pathlib import Path

    study = mo.load_study(Path(__file__).resolve().parents[1] / "examples" / "speckled_slab_2d.toml")
    assert len(study.points) == 2
    from mottle.studies.study import build_packet, build_system

    resolved = study.points[1].resolved
    system = build_system(resolved, {})
    assert system.grid.shape == (160, 144) and system.absorber.axes == (0,)
    assert build_packet(resolved, system).wavenumber == (2 * np.pi * 13 / 80.0, 0.0)
