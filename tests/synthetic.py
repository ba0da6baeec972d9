"""A results store of synthetic points, written fast (for the labelled-access tests and benches).

The points are not computed: every point holds the same small arrays (one blob written once per
record) and its own made-up statistics, drawn from a seeded generator, so that a store of 10^5
points takes a few seconds to write. The records are ordinary format-2 commit records: the store
opens, reads and reports like any other.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from mottle.studies import store as stores
from mottle.studies.study import parse_study

STUDY = """\
[study]
title = "synthetic"

[system]
points = 64
length = 40.0

[[system.disorder]]
kind = "gaussian"
rms = 0.1
correlation_length = 2.0
start = -5.0
stop = 5.0

[packet]
center = -10.0
wavenumber = 1.0
width = 3.0

[run]
duration = 1.0
step = 0.1
realizations = 4
seed = 1
snapshots = [0.5, 1.0]

[sweep]
"system.disorder.0.rms" = { start = 0.05, stop = 0.5, count = %d }
"packet.wavenumber" = { start = 0.8, stop = 1.6, count = %d }
"""

SNAPSHOTS, GRID = 2, 16


def synthetic_arrays(count: int = 4) -> dict[str, np.ndarray]:
    """Arrays of the shape ``EnsembleResult.to_arrays()`` gives, for ``count`` realizations."""
    rng = np.random.default_rng(5)
    arrays = {
        "count": np.asarray(count),
        "seed": np.asarray(1),
        "times": np.array([0.5, 1.0]),
        "x": np.linspace(-20.0, 20.0, GRID, endpoint=False),
        "k": np.fft.fftshift(np.fft.fftfreq(GRID, 40.0 / GRID)) * 2 * math.pi,
    }
    for name in ("transmission", "reflection", "norm", "absorbed_left", "absorbed_right", "quasimomentum"):
        arrays[f"samples/{name}"] = rng.uniform(0.1, 0.9, count)
    for name in ("position", "position_squared", "participation", "mean_momentum", "momentum_squared"):
        arrays[f"samples/{name}"] = rng.uniform(0.0, 1.0, (count, SNAPSHOTS))
    arrays["samples/spectrum"] = np.zeros((count, 0))
    for name in ("density", "density_stderr", "log_density", "log_density_stderr", "momentum"):
        arrays[name] = rng.uniform(0.0, 1.0, (SNAPSHOTS, GRID))
    arrays["spectrum_wavenumbers"] = np.zeros(0)
    arrays["spectrum_energies"] = np.zeros(0)
    arrays["step"] = np.asarray(0.1)
    return arrays


def write_synthetic_store(path, first: int = 316, second: int = 317, batch: int = 5000, keep=None) -> Path:
    """A store of ``first x second`` synthetic points (all of them, or the indices ``keep``)."""
    path = Path(path)
    study = parse_study(STUDY % (first, second), "synthetic.toml")
    total = first * second
    indices = np.arange(total) if keep is None else np.asarray(sorted(keep), dtype=np.int64)
    arrays = synthetic_arrays()
    blob = stores._encode_arrays(arrays, {"resolved": {}})
    blob += b"\0" * stores._pad(len(blob))
    crc = stores._crc(blob)
    layout = stores._layout(arrays)
    sweep = list(study.sweep.values())
    rng = np.random.default_rng(7)
    names = [f"{q}_{s}" for q in ("transmission", "reflection") for s in ("mean", "stderr", "std")]
    names += [f"{q}_{s}" for q in ("transmission", "reflection") for s in ("log_mean", "log_stderr")]
    with stores.StoreWriter(path, study) as writer:
        for start in range(0, indices.size, batch):
            chunk = indices[start : start + batch]
            rows, columns_of = np.unravel_index(chunk, (first, second))
            n = chunk.size
            columns = {
                "index": chunk,
                "seed": rng.integers(0, 2**62, n),
                "count": np.full(n, 4),
                "wall_time": rng.uniform(0.01, 0.02, n),
                "compute_time": rng.uniform(0.01, 0.02, n),
                "offset": np.arange(n) * len(blob),
                "length": np.full(n, len(blob)),
                "crc": np.full(n, crc),
                "host_code": np.zeros(n, dtype=np.int64),
                "layout_code": np.zeros(n, dtype=np.int64),
            }
            columns.update({f"stat:{name}": rng.uniform(0.01, 1.0, n) for name in names})
            block, directory = stores._columns_block(columns, stores._NUMERIC)
            meta = {
                "n": n,
                "hosts": ["synthetic"],
                "layouts": [layout],
                "finished": "2026-01-01T00:00:00+00:00",
                "mottle_version": "synthetic",
                "parameters": {
                    "system.disorder.0.rms": [sweep[0][r] for r in rows.tolist()],
                    "packet.wavenumber": [sweep[1][c] for c in columns_of.tolist()],
                },
                "columns": directory,
                "columns_bytes": len(block),
                "columns_crc": stores._crc(block),
            }
            writer._append(stores._record(stores._POINTS, meta, block + blob * n), n)
    return path
