"""The potential of one disorder realization."""

from __future__ import annotations

import numpy as np

from .. import _checks, _core, _requests
from ..specs.system import System


def realize(system: System, seed: int = 0, index: int = 0) -> np.ndarray:
    """Total real potential (deterministic part plus disorder) of realization ``index`` of ``seed``.

    Realization ``index`` depends on ``(seed, index, model, grid)`` alone, never on
    threads, chunking or run order: this is exactly the potential that
    ``propagate(..., seed=seed, index=index)`` and ``ensemble(..., seed=seed)`` use.
    On a 2D or 3D grid the array has the grid's shape (C order, axis 0 first).
    """
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    grid = system.grid
    potential = system.static_potential()
    if system.disorder is None:
        return potential
    if grid.ndim == 1:
        terms = _requests.disorder_terms(system.disorder)
        return _core.realize(_requests.line(grid), terms, potential, seed, index)
    base = np.ascontiguousarray(potential, dtype=np.float64)
    mesh_terms = _requests.box_disorder_terms(system.disorder, grid)
    return _core.realize_mesh(_requests.mesh(grid), mesh_terms, base, seed, index)
