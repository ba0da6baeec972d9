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
    """
    seed = _checks.integer("seed", seed, minimum=0)
    index = _checks.integer("index", index, minimum=0)
    potential = system.static_potential()
    if system.disorder is None:
        return potential
    _checks.one_dimensional("realize", system.grid)
    terms = _requests.disorder_terms(system.disorder)
    return _core.realize(_requests.line(system.grid), terms, potential, seed, index)
