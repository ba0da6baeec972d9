"""mottle: many-run split-step Fourier propagation for wave transport in disorder."""

from . import reference
from .absorber import Absorber
from .classical import ClassicalEnsemble, QuantumClassical, classical_ensemble, quantum_classical
from .disorder import BoxDisorder, GaussianDisorder, Speckle, WhiteNoise
from .ensemble import CHUNK, EnsemblePartial, EnsembleResult, ensemble, ensemble_partial, merge_partials
from .errors import InvalidParameterError, InvalidTypeError, MottleError, UnderResolvedWarning
from .fits import LocalizationFit, TailFit, bootstrap_interval, fit_log_transmission, log_density_tails
from .grid import Grid
from .localization import Lyapunov, TransmissionSpectrum, born_lyapunov, lyapunov, transmission_spectrum
from .models import Continuum, Lattice
from .momentum import MomentumPeaks, coherent_peaks
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

# Localization and transport statistics (transfer matrices, fits, classical ensembles).
__all__ += [
    "ClassicalEnsemble",
    "LocalizationFit",
    "Lyapunov",
    "MomentumPeaks",
    "QuantumClassical",
    "TailFit",
    "TransmissionSpectrum",
    "bootstrap_interval",
    "born_lyapunov",
    "classical_ensemble",
    "coherent_peaks",
    "fit_log_transmission",
    "log_density_tails",
    "lyapunov",
    "quantum_classical",
    "transmission_spectrum",
]
