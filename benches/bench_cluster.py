"""A study of 8 points: a local Dask cluster of 2 workers x 1 thread against one process with 2 threads.

Both write the same store (bitwise the same numbers); the figure is the ratio of
their best times, target at most 1.15. The cluster is started once, outside the
timing (its start-up, about two seconds, is printed beside it): what is timed
is the cost of running a study as tasks, shipping partials and merging them.
"""

from __future__ import annotations

import itertools
import time

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure, record
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
    path = tmp_path / f"{name}-{next(COUNTER)}.h5"
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
