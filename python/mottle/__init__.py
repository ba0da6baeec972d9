"""mottle: many-run split-step Fourier propagation for wave transport in disorder."""

from . import reference
from .absorber import Absorber
from .disorder import BoxDisorder, GaussianDisorder, Speckle, WhiteNoise
from .ensemble import CHUNK, EnsemblePartial, EnsembleResult, ensemble, ensemble_partial, merge_partials
from .errors import InvalidParameterError, InvalidTypeError, MottleError, UnderResolvedWarning
from .grid import Grid
from .models import Continuum, Lattice
from .packets import GaussianPacket, Normal, PacketList, RandomPacket, Uniform, Wavefunction
from .potentials import Barrier, Harmonic, Tabulated
from .propagate import Run, propagate
from .realize import realize
from .runner import StudyInterrupted, run_study
from .statistics import Stat
from .store import Store, StoreError, open_store
from .study import Study, StudyError, StudyPoint, load_study
from .system import System

__version__ = "0.1.0"

__all__ = [
    "CHUNK",
    "Absorber",
    "Barrier",
    "BoxDisorder",
    "Continuum",
    "EnsemblePartial",
    "EnsembleResult",
    "GaussianDisorder",
    "GaussianPacket",
    "Grid",
    "Harmonic",
    "InvalidParameterError",
    "InvalidTypeError",
    "Lattice",
    "MottleError",
    "Normal",
    "PacketList",
    "RandomPacket",
    "Run",
    "Speckle",
    "Stat",
    "Store",
    "StoreError",
    "Study",
    "StudyError",
    "StudyInterrupted",
    "StudyPoint",
    "System",
    "Tabulated",
    "UnderResolvedWarning",
    "Uniform",
    "Wavefunction",
    "WhiteNoise",
    "ensemble",
    "ensemble_partial",
    "load_study",
    "merge_partials",
    "open_store",
    "propagate",
    "realize",
    "reference",
    "run_study",
]
