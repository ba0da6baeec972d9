"""Time-dependent terms on the run's steps: kicks, switch-on and switch-off times as whole step counts.

A kick or a switch must fall on a step boundary; a run whose step does not land
on one is refused with a step that would (the snapshots' shorter side steps
cannot hold a kick). The counts are integers computed once from the times, so a
long run never drifts by accumulated floating-point time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import InvalidParameterError
from ..specs.potentials import Kicked, Modulated, Switched, time_dependent_terms

# Times closer than this fraction of a step to a boundary are on it (as snapshots, propagate.py).
_ON_BOUNDARY = 1e-9


def _whole_steps(what: str, time: float, step: float, hint: float) -> int:
    """``time / step`` as an integer, or an error naming a step that lands on ``hint`` (and ``time``)."""
    ratio = time / step
    nearest = round(ratio)
    if abs(ratio - nearest) <= _ON_BOUNDARY * max(nearest, 1):
        return int(nearest)
    landing = hint / math.ceil(hint / step - _ON_BOUNDARY)
    raise InvalidParameterError(
        f"{what} = {time:g} is not a whole number of steps of {step:.6g}: use a step that divides it, "
        f"e.g. step = {landing:.6g} ({hint:g} / {math.ceil(hint / step - _ON_BOUNDARY)})"
    )


@dataclass(frozen=True)
class KickSteps:
    term: Kicked
    first: int
    every: int


@dataclass(frozen=True)
class SwitchSteps:
    term: Switched
    on: int
    off: int | None


def drive_steps(system, step: float, steps: int) -> list:
    """Each time-dependent term of ``system`` with its step counts (a :class:`Modulated` as it is)."""
    duration = steps * step
    out: list = []
    for term in time_dependent_terms(system.potential):
        if isinstance(term, Kicked):
            every = _whole_steps("Kicked period", term.period, step, term.period)
            hint = (
                math.gcd(*(round(t * 1e9) for t in (term.period, term.start))) / 1e9
                if term.start
                else term.period
            )
            first = _whole_steps("Kicked start", term.start, step, hint) if term.start else 0
            if every < 1:
                raise InvalidParameterError(
                    f"Kicked period {term.period:g} is shorter than the step {step:g}"
                )
            out.append(KickSteps(term, first, every))
        elif isinstance(term, Switched):
            on = steps if term.on >= duration else _whole_steps("Switched on", term.on, step, term.on)
            off = None
            if term.off < duration:
                off = _whole_steps("Switched off", term.off, step, term.off)
            out.append(SwitchSteps(term, on, off))
        elif isinstance(term, Modulated):
            out.append(term)
    return out


def is_driven(system) -> bool:
    """Whether ``system`` has time-dependent terms or a twisted boundary."""
    return bool(time_dependent_terms(system.potential)) or system.grid.twisted


def felt_potential(system, potential):
    """The potential the step warnings look at: the static one plus each modulated or switched term at
    its strongest (kicks are exact and have no phase per step to resolve)."""
    import numpy as np

    out = np.array(potential, dtype=float, copy=True)
    grid, model = system.grid, system.model
    for term in time_dependent_terms(system.potential):
        if isinstance(term, Modulated):
            out += (1.0 + abs(term.depth)) * term.profile(grid, model)
        elif isinstance(term, Switched):
            out += term.profile(grid, model)
    return out
