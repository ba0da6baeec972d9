"""``mottle demo``: a matter-wave packet crossing a speckled stretch of a waveguide.

A slow atomic packet (k0 = 1, rms width 10, hbar = m = 1) is launched along a
one-dimensional guide towards a region lit by a repulsive optical speckle of
grain size sigma_R = 0.5 (k0 sigma_R = 0.5, inside the Born regime of a speckle,
whose mobility edge is at k sigma_R = 1). The study sweeps the speckle strength
and the length of the speckled region; the report fits the localization length
to <ln T> = a - 2L/xi and the demo prints it beside the Born prediction
xi = 1/gamma, gamma = C~(2k)/(2k^2) for the speckle's power spectrum
(Sanchez-Palencia et al., Phys. Rev. Lett. 98, 210401 (2007)). It runs 2304
propagations: about half a minute on two cores. Before the study it shows one
packet at a barrier, a condensate released from its trap into a speckled
guide (:func:`released_condensate`) and, in 2D, the coherent backscattering
peak of a packet entering a speckled slab (:func:`backscattering_slab`).
"""

from __future__ import annotations

import math
import re
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

STUDY = """\
# mottle demo: a matter-wave packet crossing a speckled stretch of a waveguide.
[study]
title = "Matter wave through a speckled guide"
notes = "Transmission against speckle strength and length; xi from <ln T> = a - 2L/xi."

[system]
points = 1024
length = 240.0
center = 10.0                 # the box spans [-110, 130)
model = "continuum"
absorber = { width = 20.0 }   # design energy 0.05, a tenth of the packet's

[[system.disorder]]
kind = "speckle"
strength = 0.2
correlation_length = 0.5      # the grain size sigma_R
start = 0.0
stop = 40.0
sign = 1                      # repulsive (blue-detuned)

[packet]
center = -60.0
wavenumber = 1.0
width = 10.0                  # narrow in k (rms 0.05): close to a single energy

[run]
duration = 200.0
step = 0.1
realizations = 192
seed = 2026
snapshots = [100.0, 200.0]    # the detector defaults to the speckled region

[sweep]
"system.disorder.0.strength" = [0.1, 0.2, 0.3]
"system.disorder.0.stop" = [20.0, 40.0, 60.0, 80.0]
"""


@dataclass
class DemoOutcome:
    study: Path
    store: Path
    figures: Path
    seconds: float
    message: str


def born_xi(strength: float, correlation_length: float, wavenumber: float) -> float:
    """Born localization length (amplitude) of the demo's speckle, ``1 / mottle.born_lyapunov``."""
    from ..specs.disorder import Speckle
    from ..specs.grid import Grid
    from ..specs.system import System
    from ..stationary.localization import born_lyapunov

    system = System(Grid(1024, 240.0, center=10.0), disorder=Speckle(strength, correlation_length, 0.0, 40.0))
    gamma = float(born_lyapunov(system, 0.5 * wavenumber**2))
    return 1.0 / gamma if gamma > 0 else math.inf


def barrier_warm_up() -> list[str]:
    """One packet at a barrier: T, R and the probability accounting, against the exact average.

    A packet of mean energy 0.72 meets a barrier of height 0.8 and width 1.5 (hbar = m = 1):
    classically it would bounce back; quantum mechanically about 47 % tunnels.
    """
    from ..analysis.exact import barrier_transmission, packet_average
    from ..dynamics.propagate import propagate
    from ..specs.absorber import Absorber
    from ..specs.grid import Grid
    from ..specs.packets import GaussianPacket
    from ..specs.potentials import Barrier
    from ..specs.system import System

    # dx = 0.05 keeps the sharp barrier's discretization error near 1e-4.
    system = System(Grid(8192, 400.0), potential=Barrier(0.8, 0.0, 1.5), absorber=Absorber(60.0))
    packet = GaussianPacket(center=-70.0, wavenumber=1.2, width=8.0)
    run = propagate(system, packet, 300.0, 0.02, detector=(0.0, 1.5), snapshots=[100.0, 300.0])
    exact = packet_average(lambda k: barrier_transmission(k**2 / 2.0, 0.8, 1.5), 1.2, 8.0)
    assert run.transmission is not None and run.reflection is not None  # a detector was given
    assert run.classical_momentum is not None  # classical=True is the default
    accounting = run.norm + run.absorbed_left + run.absorbed_right
    # At t = 100 the particle has met the barrier and not yet reached an absorbing layer.
    fate = "reflected" if run.classical_momentum[0] < 0 else "transmitted"
    return [
        "a packet at a barrier (E = 0.72, V0 = 0.8, width 1.5):",
        f"  T = {run.transmission:.6f}, R = {run.reflection:.6f}, "
        f"T + R = {run.transmission + run.reflection:.9f}",
        f"  exact T averaged over the packet's momenta = {exact:.6f} "
        "(Griffiths, Introduction to Quantum Mechanics, 2nd ed. (2005), problem 2.33)",
        f"  norm {run.norm:.3e} + absorbed left {run.absorbed_left:.6f} + right {run.absorbed_right:.6f} "
        f"= 1 {accounting - 1.0:+.1e}",
        f"  the classical particle with the packet's <x> and <p> is {fate}",
        "",
    ]


def released_condensate(realizations: int = 48) -> tuple[list[str], list[tuple[float, float, float]]]:
    """A condensate released from its trap into a speckled guide: its mean density's tails settle.

    The Gross-Pitaevskii ground state of a harmonic trap (omega = 0.02, g = 10, hbar = m = 1:
    mu = 0.22, Thomas-Fermi radius 33) is held for t = 4 in the trap with the speckle on
    (V_R = 0.2, grain 1.0), then the trap is switched off. The interaction energy turns into
    kinetic energy (momenta up to about sqrt(4 mu) = 0.95, below the speckle's Born mobility edge
    k sigma_R = 1); the expanding cloud's mean log-density grows exponential tails whose decay
    length, fitted between |x| = 40 and 100, settles while the centre stops spreading. Returns the
    printed lines and ``(time, xi, stderr)`` per snapshot (the left and right tails averaged).
    """
    import warnings

    from ..analysis.fits import log_density_tails
    from ..dynamics.ensemble import ensemble
    from ..dynamics.ground import ground_state
    from ..specs.absorber import Absorber
    from ..specs.disorder import Speckle
    from ..specs.grid import Grid
    from ..specs.potentials import Harmonic, Switched
    from ..specs.system import System

    grid = Grid(2048, 500.0)
    trap = Harmonic(0.02)
    condensate = ground_state(System(grid, potential=trap, nonlinearity=10.0))
    guide = System(
        grid,
        potential=Switched(trap, off=4.0),
        disorder=Speckle(0.2, 1.0, -210.0, 210.0),
        nonlinearity=10.0,
        absorber=Absorber(40.0),
    )
    with warnings.catch_warnings():
        # The absorber check reads the ground state's own tiny kinetic energy (8e-4); the released
        # cloud's is set by mu, which the layer is designed for.
        warnings.filterwarnings("ignore", message="absorber width")
        result = ensemble(guide, condensate, 240.0, 0.1, realizations, snapshots=[80.0, 160.0, 240.0], seed=5)
    fits = []
    for snapshot, time_ in enumerate(result.times):
        tails = log_density_tails(result, (-100.0, -40.0), (40.0, 100.0), snapshot=snapshot)
        xi = 0.5 * (tails.left.localization_length + tails.right.localization_length)
        error = 0.5 * math.hypot(tails.left.stderr, tails.right.stderr)
        fits.append((float(time_), float(xi), float(error)))
    lines = [
        f"a condensate released into a speckled guide (mu = {condensate.chemical_potential:.3f}, "
        f"{realizations} speckle realizations):",
        "  decay length of the mean density's tails, |x| = 40..100, left and right averaged:",
        *(f"    t = {t:5.0f}: xi = {xi:6.1f} ± {error:.1f}" for t, xi, error in fits),
        f"  still in the guide at t = 240: {float(result.norm.mean):.3f} (the rest reached the absorbers)",
        "",
    ]
    return lines, fits


def backscattering_slab(
    realizations: int = 96, figure_path: str | Path | None = None
) -> tuple[list[str], float]:
    """A packet entering a speckled slab in 2D: the coherent backscattering peak at -k0.

    A cold-atom packet (k0 = 1.02 along axis 0, rms width 4, hbar = m = 1) is sent into a slab
    lit by a 2D speckle (V_R = 0.3, grain 1.0) in a box periodic across the slab and absorbing at
    both ends of axis 0. Waves scattered back along reversed paths interfere constructively at
    exactly -k0 (Cherroret et al., Phys. Rev. A 85, 011604 (2012)): in the mean momentum
    distribution a peak rises there above the diffuse ring of reflected waves. The slab's peak
    stays below the bulk's factor 2 (single scattering, the finite spot; the bulk case is
    tests/test_backscattering_2d.py). Returns the printed lines and the peak over the ring's
    background at the last snapshot; ``figure_path`` gets an image of the distribution.
    """
    import numpy as np

    from ..dynamics.ensemble import ensemble
    from ..specs.absorber import Absorber
    from ..specs.disorder import Speckle
    from ..specs.grid import Grid
    from ..specs.packets import GaussianPacket
    from ..specs.system import System

    # Tuples per axis (the spec classes annotate their 1D field types).
    points: Any = (160, 144)
    length: Any = (80.0, 72.0)
    grid = Grid(points=points, length=length)
    ring = 13  # k0 = 2 pi 13 / 80, on the grid
    k0 = 2.0 * math.pi * ring / 80.0
    system = System(
        grid, disorder=Speckle(0.3, 1.0, start=-6.0, stop=34.0), absorber=Absorber(6.0, axes=(0,))
    )
    centre: Any = (-18.0, 0.0)
    wavenumber: Any = (k0, 0.0)
    packet = GaussianPacket(center=centre, wavenumber=wavenumber, width=4.0)
    result = ensemble(system, packet, 50.0, 0.1, realizations, seed=3, snapshots=[25.0, 50.0])
    kx, ky = result.k
    k_x, k_y = np.meshgrid(kx, ky, indexing="ij")
    shell = np.abs(np.hypot(k_x, k_y) - k0) < 0.05
    angle = np.degrees(np.abs(np.arctan2(k_y, k_x)))
    behind = shell & (np.abs(angle - 130.0) < 20.0)  # reflected, 30-70 degrees away from -k0
    centre = (grid.shape[0] // 2, grid.shape[1] // 2)
    ratios = []
    for snapshot in range(len(result.times)):
        momentum = result.momentum[snapshot]
        ratios.append(float(momentum[centre[0] - ring, centre[1]] / momentum[behind].mean()))
    if figure_path is not None:
        from matplotlib.figure import Figure

        figure = Figure(figsize=(5.2, 4.2), layout="constrained")
        ax = figure.subplots()
        shown = ax.imshow(
            result.momentum[-1].T, origin="lower", extent=(kx[0], kx[-1], ky[0], ky[-1]), cmap="viridis"
        )
        ax.set_xlim(-1.6, 1.6)
        ax.set_ylim(-1.6, 1.6)
        ax.plot([-k0], [0.0], "w+", markersize=12)
        ax.set_xlabel("k_0")
        ax.set_ylabel("k_1")
        ax.set_title(
            f"mean |phi(k)|^2 at t = 50: the peak at -k0 (+), {realizations} speckles", fontsize="small"
        )
        figure.colorbar(shown, ax=ax, shrink=0.8)
        figure.savefig(figure_path, dpi=110)
    lines = [
        f"a packet entering a speckled slab in 2D ({realizations} speckle realizations, 160 x 144 points):",
        f"  reflected {float(result.reflection.mean):.3f}, transmitted {float(result.transmission.mean):.3f}",
        "  mean momentum distribution at -k0 over the reflected ring's background (30-70 degrees away):",
        *(f"    t = {t:3.0f}: {ratio:.2f}" for t, ratio in zip(result.times, ratios, strict=True)),
        "  (coherent backscattering; 2 in the bulk, less from a slab: single scattering, the finite spot)",
        "",
    ]
    return lines, ratios[-1]


def run_demo(
    out: str | Path = "mottle-demo", workers=None, threads=None, progress: bool = True
) -> DemoOutcome:
    """Write the demo study to ``out``, run it into ``out/demo.mottle`` (resuming), draw ``out/figures``."""
    from ..studies.runner import run_study
    from ..studies.study import load_study
    from .report import report

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    study_path = out / "demo.toml"
    study_path.write_text(STUDY, encoding="utf-8")
    store_path = out / "demo.mottle"
    study = load_study(study_path)
    began = time.perf_counter()
    store = run_study(study, store_path, workers=workers, threads=threads, progress=progress)
    ran = time.perf_counter() - began
    written = report(store, out / "figures")
    seconds = time.perf_counter() - began
    condensate_lines, _ = released_condensate()
    backscattering_lines, _ = backscattering_slab(figure_path=out / "figures" / "backscattering_2d.png")
    lines = [
        *barrier_warm_up(),
        *condensate_lines,
        *backscattering_lines,
        written.summary_text.rstrip(),
        "",
        "against the Born prediction (Sanchez-Palencia et al., Phys. Rev. Lett. 98, 210401 (2007));",
        "expect 10-20 % apart: a packet averages T over its band, and a speckle's odd orders shift xi",
        "with its sign (Born is the mean of both signs):",
    ]
    for fit in written.fits:
        found = re.search(r"strength=([-+0-9.eE]+)", fit.label)
        assert found is not None, fit.label  # the study labels its fits by strength
        strength = float(found.group(1))
        lines.append(
            f"  {fit.label}: fitted xi = {fit.fit.localization_length:.3g} ± {fit.fit.stderr:.2g}, "
            f"Born xi = {born_xi(strength, 0.5, 1.0):.3g}"
        )
    lines += [
        "",
        f"demo: {len(study.points)} points, {study.realizations} runs in {ran:.1f} s "
        f"({seconds:.1f} s with the report)",
        f"  study:   {study_path}",
        f"  store:   {store_path}",
        f"  figures: {out / 'figures'} ({len(written.files)} files)",
    ]
    return DemoOutcome(study_path, store_path, out / "figures", seconds, "\n".join(lines))


__all__ = ["STUDY", "DemoOutcome", "backscattering_slab", "born_xi", "released_condensate", "run_demo"]
