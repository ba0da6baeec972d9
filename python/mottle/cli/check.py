"""Validation cases: mottle's numbers against published closed-form results.

A case is a function returning an :class:`Outcome` (value, reference,
tolerance), registered with :func:`case` together with its source (author,
title, year, equation). Cases that need an API mottle does not have yet
(``needs=("lyapunov",)``) report ``n/a`` instead of running; they start to
count as soon as the function exists. ``mottle check`` runs them all and exits
non-zero if any fails. Each case takes seconds, not minutes.
"""

from __future__ import annotations

import math
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..analysis.exact import barrier_transmission, packet_average


@dataclass(frozen=True)
class Outcome:
    """``|value - reference| <= tolerance`` (absolute) or ``<= tolerance * |reference|`` (relative)."""

    value: float
    reference: float
    tolerance: float
    relative: bool = False
    note: str = ""

    @property
    def error(self) -> float:
        difference = abs(self.value - self.reference)
        return difference / abs(self.reference) if self.relative else difference

    @property
    def passed(self) -> bool:
        return bool(np.isfinite(self.value)) and self.error <= self.tolerance


@dataclass(frozen=True)
class Case:
    name: str
    description: str
    source: str
    run: Callable[[], Outcome]
    needs: tuple[str, ...] = ()

    def missing(self) -> list[str]:
        import mottle

        return [name for name in self.needs if not hasattr(mottle, name)]


@dataclass(frozen=True)
class Result:
    name: str
    description: str
    source: str
    status: str  # "ok", "FAIL", "ERROR", "n/a"
    outcome: Outcome | None
    seconds: float
    message: str = ""


_REGISTRY: dict[str, Case] = {}


def case(name: str, description: str, source: str, needs: tuple[str, ...] = ()):
    """Register a validation case (a decorator); ``needs`` names mottle functions it calls."""

    def register(function: Callable[[], Outcome]) -> Callable[[], Outcome]:
        if name in _REGISTRY:
            raise ValueError(f"check case {name!r} is registered twice")
        _REGISTRY[name] = Case(name, description, source, function, tuple(needs))
        return function

    return register


def registry() -> dict[str, Case]:
    """Every registered case by name, in registration order."""
    return dict(_REGISTRY)


def run_cases(cases) -> list[Result]:
    results = []
    for item in cases:
        missing = item.missing()
        if missing:
            message = f"needs mottle.{', mottle.'.join(missing)}"
            results.append(Result(item.name, item.description, item.source, "n/a", None, 0.0, message))
            continue
        began = time.perf_counter()
        try:
            outcome = item.run()
        except Exception as error:  # a case that crashes is a failed check, reported, not fatal
            last = traceback.extract_tb(error.__traceback__)[-1]
            message = f"{type(error).__name__}: {error} ({last.filename.split('/')[-1]}:{last.lineno})"
            results.append(
                Result(
                    item.name,
                    item.description,
                    item.source,
                    "ERROR",
                    None,
                    time.perf_counter() - began,
                    message,
                )
            )
            continue
        status = "ok" if outcome.passed else "FAIL"
        results.append(
            Result(item.name, item.description, item.source, status, outcome, time.perf_counter() - began)
        )
    return results


def format_table(results: list[Result]) -> str:
    headers = ("case", "value", "reference", "error", "tolerance", "status", "source")
    rows = []
    for result in results:
        outcome = result.outcome
        if outcome is None:
            rows.append((result.name, "", "", "", "", result.status, result.source))
            continue
        kind = "rel" if outcome.relative else "abs"
        rows.append(
            (
                result.name,
                f"{outcome.value:.10g}",
                f"{outcome.reference:.10g}",
                f"{outcome.error:.2e}",
                f"{outcome.tolerance:.0e} {kind}",
                result.status,
                result.source,
            )
        )
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(headers)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)).rstrip()]
    for result, row in zip(results, rows, strict=True):
        lines.append("  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip())
        if result.message:
            lines.append(f"    {result.message}")
        elif result.outcome is not None and result.outcome.note:
            lines.append(f"    {result.outcome.note}")
    return "\n".join(lines)


# --------------------------------------------------------------------------- closed forms


# --------------------------------------------------------------------------- cases

GRIFFITHS = "Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33"
COHEN_TANNOUDJI = "Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_I"
THOULESS = "Thouless, in Ill-Condensed Matter (Les Houches 1978, publ. 1979): gamma = W^2/(24(4 - E^2))"
BORN = "Lifshits, Gredeskul & Pastur, Theory of Disordered Systems (1988): gamma = m^2 C~(2k)/(2 hbar^4 k^2)"
SPECKLE = "Sanchez-Palencia et al., Phys. Rev. Lett. 98, 210401 (2007), Born gamma of a speckle"


@case(
    "barrier-formula",
    "T(E = 1.5) of the V0 = a = 1 barrier, closed form against the tabulated value",
    GRIFFITHS,
)
def _barrier_formula() -> Outcome:
    # The book's formula evaluated by barrier_transmission, against the value tabulated in
    # docs/validation.md (ten digits, same formula): guards the closed form the next case uses.
    return Outcome(float(barrier_transmission(1.5, 1.0, 1.0)), 0.8090454696, 1e-9, relative=True)


@case("barrier-transmission", "a Gaussian packet (E = 1.5) through the V0 = a = 1 barrier", GRIFFITHS)
def _barrier_packet() -> Outcome:
    import mottle as mo

    wavenumber, width = math.sqrt(3.0), 10.0
    system = mo.System(mo.Grid(8192, 400.0), potential=mo.Barrier(1.0, 0.0, 1.0), absorber=mo.Absorber(30.0))
    run = mo.propagate(system, mo.GaussianPacket(-60.0, wavenumber, width), 80.0, 0.01, detector=(0.0, 1.0))
    reference = packet_average(lambda k: barrier_transmission(k**2 / 2.0, 1.0, 1.0), wavenumber, width)
    assert run.transmission is not None  # a detector was given
    return Outcome(run.transmission, float(reference), 1e-3, note="reference: integral |phi(k)|^2 T(k) dk")


@case("free-gaussian-width", "rms width of a free packet, sigma0 = 1 at t = 1: sqrt(5)/2", COHEN_TANNOUDJI)
def _free_width() -> Outcome:
    import mottle as mo

    system = mo.System(mo.Grid(1024, 100.0))
    run = mo.propagate(system, mo.GaussianPacket(0.0, 2.0, 1.0), 1.0, 0.1, snapshots=(1.0,))
    # sigma(t) = sigma0 sqrt(1 + (hbar t / (2 m sigma0^2))^2); the kinetic step is exact.
    return Outcome(float(run.width[-1]), math.sqrt(1.0 + (1.0 / 2.0) ** 2), 1e-10, relative=True)


@case("free-gaussian-center", "centre of a free packet, x0 + hbar k0 t / m at k0 = 2, t = 1", COHEN_TANNOUDJI)
def _free_center() -> Outcome:
    import mottle as mo

    system = mo.System(mo.Grid(1024, 100.0))
    run = mo.propagate(system, mo.GaussianPacket(0.0, 2.0, 1.0), 1.0, 0.1, snapshots=(1.0,))
    return Outcome(float(run.position[-1]), 2.0, 1e-10)


@case(
    "coherent-state",
    "<x> of a coherent state (omega = 1, x0 = 3) a quarter period on: x0 cos(pi/2) = 0",
    "Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), complement G_V",
)
def _coherent_state() -> Outcome:
    import mottle as mo

    system = mo.System(mo.Grid(1024, 40.0), potential=mo.Harmonic(1.0))
    steps = 314
    # Width sqrt(hbar / (2 m omega)) keeps the packet coherent; Strang's error is 5e-6 at this step.
    packet = mo.GaussianPacket(3.0, 0.0, math.sqrt(0.5))
    run = mo.propagate(system, packet, math.pi / 2, math.pi / 2 / steps, snapshots=(math.pi / 2,))
    return Outcome(float(run.position[-1]), 0.0, 1e-4, note="splitting error ~ step^2")


@case(
    "kicked-rotor-resonance",
    "<p^2> of the kicked rotor at hbar_eff = 4 pi, K = 2, after 10 kicks from p = 0: K^2 t^2 / 2 = 200",
    "Izrailev & Shepelyansky, Theor. Math. Phys. 43, 553 (1980): quantum resonance",
)
def _kicked_rotor_resonance() -> Outcome:
    import warnings

    import mottle as mo

    kick, kicks, points = 2.0, 10, 256
    system = mo.System(
        mo.Grid(points, 2 * math.pi),
        mo.Continuum(hbar=4 * math.pi),
        potential=mo.Kicked(mo.Cosine(kick, 1.0), period=1.0),
    )
    start = mo.Wavefunction(np.full(points, 1 / math.sqrt(2 * math.pi), dtype=complex))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", mo.UnderResolvedWarning)  # plane waves fill the box by design
        run = mo.propagate(system, start, float(kicks), 1.0, snapshots=(float(kicks),))
    assert run.momentum_squared is not None
    return Outcome(float(run.momentum_squared[-1]), kick**2 * kicks**2 / 2, 1e-10, relative=True)


@case(
    "absorber-reflection",
    "probability a layer of width 20 sends back from a packet at twice its design energy",
    "Manolopoulos, J. Chem. Phys. 117, 9552 (2002), eq. (2.13): reflection < 1e-3 for E >= 2 E_min",
)
def _absorber() -> Outcome:
    import mottle as mo

    grid, absorber = mo.Grid(4096, 400.0), mo.Absorber(20.0)
    energy = 2.0 * absorber.design_energy(mo.Continuum(), grid.dx)
    wavenumber = math.sqrt(2.0 * energy)
    duration = round(360.0 / wavenumber / 0.05) * 0.05
    run = mo.propagate(
        mo.System(grid, absorber=absorber), mo.GaussianPacket(50.0, wavenumber, 20.0), duration, 0.05
    )
    # What is still in the box after the packet has run into the right layer came back from it.
    return Outcome(run.norm, 0.0, 1e-3, note="value: probability left in the box after absorption")


@case(
    "anderson-thouless",
    "Lyapunov exponent of the Anderson model, W = 0.5, E = 0.5: gamma = 1/360 per site",
    THOULESS,
    needs=("lyapunov",),
)
def _anderson() -> Outcome:
    import mottle as mo

    # Statistical error of gamma is about 1/sqrt(gamma L): 2^21 sites x 16 chains gives 0.3 %.
    width, energy, sites = 0.5, 0.5, 1 << 21
    system = mo.System(
        mo.Grid(sites, float(sites)),
        model=mo.Lattice(hopping=1.0),
        disorder=mo.BoxDisorder(width, -0.5 * sites, 0.5 * sites),
    )
    stat = mo.lyapunov(system, energy, 16, seed=1)
    # Weak-disorder expansion; the band-centre and band-edge anomalies are far from E = 0.5.
    return Outcome(float(stat.mean), width**2 / (24.0 * (4.0 - energy**2)), 0.01, relative=True)


def _born_gamma(model, energy: float, hbar: float = 1.0, mass: float = 1.0) -> float:
    k = math.sqrt(2.0 * mass * energy) / hbar
    return mass**2 * float(model.power_spectrum(2.0 * k)) / (2.0 * hbar**4 * k**2)


# Continuum chains for the transfer matrix: dx = 0.125 resolves l = 0.5; gamma ~ 1e-3 over
# 1.3e5 per chain x 64 chains gives a statistical error of about 1 %.
_CHAIN_POINTS, _CHAIN_LENGTH, _CHAINS = 1 << 20, 131072.0, 64


def _chain(disorder):
    import mottle as mo

    return mo.System(mo.Grid(_CHAIN_POINTS, _CHAIN_LENGTH), disorder=disorder)


@case(
    "born-gaussian-formula",
    "born_lyapunov for Gaussian disorder rms 0.05, l 0.5, k 1, against the closed form",
    BORN,
    needs=("born_lyapunov",),
)
def _born_formula() -> Outcome:
    import mottle as mo

    system = _chain(mo.GaussianDisorder(0.05, 0.5, -65000.0, 65000.0))
    # C~(q) = rms^2 sqrt(2 pi) l exp(-q^2 l^2 / 2) at q = 2k = 2, written out rather than read from the model.
    spectrum = 0.05**2 * math.sqrt(2.0 * math.pi) * 0.5 * math.exp(-((2.0 * 0.5) ** 2) / 2.0)
    return Outcome(float(mo.born_lyapunov(system, 0.5)), spectrum / 2.0, 1e-9, relative=True)


@case(
    "born-gaussian-transfer-matrix",
    "transfer-matrix gamma of Gaussian disorder rms 0.05, l 0.5 at k = 1 against Born (9.50e-4)",
    BORN,
    needs=("lyapunov",),
)
def _born_transfer() -> Outcome:
    import mottle as mo

    disorder = mo.GaussianDisorder(0.05, 0.5, -65000.0, 65000.0)
    stat = mo.lyapunov(_chain(disorder), 0.5, _CHAINS, seed=3)
    return Outcome(float(stat.mean), _born_gamma(disorder, 0.5), 0.03, relative=True)


@case(
    "born-speckle-transfer-matrix",
    "transfer-matrix gamma of a speckle, k sigma_R = 0.5, V_R/E = 0.1, both signs averaged, against Born",
    SPECKLE,
    needs=("lyapunov",),
)
def _born_speckle() -> Outcome:
    import mottle as mo

    values = []
    for sign in (1, -1):
        disorder = mo.Speckle(0.05, 0.5, -65000.0, 65000.0, sign=sign)
        values.append(float(mo.lyapunov(_chain(disorder), 0.5, _CHAINS // 2, seed=5).mean))
    # Odd orders change gamma with the sign of the speckle; their mean is the Born value.
    reference = _born_gamma(mo.Speckle(0.05, 0.5, 0.0, 1.0), 0.5)
    return Outcome(0.5 * sum(values), reference, 0.03, relative=True)


# --------------------------------------------------------------------------- ground states


@case(
    "ground-state-harmonic",
    "ground-state energy of the harmonic trap, hbar = m = omega = 1: E0 = hbar omega / 2",
    "Cohen-Tannoudji, Diu & Laloe, Quantum Mechanics vol. 1 (1977), ch. V",
    needs=("ground_state",),
)
def _ground_harmonic() -> Outcome:
    import mottle as mo

    state = mo.ground_state(mo.System(mo.Grid(512, 24.0), potential=mo.Harmonic(1.0)))
    return Outcome(state.energy, 0.5, 1e-9, note="residual stop at 1e-10 of the energy scale")


@case(
    "ground-state-thomas-fermi",
    "1D GP ground state g = 500, omega = 1: mu against Thomas-Fermi (3 g omega / (4 sqrt 2))^(2/3)",
    "Pitaevskii & Stringari, Bose-Einstein Condensation (2003), 1D Thomas-Fermi limit",
    needs=("ground_state",),
)
def _ground_thomas_fermi() -> Outcome:
    import mottle as mo

    system = mo.System(mo.Grid(2048, 30.0), potential=mo.Harmonic(1.0), nonlinearity=500.0)
    state = mo.ground_state(system)
    reference = (3.0 * 500.0 / (4.0 * math.sqrt(2.0))) ** (2.0 / 3.0)
    return Outcome(
        state.chemical_potential, reference, 0.02, relative=True, note="true mu is 0.018 % above TF"
    )


__all__ = ["Case", "Outcome", "Result", "case", "format_table", "registry", "run_cases"]
