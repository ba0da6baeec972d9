"""The requests mottle sends to the Rust core, built here and nowhere else.

Each function returns one of the TypedDicts that ``_core.pyi`` declares (keyed
by ``kind`` where a request has several shapes); the core reads them into
typed Rust structs and enums (rust/src/bindings/request.rs), so a missing,
unknown or mistyped field is an :class:`~mottle.InvalidTypeError` naming it.
Disorder terms and kinetic models are derived from their spec classes' declared
fields (:mod:`mottle.specs.kinds`): the request is the kind and the fields.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, cast

import numpy as np

from .specs import kinds

if TYPE_CHECKING:
    from collections.abc import Iterable, Sequence

    from ._core import (
        _Bar,
        _BoxTerm,
        _ClassicalStart,
        _Draw,
        _Drive,
        _EnsembleRun,
        _Ground,
        _Kick,
        _Line,
        _Mesh,
        _Model,
        _Packets,
        _Particles,
        _Precision,
        _Profile,
        _Realizations,
        _Run,
        _Setup,
        _Spectrum,
        _Splitting,
        _Term,
        _TimeTerm,
    )
    from .specs.disorder import Disorder
    from .specs.grid import Grid
    from .specs.models import Continuum, Lattice
    from .specs.system import System


def line(grid: Grid) -> _Line:
    """Where the grid's points are."""
    return {"points": int(grid.points), "dx": float(grid.dx), "start": float(grid.start)}


def mesh(grid: Grid) -> _Mesh:
    """Where the points of a grid of 1 to 3 axes are (C order, axis 0 slowest)."""
    return {
        "shape": [int(n) for n in grid.shape],
        "spacing": [float(dx) for dx in np.ravel(grid.dx)],
        "start": [float(x) for x in np.ravel(grid.start)],
    }


def model(spec: Continuum | Lattice) -> _Model:
    """The kinetic-energy model: its kind and declared fields."""
    return cast("_Model", {"kind": spec.kind, **kinds.values(spec)})


def disorder_terms(disorder: Disorder | None) -> list[_Term]:
    """One request per independent term: its kind and declared fields."""
    if disorder is None:
        return []
    return [cast("_Term", {"kind": term.kind, **kinds.values(term)}) for term in disorder.terms]


def box_disorder_terms(disorder: Disorder | None, grid: Grid) -> list[_BoxTerm]:
    """One request per independent term on ``grid``: its kind, declared fields and its region as one
    start and stop per axis (a slab spans the box along axes 1 and 2)."""
    if disorder is None:
        return []
    out = []
    for term in disorder.terms:
        start, stop = term.region(grid)
        fields = {**kinds.values(term), "start": [float(x) for x in start], "stop": [float(x) for x in stop]}
        out.append(cast("_BoxTerm", {"kind": term.kind, **fields}))
    return out


def setup(system: System, step: float, splitting: str) -> _Setup:
    """The grid, model, step and absorbing layers of a run.

    On a 2D/3D grid ``points`` is the number of all points, ``dx`` the volume element and ``start``
    the first position along axis 0; ``shape``, ``spacing`` and ``origin`` give each axis (C order,
    axis 0 slowest), and the layer bounds are flat indices (whole slabs of axis 0).
    """
    left_end, right_start = system.layer_bounds()
    grid = system.grid
    spacing = [float(d) for d in np.atleast_1d(grid.dx)]
    origin = [float(s) for s in np.atleast_1d(grid.start)]
    return {
        "points": int(grid.size),
        "dx": float(np.prod(spacing)),
        "start": origin[0],
        "shape": [int(n) for n in grid.shape],
        "spacing": spacing,
        "origin": origin,
        "model": model(system.model),
        "nonlinearity": float(system.nonlinearity),
        "step": float(step),
        "splitting": cast("_Splitting", splitting),
        "left_layer_end": left_end,
        "right_layer_start": right_start,
    }


def _offsets(pauses: Sequence[int], offsets: Sequence[float] | None) -> list[float]:
    """The time past each pause's whole steps (none: every pause on a step boundary)."""
    return [0.0] * len(pauses) if offsets is None else [float(o) for o in offsets]


def run(
    steps: int,
    pauses: Sequence[int],
    detector: tuple[int, int] | None,
    classical: tuple[float, float] | None,
    precision: str,
    offsets: Sequence[float] | None = None,
) -> _Run:
    """A single run: steps, pauses, detector, where its classical particle starts (or None)."""
    start: _ClassicalStart | None = (
        None if classical is None else {"position": float(classical[0]), "momentum": float(classical[1])}
    )
    return {
        "steps": int(steps),
        "pauses": [int(p) for p in pauses],
        "offsets": _offsets(pauses, offsets),
        "keep_snapshots": True,
        "detector": detector,
        "classical": start,
        "precision": cast("_Precision", precision),
    }


def spectrum(
    probes: Iterable[int],
    positions: Iterable[float],
    modes: Iterable[int],
    wavenumbers: Iterable[float],
    energies: Iterable[float],
    velocities: Iterable[float],
) -> _Spectrum:
    """Where and at which modes an ensemble records the transmitted wave."""
    return {
        "probes": [int(p) for p in probes],
        "positions": [float(x) for x in positions],
        "modes": [int(m) for m in modes],
        "wavenumbers": [float(k) for k in wavenumbers],
        "energies": [float(e) for e in energies],
        "velocities": [float(v) for v in velocities],
    }


def ensemble_run(
    steps: int,
    pauses: Sequence[int],
    detector: tuple[int, int] | None,
    seed: int,
    precision: str,
    spectrum: _Spectrum | None,
    start: int = 0,
    count: int = 0,
    threads: int = 1,
    offsets: Sequence[float] | None = None,
) -> _EnsembleRun:
    """An ensemble's share of work: realizations ``start .. start + count`` on ``threads`` threads."""
    return {
        "steps": int(steps),
        "pauses": [int(p) for p in pauses],
        "offsets": _offsets(pauses, offsets),
        "detector": detector,
        "seed": int(seed),
        "start": int(start),
        "count": int(count),
        "threads": int(threads),
        "precision": cast("_Precision", precision),
        "spectrum": spectrum,
    }


def share(request: _EnsembleRun, start: int, count: int, threads: int) -> _EnsembleRun:
    """The same ensemble run for realizations ``start .. start + count``."""
    return {**request, "start": int(start), "count": int(count), "threads": int(threads)}


def draw(value: object) -> _Draw:
    """A packet parameter: a number, or a :class:`~mottle.Uniform` / :class:`~mottle.Normal` draw."""
    from .specs.packets import Normal, Uniform

    if isinstance(value, Uniform):
        return {"kind": "uniform", "low": value.low, "high": value.high}
    if isinstance(value, Normal):
        return {"kind": "normal", "mean": value.mean, "std": value.std}
    return {"kind": "fixed", "value": float(cast("float", value))}


def packets(grid: Grid | None, packet: object) -> _Packets:
    """The initial states: one wavefunction, drawn Gaussian packets, or a list used in turn."""
    from .specs.packets import GaussianPacket, PacketList, RandomPacket, Wavefunction

    if isinstance(packet, RandomPacket):
        return {
            "kind": "gaussian",
            "center": draw(packet.center),
            "wavenumber": draw(packet.wavenumber),
            "width": draw(packet.width),
        }
    if grid is None:
        raise ValueError("fixed and listed packets need the grid")
    if isinstance(packet, (GaussianPacket, Wavefunction)):
        return {"kind": "fixed", "values": packet.values(grid).astype(np.complex128).ravel()}
    if isinstance(packet, PacketList):
        values = np.stack([p.values(grid).ravel() for p in packet.packets]).astype(np.complex128)
        return {"kind": "list", "values": values}
    raise TypeError(f"no core request for a packet of type {type(packet).__name__}")


def realizations(seed: int, count: int, threads: int, start: int = 0) -> _Realizations:
    """Which realizations, on how many threads."""
    return {"seed": int(seed), "start": int(start), "count": int(count), "threads": int(threads)}


def bar(
    dimensions: int,
    width: int,
    slices: int,
    hopping: float,
    disorder_width: float,
    energy: float,
    qr_interval: int,
    blocks: int,
) -> _Bar:
    """A strip (2D) or bar (3D) of the Anderson model for the quasi-1D transfer matrices."""
    return {
        "dimensions": int(dimensions),
        "width": int(width),
        "slices": int(slices),
        "hopping": float(hopping),
        "disorder_width": float(disorder_width),
        "energy": float(energy),
        "qr_interval": int(qr_interval),
        "blocks": int(blocks),
    }


def particles(
    system: System,
    packet_center: float,
    packet_width: float,
    momentum: float,
    momentum_spread: float,
    count: int,
    seed: int,
    index: int,
    step: float,
    steps: int,
    pauses: Sequence[int],
    threads: int,
    offsets: Sequence[float] | None = None,
) -> _Particles:
    """A classical ensemble: particles drawn from a packet's Wigner distribution, and their run."""
    left_end, right_start = system.layer_bounds()
    return {
        "center": float(packet_center),
        "position_spread": float(packet_width),
        "momentum": float(momentum),
        "momentum_spread": float(momentum_spread),
        "particles": int(count),
        "seed": int(seed),
        "index": int(index),
        "step": float(step),
        "steps": int(steps),
        "pauses": [int(p) for p in pauses],
        "offsets": _offsets(pauses, offsets),
        "left_layer_end": left_end,
        "right_layer_start": right_start,
        "threads": int(threads),
    }


def table_profile(values: np.ndarray) -> _Profile:
    """A time-dependent term's ``V(x)`` given at the grid points."""
    return {"kind": "table", "values": np.ascontiguousarray(values, dtype=np.float64)}


def cosine_profile(amplitude: float, wavenumber: float, phase: object) -> _Profile:
    """``amplitude cos(wavenumber x + phase)``, the phase fixed or drawn per realization."""
    return {
        "kind": "cosine",
        "amplitude": float(amplitude),
        "wavenumber": float(wavenumber),
        "phase": draw(phase),
    }


def drive(system: System, step: float, steps: int) -> _Drive | None:
    """The time-dependent terms (kicks and switches as whole step counts) and the quasimomentum, or
    None for a static, periodic run."""
    from .dynamics.drive import KickSteps, SwitchSteps, drive_steps, is_driven

    if not is_driven(system):
        return None
    grid, model = system.grid, system.model
    kicks: list[_Kick] = []
    terms: list[_TimeTerm] = []
    for item in drive_steps(system, step, steps):
        if isinstance(item, KickSteps):
            profile = item.term.profile_request(grid, model)
            kick: _Kick = {"profile": profile, "first": item.first, "every": item.every, "modulation": None}
            modulation = item.term.modulation
            if modulation is not None:
                kick["modulation"] = {
                    "depth": float(modulation.depth),
                    "frequency": float(modulation.frequency),
                    "phase": draw(modulation.phase),
                }
            kicks.append(kick)
        elif isinstance(item, SwitchSteps):
            profile = item.term.profile_request(grid, model)
            terms.append({"kind": "switched", "profile": profile, "on": item.on, "off": item.off})
        else:
            terms.append(
                {
                    "kind": "modulated",
                    "profile": item.profile_request(grid, model),
                    "depth": float(item.depth),
                    "frequency": float(item.frequency),
                    "phase": draw(item.phase),
                }
            )
    quasimomentum = draw(grid.quasimomentum) if grid.twisted else None
    return {"kicks": kicks, "terms": terms, "quasimomentum": quasimomentum}


def ground(system: System, tolerance: float, max_steps: int) -> _Ground:
    """A ground-state search: grid, model, nonlinearity and the stopping rule."""
    grid = system.grid
    spacing = [float(d) for d in np.atleast_1d(grid.dx)]
    return {
        "points": int(grid.size),
        "dx": float(np.prod(spacing)),
        "shape": [int(n) for n in grid.shape],
        "spacing": spacing,
        "model": model(system.model),
        "nonlinearity": float(system.nonlinearity),
        "tolerance": float(tolerance),
        "max_steps": int(max_steps),
    }
