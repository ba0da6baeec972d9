"""The potential of one disorder realization."""

from __future__ import annotations

import numpy as np

from .. import _checks, _core
from ..specs.system import System


def realize(system: System, seed: int = 0, index: int = 0) -> np.ndarray:
    """Total real potential (deterministic part plus disorder) of realization ``index`` of ``seed``.

    Realization ``index`` depends on ``(seed, index, model, grid)`` alone, never on
    threads, chunking or run order: this is exactly the potential that
    ``propagate(..., seed=seed, index=index)`` and ``ensemble(..., seed=seed)`` use.
    """
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    potential = system.static_potential()
    if system.disorder is None:
        return potential
    grid = system.grid
    line = {"points": grid.points, "dx": grid.dx, "start": grid.start}
    terms = [term.config() for term in system.disorder.terms]
    return _core.realize(line, terms, potential, seed, index)
