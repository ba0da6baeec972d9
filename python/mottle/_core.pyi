"""Type stubs of the Rust extension (rust/src/bindings/). Called only through mottle's Python API."""

from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = [
    "CHUNK",
    "DENSITY_FLOOR",
    "__version__",
    "classical_particles",
    "draw_packet",
    "ensemble_chunks",
    "log_transmissions_of",
    "lyapunov_exponents_of",
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
def lyapunov_exponents_of(
    line: dict[str, Any],
    disorder: list[dict[str, Any]],
    static_potential: npt.NDArray[np.float64],
    medium: dict[str, Any],
    region: tuple[int, int],
    energies: list[float],
    realizations: dict[str, Any],
) -> npt.NDArray[np.float64]: ...
def log_transmissions_of(
    line: dict[str, Any],
    disorder: list[dict[str, Any]],
    static_potential: npt.NDArray[np.float64],
    medium: dict[str, Any],
    energies: list[float],
    realizations: dict[str, Any],
) -> npt.NDArray[np.float64]: ...
def classical_particles(
    config: dict[str, Any], medium: dict[str, Any], potential: npt.NDArray[np.float64]
) -> dict[str, Any]: ...
