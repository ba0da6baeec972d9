"""The results store of a study: one HDF5 file, every version of it complete.

Design. A store is a single HDF5 file that is never modified in place. To add
finished points, the writer copies the current file to a temporary file in
the same directory, appends the new points to the copy with h5py, flushes it
to disk (``fsync``), renames it over the store (``os.replace``, atomic on
POSIX and Windows) and ``fsync``-s the directory so that the rename itself
is durable. A process killed at any instant therefore leaves either the old
complete file or the new complete file, never a half-written one; the only
debris is a temporary file, removed by the next writer. HDF5's own
single-writer/multiple-reader mode was not chosen: it needs POSIX file
semantics (not NFS or Lustre, where cluster studies live) and h5py's
``flush`` does not promise that data reached the disk.

The price is that each commit copies the whole file: O(points^2) bytes over a
study. A copy runs at disk speed and a point's arrays are small (per-realization
scalars plus a few profiles of the grid's size), so a few hundred points cost
seconds; points that finish together are committed in one copy.

A second writer is refused through an exclusive ``flock`` on ``STORE.lock``
(released by the kernel if the holder dies, so a killed run never blocks the
next one). Files that are not stores, or that were truncated or damaged
outside mottle, are refused with a message saying so, and a store written by
a different study is refused with the keys that differ.

Layout (format version 1)::

    /                   attrs: format, format_version, mottle_version, host, created, points_total
    /study              attrs: source, title; datasets: text (the study file), canonical (JSON)
    /study/tables/SHA   tabulated potentials, by the SHA-256 the study names them with
    /points/NNNNNN      attrs: index, seed, count, wall_time, compute_time, host, mottle_version,
                        finished; datasets: parameters, resolved (JSON)
    /points/NNNNNN/result/...   EnsembleResult.to_arrays(), exact dtypes
"""

from __future__ import annotations

import contextlib
import datetime
import json
import math
import os
import shutil
import signal
import socket
import threading
import warnings
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ..errors import MottleError
from .study import Study, StudyPoint, differences, point_label

if TYPE_CHECKING:
    from ..dynamics.ensemble import EnsembleResult

FORMAT = "mottle-results-store"
FORMAT_VERSION = 1


class StoreError(MottleError, OSError):
    """A results store that cannot be read or written: foreign, damaged, busy, or of another study."""


def _h5py():
    try:
        import h5py
    except ImportError:
        raise StoreError("results stores need h5py: pip install 'mottle[study]'") from None
    return h5py


def _h5open(path, mode: str):
    """h5py.File without HDF5's own file locks: the store has its own lock, never changes a file in
    place, and HDF5's locks fail on file systems without them (common on cluster storage)."""
    h5py = _h5py()
    try:
        return h5py.File(path, mode, locking=False)
    except TypeError:  # h5py older than 3.5
        return h5py.File(path, mode)


def _version() -> str:
    from .. import __version__

    return __version__


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")


# --------------------------------------------------------------------------- opening


def _open_checked(path: Path):
    """Open an existing store read-only, refusing files that are not complete mottle stores."""
    if not path.exists():
        raise StoreError(f"{path}: no such results store")
    if path.is_dir():
        raise StoreError(f"{path} is a directory, not a results store file")
    size = path.stat().st_size
    if size == 0:
        raise StoreError(f"{path} is empty, not a mottle results store (remove it or choose another store)")
    with open(path, "rb") as handle:
        signature = handle.read(8)
    if signature != b"\x89HDF\r\n\x1a\n":
        raise StoreError(
            f"{path} is not an HDF5 file, so not a mottle results store (it was not overwritten)"
        )
    try:
        handle = _h5open(path, "r")
    except OSError as error:
        detail = str(error).split("(")[0].strip() or type(error).__name__
        raise StoreError(
            f"{path} is a truncated or damaged HDF5 file ({detail}); it cannot be read"
        ) from None
    if handle.attrs.get("format") != FORMAT:
        handle.close()
        raise StoreError(
            f"{path} is an HDF5 file but not a mottle results store (no format={FORMAT!r} attribute)"
        )
    version = int(handle.attrs.get("format_version", 0))
    if version > FORMAT_VERSION:
        handle.close()
        raise StoreError(
            f"{path} was written by a newer mottle (store format {version}; "
            f"this one reads {FORMAT_VERSION}): upgrade mottle"
        )
    if "study" not in handle or "points" not in handle:
        handle.close()
        raise StoreError(f"{path} is a damaged mottle results store (its study or points group is missing)")
    return handle


def _write_arrays(group, arrays: Mapping[str, np.ndarray]) -> None:
    for name, value in arrays.items():
        value = np.asarray(value)
        if value.dtype.kind == "U":
            dataset = group.create_dataset(name, data=np.char.encode(value, "utf-8"))
            dataset.attrs["numpy_dtype"] = value.dtype.str
        elif value.dtype.kind == "O":
            raise StoreError(f"cannot store {name!r}: an array of Python objects")
        else:
            group.create_dataset(name, data=value)


def _read_arrays(group) -> dict[str, np.ndarray]:
    arrays: dict[str, np.ndarray] = {}

    def visit(name, item):
        if hasattr(item, "dtype"):
            value = item[()]
            if "numpy_dtype" in item.attrs:
                value = np.char.decode(value, "utf-8").astype(item.attrs["numpy_dtype"])
            arrays[name] = np.asarray(value)

    group.visititems(visit)
    return arrays


@dataclass(eq=False)
class StoredPoint:
    """A finished point: ``parameters`` (swept values), ``resolved`` (all values), ``seed``, ``result``."""

    path: Path
    index: int
    parameters: dict
    resolved: dict
    seed: int
    count: int
    wall_time: float
    compute_time: float
    host: str
    mottle_version: str
    finished: str
    _result: object = field(default=None, repr=False)

    @property
    def result(self):
        """The point's :class:`~mottle.EnsembleResult`, read on first use."""
        if self._result is None:
            from ..dynamics.ensemble import EnsembleResult

            with _open_checked(self.path) as handle:
                arrays = _read_arrays(handle[f"points/{self.index:06d}/result"])
            self._result = EnsembleResult.from_arrays(arrays)
        return self._result

    def label(self, names: Mapping[str, str] | None = None) -> str:
        return point_label(self.parameters, names)


class Store:
    """A results store opened for reading (see :func:`open_store`)."""

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        with _open_checked(self.path) as handle:
            attrs = dict(handle.attrs)
            study = handle["study"]
            self.study_text: str = _text(study["text"])
            self.source: str = str(study.attrs.get("source", ""))
            self.title: str = str(study.attrs.get("title", ""))
            self.canonical: dict = json.loads(_text(study["canonical"]))
            self.tables = {name: np.asarray(data[()]) for name, data in study.get("tables", {}).items()}
            self.points: list[StoredPoint] = [
                _stored_point(self.path, group) for _, group in sorted(handle["points"].items())
            ]
        self.format_version = int(attrs.get("format_version", 0))
        self.mottle_version = str(attrs.get("mottle_version", ""))
        self.host = str(attrs.get("host", ""))
        self.created = str(attrs.get("created", ""))
        self.total = int(attrs.get("points_total", len(self.points)))

    @property
    def sweep(self) -> dict:
        """The swept paths and their values."""
        return dict(self.canonical.get("sweep", {}))

    @property
    def missing(self) -> list[int]:
        """Indices of the study's points not yet in the store."""
        done = {point.index for point in self.points}
        return [index for index in range(self.total) if index not in done]

    @property
    def complete(self) -> bool:
        return not self.missing

    def table(self) -> np.ndarray:
        """One row per finished point: index, swept values, seed, count, transmission and reflection stats."""
        sweep = list(self.sweep)
        columns: list[tuple[str, object]] = [("index", np.int64)]
        for path in sweep:
            values = [point.parameters.get(path) for point in self.points]
            if all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in values):
                columns.append((path, np.int64))
            elif all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
                columns.append((path, np.float64))
            else:
                columns.append((path, "U64"))
        columns += [("seed", np.uint64), ("count", np.int64)]
        for quantity in ("transmission", "reflection"):
            columns += [
                (quantity, np.float64),
                (f"{quantity}_stderr", np.float64),
                (f"{quantity}_std", np.float64),
                (f"log_{quantity}", np.float64),
                (f"log_{quantity}_stderr", np.float64),
            ]
        columns += [("norm", np.float64), ("wall_time", np.float64), ("compute_time", np.float64)]
        rows = np.zeros(len(self.points), dtype=columns)
        for row, point in zip(rows, self.points, strict=False):
            row["index"] = point.index
            for path in sweep:
                value = point.parameters.get(path)
                row[path] = json.dumps(value) if isinstance(value, list) else value
            row["seed"] = point.seed
            row["count"] = point.count
            result = point.result
            for quantity in ("transmission", "reflection"):
                stat = getattr(result, quantity)
                row[quantity] = stat.mean
                row[f"{quantity}_stderr"] = stat.stderr
                row[f"{quantity}_std"] = stat.std
                row[f"log_{quantity}"] = stat.log_mean
                row[f"log_{quantity}_stderr"] = stat.log_stderr
            row["norm"] = result.norm.mean
            row["wall_time"] = point.wall_time
            row["compute_time"] = point.compute_time
        return rows

    def to_csv(self, path: str | os.PathLike) -> Path:
        """Write :meth:`table` as CSV (header row of column names, full float precision)."""
        import csv

        rows = self.table()
        path = Path(path)
        with open(path, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            names = rows.dtype.names or ()
            writer.writerow(names)
            for row in rows:
                writer.writerow([_csv_cell(row[name]) for name in names])
        return path

    def __repr__(self) -> str:
        return f"Store({str(self.path)!r}: {len(self.points)} of {self.total} points)"


def _csv_cell(value) -> str:
    if isinstance(value, (float, np.floating)):
        return "nan" if math.isnan(value) else repr(float(value))
    return str(value)


def _text(dataset) -> str:
    return dataset.asstr()[()]


def _stored_point(path: Path, group) -> StoredPoint:
    attrs = group.attrs
    return StoredPoint(
        path=path,
        index=int(attrs["index"]),
        parameters=json.loads(_text(group["parameters"])),
        resolved=json.loads(_text(group["resolved"])),
        seed=int(attrs["seed"]),
        count=int(attrs["count"]),
        wall_time=float(attrs["wall_time"]),
        compute_time=float(attrs["compute_time"]),
        host=str(attrs["host"]),
        mottle_version=str(attrs["mottle_version"]),
        finished=str(attrs["finished"]),
    )


def open_store(path: str | os.PathLike) -> Store:
    """Open a results store for reading: ``.points`` (with ``.parameters``, ``.result``), ``.table()``."""
    return Store(path)


# --------------------------------------------------------------------------- writing


class _Lock:
    """An exclusive advisory lock on ``PATH.lock``; the kernel drops it when the holder dies."""

    def __init__(self, store: Path):
        self.path = store.with_name(store.name + ".lock")
        self.fd: int | None = None

    def acquire(self) -> None:
        try:
            import fcntl
        except ImportError:  # not POSIX: fall back to exclusive creation (a crash leaves it behind)
            fcntl = None  # type: ignore[assignment]
        while True:
            if fcntl is None:
                try:
                    fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
                except FileExistsError:
                    raise StoreError(self._busy(None)) from None
                break
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = os.pread(fd, 64, 0).decode(errors="replace").strip()
                os.close(fd)
                raise StoreError(self._busy(holder)) from None
            except OSError as error:  # a file system without locks (some network mounts)
                warnings.warn(
                    f"cannot lock {self.path} ({error.strerror}): make sure no other mottle run writes "
                    f"{self.path.with_suffix('')} at the same time",
                    stacklevel=3,
                )
                break
            # The holder may have unlinked the file between our open and our lock: retry on a fresh one.
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(self.path))
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        os.ftruncate(fd, 0)
        os.lseek(fd, 0, os.SEEK_SET)
        os.write(fd, f"{os.getpid()} {socket.gethostname()}\n".encode())
        self.fd = fd

    def _busy(self, holder: str | None) -> str:
        who = f" (process {holder})" if holder else ""
        return (
            f"{self.path.with_suffix('')} is being written by another mottle run{who}: wait for it to finish "
            f"or choose another store (lock file {self.path})"
        )

    def release(self) -> None:
        if self.fd is not None:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(self.path)
            os.close(self.fd)
            self.fd = None


@contextlib.contextmanager
def _signals_deferred():
    """Hold SIGINT and SIGTERM back while a commit renames files, so Ctrl-C never lands half way."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def _fsync_directory(directory: Path) -> None:
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:  # Windows cannot open directories; its rename is durable on its own terms
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


@dataclass
class Finished:
    """A point ready to be committed: its result and how long it took where."""

    point: StudyPoint
    result: EnsembleResult
    wall_time: float
    compute_time: float
    host: str


class StoreWriter:
    """The one writer of a store: locks it, checks it is ``study``'s, commits finished points atomically.

    Use as a context manager. ``done`` holds the indices already in the store.
    """

    def __init__(self, path: str | os.PathLike, study: Study):
        self.path = Path(path)
        self.study = study
        self.lock = _Lock(self.path)
        self.done: set[int] = set()
        self.commits = 0

    def __enter__(self) -> StoreWriter:
        if self.path.is_dir():
            raise StoreError(f"{self.path} is a directory; give a file name for the store, e.g. results.h5")
        if not self.path.parent.is_dir():
            raise StoreError(f"{self.path}: the directory {self.path.parent} does not exist")
        self.lock.acquire()
        try:
            self._remove_debris()
            if self.path.exists():
                self._check_existing()
            else:
                self._rewrite(self._create)
        except BaseException:
            self.lock.release()
            raise
        return self

    def __exit__(self, *exc) -> None:
        self.lock.release()

    def _temporary(self) -> Path:
        return self.path.with_name(f".{self.path.name}.{os.getpid()}.tmp")

    def _remove_debris(self) -> None:
        # Only the lock holder writes temporaries, so any left are from a writer that died.
        for stale in self.path.parent.glob(f".{self.path.name}.*.tmp"):
            with contextlib.suppress(OSError):
                stale.unlink()

    def _check_existing(self) -> None:
        with _open_checked(self.path) as handle:
            stored = json.loads(_text(handle["study/canonical"]))
            total = int(handle.attrs.get("points_total", -1))
            self.done = {int(group.attrs["index"]) for group in handle["points"].values()}
        changed = differences(stored, self.study.canonical())
        if changed or total != len(self.study.points):
            listed = "; ".join(changed[:8]) + (f"; and {len(changed) - 8} more" if len(changed) > 8 else "")
            raise StoreError(
                f"{self.path} holds results of a different study, so it cannot be resumed with this one "
                f"(the store != this study: {listed or 'the number of points'}); choose another store"
            )

    def _create(self, handle) -> None:
        handle.attrs["format"] = FORMAT
        handle.attrs["format_version"] = FORMAT_VERSION
        handle.attrs["mottle_version"] = _version()
        handle.attrs["host"] = socket.gethostname()
        handle.attrs["created"] = _now()
        handle.attrs["points_total"] = len(self.study.points)
        study = handle.create_group("study")
        # Texts go in datasets: HDF5 attributes are limited to 64 KiB.
        study.create_dataset("text", data=self.study.text)
        study.create_dataset("canonical", data=json.dumps(self.study.canonical()))
        study.attrs["source"] = self.study.source
        study.attrs["title"] = self.study.title
        tables = study.create_group("tables")
        for name, values in self.study.tables.items():
            tables.create_dataset(name, data=values)
        handle.create_group("points")

    def _rewrite(self, change) -> None:
        temporary = self._temporary()
        with _signals_deferred():
            try:
                if self.path.exists():
                    shutil.copyfile(self.path, temporary)
                    mode = "r+"
                else:
                    mode = "w"
                with _h5open(temporary, mode) as handle:
                    change(handle)
                with open(temporary, "rb+") as raw:
                    os.fsync(raw.fileno())
                os.replace(temporary, self.path)
            except BaseException:
                with contextlib.suppress(OSError):
                    temporary.unlink()
                raise
            _fsync_directory(self.path.parent)
        self.commits += 1

    def commit(self, finished: Iterable[Finished]) -> None:
        """Add finished points to the store in one atomic rewrite."""
        finished = [item for item in finished if item.point.index not in self.done]
        if not finished:
            return

        def add(handle):
            points = handle["points"]
            for item in finished:
                point = item.point
                group = points.create_group(f"{point.index:06d}")
                group.attrs["index"] = point.index
                group.create_dataset("parameters", data=json.dumps(point.parameters))
                group.create_dataset("resolved", data=json.dumps(point.resolved))
                group.attrs["seed"] = np.uint64(point.seed)
                group.attrs["count"] = int(item.result.count)
                group.attrs["wall_time"] = float(item.wall_time)
                group.attrs["compute_time"] = float(item.compute_time)
                group.attrs["host"] = item.host
                group.attrs["mottle_version"] = _version()
                group.attrs["finished"] = _now()
                _write_arrays(group.create_group("result"), item.result.to_arrays())

        self._rewrite(add)
        self.done.update(item.point.index for item in finished)


__all__ = ["Finished", "Store", "StoreError", "StoreWriter", "StoredPoint", "open_store"]
