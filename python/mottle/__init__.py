"""mottle: many-run split-step Fourier propagation for wave transport in disorder."""

from .analysis.fits import (
    LocalizationFit,
    TailFit,
    bootstrap_interval,
    fit_log_transmission,
    log_density_tails,
)
from .analysis.momentum import MomentumPeaks, coherent_peaks, momentum_tails
from .analysis.statistics import Stat
from .dynamics import reference
from .dynamics.classical import (
    ClassicalEnsemble,
    QuantumClassical,
    StandardMap,
    classical_ensemble,
    quantum_classical,
    standard_map,
)
from .dynamics.ensemble import (
    CHUNK,
    EnsemblePartial,
    EnsembleResult,
    ensemble,
    ensemble_partial,
    merge_partials,
)
from .dynamics.ground import GroundState, ground_state
from .dynamics.propagate import Run, propagate
from .dynamics.realize import realize
from .errors import (
    InvalidParameterError,
    InvalidTypeError,
    MottleError,
    StepChangedWarning,
    UnderResolvedWarning,
)
from .specs import disorder as _disorder
from .specs.absorber import Absorber
from .specs.disorder import *  # noqa: F403 (every disorder model, listed once in its module)
from .specs.grid import Grid
from .specs.models import Continuum, Lattice
from .specs.packets import GaussianPacket, Normal, PacketList, RandomPacket, Uniform, Wavefunction
from .specs.potentials import Barrier, Cosine, Harmonic, Kicked, Modulated, Switched, Tabulated
from .specs.system import System
from .stationary.localization import (
    Lyapunov,
    TransmissionSpectrum,
    born_lyapunov,
    lyapunov,
    transmission_spectrum,
)
from .stationary.quasi1d import Quasi1DLyapunov
from .studies.runner import StudyInterrupted, run_study
from .studies.store import Store, StoreError, convert_store, open_store
from .studies.study import Study, StudyError, StudyPoint, load_study

__version__ = "0.1.0"

__all__ = [
    "CHUNK",
    "Absorber",
    "Barrier",
    "Continuum",
    "Cosine",
    "EnsemblePartial",
    "EnsembleResult",
    "GaussianPacket",
    "Grid",
    "GroundState",
    "Harmonic",
    "InvalidParameterError",
    "InvalidTypeError",
    "Kicked",
    "Lattice",
    "Modulated",
    "MottleError",
    "Normal",
    "PacketList",
    "RandomPacket",
    "Run",
    "Stat",
    "StepChangedWarning",
    "Store",
    "StoreError",
    "Study",
    "StudyError",
    "StudyInterrupted",
    "StudyPoint",
    "Switched",
    "System",
    "Tabulated",
    "UnderResolvedWarning",
    "Uniform",
    "Wavefunction",
    "convert_store",
    "ensemble",
    "ensemble_partial",
    "ground_state",
    "load_study",
    "merge_partials",
    "open_store",
    "propagate",
    "realize",
    "reference",
    "run_study",
]

__all__ += _disorder.__all__

# Localization and transport statistics (transfer matrices, fits, classical ensembles).
__all__ += [
    "ClassicalEnsemble",
    "LocalizationFit",
    "Lyapunov",
    "MomentumPeaks",
    "QuantumClassical",
    "Quasi1DLyapunov",
    "StandardMap",
    "TailFit",
    "TransmissionSpectrum",
    "bootstrap_interval",
    "born_lyapunov",
    "classical_ensemble",
    "coherent_peaks",
    "fit_log_transmission",
    "log_density_tails",
    "lyapunov",
    "momentum_tails",
    "quantum_classical",
    "standard_map",
    "transmission_spectrum",
]
