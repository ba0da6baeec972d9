"""Exceptions and warnings raised by mottle.

Every error that is the caller's fault subclasses ``ValueError`` or
``TypeError`` as well as :class:`MottleError`, so ``except ValueError`` works
as Python users expect and ``except MottleError`` catches everything of ours.
"""

from __future__ import annotations


class MottleError(Exception):
    """Base class of every exception mottle raises on purpose."""


class InvalidParameterError(MottleError, ValueError):
    """A parameter has an impossible or unsupported value."""


class InvalidTypeError(MottleError, TypeError):
    """A parameter has the wrong type."""


class UnderResolvedWarning(UserWarning):
    """The run is visibly under-resolved (step, grid or absorber too coarse)."""
