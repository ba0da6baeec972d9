"""The numerical limits mottle enforces or warns about, each in one place with its reason.

Specs refuse what cannot be right (``InvalidParameterError``); runs warn
(``UnderResolvedWarning``) where a result is visibly under-resolved. The
values are common practice for split-step Fourier methods unless a source
is named; docs/validation.md lists the checks behind them.
"""

import math

PACKET_TAIL = 5.0
"""Standard deviations of a Gaussian packet that must fit: 2 x this many widths inside the box,
``|k0| + PACKET_TAIL sigma_k`` below the grid's largest wavenumber ``pi/dx`` (exp(-12.5) of the peak
amplitude is below what the checks resolve)."""

POINTS_PER_CORRELATION = 2.0
"""Grid spacings per correlation length a correlated disorder model needs (fewer and the
generated correlation is the grid's, not the model's)."""

ABSORBER_MIN_SPACINGS = 4.0
"""Grid spacings an absorbing layer must span to have a profile at all."""

ABSORBER_ENERGY_MARGIN = 2.0
"""A packet's mean energy must reach this many design energies E_min of the absorber, where the
layer reflects less than 1e-3 (Manolopoulos, J. Chem. Phys. 117, 9552 (2002); measured in
tests/test_absorber.py)."""

PHASE_PER_STEP = math.pi
"""Largest kinetic or potential phase per step on what a run populates before it is under-resolved
(beyond pi the split-step phase wraps and the Trotter error is O(1))."""

SPECTRUM_PHASE_PER_STEP = 2.0 * math.pi
"""Largest kinetic phase per step at the grid's largest wavenumber for ``result.spectrum``: beyond
it, modes alias in the time transform."""

SPECTRUM_BAND = 3.5
"""A Gaussian packet's spectrum covers ``|k - k0| <= SPECTRUM_BAND sigma_k`` (|phi|^2 > 2e-3 of peak)."""

SPECTRUM_WEIGHT = 1e-3
"""Other packets' spectra cover the wavenumbers where |phi(k)|^2 exceeds this fraction of its peak."""

SPECTRUM_MODES = 256
"""At most this many wavenumbers in a spectrum (evenly thinned beyond)."""

LOG_NOISE_FLOOR = -64.0
"""Below exp(-64) of its peak a split-step density is double-precision rounding noise
(|psi| errors ~1e-16 of the peak amplitude; exp(-64) = 1.6e-28)."""

STUDY_POINTS = 10_000_000
"""Most points one study may have: beyond it the list of points, the store's index and a report
outgrow what one machine handles in seconds (split the study, or sweep fewer values)."""
GROUND_EDGE_DENSITY = 1e-4
"""A ground state whose density at the box edges exceeds this fraction of its peak is held by the box,
not by the potential: ``ground_state`` refuses it (the ground state of a periodic box is not what a
trap calculation wants). Between the tolerance and this, it warns: the periodic images' overlap then
shifts mu by about that fraction (common practice)."""
