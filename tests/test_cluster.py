"""The study runner's driver: a bounded window of Dask tasks, small points grouped, target_stderr
stopping that matches mo.ensemble to the bit, commits batched by time, and the progress display."""

from __future__ import annotations

import dataclasses
import io
import sys

import numpy as np
import pytest

import mottle as mo
from mottle.analysis.statistics import stderr
from mottle.studies import cluster, runner
from mottle.studies.study import StudyPoint, parse_study

STUDY = """\
[system]
points = 256
length = 120.0
absorber = { width = 15.0 }

[[system.disorder]]
kind = "gaussian"
rms = 0.3
correlation_length = 1.0
start = 0.0
stop = 20.0

[packet]
center = -25.0
wavenumber = 1.5
width = 5.0

[run]
duration = 40.0
step = 0.2
realizations = %d
seed = 3
%s

[sweep]
"system.disorder.0.rms" = %s
"""


def small_study(values, realizations=16, target=None):
    extra = "" if target is None else f"target_stderr = {target!r}"
    return parse_study(STUDY % (realizations, extra, [float(v) for v in values]), "small.toml")


def changed(point, **run):
    """The point with some of its run keys changed (past the study file's validation)."""
    resolved = {**point.resolved, "run": {**point.resolved["run"], **run}}
    return StudyPoint(point.index, point.parameters, resolved, point.seed, point.tables)


def same(one, other) -> None:
    a, b = one.to_arrays(), other.to_arrays()
    assert a.keys() == b.keys()
    for name in a:
        assert a[name].dtype == b[name].dtype, name
        assert np.array_equal(a[name], b[name], equal_nan=True), name


@pytest.fixture(scope="module", params=[1, 2], ids=["1 worker", "2 workers"])
def client(request):
    from distributed import Client, LocalCluster

    with (
        LocalCluster(
            n_workers=request.param,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
        ) as local,
        Client(local) as connected,
    ):
        yield connected


def stopping_target(point) -> tuple[float, int]:
    """A target_stderr that mo.ensemble reaches after k >= 3 chunks (k < the cap), and k."""
    system, packet, arguments = point.build()
    full = mo.ensemble(system, packet, threads=1, **arguments).samples["transmission"]
    curve = [stderr(full[: mo.CHUNK * k]) for k in range(1, point.realizations // mo.CHUNK + 1)]
    for k in range(3, len(curve)):
        lowest = min(curve[: k - 1])
        if curve[k - 1] < lowest:
            return (curve[k - 1] + lowest) / 2, k
    raise AssertionError("the standard error never fell to a new low")


def collect(client, points, threads=1):
    advanced, skipped = [], []
    out = {}
    for batch in cluster.run_on_cluster(client, points, threads, advanced.append, skip=skipped.append):
        for point, result, timing in batch:
            assert point.index not in out
            out[point.index] = result
            assert timing["compute_time"] > 0 and timing["host"]
    return out, sum(advanced), sum(skipped)


def test_target_stderr_on_dask_stops_at_the_chunk_ensemble_stops_at(client):
    base = small_study([0.3, 0.5], realizations=320)
    target, chunks = stopping_target(base.points[0])
    points = list(small_study([0.3, 0.5], realizations=320, target=target).points)
    results, advanced, skipped = collect(client, list(points))
    assert sorted(results) == [0, 1]
    counts = []
    for point in points:
        system, packet, arguments = point.build()
        assert arguments["target_stderr"] == target
        expected = mo.ensemble(system, packet, threads=2, **arguments)
        same(results[point.index], expected)
        counts.append(expected.count)
    assert counts[0] == chunks * mo.CHUNK < 320
    # Tasks of two Rust threads get pieces of two chunks: the stop may fall inside one.
    for index, result in collect(client, list(points), threads=2)[0].items():
        same(result, results[index])
    # Progress counted the folded realizations only, and let go of the cap's remainder.
    assert advanced == sum(counts) and skipped == 2 * 320 - sum(counts)


def test_run_study_with_target_stderr_stores_the_same_numbers_both_ways(client, tmp_path):
    base = small_study([0.3], realizations=320)
    target, chunks = stopping_target(base.points[0])
    stopping = small_study([0.3], realizations=320, target=target)
    mo.run_study(stopping, tmp_path / "here.mottle", progress=False, threads=1)
    mo.run_study(stopping, tmp_path / "there.mottle", scheduler=client, progress=False, threads=1)
    here, there = (
        mo.open_store(tmp_path / "here.mottle").points,
        mo.open_store(tmp_path / "there.mottle").points,
    )
    assert [p.count for p in here] == [p.count for p in there] == [chunks * mo.CHUNK]
    same(here[0].result, there[0].result)


class Spy:
    """A client that remembers how many of its tasks were unfinished whenever one was submitted."""

    def __init__(self, client):
        self.client, self.futures, self.most = client, [], 0

    def nthreads(self):
        return self.client.nthreads()

    def submit(self, *args, **options):
        self.most = max(self.most, 1 + sum(not future.done() for future in self.futures))
        future = self.client.submit(*args, **options)
        self.futures.append(future)
        return future

    def cancel(self, futures):
        return self.client.cancel(futures)


def test_many_small_points_run_in_a_bounded_window_of_grouped_tasks(client):
    values = np.round(np.linspace(0.05, 0.5, 48), 4)
    points = list(small_study(values).points)
    spy = Spy(client)
    results, advanced, skipped = collect(spy, points)
    slots = sum(client.nthreads().values())
    assert spy.most <= cluster.IN_FLIGHT_PER_SLOT * slots
    # After the first tasks measured the cost of a run, the small points went several to a task.
    assert len(spy.futures) < len(points)
    assert sorted(results) == list(range(len(points)))
    assert advanced == 16 * len(points) and skipped == 0
    for point in points[::7]:
        system, packet, arguments = point.build()
        same(results[point.index], mo.ensemble(system, packet, threads=1, **arguments))


def test_a_failing_point_is_named(client, monkeypatch):
    points = list(small_study([0.3, 0.4, 0.5]).points)
    points[1] = changed(points[1], duration=-1.0)
    with pytest.raises(
        mo.MottleError, match=r"point 2 \(.*rms=0.4\) failed on a worker: InvalidParameterError"
    ):
        collect(client, points)


def test_in_process_points_are_committed_in_batches_by_time(tmp_path, monkeypatch):
    from mottle.studies.store import StoreWriter

    commits = []
    original = StoreWriter.commit

    def commit(self, finished):
        finished = list(finished)
        commits.append(len(finished))
        return original(self, finished)

    monkeypatch.setattr(StoreWriter, "commit", commit)
    small = small_study(np.round(np.linspace(0.05, 0.5, 12), 4))
    mo.run_study(small, tmp_path / "batched.mottle", progress=False, threads=1)
    assert sum(commits) == 12 and len(commits) < 12
    assert len(mo.open_store(tmp_path / "batched.mottle").points) == 12
    commits.clear()
    monkeypatch.setattr(runner, "COMMIT_SECONDS", 0.0)
    mo.run_study(small, tmp_path / "each.mottle", progress=False, threads=1)
    assert commits == [1] * 12


class Clock:
    def __init__(self):
        self.now = 100.0

    def __call__(self):
        return self.now


def test_batch_falls_due_by_age_size_or_the_next_point():
    clock = Clock()
    batch = runner.Batch(seconds=2.0, limit=3, clock=clock)
    assert not batch.due() and batch.wait_left() == float("inf")
    batch.add("a")
    clock.now += 1.5
    assert not batch.due() and batch.wait_left() == pytest.approx(0.5)
    assert batch.due(ahead=0.5)  # the next point would make it wait too long
    clock.now += 0.5
    assert batch.due() and batch.take() == ["a"] and not batch
    for item in "xyz":
        batch.add(item)
    assert batch.due() and len(batch.take()) == 3


def test_progress_rate_and_time_left_with_a_fake_clock():
    clock = Clock()
    progress = runner.Progress(points=100, done=20, runs=10_000, clock=clock)
    assert progress.status() == "starting" and progress.left() == float("inf")
    clock.now += 10
    progress.advance(1000)
    assert progress.rate() == pytest.approx(100.0)
    assert progress.status() == "100 runs/s, 1 min 30 s left"
    progress.finished(5)
    assert progress.line() == "points 25/100, 1000/10000 runs, 100 runs/s, 1 min 30 s left"
    # The rate follows the last minute: the slow second stretch replaces the fast first one.
    clock.now += 90
    progress.advance(1000)
    assert progress.rate() == pytest.approx(1000 / 90)
    assert progress.status() == "11.1 runs/s, 12 min 00 s left"
    # A point that reached its target_stderr early lets go of the rest of its cap.
    progress.skip(4000)
    assert progress.runs == 6000 and progress.left() == pytest.approx(4000 * 0.09)
    clock.now += 1e6
    progress.advance(4000)
    assert progress.status() == "0.004 runs/s, 0 s left"


@pytest.mark.parametrize(
    "seconds, text",
    [
        (0.4, "0 s"),
        (42, "42 s"),
        (185, "3 min 05 s"),
        (7620, "2 h 07 min"),
        (3 * 86400 + 4 * 3600, "3 d 4 h"),
    ],
)
def test_durations(seconds, text):
    assert runner._duration(seconds) == text


def test_rates():
    assert [runner._rate(v) for v in (0.52, 37.44, 812, 1520, 23100, 1.2e6)] == [
        "0.52",
        "37.4",
        "812",
        "1.52k",
        "23.1k",
        "1.2M",
    ]


def test_plain_progress_without_tqdm(monkeypatch):
    monkeypatch.setitem(sys.modules, "tqdm", None)  # import tqdm fails
    clock, err, out = Clock(), io.StringIO(), io.StringIO()
    display = runner._Display(stream=err, clock=clock, out=out)
    display.start(10, 2, 800)
    clock.now += 5
    display.advance(100)
    assert err.getvalue() == ""  # not yet: a status line every STATUS_SECONDS
    clock.now += runner.STATUS_SECONDS - 5
    display.advance(100)
    assert err.getvalue() == "points 2/10, 200/800 runs, 20 runs/s, 30 s left\n"
    display.finished(["point 3/10 [a]: T = 1", "point 4/10 [b]: T = 2"])
    assert out.getvalue() == "point 3/10 [a]: T = 1\npoint 4/10 [b]: T = 2\n"
    display.close()
    display.close()
    assert err.getvalue().splitlines()[-1] == "points 4/10, 200/800 runs, 20 runs/s, 30 s left"
    assert len(err.getvalue().splitlines()) == 2


def test_tqdm_progress_shows_points_rate_and_time_left():
    clock, err, out = Clock(), io.StringIO(), io.StringIO()
    display = runner._Display(stream=err, clock=clock, out=out)
    display.start(4, 0, 64)
    clock.now += 2
    display.advance(16)
    display.finished(["point 1/4 [a]"])
    display.close()
    assert "points 1/4" in err.getvalue() and "8 runs/s, 6 s left" in err.getvalue()
    assert out.getvalue() == "point 1/4 [a]\n"


def test_points_finished_before_a_failing_one_are_saved(tmp_path):
    small = small_study([0.1, 0.2, 0.3, 0.4])
    points = (*small.points[:2], changed(small.points[2], duration=-1.0), small.points[3])
    failing = dataclasses.replace(small, points=points)
    with pytest.raises(mo.MottleError, match=r"point 3 \(.*rms=0.3\) failed"):
        mo.run_study(failing, tmp_path / "partial.mottle", progress=False, threads=1)
    # The two finished points were still waiting for their batch's commit when point 3 failed.
    assert [p.index for p in mo.open_store(tmp_path / "partial.mottle").points] == [0, 1]
