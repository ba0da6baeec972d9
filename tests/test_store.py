"""The results store: exact round trip, refusals, one writer at a time, and survival of SIGKILL."""

from __future__ import annotations

import csv
import json
import random
import signal
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest

import mottle as mo
from mottle.studies.store import Finished, StoreError, StoreWriter
from mottle.studies.study import parse_study

STUDY = """\
[system]
points = 512
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
duration = 20.0
step = 0.05
realizations = 20
seed = 3
snapshots = [10.0, 20.0]

[sweep]
"system.disorder.0.rms" = [0.1, 0.2, 0.3]
"""


@pytest.fixture(scope="module")
def study():
    return parse_study(STUDY, "store.toml")


@pytest.fixture(scope="module")
def results(study):
    out = []
    for point in study.points:
        system, packet, arguments = point.build()
        out.append(mo.ensemble(system, packet, **arguments))
    return out


def write_store(path, study, results, indices=None):
    with StoreWriter(path, study) as writer:
        for index in indices if indices is not None else range(len(study.points)):
            writer.commit([Finished(study.points[index], results[index], 1.5, 2.5, "host-a")])
    return path


def assert_bitwise(first, second):
    one, other = first.to_arrays(), second.to_arrays()
    assert one.keys() == other.keys()
    for name in one:
        assert one[name].dtype == other[name].dtype, name
        assert np.array_equal(one[name], other[name], equal_nan=True), name


def test_round_trip_is_exact_and_keeps_the_metadata(tmp_path, study, results):
    path = write_store(tmp_path / "r.h5", study, results)
    store = mo.open_store(path)
    assert store.total == 3 and store.complete and store.missing == []
    assert store.study_text == STUDY
    assert store.sweep == {"system.disorder.0.rms": [0.1, 0.2, 0.3]}
    assert store.mottle_version == mo.__version__ and store.host
    for point, stored, result in zip(study.points, store.points, results, strict=True):
        assert stored.index == point.index
        assert stored.parameters == point.parameters
        assert stored.resolved == point.resolved
        assert stored.seed == point.seed
        assert stored.count == 20
        assert (stored.wall_time, stored.compute_time, stored.host) == (1.5, 2.5, "host-a")
        assert_bitwise(stored.result, result)
        assert stored.result.transmission == result.transmission


def test_tidy_table_and_csv(tmp_path, study, results):
    store = mo.open_store(write_store(tmp_path / "r.h5", study, results))
    table = store.table()
    assert table.dtype.names[:4] == ("index", "system.disorder.0.rms", "seed", "count")
    assert list(table["system.disorder.0.rms"]) == [0.1, 0.2, 0.3]
    for row, result in zip(table, results, strict=True):
        assert row["transmission"] == result.transmission.mean
        assert row["transmission_stderr"] == result.transmission.stderr
        assert row["log_transmission"] == result.transmission.log_mean
        assert row["reflection"] == result.reflection.mean
    path = store.to_csv(tmp_path / "table.csv")
    with open(path, newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [float(r["transmission"]) for r in rows] == list(table["transmission"])
    assert [int(r["seed"]) for r in rows] == [p.seed for p in study.points]


def test_a_partial_store_lists_what_is_missing(tmp_path, study, results):
    store = mo.open_store(write_store(tmp_path / "r.h5", study, results, indices=[2, 0]))
    assert [p.index for p in store.points] == [0, 2]
    assert store.missing == [1] and not store.complete
    with StoreWriter(tmp_path / "r.h5", study) as writer:
        assert writer.done == {0, 2}


def test_a_store_of_another_study_is_refused_naming_the_keys(tmp_path, study, results):
    path = write_store(tmp_path / "r.h5", study, results, indices=[0])
    other = parse_study(
        STUDY.replace("realizations = 20", "realizations = 40").replace("rms = 0.15", "rms = 0.2"), "x"
    )
    before = path.read_bytes()
    with pytest.raises(
        StoreError, match=r"different study.*run.realizations: 20 != 40.*system.disorder.0.rms"
    ):
        with StoreWriter(path, other):
            pass
    assert path.read_bytes() == before


def test_foreign_empty_and_truncated_files_are_refused_untouched(tmp_path, study, results):
    text = tmp_path / "notes.h5"
    text.write_text("my thesis notes\n")
    empty = tmp_path / "empty.h5"
    empty.write_bytes(b"")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as handle:
        handle["data"] = np.arange(3)
    truncated = tmp_path / "truncated.h5"
    data = write_store(tmp_path / "whole.h5", study, results).read_bytes()
    truncated.write_bytes(data[: len(data) // 2])
    cases = {
        text: "is not an HDF5 file, so not a mottle results store",
        empty: "is empty, not a mottle results store",
        other: "is an HDF5 file but not a mottle results store",
        truncated: "is a truncated or damaged HDF5 file",
        tmp_path: "is a directory",
    }
    for path, message in cases.items():
        before = path.read_bytes() if path.is_file() else None
        with pytest.raises(StoreError, match=message):
            mo.open_store(path)
        with pytest.raises(StoreError, match=message):
            with StoreWriter(path, study):
                pass
        if before is not None:
            assert path.read_bytes() == before
    with pytest.raises(StoreError, match="no such results store"):
        mo.open_store(tmp_path / "absent.h5")


HOLDER = """
import sys, time
from mottle.studies.study import parse_study
from mottle.studies.store import StoreWriter
study = parse_study(open(sys.argv[2]).read(), "store.toml")
with StoreWriter(sys.argv[1], study):
    print("holding", flush=True)
    time.sleep(60)
"""


def test_a_second_writer_is_refused_until_the_first_dies(tmp_path, study):
    (tmp_path / "study.toml").write_text(STUDY)
    holder = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(tmp_path / "r.h5"), str(tmp_path / "study.toml")],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "holding"
        with pytest.raises(StoreError, match=rf"being written by another mottle run \(process {holder.pid} "):
            with StoreWriter(tmp_path / "r.h5", study):
                pass
    finally:
        holder.send_signal(signal.SIGKILL)
        holder.wait()
    # The kernel released the dead holder's lock: the next writer gets the store.
    with StoreWriter(tmp_path / "r.h5", study) as writer:
        assert writer.done == set()
    assert not (tmp_path / "r.h5.lock").exists()


KILLED = """
import sys
import mottle as mo
from mottle.studies.study import parse_study
from mottle.studies.store import Finished, StoreWriter
study = parse_study(open(sys.argv[2]).read(), "kill.toml")
system, packet, arguments = study.points[0].build()
result = mo.ensemble(system, packet, **arguments)
with StoreWriter(sys.argv[1], study) as writer:
    print("ready", flush=True)
    for point in study.points:
        writer.commit([Finished(point, result, 0.0, 0.0, "h")])
        print(point.index, flush=True)
"""

# Many points with large profiles, so that commits take long enough for kills to land inside them.
KILL_STUDY = (
    STUDY.replace("points = 512", "points = 4096")
    .replace("snapshots = [10.0, 20.0]", "snapshots = [5.0, 10.0, 15.0, 20.0]")
    .replace("realizations = 20", "realizations = 2")
    .replace(
        '"system.disorder.0.rms" = [0.1, 0.2, 0.3]',
        '"packet.center" = { start = -60.0, stop = -30.0, count = 40 }',
    )
)


def test_the_store_survives_sigkill_at_random_moments(tmp_path):
    study = parse_study(KILL_STUDY, "kill.toml")
    system, packet, arguments = study.points[0].build()
    reference = mo.ensemble(system, packet, **arguments)
    (tmp_path / "kill.toml").write_text(KILL_STUDY)
    chooser = random.Random(20261201)
    delays = [chooser.uniform(0.0, 0.6) for _ in range(6)]
    committed_at_kill = []
    mid_commit = 0
    for trial, delay in enumerate(delays):
        path = tmp_path / f"k{trial}.h5"
        child = subprocess.Popen(
            [sys.executable, "-c", KILLED, str(path), str(tmp_path / "kill.toml")],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        if child.stdout.readline().strip() != "ready":
            pytest.fail(f"the writer did not start: {child.communicate()[1]}")
        time.sleep(delay)
        child.send_signal(signal.SIGKILL)
        child.wait()
        reported = {int(line) for line in child.stdout.read().split()}
        store = mo.open_store(path)
        stored = {point.index for point in store.points}
        # Every point reported finished is there; at most the one in flight besides.
        assert reported <= stored <= reported | {len(reported)}
        assert stored == set(range(len(stored)))
        for point in store.points:
            assert_bitwise(point.result, reference)
        committed_at_kill.append(len(stored))
        # A temporary file left behind means the kill landed inside a commit.
        mid_commit += bool(list(tmp_path.glob(f".k{trial}.h5.*.tmp")))
        # The next writer finds the lock free, removes the dead writer's temporary file and resumes.
        with StoreWriter(path, study) as writer:
            assert writer.done == stored
            assert not list(tmp_path.glob(f".k{trial}.h5.*.tmp"))
    # The kills landed at different stages of the run, not all before or after it.
    assert len(set(committed_at_kill)) >= 3
    assert max(committed_at_kill) < len(study.points)
    assert mid_commit >= 2


def test_stale_temporary_files_are_removed_by_the_next_writer(tmp_path, study, results):
    path = write_store(tmp_path / "r.h5", study, results, indices=[0])
    stale = tmp_path / ".r.h5.99999.tmp"
    stale.write_bytes(b"half a file")
    with StoreWriter(path, study) as writer:
        assert not stale.exists()
        writer.commit([Finished(study.points[1], results[1], 0.0, 0.0, "h")])
    assert [p.index for p in mo.open_store(path).points] == [0, 1]


def test_texts_larger_than_an_hdf5_attribute_are_stored(tmp_path, results):
    # A long notes field (more than HDF5's 64 KiB attribute limit) still round-trips.
    notes = "x" * 70000
    big = parse_study(STUDY.replace("[system]", f'[study]\nnotes = "{notes}"\n\n[system]'), "big.toml")
    write_store(tmp_path / "big.h5", big, results, indices=[0])
    store = mo.open_store(tmp_path / "big.h5")
    assert notes in store.study_text
    assert json.dumps(store.points[0].resolved)


def test_a_file_system_without_locks_warns_and_still_writes(tmp_path, study, results, monkeypatch):
    import errno
    import fcntl

    def unsupported(fd, operation):
        raise OSError(errno.ENOSYS, "Function not implemented")

    monkeypatch.setattr(fcntl, "flock", unsupported)
    with pytest.warns(UserWarning, match=r"cannot lock .*r.h5.lock \(Function not implemented\)"):
        write_store(tmp_path / "r.h5", study, results, indices=[1])
    assert [p.index for p in mo.open_store(tmp_path / "r.h5").points] == [1]
