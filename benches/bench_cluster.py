"""Studies on a local Dask cluster of 2 workers x 1 thread against one process with 2 threads.

A study of 8 points: both write the same store (bitwise the same numbers); the
figure is the ratio of their best times, target at most 1.15. The cluster is
started once, outside the timing (its start-up, about two seconds, is printed
beside it): what is timed is the cost of running a study as tasks, shipping
partials and merging them.

A study of 10^4 small points (256 grid points, 32 realizations, 40 steps:
milliseconds each; ``MOTTLE_BENCH_POINTS`` changes the number): the two
runners' batches are consumed and dropped without a store, so that what is
measured is the driver (the store's own cost per commit is benches of its own),
once each. Figures: the wall time ratio, the tasks the cluster path made, and
the growth of the driver's resident memory over the run (sampled every 20 ms).
"""

from __future__ import annotations

import itertools
import os
import threading
import time

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record
from mottle.studies import cluster as cluster_module
from mottle.studies import runner
from mottle.studies.study import parse_study

STUDY = """\
[system]
points = 1024
length = 240.0
center = 10.0
absorber = { width = 20.0 }

[[system.disorder]]
kind = "speckle"
strength = 0.2
correlation_length = 0.5
start = 0.0
stop = 40.0

[packet]
center = -60.0
wavenumber = 1.0
width = 10.0

[run]
duration = 150.0
step = 0.1
realizations = 96
seed = 5
snapshots = [150.0]

[sweep]
"system.disorder.0.strength" = [0.1, 0.2]
"system.disorder.0.stop" = [20.0, 40.0, 60.0, 80.0]
"""

COUNTER = itertools.count()
STORES = {}


@pytest.fixture(scope="module")
def study():
    return parse_study(STUDY, "bench.toml")


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster

    began = time.perf_counter()
    cluster = LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    )
    TIMINGS["study: local cluster start-up (once)"] = time.perf_counter() - began
    with cluster, Client(cluster) as connected:
        yield connected


def fresh_store(tmp_path, name):
    path = tmp_path / f"{name}-{next(COUNTER)}.mottle"
    STORES[name] = path
    return (path,), {}


@pytest.mark.benchmark(group="study of 8 points")
def test_in_process(benchmark, study, tmp_path):
    benchmark.pedantic(
        lambda path: mo.run_study(study, path, progress=False, threads=2),
        setup=lambda: fresh_store(tmp_path, "in-process"),
        rounds=3,
    )
    record("study: in-process, 2 threads", benchmark)


@pytest.mark.benchmark(group="study of 8 points")
def test_local_cluster(benchmark, study, client, tmp_path):
    benchmark.pedantic(
        lambda path: mo.run_study(study, path, scheduler=client, progress=False, threads=1),
        setup=lambda: fresh_store(tmp_path, "cluster"),
        rounds=3,
    )
    record("study: local cluster, 2 workers x 1 thread", benchmark)
    ratio = TIMINGS["study: local cluster, 2 workers x 1 thread"] / TIMINGS["study: in-process, 2 threads"]
    figure("study: cluster / in-process time", ratio, "<= 1.15")
    print(f"\nlocal cluster (2 x 1 thread) / in-process (2 threads): {ratio:.3f}")
    one = [p.result.samples["transmission"] for p in mo.open_store(STORES["in-process"]).points]
    other = [p.result.samples["transmission"] for p in mo.open_store(STORES["cluster"]).points]
    assert all(np.array_equal(a, b) for a, b in zip(one, other, strict=True))


SMALL = """\
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
duration = 8.0
step = 0.2
realizations = 32
seed = 3

[sweep]
"system.disorder.0.rms" = %s
"system.disorder.0.stop" = %s
"""
SMALL_POINTS = int(os.environ.get("MOTTLE_BENCH_POINTS", "10000"))
KEPT = {}


@pytest.fixture(scope="module")
def small_study(tmp_path_factory):
    side = max(1, round(SMALL_POINTS**0.5))
    rms = [float(v) for v in np.round(np.linspace(0.05, 0.5, side), 6)]
    stops = [float(v) for v in np.round(np.linspace(5.0, 25.0, SMALL_POINTS // side), 6)]
    root = tmp_path_factory.mktemp("small")
    began = time.perf_counter()
    loaded = parse_study(SMALL % (rms, stops), "small.toml", root=root, store=root / "small.mottle")
    TIMINGS[f"study of {len(loaded.points)} points: loading (once)"] = time.perf_counter() - began
    return loaded


class PeakMemory:
    """The largest growth of this process's resident memory while in use, sampled every 20 ms."""

    def __init__(self):
        self.page = os.sysconf("SC_PAGE_SIZE")

    def rss(self) -> int:
        with open("/proc/self/statm") as statm:
            return int(statm.read().split()[1]) * self.page

    def __enter__(self):
        self.base = self.peak = self.rss()
        self.running = True
        self.thread = threading.Thread(target=self._sample, daemon=True)
        self.thread.start()
        return self

    def _sample(self):
        while self.running:
            self.peak = max(self.peak, self.rss())
            time.sleep(0.02)

    def __exit__(self, *exc):
        self.running = False
        self.thread.join()
        self.peak = max(self.peak, self.rss())

    @property
    def growth_mib(self) -> float:
        return (self.peak - self.base) / 2**20


def drain(batches, name):
    """Consume a runner's batches as run_study does, keeping a few results to compare."""
    count = 0
    for batch in batches:
        for point, result, _ in batch:
            count += 1
            if point.index % 997 == 0:
                KEPT.setdefault(name, {})[point.index] = result.samples["transmission"]
    return count


@pytest.mark.benchmark(group="study of 10^4 small points")
def test_small_points_in_process(benchmark, small_study):
    points = list(small_study.points)

    def run():
        batches = runner._in_process(points, 2, lambda n: None, lambda n: None, runner.Batch())
        assert drain(batches, "in-process") == len(points)

    with PeakMemory() as memory:
        benchmark.pedantic(run, rounds=1, iterations=1)
    record(f"study of {len(points)} points: in-process, 2 threads", benchmark)
    figure("10^4 points: driver memory growth, in-process (MiB)", memory.growth_mib, "bounded")


@pytest.mark.benchmark(group="study of 10^4 small points")
def test_small_points_local_cluster(benchmark, small_study, client):
    points = list(small_study.points)
    submitted = []

    class Counting:
        def nthreads(self):
            return client.nthreads()

        def submit(self, *args, **options):
            submitted.append(1)
            return client.submit(*args, **options)

        def cancel(self, futures):
            return client.cancel(futures)

    def run():
        batches = cluster_module.run_on_cluster(Counting(), points, 1, lambda n: None, batch=runner.Batch())
        assert drain(batches, "cluster") == len(points)

    with PeakMemory() as memory:
        benchmark.pedantic(run, rounds=1, iterations=1)
    name = f"study of {len(points)} points"
    record(f"{name}: local cluster, 2 workers x 1 thread", benchmark)
    here = TIMINGS[f"{name}: in-process, 2 threads"]
    ratio = TIMINGS[f"{name}: local cluster, 2 workers x 1 thread"] / here
    figure("10^4 points: cluster / in-process time", ratio, "<= 1.15")
    figure("10^4 points: tasks submitted", float(len(submitted)), "<< points")
    figure("10^4 points: driver memory growth, cluster (MiB)", memory.growth_mib, "bounded")
    print(f"\n{name}: cluster / in-process {ratio:.3f}, {len(submitted)} tasks")
    print(f"driver memory growth: cluster {memory.growth_mib:.1f} MiB")
    assert KEPT["cluster"].keys() == KEPT["in-process"].keys()
    assert all(np.array_equal(KEPT["cluster"][i], KEPT["in-process"][i]) for i in KEPT["cluster"])
