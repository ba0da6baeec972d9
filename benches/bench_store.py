"""The results store at scale: what a commit costs as the study grows, labelled access, bytes.

* The same small point (1024 grid points, 16 realizations, 50 steps, two snapshots: about
  0.01 s of compute) in studies of 200 and of ``MOTTLE_BENCH_STORE_POINTS`` (5000) points,
  in process on one thread: the wall time per point of the larger over the smaller (target
  <= 1.3: a commit does not grow with the store) and the wall time over the compute time of
  the larger (<= 1.5; compute = the sum of the points' ensemble times the store records).
* ``open_store(path).dataset()`` and ``.table()`` of a store of ``MOTTLE_BENCH_SYNTHETIC``
  (316 x 317 = 100172) synthetic points (tests/synthetic.py), each from a fresh open, xarray
  and pandas already imported (<= 5 s).
* Bytes per point of the 5000-point store over the bytes of the arrays each point holds
  (``EnsembleResult.to_arrays()``, no compression; target <= 1.2).

One round each (the studies take minutes): ``python -m pytest benches/bench_store.py -p no:cacheprovider``.
"""

from __future__ import annotations

import contextlib
import os
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import mottle as mo
from conftest import TIMINGS, figure
from mottle.studies.study import parse_study

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from synthetic import write_synthetic_store

LARGE = int(os.environ.get("MOTTLE_BENCH_STORE_POINTS", "5000"))
SMALL = min(200, LARGE)
SYNTHETIC = int(os.environ.get("MOTTLE_BENCH_SYNTHETIC", str(316 * 317)))

STUDY = """\
[system]
points = 1024
length = 200.0
absorber = { width = 30.0 }

[[system.disorder]]
kind = "gaussian"
rms = 0.15
correlation_length = 1.0
start = 0.0
stop = 20.0

[packet]
center = -40.0
wavenumber = 1.2
width = 6.0

[run]
duration = 2.5
step = 0.05
realizations = 16
seed = 3
snapshots = [1.25, 2.5]

[sweep]
"packet.center" = { start = -45.0, stop = -35.0, count = %d }
"""

RUNS: dict[int, tuple[float, float, int, int]] = {}


def run(tmp_path, count: int) -> tuple[float, float, int, int]:
    study = parse_study(STUDY % count, "bench.toml")
    path = tmp_path / f"bench-{count}.mottle"
    began = time.perf_counter()
    store = mo.run_study(study, path, progress=False, threads=1)
    wall = time.perf_counter() - began
    compute = float(store.table()["compute_time"].sum())
    arrays = sum(np.asarray(v).nbytes for v in store.points[0].arrays().values())
    return wall, compute, path.stat().st_size, arrays


@pytest.fixture(scope="module")
def warm(tmp_path_factory):
    """A first, unmeasured study of 20 points: imports, FFT plans and caches are warm for both."""
    run(tmp_path_factory.mktemp("warm"), 20)


@pytest.mark.parametrize("count", sorted({SMALL, LARGE}))
def test_store_overhead(tmp_path, warm, count):
    RUNS[count] = run(tmp_path, count)
    wall, compute, size, arrays = RUNS[count]
    TIMINGS[f"study of {count} small points: wall per point"] = wall / count
    TIMINGS[f"study of {count} small points: compute per point"] = compute / count
    TIMINGS[f"study of {count} small points: wall - compute per point"] = (wall - compute) / count
    if count == LARGE and SMALL in RUNS:
        small = RUNS[SMALL]
        figure(
            f"store: wall per point, {LARGE} / {SMALL} points", (wall / count) / (small[0] / SMALL), "<= 1.3"
        )
        figure(f"store: wall / compute, {LARGE} points", wall / compute, "<= 1.5")
        figure(f"store: bytes per point / array bytes, {LARGE} points", size / count / arrays, "<= 1.2")


@pytest.fixture(scope="module")
def synthetic(tmp_path_factory):
    import pandas  # noqa: F401  (imported once here: the figures time the access, not the import)
    import xarray  # noqa: F401

    with contextlib.suppress(ImportError):  # xarray imports dask.array on first use when it is there
        import dask.array  # noqa: F401

    first = max(1, round(SYNTHETIC**0.5))
    return write_synthetic_store(tmp_path_factory.mktemp("synthetic") / "s.mottle", first, SYNTHETIC // first)


@pytest.mark.parametrize("access", ["dataset", "table"])
def test_labelled_access(benchmark, synthetic, access):
    def read():
        return getattr(mo.open_store(synthetic), access)()

    out = benchmark.pedantic(read, rounds=1, iterations=1)
    points = out.sizes["rms"] * out.sizes["wavenumber"] if access == "dataset" else len(out)
    assert points >= SYNTHETIC // 2
    figure(f"store: open + {access}() of {points} synthetic points, s", benchmark.stats.stats.min, "<= 5")
