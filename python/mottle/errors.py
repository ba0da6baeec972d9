"""Exceptions and warnings raised by mottle.

Every error that is the caller's fault subclasses ``ValueError`` or
``TypeError`` as well as :class:`MottleError`, so ``except ValueError`` works
as Python users expect and ``except MottleError`` catches everything of ours.
"""

from __future__ import annotations

# Defined once, in the core (rust/src/bindings/error.rs), so that the core raises them directly.
from ._core import InvalidParameterError, InvalidTypeError, MottleError


class UnderResolvedWarning(UserWarning):
    """The run is visibly under-resolved (step, grid or absorber too coarse)."""


class StepChangedWarning(UserWarning):
    """A duration that is not a whole number of steps runs equal steps more than 1% shorter than asked."""


__all__ = [
    "InvalidParameterError",
    "InvalidTypeError",
    "MottleError",
    "StepChangedWarning",
    "UnderResolvedWarning",
]
