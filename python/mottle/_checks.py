"""Small validators shared by the spec classes: each names the value and what is accepted."""

from __future__ import annotations

import math
import numbers
import os
from typing import Any

import numpy as np

from .errors import InvalidParameterError, InvalidTypeError


def real(name: str, value: object) -> float:
    """A finite real number."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InvalidTypeError(f"{name} must be a real number, got {value!r} of type {type(value).__name__}")
    value = float(value)
    if not math.isfinite(value):
        raise InvalidParameterError(f"{name} must be finite, got {value!r}")
    return value


def positive(name: str, value: object) -> float:
    """A finite real number > 0."""
    value = real(name, value)
    if value <= 0.0:
        raise InvalidParameterError(f"{name} must be > 0, got {value!r}")
    return value


def non_negative(name: str, value: object) -> float:
    """A finite real number >= 0."""
    value = real(name, value)
    if value < 0.0:
        raise InvalidParameterError(f"{name} must be >= 0, got {value!r}")
    return value


def integer(name: str, value: object, minimum: int) -> int:
    """An integer (an int, a numpy integer, or a float with no fractional part) >= minimum."""
    if isinstance(value, bool):
        raise InvalidTypeError(f"{name} must be an integer, got {value!r}")
    if isinstance(value, numbers.Integral):
        result = int(value)
    elif isinstance(value, numbers.Real):
        if not math.isfinite(float(value)) or float(value) != math.floor(float(value)):
            raise InvalidParameterError(f"{name} must be a whole number, got {value!r}")
        result = int(float(value))
    else:
        raise InvalidTypeError(f"{name} must be an integer, got {value!r} of type {type(value).__name__}")
    if result < minimum:
        raise InvalidParameterError(f"{name} must be >= {minimum}, got {result}")
    return result


def real_array(name: str, values: Any, shape: tuple[int, ...], dtype=np.float64) -> np.ndarray:
    """A finite array of the given shape, copied so later writes by the caller do not reach us."""
    if not np.issubdtype(np.dtype(dtype), np.complexfloating) and np.iscomplexobj(values):
        # numpy would drop the imaginary parts with only a ComplexWarning.
        raise InvalidTypeError(f"{name} must be real, got complex values of type {np.asarray(values).dtype}")
    try:
        array = np.array(values, dtype=dtype, copy=True)
    except (TypeError, ValueError) as error:
        raise InvalidTypeError(
            f"{name} must be an array of numbers, got {type(values).__name__}: {error}"
        ) from None
    if array.shape != shape:
        raise InvalidParameterError(f"{name} must have shape {shape}, got {array.shape}")
    if not np.all(np.isfinite(array)):
        bad = int(np.flatnonzero(~np.isfinite(array.ravel()))[0])
        raise InvalidParameterError(
            f"{name} must be finite everywhere, got {array.ravel()[bad]!r} at index {bad}"
        )
    array.setflags(write=False)
    return array


def choice(name: str, value: object, accepted: tuple) -> object:
    if value not in accepted:
        raise InvalidParameterError(f"{name} must be one of {', '.join(map(repr, accepted))}; got {value!r}")
    return value


def default_threads() -> int:
    """The cores this process may use (its CPU affinity where the system has one)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def threads(value: object) -> int:
    """A ``threads=`` argument: None for every core this process may use, else an integer >= 1."""
    return default_threads() if value is None else integer("threads", value, minimum=1)


# What already works on 2D and 3D grids; the one message below names them, so a refusal says where to go.
ND_SUPPORTED: tuple[str, ...] = (
    "mottle.Grid",
    "GaussianPacket, Wavefunction, PacketList",
    "the static potentials (Barrier, Harmonic, Tabulated, Cosine)",
    "the disorder models",
    "Absorber",
    "propagate, ensemble, realize, mottle.reference.propagate and studies",
)


def one_dimensional(what: str, grid: Any) -> None:
    """Refuse a 2D or 3D grid (or its shape, a tuple) in a part of mottle that is 1D only so far,
    with the one shared message."""
    shape = grid if isinstance(grid, tuple) else getattr(grid, "shape", None)
    ndim = 1 if shape is None else len(shape)
    if ndim != 1:
        raise InvalidParameterError(
            f"{what} is 1D only for now; 2D/3D grids are supported by {', '.join(ND_SUPPORTED)} "
            f"(this grid has {ndim} axes, shape {shape})"
        )
