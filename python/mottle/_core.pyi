"""Type stubs of the Rust extension (rust/src/bindings/). Called only through mottle's Python API.

The requests (the ``_``-named TypedDicts, which exist only here) are built by
``mottle._requests`` and read by rust/src/bindings/ into typed structs and
enums with exactly these fields; a request with several shapes is tagged by
``kind``. Disorder terms carry the declared fields of their spec classes.
"""

from typing import Any, Literal, TypedDict

import numpy as np
import numpy.typing as npt

__all__ = [
    "CHUNK",
    "DENSITY_FLOOR",
    "InvalidParameterError",
    "InvalidTypeError",
    "MottleError",
    "__version__",
    "bar_disorder_of",
    "bar_exponents_of",
    "classical_particles",
    "draw_packet",
    "ensemble_chunks",
    "ground_state_of",
    "log_transmissions_of",
    "lyapunov_exponents_of",
    "propagate_one",
    "realize",
    "realize_mesh",
]

__version__: str
CHUNK: int
DENSITY_FLOOR: float

class MottleError(Exception):
    """Base class of every exception mottle raises on purpose."""

class InvalidParameterError(MottleError, ValueError):
    """A parameter has an impossible or unsupported value."""

class InvalidTypeError(MottleError, TypeError):
    """A parameter has the wrong type."""

_Precision = Literal["double", "single"]
_Splitting = Literal["strang", "yoshida", "blanes-moan"]

class _Line(TypedDict):
    points: int
    dx: float
    start: float

class _Continuum(TypedDict):
    kind: Literal["continuum"]
    hbar: float
    mass: float

class _Lattice(TypedDict):
    kind: Literal["lattice"]
    hbar: float
    hopping: float

_Model = _Continuum | _Lattice

class _Setup(TypedDict):
    points: int
    dx: float
    start: float
    shape: list[int]
    spacing: list[float]
    origin: list[float]
    model: _Model
    nonlinearity: float
    step: float
    splitting: _Splitting
    left_layer_end: int
    right_layer_start: int

class _ClassicalStart(TypedDict):
    position: float
    momentum: float

class _Run(TypedDict):
    steps: int
    pauses: list[int]
    offsets: list[float]
    keep_snapshots: bool
    detector: tuple[int, int] | None
    classical: _ClassicalStart | None
    precision: _Precision

class _Spectrum(TypedDict):
    probes: list[int]
    positions: list[float]
    modes: list[int]
    wavenumbers: list[float]
    energies: list[float]
    velocities: list[float]

class _EnsembleRun(TypedDict):
    steps: int
    pauses: list[int]
    offsets: list[float]
    detector: tuple[int, int] | None
    seed: int
    start: int
    count: int
    threads: int
    precision: _Precision
    spectrum: _Spectrum | None

class _WhiteNoise(TypedDict):
    kind: Literal["white-noise"]
    strength: float
    start: float
    stop: float

class _Box(TypedDict):
    kind: Literal["box"]
    width: float
    start: float
    stop: float

class _Gaussian(TypedDict):
    kind: Literal["gaussian"]
    rms: float
    correlation_length: float
    start: float
    stop: float

class _Speckle(TypedDict):
    kind: Literal["speckle"]
    strength: float
    correlation_length: float
    sign: int
    start: float
    stop: float

class _Cauchy(TypedDict):
    kind: Literal["cauchy"]
    width: float
    start: float
    stop: float

_Term = _WhiteNoise | _Box | _Gaussian | _Speckle | _Cauchy

class _Mesh(TypedDict):
    shape: list[int]
    spacing: list[float]
    start: list[float]

class _BoxWhiteNoise(TypedDict):
    kind: Literal["white-noise"]
    strength: float
    start: list[float]
    stop: list[float]

class _BoxBox(TypedDict):
    kind: Literal["box"]
    width: float
    start: list[float]
    stop: list[float]

class _BoxGaussian(TypedDict):
    kind: Literal["gaussian"]
    rms: float
    correlation_length: float
    start: list[float]
    stop: list[float]

class _BoxSpeckle(TypedDict):
    kind: Literal["speckle"]
    strength: float
    correlation_length: float
    sign: int
    start: list[float]
    stop: list[float]

class _BoxCauchy(TypedDict):
    kind: Literal["cauchy"]
    width: float
    start: list[float]
    stop: list[float]

_BoxTerm = _BoxWhiteNoise | _BoxBox | _BoxGaussian | _BoxSpeckle | _BoxCauchy

class _FixedDraw(TypedDict):
    kind: Literal["fixed"]
    value: float

class _UniformDraw(TypedDict):
    kind: Literal["uniform"]
    low: float
    high: float

class _NormalDraw(TypedDict):
    kind: Literal["normal"]
    mean: float
    std: float

_Draw = _FixedDraw | _UniformDraw | _NormalDraw

class _FixedPackets(TypedDict):
    kind: Literal["fixed"]
    values: npt.NDArray[np.complex128]

class _ListPackets(TypedDict):
    kind: Literal["list"]
    values: npt.NDArray[np.complex128]

class _GaussianPackets(TypedDict):
    kind: Literal["gaussian"]
    center: _Draw
    wavenumber: _Draw
    width: _Draw

_Packets = _FixedPackets | _ListPackets | _GaussianPackets

class _Realizations(TypedDict):
    seed: int
    start: int
    count: int
    threads: int

class _Bar(TypedDict):
    dimensions: int
    width: int
    slices: int
    hopping: float
    disorder_width: float
    energy: float
    qr_interval: int
    blocks: int

class _Particles(TypedDict):
    center: float
    position_spread: float
    momentum: float
    momentum_spread: float
    particles: int
    seed: int
    index: int
    step: float
    steps: int
    pauses: list[int]
    offsets: list[float]
    left_layer_end: int
    right_layer_start: int
    threads: int

class _TableProfile(TypedDict):
    kind: Literal["table"]
    values: npt.NDArray[np.float64]

class _CosineProfile(TypedDict):
    kind: Literal["cosine"]
    amplitude: float
    wavenumber: float
    phase: _Draw

_Profile = _TableProfile | _CosineProfile

class _KickModulation(TypedDict):
    depth: float
    frequency: float
    phase: _Draw

class _Kick(TypedDict):
    profile: _Profile
    first: int
    every: int
    modulation: _KickModulation | None

class _ModulatedTerm(TypedDict):
    kind: Literal["modulated"]
    profile: _Profile
    depth: float
    frequency: float
    phase: _Draw

class _SwitchedTerm(TypedDict):
    kind: Literal["switched"]
    profile: _Profile
    on: int
    off: int | None

_TimeTerm = _ModulatedTerm | _SwitchedTerm

class _Drive(TypedDict):
    kicks: list[_Kick]
    terms: list[_TimeTerm]
    quasimomentum: _Draw | None

class _Ground(TypedDict):
    points: int
    dx: float
    shape: list[int]
    spacing: list[float]
    model: _Model
    nonlinearity: float
    tolerance: float
    max_steps: int

def propagate_one(
    setup: _Setup,
    run: _Run,
    absorption: npt.NDArray[np.float64],
    potential: npt.NDArray[np.float64],
    psi: npt.NDArray[np.complex128],
    drive: tuple[_Drive, int, int] | None = None,
) -> dict[str, Any]: ...
def realize(
    line: _Line,
    disorder: list[_Term],
    base: npt.NDArray[np.float64],
    seed: int,
    index: int,
) -> npt.NDArray[np.float64]: ...
def realize_mesh(
    mesh: _Mesh,
    disorder: list[_BoxTerm],
    base: npt.NDArray[np.float64],
    seed: int,
    index: int,
) -> npt.NDArray[np.float64]: ...
def draw_packet(packets: _Packets, seed: int, index: int) -> tuple[float, float, float]: ...
def ensemble_chunks(
    setup: _Setup,
    run: _EnsembleRun,
    absorption: npt.NDArray[np.float64],
    static_potential: npt.NDArray[np.float64],
    disorder: list[_Term],
    packets: _Packets,
    drive: _Drive | None = None,
    mesh: tuple[_Mesh, list[_BoxTerm]] | None = None,
) -> list[dict[str, Any]]: ...
def lyapunov_exponents_of(
    line: _Line,
    disorder: list[_Term],
    static_potential: npt.NDArray[np.float64],
    model: _Model,
    region: tuple[int, int],
    energies: list[float],
    realizations: _Realizations,
) -> npt.NDArray[np.float64]: ...
def log_transmissions_of(
    line: _Line,
    disorder: list[_Term],
    static_potential: npt.NDArray[np.float64],
    model: _Model,
    region: tuple[int, int],
    energies: list[float],
    realizations: _Realizations,
) -> npt.NDArray[np.float64]: ...
def bar_exponents_of(bar: _Bar, realizations: _Realizations) -> npt.NDArray[np.float64]: ...
def bar_disorder_of(bar: _Bar, seed: int, index: int) -> npt.NDArray[np.float64]: ...
def classical_particles(
    line: _Line, model: _Model, config: _Particles, potential: npt.NDArray[np.float64]
) -> dict[str, Any]: ...
def ground_state_of(
    request: _Ground, potential: npt.NDArray[np.float64], initial: npt.NDArray[np.float64]
) -> dict[str, Any]: ...
