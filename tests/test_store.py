"""The results store (format 2): exact round trip, refusals, one writer at a time, survival of SIGKILL,
full disks and read-only locations, and the conversion of format-1 stores."""

from __future__ import annotations

import csv
import errno
import json
import os
import random
import signal
import socket
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest

import mottle as mo
from mottle.studies.store import Finished, StoreError, StoreWriter, convert_store
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
    path = write_store(tmp_path / "r.mottle", study, results)
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
    store = mo.open_store(write_store(tmp_path / "r.mottle", study, results))
    table = store.table()
    assert list(table.columns[:4]) == ["index", "rms", "seed", "count"]
    assert list(table["rms"]) == [0.1, 0.2, 0.3]
    for row, result in zip(table.itertuples(), results, strict=True):
        assert row.transmission_mean == result.transmission.mean
        assert row.transmission_stderr == result.transmission.stderr
        assert row.transmission_std == result.transmission.std
        assert row.transmission_log_mean == result.transmission.log_mean
        assert row.transmission_log_stderr == result.transmission.log_stderr
        assert row.reflection_mean == result.reflection.mean
        assert row.norm_mean == result.norm.mean
    path = store.to_csv(tmp_path / "table.csv")
    with open(path, newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [float(r["transmission_mean"]) for r in rows] == list(table["transmission_mean"])
    assert [int(r["seed"]) for r in rows] == [p.seed for p in study.points]


def test_a_partial_store_lists_what_is_missing(tmp_path, study, results):
    store = mo.open_store(write_store(tmp_path / "r.mottle", study, results, indices=[2, 0]))
    assert [p.index for p in store.points] == [0, 2]
    assert store.missing == [1] and not store.complete
    with StoreWriter(tmp_path / "r.mottle", study) as writer:
        assert writer.done == {0, 2}


def test_a_store_of_another_study_is_refused_naming_the_keys(tmp_path, study, results):
    path = write_store(tmp_path / "r.mottle", study, results, indices=[0])
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


def write_format1(path, study, results, indices):
    """A format-1 store (one HDF5 file), laid out as mottle wrote it before format 2."""
    with h5py.File(path, "w") as handle:
        handle.attrs.update(format="mottle-results-store", format_version=1, points_total=len(study.points))
        handle.attrs.update(mottle_version="0.1.0", host="old-host", created="2026-01-01T00:00:00+00:00")
        group = handle.create_group("study")
        group.create_dataset("text", data=study.text)
        group.create_dataset("canonical", data=json.dumps(study.canonical()))
        group.attrs.update(source=study.source, title=study.title)
        group.create_group("tables")
        points = handle.create_group("points")
        for index in indices:
            point = points.create_group(f"{index:06d}")
            point.attrs.update(index=index, seed=np.uint64(study.points[index].seed), count=20)
            point.attrs.update(wall_time=1.5, compute_time=2.5, host="old-host", mottle_version="0.1.0")
            point.attrs["finished"] = "2026-01-01T00:00:00+00:00"
            point.create_dataset("parameters", data=json.dumps(study.points[index].parameters))
            point.create_dataset("resolved", data=json.dumps(study.points[index].resolved))
            arrays = point.create_group("result")
            for name, value in results[index].to_arrays().items():
                arrays.create_dataset(name, data=value)
    return path


def test_foreign_empty_truncated_damaged_and_format1_files_are_refused_untouched(tmp_path, study, results):
    text = tmp_path / "notes.mottle"
    text.write_text("my thesis notes\n")
    empty = tmp_path / "empty.mottle"
    empty.write_bytes(b"")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as handle:
        handle["data"] = np.arange(3)
    old = write_format1(tmp_path / "old.h5", study, results, [0, 1])
    data = write_store(tmp_path / "whole.mottle", study, results).read_bytes()
    truncated = tmp_path / "truncated.mottle"
    truncated.write_bytes(data[:100])  # inside the study record
    damaged = tmp_path / "damaged.mottle"
    spoiled = bytearray(data)
    spoiled[60] ^= 0xFF  # a byte of the study record's metadata
    damaged.write_bytes(bytes(spoiled))
    newer = tmp_path / "newer.mottle"
    newer.write_bytes(data[:8] + (9).to_bytes(4, "little") + data[12:])
    cases = {
        text: "is not a mottle results store",
        empty: "is empty, not a mottle results store",
        other: r"is an HDF5 file.*convert it with: mottle convert .*other.h5 NEW.mottle",
        old: r"is an HDF5 file: a format-1 mottle store .*mottle convert",
        truncated: "is a truncated mottle results store",
        damaged: r"is a damaged mottle results store \(the record at byte 16 fails its checksum\)",
        newer: r"written by a newer mottle \(store format 9",
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
        mo.open_store(tmp_path / "absent.mottle")


def test_a_damaged_point_is_refused_when_read_and_the_others_still_read(tmp_path, study, results):
    path = write_store(tmp_path / "r.mottle", study, results)
    store = mo.open_store(path)
    offset, length, _ = store.points[1]._where
    data = bytearray(path.read_bytes())
    data[offset + length - 9] ^= 0x01  # the last byte of point 2's arrays
    path.write_bytes(bytes(data))
    store = mo.open_store(path)
    with pytest.raises(StoreError, match="damaged: the arrays of point 2 fail their checksum"):
        store.points[1].arrays()
    assert_bitwise(store.points[2].result, results[2])


def test_damaged_columns_of_a_commit_are_refused(tmp_path, study, results):
    path = write_store(tmp_path / "r.mottle", study, results, indices=[0])
    store = mo.open_store(path)
    first_blob = store.points[0]._where[0]
    data = bytearray(path.read_bytes())
    data[first_blob - 8] ^= 0xFF  # the last byte of the commit's numeric columns
    path.write_bytes(bytes(data))
    with pytest.raises(StoreError, match=r"damaged mottle results store \(the columns of the record at byte"):
        mo.open_store(path)


def test_a_store_cut_between_or_inside_commits_reads_what_it_holds(tmp_path, study, results):
    # A copy cut short, or a writer killed during a commit: the complete records read, the
    # rest is reported as unfinished and cut off by the next writer before it appends.
    path = write_store(tmp_path / "r.mottle", study, results)
    whole = path.read_bytes()
    ends = [p._where[0] + p._where[1] for p in mo.open_store(path).points]
    cut = tmp_path / "cut.mottle"
    cut.write_bytes(whole[: ends[1] - 100])
    store = mo.open_store(cut)
    assert [p.index for p in store.points] == [0]
    assert store.unfinished_bytes > 0 and store.missing == [1, 2]
    assert_bitwise(store.points[0].result, results[0])
    with StoreWriter(cut, study) as writer:
        assert writer.done == {0}
        writer.commit([Finished(study.points[2], results[2], 0.0, 0.0, "h")])
    store = mo.open_store(cut)
    assert [p.index for p in store.points] == [0, 2] and store.unfinished_bytes == 0
    assert_bitwise(store.points[1].result, results[2])


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
        [sys.executable, "-c", HOLDER, str(tmp_path / "r.mottle"), str(tmp_path / "study.toml")],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "holding"
        with pytest.raises(StoreError, match=rf"being written by another mottle run \(process {holder.pid} "):
            with StoreWriter(tmp_path / "r.mottle", study):
                pass
    finally:
        holder.send_signal(signal.SIGKILL)
        holder.wait()
    # The kernel released the dead holder's lock: the next writer gets the store.
    with StoreWriter(tmp_path / "r.mottle", study) as writer:
        assert writer.done == set()
    assert not (tmp_path / "r.mottle.lock").exists()


# A slow disk: each write moves at most 64 KiB and waits 2 ms, so that kills land inside commits.
SLOW_DISK = """
import os, time
_pwrite = os.pwrite
def slow(fd, data, offset):
    time.sleep(0.002)
    return _pwrite(fd, data[:65536], offset)
os.pwrite = slow
"""

KILLED = (
    SLOW_DISK
    + """
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
)

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
        path = tmp_path / f"k{trial}.mottle"
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
        # Bytes after the last complete record mean the kill landed inside a commit.
        mid_commit += store.unfinished_bytes > 0
        # The next writer finds the lock free, cuts the unfinished record off and resumes.
        with StoreWriter(path, study) as writer:
            assert writer.done == stored
        assert mo.open_store(path).unfinished_bytes == 0
    # The kills landed at different stages of the run, not all before or after it.
    assert len(set(committed_at_kill)) >= 3
    assert max(committed_at_kill) < len(study.points)
    assert mid_commit >= 2


def test_stale_temporary_files_are_removed_by_the_next_writer(tmp_path, study, results):
    path = write_store(tmp_path / "r.mottle", study, results, indices=[0])
    stale = tmp_path / ".r.mottle.99999.tmp"
    stale.write_bytes(b"half a file")
    with StoreWriter(path, study) as writer:
        assert not stale.exists()
        writer.commit([Finished(study.points[1], results[1], 0.0, 0.0, "h")])
    assert [p.index for p in mo.open_store(path).points] == [0, 1]


def test_texts_larger_than_an_hdf5_attribute_are_stored(tmp_path, results):
    # A long notes field (more than HDF5's 64 KiB attribute limit) still round-trips.
    notes = "x" * 70000
    big = parse_study(STUDY.replace("[system]", f'[study]\nnotes = "{notes}"\n\n[system]'), "big.toml")
    write_store(tmp_path / "big.mottle", big, results, indices=[0])
    store = mo.open_store(tmp_path / "big.mottle")
    assert notes in store.study_text
    assert json.dumps(store.points[0].resolved)


def no_flock(monkeypatch):
    """Simulate a file system without POSIX locks (as some NFS and Lustre mounts): flock -> ENOSYS."""
    import errno
    import fcntl

    def unsupported(fd, operation):
        raise OSError(errno.ENOSYS, "Function not implemented")

    monkeypatch.setattr(fcntl, "flock", unsupported)


def test_without_flock_an_exclusive_lock_file_keeps_one_writer(tmp_path, study, results, monkeypatch):
    no_flock(monkeypatch)
    path = tmp_path / "r.mottle"
    lock = tmp_path / "r.mottle.lock"
    with StoreWriter(path, study) as writer:
        writer.commit([Finished(study.points[1], results[1], 0.0, 0.0, "h")])
        assert lock.read_text().split() == [str(os.getpid()), socket.gethostname()]
        with pytest.raises(
            StoreError, match=rf"being written by another mottle run \(process {os.getpid()} "
        ):
            with StoreWriter(path, study):
                pass
    assert not lock.exists()
    assert [p.index for p in mo.open_store(path).points] == [1]
    # A lock file left by a process that is dead on this host is taken over.
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True
    )
    lock.write_text(f"{dead.stdout.strip()} {socket.gethostname()}\n")
    with StoreWriter(path, study) as writer:
        assert writer.done == {1}
    # One from another host cannot be checked: refused, saying how to clear it.
    lock.write_text("4242 node-17\n")
    with pytest.raises(
        StoreError, match=r"process 4242 node-17.*if that run is dead, remove .*r.mottle.lock"
    ):
        with StoreWriter(path, study):
            pass
    assert [p.index for p in mo.open_store(path).points] == [1]


def test_a_full_disk_gives_one_line_and_loses_nothing(tmp_path, study, results, monkeypatch):
    path = write_store(tmp_path / "r.mottle", study, results, indices=[0])
    before = path.read_bytes()
    real = os.pwrite

    def full(fd, data, offset):  # the disk fills up half way through the record
        if len(data) > 1000:
            real(fd, bytes(data[: len(data) // 2]), offset)
        raise OSError(errno.ENOSPC, "No space left on device")

    with StoreWriter(path, study) as writer:
        monkeypatch.setattr(os, "pwrite", full)
        with pytest.raises(StoreError) as caught:
            writer.commit([Finished(study.points[1], results[1], 0.0, 0.0, "h")])
        monkeypatch.setattr(os, "pwrite", real)
        assert writer.done == {0}
    message = str(caught.value)
    assert "\n" not in message
    assert message == (
        f"{path}: could not save 1 finished points (the disk is full); nothing stored before was lost"
    )
    assert path.read_bytes() == before
    assert_bitwise(mo.open_store(path).points[0].result, results[0])


def test_a_read_only_location_gives_one_line(tmp_path, study, results, monkeypatch):
    # Simulated (the tests may run as root, who can write anywhere): opening for writing in the
    # store's directory fails with EROFS, as on a read-only mount.
    path = write_store(tmp_path / "r.mottle", study, results, indices=[0])
    before = path.read_bytes()
    real = os.open

    def read_only(name, flags, *args, **kwargs):
        if str(name).startswith(str(tmp_path)) and flags & (os.O_WRONLY | os.O_RDWR | os.O_CREAT):
            raise OSError(errno.EROFS, "Read-only file system")
        return real(name, flags, *args, **kwargs)

    monkeypatch.setattr(os, "open", read_only)
    for target in (path, tmp_path / "new.mottle"):
        with pytest.raises(StoreError) as caught:
            with StoreWriter(target, study):
                pass
        assert str(caught.value) == (
            f"{target}: could not lock the store ({tmp_path} is not writable: Read-only file system); "
            "nothing stored before was lost"
        )
    monkeypatch.setattr(os, "open", real)
    assert path.read_bytes() == before and not (tmp_path / "new.mottle").exists()
    assert [p.index for p in mo.open_store(path).points] == [0]


def test_a_format1_store_converts_exactly(tmp_path, study, results):
    old = write_format1(tmp_path / "old.h5", study, results, [2, 0])
    from mottle.cli import main

    assert main(["convert", str(old), str(tmp_path / "new.mottle")]) == 0
    store = mo.open_store(tmp_path / "new.mottle")
    assert [p.index for p in store.points] == [0, 2] and store.missing == [1]
    for point in store.points:
        assert_bitwise(point.result, results[point.index])
        assert (point.wall_time, point.compute_time, point.host) == (1.5, 2.5, "old-host")
        assert point.resolved == study.points[point.index].resolved
    # The converted store resumes with the same study; a second conversion onto it is refused.
    with StoreWriter(tmp_path / "new.mottle", study) as writer:
        assert writer.done == {0, 2}
    with pytest.raises(StoreError, match="exists already"):
        convert_store(old, tmp_path / "new.mottle")
    with pytest.raises(StoreError, match="not an HDF5 file"):
        convert_store(tmp_path / "new.mottle", tmp_path / "other.mottle")


KILLED_STUDY = (
    SLOW_DISK
    + """
import sys
from mottle.studies import store
from mottle.studies.runner import run_study
from mottle.studies.study import parse_study

# Report the start of the second commit's write, then keep writing slowly (the test kills us).
calls = {"appends": 0}
append = store.StoreWriter._append
def noisy(self, record, count):
    calls["appends"] += 1
    if calls["appends"] == 2:  # the second commit
        print("committing", len(self.done), flush=True)
    return append(self, record, count)
store.StoreWriter._append = noisy
run_study(parse_study(open(sys.argv[2]).read(), "tiny.toml"), sys.argv[1], progress=False, threads=1)
"""
)

TINY = """[system]
points = 64
length = 40.0

[[system.disorder]]
kind = "gaussian"
rms = 0.1
correlation_length = 2.0
start = -5.0
stop = 5.0

[packet]
center = -12.0
wavenumber = 1.0
width = 2.0

[run]
duration = 0.5
step = 0.1
realizations = 1
seed = 11

[sweep]
"packet.wavenumber" = { start = 0.8, stop = 1.2, count = 5000 }
"""


def test_sigkill_during_a_commit_of_a_5000_point_study_then_resume(tmp_path, monkeypatch):
    (tmp_path / "tiny.toml").write_text(TINY)
    path = tmp_path / "tiny.mottle"
    child = subprocess.Popen(
        [sys.executable, "-c", KILLED_STUDY, str(path), str(tmp_path / "tiny.toml")],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    line = child.stdout.readline()
    if not line.startswith("committing"):
        child.kill()
        pytest.fail(f"the run did not reach its second commit: {child.communicate()[1]}")
    time.sleep(0.01)  # well inside the write of a record of hundreds of points
    child.send_signal(signal.SIGKILL)
    child.wait()
    store = mo.open_store(path)
    first = int(line.split()[1])
    assert store.unfinished_bytes > 0, "the kill landed outside the commit"
    assert len(store.points) == first and store.indices.tolist() == list(range(first))
    # Resume: only the missing points are computed, the finished ones keep their bits.
    study = parse_study(TINY, "tiny.toml")
    from mottle.dynamics import ensemble as ensembles

    computed = []
    original = ensembles.ensemble

    def counting(*args, **kwargs):
        computed.append(1)
        return original(*args, **kwargs)

    monkeypatch.setattr(ensembles, "ensemble", counting)
    kept = {p.index: p.arrays() for p in store.points[:: max(1, first // 20)]}
    resumed = mo.run_study(study, path, progress=False, threads=1)
    assert len(computed) == 5000 - first
    assert resumed.complete and resumed.unfinished_bytes == 0
    assert resumed.indices.tolist() == list(range(5000))
    by_index = {p.index: p for p in resumed.points}
    for index, arrays in kept.items():
        again = by_index[index].arrays()
        assert all(np.array_equal(arrays[name], again[name], equal_nan=True) for name in arrays)
    # A point computed before the kill equals the same point computed now, to the bit.
    monkeypatch.setattr(ensembles, "ensemble", original)
    for index in (0, first - 1, first, 4999):
        system, packet, arguments = study.points[index].build()
        assert_bitwise(by_index[index].result, original(system, packet, threads=1, **arguments))
