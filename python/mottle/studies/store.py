"""The results store of a study: one append-only file of self-describing commit records.

Design (format 2). A store is a single file: a 16-byte file header (the magic
``\\x89MOTTLE\\n``, the format version) followed by records. Each record is a
32-byte header (tag ``REC2``, kind, length of its metadata, length of its data,
CRC-32 of the metadata, CRC-32 of the header itself) followed by the metadata
(JSON, padded to 8 bytes) and the data (raw array bytes, 8-byte aligned). The
first record describes the study (its text, canonical form, tabulated
potentials, the number of points); every later record is one commit and holds
the points of that commit:

* metadata (JSON): the swept values column by column, the hosts and array
  layouts of the commit, and a directory of the record's numeric columns;
* the numeric columns, raw (each one numpy array over the commit's points):
  index, seed, count, timings, where each point's arrays lie and their CRC-32,
  and the scalar statistics of every per-realization sample
  (``transmission_mean``, ``transmission_stderr``, ``transmission_std``,
  ``transmission_log_mean``, ``transmission_log_stderr`` and likewise for
  reflection, norm, the absorbed fractions...), with their own CRC-32;
* per point one contiguous blob with its own CRC-32: a small JSON directory
  (the resolved parameters, each array's name, exact numpy dtype, shape and
  offset) followed by the raw bytes of ``EnsembleResult.to_arrays()``. No
  pickle anywhere; no compression: zlib (level 6) shrinks the bench point's
  arrays by 23 %, mostly on the regular ``x`` and ``k`` grids (14 % on the
  profiles), which does not pay for inflating every read, and the store stays
  within 1.03 times the raw bytes of its arrays without it.

A commit appends one record with one ``pwrite`` at the end of the last complete
record and ``fsync``-s the file, so it costs the size of the points it adds and
nothing else: the study's cost is linear in its points (the format-1 store copied
the whole HDF5 file on every commit, O(points^2); docs/stores.md has the
measurements). Opening reads the record headers, metadata and numeric
columns only, seeking over the arrays (a store of 10^5 points opens in a
quarter of a second); a point's arrays are read, and their checksum verified,
when asked for: :meth:`Store.dataset` and :meth:`Store.table` build on the
columns and read profiles only when their values are asked for.

Crashes. A writer killed at any instant (SIGKILL, power aside) leaves every
record it finished intact and at most a last record cut short, because the
file only grows by appending whole records after the end of the last complete
one. Readers ignore a record the file ends inside (``Store.unfinished_bytes``
says how many bytes that is), and the next writer cuts it off before it
appends. The first record is written to a temporary file, ``fsync``-ed and
renamed into place (``os.replace``), so a store file always has its study.
What such a cut cannot be told apart from is a copy truncated between two
records: that looks like an earlier state of the store, and ``mottle run``
computes the points it lacks.

Refusals. Files that are empty, foreign, HDF5 (format-1 stores: convert them
with ``mottle convert OLD NEW``), cut inside the study record, or whose record
headers or metadata fail their checksums are refused with the reason; a
point whose arrays fail theirs is refused when read. A store written by a
different study is refused with the keys that differ.

One writer. A second writer is refused through an exclusive ``flock`` on
``STORE.lock`` (released by the kernel if the holder dies, so a killed run never
blocks the next one). Where ``flock`` is not supported (some network and
cluster file systems answer ENOSYS, ENOLCK or EOPNOTSUPP), the lock falls back
to creating ``STORE.lock`` exclusively (``O_EXCL``) with the holder's pid and
host in it; a lock file left by a process that is dead on this host is taken
over, one from another host is refused with its host and pid (remove it if
that run is dead). The tests simulate such a file system by making
``fcntl.flock`` raise ENOSYS.

Errors while writing (a full disk, a read-only location) are one-line
:class:`StoreError` messages; a commit that fails half way is cut off again,
so the points stored before are untouched.
"""

from __future__ import annotations

import contextlib
import datetime
import errno
import hashlib
import json
import math
import os
import signal
import socket
import struct
import threading
import zlib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import MottleError
from .study import Study, StudyPoint, differences, format_value, point_label, short_names

if TYPE_CHECKING:
    from ..dynamics.ensemble import EnsembleResult

FORMAT = "mottle-results-store"
FORMAT_VERSION = 2
SUFFIX = ".mottle"
"""The file name suffix of a results store (``mottle run study.toml`` writes ``study.mottle``)."""

MAGIC = b"\x89MOTTLE\n"
_FILE_HEADER = struct.Struct("<8sII")  # magic, format version, reserved
_RECORD = struct.Struct("<4sIQQII")  # tag, kind, metadata bytes, data bytes, metadata CRC, header CRC
_TAG = b"REC2"
_STUDY, _POINTS = 1, 2
_HDF5 = b"\x89HDF\r\n\x1a\n"


class StoreError(MottleError, OSError):
    """A results store that cannot be read or written: foreign, damaged, busy, or of another study."""


def _version() -> str:
    from .. import __version__

    return __version__


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")


def _pad(length: int) -> int:
    return -length % 8


def _crc(data) -> int:
    return zlib.crc32(data) & 0xFFFFFFFF


# --------------------------------------------------------------------------- encoding


def _encode_arrays(arrays: Mapping[str, np.ndarray], extra: Mapping[str, Any]) -> bytes:
    """A blob: u64 directory length, the JSON directory (8-byte padded), the raw arrays (8-byte aligned)."""
    entries = []
    chunks = []
    offset = 0
    for name, value in arrays.items():
        value = np.asarray(value, order="C")
        if value.dtype.kind == "O" or value.dtype.names is not None:
            raise StoreError(f"cannot store {name!r}: an array of Python objects or records")
        raw = value.tobytes()
        entries.append([name, value.dtype.str, list(value.shape), offset, len(raw)])
        chunks.append(raw)
        chunks.append(b"\0" * _pad(len(raw)))
        offset += len(raw) + _pad(len(raw))
    directory = json.dumps({**extra, "arrays": entries}).encode()
    directory += b" " * _pad(len(directory))
    return struct.pack("<Q", len(directory)) + directory + b"".join(chunks)


def _decode_blob(blob: bytes) -> tuple[dict, dict[str, np.ndarray]]:
    (length,) = struct.unpack_from("<Q", blob, 0)
    directory = json.loads(blob[8 : 8 + length])
    start = 8 + length
    arrays = {}
    for name, dtype, shape, offset, _ in directory.pop("arrays"):
        data = np.frombuffer(blob, dtype=np.dtype(dtype), count=math.prod(shape), offset=start + offset)
        arrays[name] = data.reshape(shape).copy()
    return directory, arrays


def _record(kind: int, meta: Mapping, data: bytes) -> bytes:
    text = json.dumps(meta, allow_nan=True).encode()
    text += b" " * _pad(len(text))
    head = struct.pack("<4sIQQI", _TAG, kind, len(text), len(data), _crc(text))
    return head + struct.pack("<I", _crc(head)) + text + data + b"\0" * _pad(len(data))


def point_statistics(result: EnsembleResult) -> dict[str, float]:
    """The scalar statistics a store keeps beside a point, from its per-realization samples.

    For every one-dimensional sample (``transmission``, ``reflection``, ``norm``, ``absorbed_left``,
    ``absorbed_right``...): ``NAME_mean``, ``NAME_stderr``, ``NAME_std``, ``NAME_log_mean`` and
    ``NAME_log_stderr``, exactly as :class:`~mottle.analysis.statistics.Stat` gives them.
    """
    from ..analysis.statistics import Stat

    out: dict[str, float] = {}
    for name, values in result.samples.items():
        values = np.asarray(values)
        if values.ndim != 1 or values.dtype.kind not in "fiu":
            continue
        stat = Stat.of(values)
        out[f"{name}_mean"] = stat.mean
        out[f"{name}_stderr"] = stat.stderr
        out[f"{name}_std"] = stat.std
        out[f"{name}_log_mean"] = stat.log_mean
        out[f"{name}_log_stderr"] = stat.log_stderr
    return out


def _columns_block(columns: Mapping[str, Any], dtypes: Mapping[str, Any]) -> tuple[bytes, dict]:
    """Columns of numbers as one block of raw arrays (8-byte aligned) and its directory."""
    chunks, directory, offset = [], {}, 0
    for name, values in columns.items():
        raw = np.asarray(values, dtype=dtypes.get(name, np.float64)).tobytes()
        directory[name] = [np.dtype(dtypes.get(name, np.float64)).str, offset]
        chunks += [raw, b"\0" * _pad(len(raw))]
        offset += len(raw) + _pad(len(raw))
    return b"".join(chunks), directory


def _layout(arrays: Mapping[str, np.ndarray]) -> str:
    """A short fingerprint of a point's axes (times, x, k): points with one layout share profiles' dims."""
    digest = hashlib.sha256()
    # On a 2D/3D grid the axes are x/0, x/1, ... and k/0, k/1, ...
    axes = sorted(name for name in arrays if name.startswith(("x/", "k/")))
    for name in ("times", "x", "k", *axes):
        value = np.asarray(arrays.get(name, np.zeros(0)))
        digest.update(f"{name}:{value.dtype.str}:{value.shape}".encode())
        digest.update(np.ascontiguousarray(value).tobytes())
    return digest.hexdigest()[:16]


# --------------------------------------------------------------------------- reading


@dataclass
class _Scan:
    study: dict
    study_data: int  # file offset of the study record's data
    records: list[tuple[dict, int]]  # (metadata, file offset of the data) of each points record
    end: int  # end of the last complete record
    size: int


def _refuse_header(path: Path, head: bytes, size: int) -> None:
    if size == 0:
        raise StoreError(f"{path} is empty, not a mottle results store (remove it or choose another store)")
    if head[:8] == _HDF5:
        raise StoreError(
            f"{path} is an HDF5 file: a format-1 mottle store or another HDF5 file, not a format-2 store; "
            f"if it is a results store of an older mottle, convert it with: mottle convert {path} NEW{SUFFIX}"
        )
    if head[:8] != MAGIC or len(head) < _FILE_HEADER.size:
        raise StoreError(f"{path} is not a mottle results store (it was not overwritten)")
    _, version, _ = _FILE_HEADER.unpack_from(head)
    if version > FORMAT_VERSION:
        raise StoreError(
            f"{path} was written by a newer mottle (store format {version}; "
            f"this one reads {FORMAT_VERSION}): upgrade mottle"
        )
    if version != FORMAT_VERSION:
        raise StoreError(f"{path} has an unknown store format {version}; it cannot be read")


def _scan(path: Path) -> _Scan:
    """Read the file header, every record header and metadata; refuse what is not a complete store."""
    if not path.exists():
        raise StoreError(f"{path}: no such results store")
    if path.is_dir():
        raise StoreError(f"{path} is a directory, not a results store file")
    try:
        handle = open(path, "rb")
    except OSError as error:
        raise StoreError(f"{path}: cannot read the store ({error.strerror})") from None
    with handle:
        size = os.fstat(handle.fileno()).st_size
        head = handle.read(_FILE_HEADER.size)
        _refuse_header(path, head, size)
        position = _FILE_HEADER.size
        study: dict | None = None
        study_data = 0
        records: list[tuple[dict, int]] = []
        while position < size:
            raw = handle.read(_RECORD.size)
            if len(raw) < _RECORD.size:
                break  # a record cut short: a commit in progress or a writer killed during one
            tag, kind, meta_length, data_length, meta_crc, head_crc = _RECORD.unpack(raw)
            if tag != _TAG or _crc(raw[:-4]) != head_crc:
                raise StoreError(
                    f"{path} is a damaged mottle results store (the record header at byte {position} "
                    f"fails its checksum); it cannot be read"
                )
            data_at = position + _RECORD.size + meta_length
            stop = data_at + data_length + _pad(data_length)
            if stop > size:
                break
            text = handle.read(meta_length)
            if _crc(text) != meta_crc:
                raise StoreError(
                    f"{path} is a damaged mottle results store (the record at byte {position} fails its "
                    f"checksum); it cannot be read"
                )
            meta = json.loads(text)
            if kind == _STUDY and study is None:
                study, study_data = meta, data_at
            elif kind == _POINTS and study is not None:
                block = handle.read(int(meta["columns_bytes"]))
                if _crc(block) != meta["columns_crc"]:
                    raise StoreError(
                        f"{path} is a damaged mottle results store (the columns of the record at byte "
                        f"{position} fail their checksum); it cannot be read"
                    )
                meta["columns"] = {
                    name: np.frombuffer(block, dtype=np.dtype(dtype), count=int(meta["n"]), offset=offset)
                    for name, (dtype, offset) in meta["columns"].items()
                }
                records.append((meta, data_at))
            else:
                raise StoreError(
                    f"{path} is a damaged mottle results store (unexpected record at {position})"
                )
            position = stop
            handle.seek(position)
        if study is None:
            raise StoreError(f"{path} is a truncated mottle results store (its study record is incomplete)")
        if study.get("format") != FORMAT:
            raise StoreError(
                f"{path} is not a mottle results store (no format={FORMAT!r} in its study record)"
            )
    return _Scan(study, study_data, records, position, size)


def _read(path: Path, offset: int, length: int) -> bytes:
    try:
        with open(path, "rb") as handle:
            handle.seek(offset)
            data = handle.read(length)
    except OSError as error:
        raise StoreError(f"{path}: cannot read the store ({error.strerror})") from None
    if len(data) != length:
        raise StoreError(f"{path} is a truncated mottle results store (it is shorter than its records say)")
    return data


@dataclass(eq=False)
class StoredPoint:
    """A finished point: ``parameters`` (swept values), ``resolved`` (all values), ``seed``, ``result``.

    ``statistics`` holds the scalar statistics kept beside it (see :func:`point_statistics`);
    ``resolved`` and ``result`` are read from the file on first use.
    """

    path: Path
    index: int
    parameters: dict
    seed: int
    count: int
    wall_time: float
    compute_time: float
    host: str
    mottle_version: str
    finished: str
    statistics: dict = field(default_factory=dict, repr=False)
    _where: tuple[int, int, int] = field(default=(0, 0, 0), repr=False)
    _result: object = field(default=None, repr=False)
    _resolved: dict | None = field(default=None, repr=False)

    def _load(self) -> tuple[dict, dict[str, np.ndarray]]:
        offset, length, crc = self._where
        blob = _read(self.path, offset, length)
        if _crc(blob) != crc:
            raise StoreError(
                f"{self.path} is damaged: the arrays of point {self.index + 1} fail their checksum"
            )
        return _decode_blob(blob)

    def arrays(self) -> dict[str, np.ndarray]:
        """The point's arrays as stored (``EnsembleResult.to_arrays()``, exact dtypes)."""
        directory, arrays = self._load()
        self._resolved = directory.get("resolved", {})
        return arrays

    @property
    def resolved(self) -> dict:
        if self._resolved is None:
            self.arrays()
        assert self._resolved is not None
        return self._resolved

    @property
    def result(self):
        """The point's :class:`~mottle.EnsembleResult`, read on first use."""
        if self._result is None:
            from ..dynamics.ensemble import EnsembleResult

            self._result = EnsembleResult.from_arrays(self.arrays())
        return self._result

    def label(self, names: Mapping[str, str] | None = None) -> str:
        return point_label(self.parameters, names)


class Store:
    """A results store opened for reading (see :func:`open_store`)."""

    def __init__(self, path: str | os.PathLike):
        self.path = Path(path)
        scan = _scan(self.path)
        study = scan.study
        self.format_version = FORMAT_VERSION
        self.study_text: str = study["text"]
        self.source: str = study.get("source", "")
        self.title: str = study.get("title", "")
        self.canonical: dict = study["canonical"]
        self.mottle_version = str(study.get("mottle_version", ""))
        self.host = str(study.get("host", ""))
        self.created = str(study.get("created", ""))
        self.total = int(study["points_total"])
        self.unfinished_bytes = scan.size - scan.end
        """Bytes after the last complete record: a commit in progress, or one a killed writer left."""
        self.tables = {}
        for name, (dtype, shape, offset, nbytes) in study.get("tables", {}).items():
            raw = _read(self.path, scan.study_data + offset, nbytes)
            self.tables[name] = np.frombuffer(raw, dtype=np.dtype(dtype)).reshape(shape).copy()
        self._columns = _merge(scan.records)
        self._points: list[StoredPoint] | None = None

    @property
    def points(self) -> list[StoredPoint]:
        """The finished points, by index."""
        if self._points is None:
            self._points = [self._point(number) for number in range(self._columns["n"])]
        return self._points

    def _point(self, number: int) -> StoredPoint:
        """The ``number``-th finished point (by index), made on its own."""
        if self._points is not None:
            return self._points[number]
        c = self._columns
        return StoredPoint(
            self.path,
            int(c["index"][number]),
            {path: values[number] for path, values in c["parameters"].items()},
            int(c["seed"][number]),
            int(c["count"][number]),
            float(c["wall_time"][number]),
            float(c["compute_time"][number]),
            str(c["host"][number]),
            str(c["mottle_version"][number]),
            str(c["finished"][number]),
            {name: float(values[number]) for name, values in c["stats"].items()},
            (int(c["offset"][number]), int(c["length"][number]), int(c["crc"][number])),
        )

    @property
    def indices(self) -> np.ndarray:
        """The indices of the finished points, increasing."""
        return self._columns["index"].copy()

    @property
    def sweep(self) -> dict:
        """The swept paths and their values."""
        return dict(self.canonical.get("sweep", {}))

    @property
    def grid(self) -> bool:
        """Whether the points are the full Cartesian product of the sweep's values (first key slowest)."""
        return "factors" not in self.canonical

    @property
    def missing(self) -> list[int]:
        """Indices of the study's points not yet in the store."""
        done = np.zeros(self.total, dtype=bool)
        done[self.indices] = True
        return np.flatnonzero(~done).tolist()

    @property
    def complete(self) -> bool:
        return self._columns["n"] == self.total

    def swept_values(self, index) -> dict:
        """The swept values of point(s) ``index`` (computed or not), from the study's sweep."""
        indices = np.atleast_1d(np.asarray(index, dtype=np.int64))
        out: dict[str, list] = {}
        if self.grid:
            sizes = [len(v) for v in self.sweep.values()]
            digits = np.unravel_index(indices, sizes) if sizes else []
            for (path, values), digit in zip(self.sweep.items(), digits, strict=True):
                out[path] = [values[d] for d in digit]
        else:
            factors = self.canonical["factors"]
            sizes = [len(next(iter(f.values()))) for f in factors]
            digits = np.unravel_index(indices, sizes)
            for factor, digit in zip(factors, digits, strict=True):
                for path, values in factor.items():
                    out[path] = [values[d] for d in digit]
        return {path: out[path] for path in self.sweep}

    def table(self):
        """A :class:`pandas.DataFrame`, one row per finished point (by index).

        Columns: ``index``, the swept keys by their short names (a distribution or packet spec as
        its label, e.g. ``uniform(0.8, 1.2)``), ``seed``, ``count``, ``wall_time``,
        ``compute_time``, ``host``, and the scalar statistics (:func:`point_statistics`).
        Profiles are not loaded.
        """
        import pandas as pd

        c = self._columns
        names = short_names(self.sweep)
        data: dict[str, Any] = {"index": c["index"]}
        for path in self.sweep:
            data[names[path]] = _column(c["parameters"].get(path, [None] * c["n"]))
        for name in ("seed", "count", "wall_time", "compute_time", "host"):
            data[name] = c[name]
        for name, values in c["stats"].items():
            data[name] = values
        return pd.DataFrame(data)

    def to_csv(self, path: str | os.PathLike) -> Path:
        """Write :meth:`table` as CSV (header row of column names, floats to full precision)."""
        path = Path(path)
        self.table().to_csv(path, index=False, float_format="%.17g")
        return path

    def dataset(self):
        """An :class:`xarray.Dataset` of the study: one dimension per swept key, or ``point``.

        A full Cartesian sweep gives one dimension per swept key (short names, the swept values
        as coordinates; a distribution or packet spec as its label); zipped groups and point lists
        give one ``point`` dimension with the swept values as coordinates along it. Variables: the
        scalar statistics (:func:`point_statistics`), ``count``, ``wall_time``, ``compute_time``
        (NaN where a point is not computed yet; ``ds["count"]``, as ``Dataset.count`` is a method),
        ``seed`` (0 there) and ``computed``; where every
        point shares one grid and one non-empty set of snapshots, the profiles ``density``,
        ``density_stderr``, ``log_density``, ``log_density_stderr`` (``time``, ``x``), ``momentum``
        (``time``, ``k``), ``position``, ``second_moment`` and ``participation`` (``time``), read from
        the file only when their values are asked for.
        """
        import xarray as xr

        c = self._columns
        sweep = self.sweep
        names = short_names(sweep)
        stored = c["index"]
        if self.grid:
            dims = [names[p] for p in sweep]
            shape = tuple(len(v) for v in sweep.values())
            coords: dict[str, Any] = {names[p]: _column(v) for p, v in sweep.items()}
        else:
            dims, shape = ["point"], (self.total,)
            values = self.swept_values(np.arange(self.total))
            coords = {"point": np.arange(self.total)}
            coords.update({names[p]: ("point", _column(v)) for p, v in values.items()})
        total = self.total

        def scatter(column, dtype, fill):
            out = np.full(total, fill, dtype=dtype)
            out[stored] = column
            return out.reshape(shape)

        variables: dict[str, Any] = {}
        computed = np.zeros(total, dtype=bool)
        computed[stored] = True
        variables["computed"] = (dims, computed.reshape(shape))
        variables["count"] = (dims, scatter(c["count"], np.float64, np.nan))
        variables["seed"] = (dims, scatter(c["seed"], np.uint64, 0))
        for name in ("wall_time", "compute_time"):
            variables[name] = (dims, scatter(c[name], np.float64, np.nan))
        for name, column in c["stats"].items():
            variables[name] = (dims, scatter(column, np.float64, np.nan))
        layouts = set(c["layout"])
        attrs = {"title": self.title, "store": str(self.path), "points_total": total}
        first = self._point(0).arrays() if len(layouts) == 1 and c["n"] else {}
        if first and first["times"].size:
            times = first["times"]
            spatial: tuple[str, ...]
            spectral: tuple[str, ...]
            per_axis: tuple[str, ...]
            if "x" in first:
                coords.update({"time": times, "x": first["x"], "k": first["k"]})
                spatial, spectral, per_axis = ("x",), ("k",), ()
            else:  # a 2D/3D grid: one coordinate per axis, x_0, x_1, ... and k_0, k_1, ...
                ndim = sum(1 for name in first if name.startswith("x/"))
                spatial = tuple(f"x_{a}" for a in range(ndim))
                spectral = tuple(f"k_{a}" for a in range(ndim))
                per_axis = ("axis",)
                coords["time"] = times
                coords.update({f"x_{a}": first[f"x/{a}"] for a in range(ndim)})
                coords.update({f"k_{a}": first[f"k/{a}"] for a in range(ndim)})
                coords["axis"] = np.arange(ndim)
            profile_axes = ("time", *spatial, *spectral, *per_axis)
            sizes = {name: np.asarray(coords[name]).size for name in profile_axes}
            positions = np.full(total, -1, dtype=np.int64)
            positions[stored] = np.arange(c["n"])
            for name, parts, getter in _PROFILES:
                extra = tuple(
                    axis for part in parts for axis in {"x": spatial, "k": spectral, "time": ("time",)}[part]
                ) + (per_axis if name in _PER_AXIS_PROFILES else ())
                lazy = _LazyProfiles(self, positions.reshape(shape), tuple(sizes[a] for a in extra), getter)
                variables[name] = (dims + list(extra), _lazily(lazy))
        elif len(layouts) > 1:
            attrs["profiles"] = "left out: the points differ in grid or snapshots"
        return xr.Dataset(variables, coords=coords, attrs=attrs)

    def __repr__(self) -> str:
        return f"Store({str(self.path)!r}: {self._columns['n']} of {self.total} points)"


def _column(values: list) -> np.ndarray:
    """Swept values as one numpy column: integers, floats, or labels (``format_value``)."""
    if values and all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in values):
        return np.asarray(values, dtype=np.int64)
    if values and all(isinstance(v, (int, float, np.number)) and not isinstance(v, bool) for v in values):
        return np.asarray(values, dtype=np.float64)
    return np.asarray([format_value(v) for v in values], dtype=object)


def _merge(records: list[tuple[dict, int]]) -> dict:
    """The columns of every points record, one entry per point, sorted by index (the first copy of
    an index wins)."""
    parts: dict[str, list] = {name: [] for name in _NUMERIC}
    stats: dict[str, list] = {}
    texts: dict[str, list] = {"host": [], "layout": [], "finished": [], "mottle_version": []}
    parameters: dict[str, list] = {}
    total = 0
    for meta, data_at in records:
        columns = meta["columns"]
        n = int(meta["n"])
        for name in _NUMERIC:
            parts[name].append(columns[name])
        parts["offset"][-1] = parts["offset"][-1] + (data_at + int(meta["columns_bytes"]))
        for name in columns:
            if name.startswith("stat:"):
                stats.setdefault(name[5:], [np.full(total, np.nan)] if total else []).append(columns[name])
        for column in stats.values():
            if sum(part.size for part in column) < total + n:
                column.append(np.full(n, np.nan))
        texts["host"].append(np.asarray(meta["hosts"], dtype=object)[columns["host_code"]])
        texts["layout"].append(np.asarray(meta["layouts"], dtype=object)[columns["layout_code"]])
        texts["finished"].append(np.full(n, meta["finished"], dtype=object))
        texts["mottle_version"].append(np.full(n, meta["mottle_version"], dtype=object))
        for path, values in meta["parameters"].items():
            column = parameters.setdefault(path, [None] * total)
            column.extend(values)
        total += n
        for column in parameters.values():
            column.extend([None] * (total - len(column)))
    out: dict[str, Any] = {}
    if not total:
        out.update({name: np.zeros(0, dtype=dtype) for name, dtype in _NUMERIC.items()})
        out.update({name: np.zeros(0, dtype=object) for name in texts})
        out.update(stats={}, parameters={}, n=0)
        return out
    index = np.concatenate(parts["index"])
    order = np.argsort(index, kind="stable")
    first = np.ones(order.size, dtype=bool)
    first[1:] = index[order][1:] != index[order][:-1]
    order = order[first]
    for name in _NUMERIC:
        out[name] = np.concatenate(parts[name])[order]
    for name, column in texts.items():
        out[name] = np.concatenate(column)[order]
    out["stats"] = {name: np.concatenate(column)[order] for name, column in stats.items()}
    out["parameters"] = {path: [values[i] for i in order.tolist()] for path, values in parameters.items()}
    out["n"] = int(order.size)
    return out


_NUMERIC = {
    "index": np.int64,
    "seed": np.uint64,
    "count": np.int64,
    "wall_time": np.float64,
    "compute_time": np.float64,
    "offset": np.int64,
    "length": np.int64,
    "crc": np.int64,
    "host_code": np.int64,
    "layout_code": np.int64,
}


def _mean_over(name: str):
    return lambda arrays: np.mean(arrays[f"samples/{name}"], axis=0)


def _second_moment(arrays):
    return np.mean(arrays["samples/position_squared"] - arrays["samples/position"] ** 2, axis=0)


# Profiles with one value per axis on a 2D/3D grid (a trailing "axis" dimension there).
_PER_AXIS_PROFILES = ("position", "second_moment")
_PROFILES = (
    ("density", ("time", "x"), lambda a: a["density"]),
    ("density_stderr", ("time", "x"), lambda a: a["density_stderr"]),
    ("log_density", ("time", "x"), lambda a: a["log_density"]),
    ("log_density_stderr", ("time", "x"), lambda a: a["log_density_stderr"]),
    ("momentum", ("time", "k"), lambda a: a["momentum"]),
    ("position", ("time",), _mean_over("position")),
    ("second_moment", ("time",), _second_moment),
    ("participation", ("time",), _mean_over("participation")),
)


class _LazyProfiles:
    """A profile over the sweep, read point by point from the store when indexed."""

    def __init__(self, store: Store, positions: np.ndarray, extra: tuple[int, ...], getter):
        self.store, self.positions, self.getter = store, positions, getter
        self.shape = positions.shape + extra
        self.dtype = np.dtype(np.float64)

    def __getitem__(self, key):
        from xarray.core import indexing

        return indexing.explicit_indexing_adapter(key, self.shape, indexing.IndexingSupport.BASIC, self._raw)

    def _raw(self, key: tuple) -> np.ndarray:
        grid = self.positions.ndim
        positions = self.positions[key[:grid]]
        extra = self.shape[grid:]
        out = np.full(positions.shape + extra, np.nan)
        for where in np.ndindex(positions.shape):
            number = positions[where]
            if number >= 0:
                out[where] = self.getter(self.store._point(int(number)).arrays())
        return out[(Ellipsis, *key[grid:])]


def _lazily(array: _LazyProfiles):
    from xarray.backends import BackendArray
    from xarray.core import indexing

    class Backend(BackendArray):
        def __init__(self, inner):
            self.inner, self.shape, self.dtype = inner, inner.shape, inner.dtype

        def __getitem__(self, key):
            return self.inner[key]

    return indexing.LazilyIndexedArray(Backend(array))


def open_store(path: str | os.PathLike) -> Store:
    """Open a results store for reading: ``.points`` (with ``.parameters``, ``.result``),
    ``.table()`` (pandas) and ``.dataset()`` (xarray)."""
    return Store(path)


# --------------------------------------------------------------------------- writing


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class _Lock:
    """An exclusive lock on ``PATH.lock``: ``flock`` where the file system has it (the kernel drops it
    when the holder dies), else exclusive creation with the holder's pid and host in the file."""

    def __init__(self, store: Path):
        self.path = store.with_name(store.name + ".lock")
        self.fd: int | None = None
        self.exclusive = False

    def acquire(self) -> None:
        try:
            import fcntl
        except ImportError:  # not POSIX
            fcntl = None  # type: ignore[assignment]
        if fcntl is None:
            self._create_exclusive()
            return
        while True:
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
                created = True
            except FileExistsError:
                try:
                    fd = os.open(self.path, os.O_RDWR)
                except FileNotFoundError:
                    continue
                created = False
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                holder = os.pread(fd, 200, 0).decode(errors="replace").strip()
                os.close(fd)
                raise StoreError(self._busy(holder)) from None
            except OSError:  # a file system without flock: exclusive creation decides
                if created:
                    self.exclusive = True
                    break
                os.close(fd)
                self._create_exclusive()
                return
            # The holder may have unlinked the file between our open and our lock: retry on a fresh one.
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(self.path))
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        self._sign(fd)

    def _sign(self, fd: int) -> None:
        os.ftruncate(fd, 0)
        os.pwrite(fd, f"{os.getpid()} {socket.gethostname()}\n".encode(), 0)
        self.fd = fd

    def _create_exclusive(self) -> None:
        for _ in range(3):
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                try:
                    holder = self.path.read_text(errors="replace").strip()
                except FileNotFoundError:
                    continue
                words = holder.split()
                host = socket.gethostname()
                if len(words) == 2 and words[0].isdigit() and words[1] == host and not _alive(int(words[0])):
                    with contextlib.suppress(FileNotFoundError):  # a dead writer's lock: take it over
                        os.unlink(self.path)
                    continue
                if len(words) == 2 and words[1] != host:
                    raise StoreError(
                        self._busy(holder) + "; this file system has no flock: if that run is dead, "
                        f"remove {self.path}"
                    ) from None
                raise StoreError(self._busy(holder)) from None
            self.exclusive = True
            self._sign(fd)
            return
        raise StoreError(self._busy(None))

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
    """Hold SIGINT and SIGTERM back while a commit writes, so Ctrl-C never lands half way."""
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


def _write_all(fd: int, data: bytes, offset: int) -> None:
    view = memoryview(data)
    while view:
        written = os.pwrite(fd, view, offset)
        view, offset = view[written:], offset + written


def _write_failed(path: Path, error: OSError, what: str) -> StoreError:
    reason = error.strerror or str(error)
    if error.errno == errno.ENOSPC:
        reason = "the disk is full"
    elif error.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        reason = f"{path.parent} is not writable: {error.strerror}"
    return StoreError(f"{path}: could not {what} ({reason}); nothing stored before was lost")


@dataclass
class Finished:
    """A point ready to be committed: its result and how long it took where."""

    point: StudyPoint
    result: EnsembleResult
    wall_time: float
    compute_time: float
    host: str


class StoreWriter:
    """The one writer of a store: locks it, checks it is ``study``'s, appends finished points.

    Use as a context manager. ``done`` holds the indices already in the store.
    """

    def __init__(self, path: str | os.PathLike, study: Study):
        self.path = Path(path)
        self.study = study
        self.lock = _Lock(self.path)
        self.done: set[int] = set()
        self.commits = 0
        self.fd: int | None = None
        self.end = 0

    def __enter__(self) -> StoreWriter:
        if self.path.is_dir():
            raise StoreError(
                f"{self.path} is a directory; give a file name for the store, e.g. results{SUFFIX}"
            )
        if not self.path.parent.is_dir():
            raise StoreError(f"{self.path}: the directory {self.path.parent} does not exist")
        try:
            self.lock.acquire()
        except StoreError:
            raise
        except OSError as error:
            raise _write_failed(self.path, error, "lock the store") from None
        try:
            self._remove_debris()
            if self.path.exists():
                self._check_existing()
            else:
                self._create()
            try:
                self.fd = os.open(self.path, os.O_RDWR)
            except OSError as error:
                raise _write_failed(self.path, error, "open the store for writing") from None
            if os.fstat(self.fd).st_size > self.end:  # a commit a killed writer left unfinished
                os.ftruncate(self.fd, self.end)
                os.fsync(self.fd)
        except BaseException:
            self._close()
            raise
        return self

    def __exit__(self, *exc) -> None:
        self._close()

    def _close(self) -> None:
        if self.fd is not None:
            os.close(self.fd)
            self.fd = None
        self.lock.release()

    def _temporary(self) -> Path:
        return self.path.with_name(f".{self.path.name}.{os.getpid()}.tmp")

    def _remove_debris(self) -> None:
        # Only the lock holder writes temporaries, so any left are from a writer that died.
        for stale in self.path.parent.glob(f".{self.path.name}.*.tmp"):
            with contextlib.suppress(OSError):
                stale.unlink()

    def _check_existing(self) -> None:
        scan = _scan(self.path)
        stored = scan.study["canonical"]
        total = int(scan.study.get("points_total", -1))
        changed = differences(stored, self.study.canonical())
        if changed or total != len(self.study.points):
            listed = "; ".join(changed[:8]) + (f"; and {len(changed) - 8} more" if len(changed) > 8 else "")
            raise StoreError(
                f"{self.path} holds results of a different study, so it cannot be resumed with this one "
                f"(the store != this study: {listed or 'the number of points'}); choose another store"
            )
        self.done = {int(i) for meta, _ in scan.records for i in meta["columns"]["index"]}
        self.end = scan.end

    def _create(self) -> None:
        tables = {}
        chunks = []
        offset = 0
        for name, values in self.study.tables.items():
            values = np.asarray(values, order="C")
            raw = values.tobytes()
            tables[name] = [values.dtype.str, list(values.shape), offset, len(raw)]
            chunks += [raw, b"\0" * _pad(len(raw))]
            offset += len(raw) + _pad(len(raw))
        meta = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "mottle_version": _version(),
            "host": socket.gethostname(),
            "created": _now(),
            "points_total": len(self.study.points),
            "source": self.study.source,
            "title": self.study.title,
            "text": self.study.text,
            "canonical": self.study.canonical(),
            "tables": tables,
        }
        data = _FILE_HEADER.pack(MAGIC, FORMAT_VERSION, 0) + _record(_STUDY, meta, b"".join(chunks))
        temporary = self._temporary()
        with _signals_deferred():
            try:
                fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
                try:
                    _write_all(fd, data, 0)
                    os.fsync(fd)
                finally:
                    os.close(fd)
                os.replace(temporary, self.path)
            except OSError as error:
                with contextlib.suppress(OSError):
                    temporary.unlink()
                raise _write_failed(self.path, error, "create the store") from None
            except BaseException:
                with contextlib.suppress(OSError):
                    temporary.unlink()
                raise
            _fsync_directory(self.path.parent)
        self.end = len(data)

    def commit(self, finished: Iterable[Finished]) -> None:
        """Append finished points to the store in one record (one write, one fsync)."""
        finished = [item for item in finished if item.point.index not in self.done]
        if not finished:
            return
        assert self.fd is not None, "StoreWriter.commit outside its with block"
        blobs, where, layouts, statistics = [], [], [], []
        offset = 0
        for item in finished:
            arrays = item.result.to_arrays()
            blob = _encode_arrays(arrays, {"resolved": item.point.resolved})
            where.append((offset, len(blob), _crc(blob)))
            blobs += [blob, b"\0" * _pad(len(blob))]
            offset += len(blob) + _pad(len(blob))
            layouts.append(_layout(arrays))
            statistics.append(point_statistics(item.result))
        hosts = sorted({item.host for item in finished})
        unique = sorted(set(layouts))
        columns: dict[str, list] = {
            "index": [item.point.index for item in finished],
            "seed": [int(item.point.seed) for item in finished],
            "count": [int(item.result.count) for item in finished],
            "wall_time": [float(item.wall_time) for item in finished],
            "compute_time": [float(item.compute_time) for item in finished],
            "offset": [w[0] for w in where],
            "length": [w[1] for w in where],
            "crc": [w[2] for w in where],
            "host_code": [hosts.index(item.host) for item in finished],
            "layout_code": [unique.index(layout) for layout in layouts],
        }
        meta = {
            "n": len(finished),
            "hosts": hosts,
            "layouts": unique,
            "finished": _now(),
            "mottle_version": _version(),
            "parameters": {
                path: [item.point.parameters.get(path) for item in finished] for path in self.study.sweep
            },
        }
        names = list(dict.fromkeys(name for stats in statistics for name in stats))
        stats = {f"stat:{name}": [s.get(name, math.nan) for s in statistics] for name in names}
        block, meta["columns"] = _columns_block({**columns, **stats}, _NUMERIC)
        meta.update(columns_bytes=len(block), columns_crc=_crc(block))
        self._append(_record(_POINTS, meta, block + b"".join(blobs)), len(finished))
        self.done.update(item.point.index for item in finished)

    def _append(self, record: bytes, count: int) -> None:
        assert self.fd is not None
        with _signals_deferred():
            try:
                _write_all(self.fd, record, self.end)
                os.fsync(self.fd)
            except OSError as error:
                with contextlib.suppress(OSError):  # cut the half-written record off again
                    os.ftruncate(self.fd, self.end)
                raise _write_failed(self.path, error, f"save {count} finished points") from None
        self.end += len(record)
        self.commits += 1


# --------------------------------------------------------------------------- format 1


def convert_store(old: str | os.PathLike, new: str | os.PathLike) -> Store:
    """Write the points of a format-1 (HDF5) store ``old`` into a new format-2 store ``new``.

    Needs h5py. The arrays are copied exactly; ``new`` must not exist yet.
    """
    from .study import parse_study

    old, new = Path(old), Path(new)
    if new.exists():
        raise StoreError(f"{new} exists already; give the name of a new store")
    try:
        import h5py
    except ImportError:
        raise StoreError("converting a format-1 store needs h5py: pip install 'mottle[convert]'") from None
    if not old.is_file():
        raise StoreError(f"{old}: no such results store")
    with open(old, "rb") as raw:
        if raw.read(8) != _HDF5:
            raise StoreError(f"{old} is not an HDF5 file, so not a format-1 mottle results store")
    try:
        handle = h5py.File(old, "r", locking=False)
    except OSError as error:
        raise StoreError(f"{old} is a truncated or damaged HDF5 file ({error}); it cannot be read") from None
    with handle:
        if handle.attrs.get("format") != FORMAT or int(handle.attrs.get("format_version", 0)) != 1:
            raise StoreError(f"{old} is an HDF5 file but not a format-1 mottle results store")
        study_group = handle["study"]
        text = study_group["text"].asstr()[()]
        source = str(study_group.attrs.get("source", old.name))
        study = parse_study(text, source)
        canonical = json.loads(study_group["canonical"].asstr()[()])
        if differences(canonical, study.canonical()):
            raise StoreError(f"{old}: its study text does not give its stored study; it cannot be converted")
        items = []
        for _, group in sorted(handle["points"].items()):
            items.append(_format1_point(study, group))
    with StoreWriter(new, study) as writer:
        for start in range(0, len(items), 256):
            writer.commit(items[start : start + 256])
    return open_store(new)


def _format1_point(study: Study, group) -> Finished:
    from ..dynamics.ensemble import EnsembleResult

    arrays: dict[str, np.ndarray] = {}

    def visit(name, item):
        if hasattr(item, "dtype"):
            value = item[()]
            if "numpy_dtype" in item.attrs:
                value = np.char.decode(value, "utf-8").astype(item.attrs["numpy_dtype"])
            arrays[name] = np.asarray(value)

    group["result"].visititems(visit)
    attrs = group.attrs
    point = study.points[int(attrs["index"])]
    return Finished(
        point,
        EnsembleResult.from_arrays(arrays),
        float(attrs["wall_time"]),
        float(attrs["compute_time"]),
        str(attrs["host"]),
    )


__all__ = [
    "SUFFIX",
    "Finished",
    "Store",
    "StoreError",
    "StoreWriter",
    "StoredPoint",
    "convert_store",
    "open_store",
    "point_statistics",
]
