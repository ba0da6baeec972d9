"""The mottle command end to end: in-process, on a Dask cluster that loses a worker, killed and resumed."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import mottle as mo

STUDY = """\
[study]
title = "six points"

[system]
points = 512
length = 200.0
absorber = { width = 30.0 }

[[system.disorder]]
kind = "gaussian"
rms = 0.1
correlation_length = 1.0
start = 0.0
stop = 20.0

[packet]
center = -40.0
wavenumber = 1.5
width = 6.0

[run]
duration = 60.0
step = 0.05
realizations = 96
seed = 11
snapshots = [30.0, 60.0]

[sweep]
"system.disorder.0.rms" = [0.1, 0.3]
"system.disorder.0.stop" = [10.0, 20.0, 30.0]
"""

_SCRIPT = Path(sys.executable).with_name("mottle")
# The installed console script where there is one for this interpreter, else the same main().
MOTTLE = [str(_SCRIPT)] if _SCRIPT.exists() else [sys.executable, "-m", "mottle.cli"]


def mottle(*args, cwd=None, timeout=300):
    return subprocess.run(
        [*MOTTLE, *map(str, args)], capture_output=True, text=True, cwd=cwd, timeout=timeout, check=False
    )


def start(*args, **options):
    return subprocess.Popen(
        [*MOTTLE, *map(str, args)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **options
    )


def read_until_point(process) -> list[str]:
    lines = []
    while True:
        line = process.stdout.readline()
        assert line, f"the run ended before finishing a point: {process.stderr.read()}"
        lines.append(line)
        if line.startswith("point "):
            return lines


def point_lines(text: str) -> list[str]:
    return [line for line in text.splitlines() if line.startswith("point ")]


def samples(path) -> list[dict]:
    return [point.result.to_arrays() for point in mo.open_store(path).points]


def assert_same_numbers(first, second):
    one, other = samples(first), samples(second)
    assert len(one) == len(other) == 6
    for a, b in zip(one, other, strict=True):
        assert a.keys() == b.keys()
        for name in a:
            assert a[name].dtype == b[name].dtype, name
            assert np.array_equal(a[name], b[name], equal_nan=True), name


@pytest.fixture(scope="module")
def workspace(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli")
    (root / "study.toml").write_text(STUDY)
    # Five times the work per point, for the tests that interrupt a run: a point then takes long
    # enough (about a second) that the interruption comes before the last point on a fast machine too.
    (root / "slow.toml").write_text(STUDY.replace("realizations = 96", "realizations = 480"))
    return root


@pytest.fixture(scope="module")
def in_process(workspace):
    """The reference: the whole study in one uninterrupted in-process run."""
    result = mottle(
        "run", workspace / "study.toml", "--store", workspace / "in-process.mottle", "--threads", 2
    )
    assert result.returncode == 0, result.stderr
    return workspace / "in-process.mottle", result


@pytest.fixture(scope="module")
def slow_in_process(workspace):
    """The reference for the interrupted runs: the slow study uninterrupted, in process."""
    store = workspace / "slow-in-process.mottle"
    result = mottle("run", workspace / "slow.toml", "--store", store, "--threads", 2)
    assert result.returncode == 0, result.stderr
    return store


def test_in_process_run_prints_one_line_per_point_and_fills_the_store(in_process):
    path, result = in_process
    lines = point_lines(result.stdout)
    assert [line.split(" [")[0] for line in lines] == [f"point {i}/6" for i in range(1, 7)]
    assert "[rms=0.1, stop=10]: T = " in lines[0] and "(96 runs, " in lines[0]
    assert "runs" in result.stderr and "points 6/6" in result.stderr  # the progress bar
    store = mo.open_store(path)
    assert store.complete and [p.index for p in store.points] == list(range(6))
    assert all(p.count == 96 for p in store.points)
    # The printed summary is the stored one.
    first = store.points[0].result.transmission
    assert f"T = {first.mean:.4g} ± {first.stderr:.2g}" in lines[0]
    # A second run finds nothing to do.
    again = mottle("run", path.parent / "study.toml", "--store", path)
    assert again.returncode == 0 and point_lines(again.stdout) == []
    assert "6 of 6 points" in again.stdout


def test_a_cluster_that_loses_a_worker_gives_the_same_numbers(workspace, in_process):
    from clusters import busy_worker, forgiving_cluster
    from distributed import Client

    cluster = forgiving_cluster()
    with cluster, Client(cluster) as client:
        before = client.run(os.getpid)
        store = workspace / "cluster.mottle"
        run = start(
            "run", workspace / "study.toml", "--store", store, "--scheduler", cluster.scheduler_address
        )
        victim = busy_worker(client)
        assert victim is not None and run.poll() is None, "no task was seen running"
        os.kill(before[victim], signal.SIGKILL)
        killed_at = len(mo.open_store(store).points) if store.exists() else 0
        out, err = run.communicate(timeout=300)
        assert run.returncode == 0, err
        assert killed_at < 6
        after = client.run(os.getpid)
        assert before[victim] not in after.values()
    assert len(point_lines(out)) == 6
    assert_same_numbers(in_process[0], store)
    hosts = {point.host for point in mo.open_store(store).points}
    assert hosts and all(hosts)


def test_a_killed_driver_resumes_to_the_same_numbers(workspace, slow_in_process):
    store = workspace / "resumed.mottle"
    # One thread (the numbers do not depend on it), the slow study: the first commit comes well
    # before the last point.
    run = start("run", workspace / "slow.toml", "--store", store, "--threads", 1)
    printed = point_lines("".join(read_until_point(run)))
    # Frozen with its lock held, so that it cannot finish before the second writer tries (points
    # that finish together are committed together, so the run may be close to its end here).
    run.send_signal(signal.SIGSTOP)
    try:
        # A second writer on the same store is refused while the first one holds it.
        second = mottle("run", workspace / "slow.toml", "--store", store)
    finally:
        run.send_signal(signal.SIGKILL)
        run.wait()
    assert second.returncode == 1
    assert "being written by another mottle run" in second.stderr and "Traceback" not in second.stderr
    saved = mo.open_store(store)
    finished = {p.index for p in saved.points}
    assert {int(line.split()[1].split("/")[0]) - 1 for line in printed} <= finished
    assert 1 <= len(finished) < 6, "the driver finished before it was killed"
    resumed = mottle("run", workspace / "slow.toml", "--store", store)
    assert resumed.returncode == 0, resumed.stderr
    # Only the missing points ran.
    assert len(point_lines(resumed.stdout)) == 6 - len(finished)
    assert_same_numbers(slow_in_process, store)


def test_ctrl_c_keeps_the_finished_points_and_says_how_to_resume(workspace, slow_in_process):
    store = workspace / "interrupted.mottle"
    run = start(
        "run",
        workspace / "slow.toml",
        "--store",
        store,
        "--workers",
        2,
        "--threads",
        1,
        start_new_session=True,
    )
    read_until_point(run)
    os.killpg(run.pid, signal.SIGINT)  # what a terminal does: the whole process group
    _, err = run.communicate(timeout=120)
    assert run.returncode == 130
    assert "Traceback" not in err
    message = [line for line in err.splitlines() if "interrupted" in line]
    assert len(message) == 1
    done = len(mo.open_store(store).points)
    assert f"interrupted: {done} of 6 points are saved in {store}; resume with: mottle run " in message[0]
    resumed = mottle("run", workspace / "slow.toml", "--store", store)
    assert resumed.returncode == 0
    assert_same_numbers(slow_in_process, store)


def test_report_draws_the_stored_numbers(workspace, in_process):
    import matplotlib.image

    from mottle.cli import report

    path = in_process[0]
    out = workspace / "figures"
    result = mottle("report", path, "--out", out, "--csv", workspace / "table.csv")
    assert result.returncode == 0, result.stderr
    names = {
        "transmission_vs_rms.png",
        "transmission_vs_stop.png",
        "log_transmission_vs_length.png",
        "density.png",
        "momentum.png",
    }
    assert names <= {p.name for p in out.iterdir()}
    for name in names:
        pixels = matplotlib.image.imread(out / name)
        assert pixels.shape[0] > 200 and pixels.shape[1] > 300
        assert np.ptp(pixels[..., :3]) > 0.5  # something is drawn, not a blank canvas
    summary = (out / "summary.txt").read_text()
    assert "six points: 6 of 6 points" in summary and "xi = " in summary
    assert summary in result.stdout
    assert (workspace / "table.csv").read_text().count("\n") == 7

    store = mo.open_store(path)
    by_values = {tuple(p.parameters.values()): p.result for p in store.points}

    figure = report.transmission_figure(store, "system.disorder.0.stop")
    (ax,) = figure.axes
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["rms=0.1", "rms=0.3"]
    for container, rms in zip(ax.containers, (0.1, 0.3), strict=True):
        x, y = container.lines[0].get_data()
        assert list(x) == [10.0, 20.0, 30.0]
        stats = [by_values[(rms, stop)].transmission for stop in x]
        assert np.array_equal(y, [s.mean for s in stats])
        (bars,) = container.lines[2]
        heights = [segment[1, 1] - segment[0, 1] for segment in bars.get_segments()]
        assert np.allclose(heights, [2 * s.stderr for s in stats], rtol=1e-12)

    figure = report.log_transmission_figure(store)
    (ax,) = figure.axes
    for container, rms in zip(ax.containers, (0.1, 0.3), strict=True):
        x, y = container.lines[0].get_data()
        assert list(x) == [10.0, 20.0, 30.0]  # the sample length stop - start
        stats = [by_values[(rms, stop)].transmission for stop in x]
        assert np.array_equal(y, [s.log_mean for s in stats])
        # The drawn fit is the weighted least-squares line (numpy's polyfit weights are 1/sigma).
        slope, intercept = np.polyfit(x, y, 1, w=[1 / s.log_stderr for s in stats])
        fit = next(f for f in report.localization_fits(store) if f.label == f"rms={rms}")
        assert np.isclose(fit.fit.slope, slope, rtol=1e-9)
        assert np.isclose(fit.fit.intercept, intercept, rtol=1e-9)
        assert np.isclose(fit.fit.localization_length, -2 / slope, rtol=1e-9)
        assert f"xi = {fit.fit.localization_length:.4g}" in summary

    figure = report.momentum_figure(store)
    assert len(figure.axes) == 2  # one panel per snapshot
    for snapshot, ax in enumerate(figure.axes):
        lines = ax.get_lines()
        assert len(lines) == 6
        for line, point in zip(lines, store.points, strict=True):
            x, y = line.get_data()
            assert np.array_equal(x, point.result.k)
            assert np.array_equal(y, point.result.momentum[snapshot])
    assert figure.axes[0].get_yscale() == "linear"

    # The density: one panel per point, one line per snapshot, the disorder and the layers shaded.
    figure = report.density_figure(store)
    assert len(figure.axes) == 6
    for ax, point in zip(figure.axes, store.points, strict=True):
        assert ax.get_yscale() == "log"
        lines = ax.get_lines()
        assert len(lines) == 2
        for snapshot, line in enumerate(lines):
            x, y = line.get_data()
            assert np.array_equal(x, point.result.x)
            assert np.array_equal(y, point.result.density[snapshot])
        spans = sorted(
            tuple(np.round(patch.get_x() + np.array([0.0, patch.get_width()]), 9)) for patch in ax.patches
        )
        stop = point.resolved["system"]["disorder"][0]["stop"]
        assert spans == [(-100.0, -70.0), (0.0, stop), (70.0, 100.0)]
    figure.savefig(workspace / "density-check.png", dpi=80)


def test_dry_run_lists_points_and_runs_nothing(workspace):
    result = mottle("run", workspace / "study.toml", "--store", workspace / "dry.mottle", "--dry-run")
    assert result.returncode == 0
    assert "valid, 6 points, 576 realizations in all" in result.stdout
    assert "point 6: rms=0.3, stop=30 (seed " in result.stdout
    assert not (workspace / "dry.mottle").exists()


def test_errors_are_one_line_without_traceback_unless_debug(workspace, in_process):
    bad = workspace / "bad.toml"
    bad.write_text(STUDY.replace("width = 6.0", "widht = 6.0"))
    result = mottle("run", bad)
    assert result.returncode == 2
    assert result.stderr.strip().splitlines() == [
        f"mottle: error: {bad}:19: packet.widht: unknown key; did you mean 'width'?"
    ]
    debug = mottle("run", bad, "--debug")
    assert debug.returncode == 2 and "Traceback" in debug.stderr
    assert mottle("--debug", "run", bad).stderr.count("Traceback") == 1

    other = workspace / "other.toml"
    other.write_text(STUDY.replace("realizations = 96", "realizations = 64"))
    refused = mottle("run", other, "--store", in_process[0])
    assert refused.returncode == 1
    assert "different study" in refused.stderr and "run.realizations: 96 != 64" in refused.stderr

    notes = workspace / "notes.mottle"
    notes.write_text("not a store")
    for args in (("run", workspace / "study.toml", "--store", notes), ("report", notes)):
        result = mottle(*args)
        assert result.returncode == 1 and "Traceback" not in result.stderr
        assert (
            result.stderr.strip()
            == f"mottle: error: {notes} is not a mottle results store (it was not overwritten)"
        )
    assert notes.read_text() == "not a store"

    result = mottle("report", workspace / "absent.mottle")
    assert result.returncode == 1 and "no such results store" in result.stderr
    usage = mottle("run", workspace / "study.toml", "--workers", 2, "--scheduler", "tcp://127.0.0.1:1")
    assert usage.returncode == 2 and "not allowed with argument" in usage.stderr
    assert mottle("run", workspace / "study.toml", "--workers", 0).returncode == 2


@pytest.mark.parametrize("command", [(), ("run",), ("report",), ("demo",), ("check",)])
def test_help_with_examples(command):
    result = mottle(*command, "--help")
    assert result.returncode == 0
    assert "examples:" in result.stdout and "mottle" in result.stdout


def test_check_passes_and_prints_value_reference_tolerance_and_source():
    result = mottle("check")
    assert result.returncode == 0, result.stdout + result.stderr
    header = result.stdout.splitlines()[0].split()
    assert header == ["case", "value", "reference", "error", "tolerance", "status", "source"]
    rows = {
        line.split()[0]: line for line in result.stdout.splitlines()[1:] if line and not line.startswith(" ")
    }
    for name in ("barrier-transmission", "free-gaussian-width", "free-gaussian-center", "coherent-state"):
        assert " ok " in rows[name]
    assert "Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005)" in rows["barrier-transmission"]
    unknown = mottle("check", "barrier-transmision")
    assert unknown.returncode == 2 and "did you mean 'barrier-transmission'" in unknown.stderr


def test_check_fails_on_a_failing_case(monkeypatch, capsys):
    from mottle import cli
    from mottle.cli import check

    cases = dict(check._REGISTRY)
    cases["always-off"] = check.Case(
        "always-off", "a case whose value misses its reference", "test", lambda: check.Outcome(1.0, 2.0, 0.1)
    )
    cases["crashes"] = check.Case("crashes", "a case that raises", "test", lambda: 1 / 0)
    monkeypatch.setattr(check, "_REGISTRY", cases)
    status = cli.main(["check", "always-off", "crashes", "free-gaussian-center"])
    out = capsys.readouterr().out
    assert status == 1
    assert "2 of 3 checks failed: always-off, crashes" in out
    assert "ZeroDivisionError" in out


def test_the_demo_condensate_released_into_speckle_grows_tails_that_settle():
    from mottle.cli.demo import released_condensate

    lines, fits = released_condensate()
    assert "a condensate released into a speckled guide (mu = 0.225" in lines[0]
    _, (_, middle, middle_error), (_, late, late_error) = fits
    # Decaying tails (a finite, positive decay length well inside the window's scale) whose length
    # has stopped changing between t = 160 and 240 within the errors (common practice: the
    # stationary tails of Anderson localization are what a localization length is read from).
    assert 10.0 < late < 200.0 and 10.0 < middle < 200.0
    assert late_error < 0.5 * late and middle_error < 0.5 * middle
    assert abs(late - middle) < 2.0 * math.hypot(late_error, middle_error)


def test_the_demo_slab_in_2d_shows_the_backscattering_peak(tmp_path):
    from mottle.cli.demo import backscattering_slab

    lines, ratio = backscattering_slab(realizations=48, figure_path=tmp_path / "cbs.png")
    # Cherroret et al., Phys. Rev. A 85, 011604 (2012): a peak at -k0 above the reflected ring;
    # from a slab it stays below the bulk's 2 (single scattering, the finite spot).
    assert 1.15 < ratio < 2.2, ratio
    assert "a packet entering a speckled slab in 2D" in lines[0]
    assert (tmp_path / "cbs.png").stat().st_size > 10000


def test_demo_writes_study_store_and_figures_within_two_minutes(tmp_path):
    began = time.monotonic()
    result = mottle("demo", "--out", tmp_path / "demo", "--quiet", timeout=240)
    elapsed = time.monotonic() - began
    assert result.returncode == 0, result.stderr
    assert elapsed < 120
    assert "a condensate released into a speckled guide" in result.stdout
    assert "a packet entering a speckled slab in 2D" in result.stdout
    assert (tmp_path / "demo" / "figures" / "backscattering_2d.png").exists()
    for line in (
        f"study:   {tmp_path / 'demo' / 'demo.toml'}",
        f"store:   {tmp_path / 'demo' / 'demo.mottle'}",
    ):
        assert line in result.stdout
    store = mo.open_store(tmp_path / "demo" / "demo.mottle")
    assert store.complete and len(store.points) == 12
    assert mo.load_study(tmp_path / "demo" / "demo.toml").differences(store.canonical) == []
    # Labelled access: one dimension per swept key, the stored numbers to the bit.
    ds = store.dataset()
    assert ds.transmission_mean.dims == ("strength", "stop")
    assert list(ds.strength.values) == [0.1, 0.2, 0.3] and list(ds.stop.values) == [20.0, 40.0, 60.0, 80.0]
    (point,) = [
        p
        for p in store.points
        if p.parameters["system.disorder.0.strength"] == 0.2
        and p.parameters["system.disorder.0.stop"] == 40.0
    ]
    assert ds.transmission_mean.sel(strength=0.2, stop=40.0).item() == point.result.transmission.mean
    figures = tmp_path / "demo" / "figures"
    assert (figures / "log_transmission_vs_length.png").stat().st_size > 10000
    # Stronger speckle localizes more: the fitted xi falls with the strength.
    from mottle.cli.report import localization_fits

    xi = [series.fit.localization_length for series in localization_fits(store)]
    assert len(xi) == 3 and xi[0] > xi[1] > xi[2] > 0
