"""Type stubs of the Rust extension (rust/src/bindings/). Called only through mottle's Python API."""

from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = [
    "CHUNK",
    "DENSITY_FLOOR",
    "__version__",
    "draw_packet",
    "ensemble_chunks",
    "propagate_one",
    "realize",
]

__version__: str
CHUNK: int
DENSITY_FLOOR: float

def propagate_one(
    setup: dict[str, Any],
    run: dict[str, Any],
    kinetic: npt.NDArray[np.float64],
    absorption: npt.NDArray[np.float64],
    potential: npt.NDArray[np.float64],
    psi: npt.NDArray[np.complex128],
) -> dict[str, Any]: ...
def realize(
    line: dict[str, Any],
    disorder: list[dict[str, Any]],
    base: npt.NDArray[np.float64],
    seed: int,
    index: int,
) -> npt.NDArray[np.float64]: ...
def draw_packet(packets: dict[str, Any], seed: int, index: int) -> tuple[float, float, float]: ...
def ensemble_chunks(
    setup: dict[str, Any],
    run: dict[str, Any],
    kinetic: npt.NDArray[np.float64],
    absorption: npt.NDArray[np.float64],
    static_potential: npt.NDArray[np.float64],
    disorder: list[dict[str, Any]],
    packets: dict[str, Any],
) -> list[dict[str, Any]]: ...
