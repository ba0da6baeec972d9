"""Figures and a text summary of a results store (matplotlib, no pyplot: no global state, no display).

Each ``*_figure`` function returns a ``matplotlib.figure.Figure`` whose lines
carry exactly the stored numbers, so what is drawn can be checked against the
store; :func:`report` saves them as PNG next to a plain-text summary.

Localization length: the amplitude convention (docs/validation.md), ``<ln T> = a - 2 L / xi``
for a slab of length L much longer than xi (Anderson, Thouless, Abrahams &
Fisher, Phys. Rev. B 22, 3519 (1980)), fitted by weighted least squares with
the standard errors of ``<ln T>`` as weights.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..analysis.fits import LocalizationFit, line_fit
from ..studies.store import Store, open_store
from ..studies.study import format_value, point_label, short_names

_LENGTH_PATH = re.compile(r"^system\.disorder\.(\d+)\.(start|stop)$")
MAX_LEGEND = 10
MAX_PANELS = 4


def _figure(rows: int = 1, columns: int = 1, height: float = 3.6):
    from matplotlib.figure import Figure

    figure = Figure(figsize=(6.4, height * rows), layout="constrained")
    axes = figure.subplots(rows, columns, squeeze=False)
    return figure, [ax for row in axes for ax in row]


def _numeric(values) -> bool:
    return all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)


def _groups(store: Store, fixed: list[str]):
    """Points grouped by their values of the ``fixed`` paths, in order of first appearance."""
    groups: dict[tuple, list] = {}
    for point in store.points:
        key = tuple(_hashable(point.parameters.get(path)) for path in fixed)
        groups.setdefault(key, []).append(point)
    return groups


def _hashable(value):
    return tuple(value) if isinstance(value, list) else value


def _group_label(paths: list[str], key: tuple, names: dict) -> str:
    return point_label(dict(zip(paths, key, strict=True)), names, empty="all points")


def swept_numbers(store: Store) -> list[str]:
    """The swept paths with numeric values (those a figure can have on its x axis)."""
    return [path for path, values in store.sweep.items() if _numeric(values) and len(values) > 1]


def transmission_figure(store: Store, parameter: str):
    """``<T>`` with its standard error against ``parameter``, one line per value of the other swept keys.

    The typical transmission ``exp<ln T>`` is drawn dashed in the same colour.
    """
    names = short_names(store.sweep)
    others = [path for path in store.sweep if path != parameter]
    figure, (ax,) = _figure()
    for number, (key, points) in enumerate(_groups(store, others).items()):
        points = sorted(points, key=lambda p: p.parameters[parameter])
        x = np.array([p.parameters[parameter] for p in points], dtype=float)
        stats = [p.result.transmission for p in points]
        mean = np.array([s.mean for s in stats])
        stderr = np.array([s.stderr for s in stats])
        label = _group_label(others, key, names) if number < MAX_LEGEND else None
        drawn = ax.errorbar(x, mean, yerr=stderr, marker="o", capsize=3, label=label)
        typical = np.array([s.typical for s in stats])
        if np.any(np.isfinite(typical)):
            ax.plot(x, typical, linestyle="--", color=drawn.lines[0].get_color(), alpha=0.7)
    ax.set_xlabel(names[parameter])
    ax.set_ylabel("transmission  <T> (solid), exp<ln T> (dashed)")
    ax.set_title(f"{store.title}: transmission against {names[parameter]}")
    if store.sweep and len(store.sweep) > 1:
        ax.legend(fontsize="small")
    return figure


def length_path(store: Store) -> tuple[int, list[str]] | None:
    """The disorder entry whose region the study sweeps, and the swept start/stop paths of it."""
    for path in store.sweep:
        match = _LENGTH_PATH.match(path)
        if match and _numeric(store.sweep[path]):
            entry = int(match.group(1))
            paths = [p for p in store.sweep if (m := _LENGTH_PATH.match(p)) and int(m.group(1)) == entry]
            return entry, paths
    return None


def sample_length(point, entry: int) -> float:
    disorder = point.resolved["system"]["disorder"][entry]
    return float(disorder["stop"]) - float(disorder["start"])


@dataclass
class LengthSeries:
    """``<ln T>`` against the sample length for one value of the other swept keys, and its fit."""

    label: str
    lengths: np.ndarray
    log_transmission: np.ndarray
    log_stderr: np.ndarray
    fit: LocalizationFit


def fit_series(lengths, log_transmission, log_stderr, label: str = "") -> LengthSeries | None:
    """:func:`mottle.analysis.fits.line_fit` of ``<ln T>`` on L, weighted by the standard errors
    (unweighted where one is missing); None with fewer than two distinct lengths."""
    x = np.asarray(lengths, dtype=float)
    y = np.asarray(log_transmission, dtype=float)
    s = np.asarray(log_stderr, dtype=float)
    keep = np.isfinite(x) & np.isfinite(y)
    x, y, s = x[keep], y[keep], s[keep]
    if np.unique(x).size < 2:
        return None
    weighted = bool(np.all(np.isfinite(s) & (s > 0)))
    return LengthSeries(label, x, y, s, line_fit(x, y, s if weighted else None))


def localization_fits(store: Store) -> list[LengthSeries]:
    """One fit of ``<ln T>`` against the sample length per value of the other swept keys."""
    found = length_path(store)
    if found is None:
        return []
    entry, paths = found
    names = short_names(store.sweep)
    others = [path for path in store.sweep if path not in paths]
    fits = []
    for key, points in _groups(store, others).items():
        points = sorted(points, key=lambda p: sample_length(p, entry))
        stats = [p.result.transmission for p in points]
        fit = fit_series(
            [sample_length(p, entry) for p in points],
            [s.log_mean for s in stats],
            [s.log_stderr for s in stats],
            _group_label(others, key, names),
        )
        if fit is not None:
            fits.append(fit)
    return fits


def log_transmission_figure(store: Store):
    """``<ln T>`` with error bars against the sample length, and the fitted ``a - 2L/xi`` lines."""
    figure, (ax,) = _figure()
    fits = localization_fits(store)
    for number, fit in enumerate(fits):
        label = (
            f"{fit.label}: xi = {fit.fit.localization_length:.3g} ± {fit.fit.stderr:.2g}"
            if number < MAX_LEGEND
            else None
        )
        drawn = ax.errorbar(
            fit.lengths,
            fit.log_transmission,
            yerr=fit.log_stderr,
            marker="o",
            capsize=3,
            linestyle="none",
            label=label,
        )
        span = np.linspace(0.0, fit.lengths.max(), 50)
        ax.plot(span, fit.fit.line(span), color=drawn.lines[0].get_color(), linewidth=1)
    ax.set_xlabel("sample length L")
    ax.set_ylabel("<ln T>")
    ax.set_title(f"{store.title}: <ln T> = a - 2L/xi")
    if fits:
        ax.legend(fontsize="small")
    return figure


def _panels(times) -> list[int]:
    count = len(times)
    if count <= MAX_PANELS:
        return list(range(count))
    return sorted({round(i * (count - 1) / (MAX_PANELS - 1)) for i in range(MAX_PANELS)})


def _profile_figure(store: Store, quantity: str, log: bool):
    first = store.points[0].result
    panels = _panels(first.times)
    figure, axes = _figure(len(panels), 1, height=3.0)
    names = short_names(store.sweep)
    colours = _colours(len(store.points))
    for ax, snapshot in zip(axes, panels, strict=True):
        peak = 0.0
        for number, point in enumerate(store.points):
            result = point.result
            x = result.x if quantity == "density" else result.k
            y = getattr(result, quantity)[snapshot]
            label = point.label(names) if number < MAX_LEGEND else None
            ax.plot(x, y, color=colours[number], linewidth=1, label=label)
            peak = max(peak, float(np.max(y)))
        if log:
            ax.set_yscale("log")
            if peak > 0:
                ax.set_ylim(peak * 1e-14, peak * 3)
        ax.set_title(f"t = {first.times[snapshot]:.4g}", fontsize="medium")
        ax.set_xlabel("x" if quantity == "density" else "wavenumber k")
        ax.set_ylabel("mean |psi(x)|^2" if quantity == "density" else "mean |phi(k)|^2")
        if quantity == "momentum" and peak > 0:
            populated = np.flatnonzero(
                np.max([p.result.momentum[snapshot] for p in store.points], axis=0) > 1e-4 * peak
            )
            k = first.k
            ax.set_xlim(
                k[populated[0]] - 0.1 * abs(k[populated[0]]) - 1e-3,
                k[populated[-1]] + 0.1 * abs(k[populated[-1]]) + 1e-3,
            )
    if 1 < len(store.points):
        axes[0].legend(fontsize="x-small")
    return figure


def _colours(count: int):
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(0.85 * i / max(count - 1, 1)) for i in range(count)]


MAX_DENSITY_PANELS = 6
"""The density figure shows at most this many points, one panel each (evenly picked)."""


def _regions(store: Store, point) -> tuple[list[tuple[float, float]], list[tuple[float, float]]]:
    """``(disorder regions, absorbing layers)`` of a stored point's system, as x intervals."""
    from ..studies.study import build_system

    try:
        system = build_system(point.resolved, getattr(store, "tables", {}))
    except Exception:  # shading is a courtesy; the curves do not depend on it
        return [], []
    disorder = [] if system.disorder is None else [(term.start, term.stop) for term in system.disorder.terms]
    layers = []
    if system.absorber is not None:
        grid, width = system.grid, system.absorber.width
        layers = [(grid.start, grid.start + width), (grid.stop - width, grid.stop)]
    return disorder, layers


def density_figure(store: Store):
    """Mean density ``<|psi(x)|^2>`` on a log scale: one panel per point (at most
    :data:`MAX_DENSITY_PANELS`, evenly picked), one line per snapshot (at most four), with the
    disorder region shaded grey and the absorbing layers hatched red."""
    from matplotlib.patches import Patch

    points = store.points
    shown = _panels_of(len(points), MAX_DENSITY_PANELS)
    first = points[0].result
    snapshots = _panels(first.times)
    figure, axes = _figure(len(shown), 1, height=2.6)
    names = short_names(store.sweep)
    colours = _colours(len(snapshots))
    for ax, number in zip(axes, shown, strict=True):
        point = points[number]
        result = point.result
        disorder, layers = _regions(store, point)
        for start, stop in disorder:
            ax.axvspan(start, stop, color="0.85", zorder=0)
        for start, stop in layers:
            ax.axvspan(start, stop, facecolor="none", edgecolor="tab:red", hatch="//", alpha=0.5, zorder=0)
        peak = 0.0
        for colour, snapshot in zip(colours, snapshots, strict=True):
            y = result.density[snapshot]
            ax.plot(result.x, y, color=colour, linewidth=1, label=f"t = {result.times[snapshot]:.4g}")
            peak = max(peak, float(np.max(y)))
        ax.set_yscale("log")
        if peak > 0:
            ax.set_ylim(peak * 1e-14, peak * 3)
        ax.set_xlim(result.x[0], result.x[-1])
        title = point.label(names) if store.sweep else store.title
        ax.set_title(f"point {number + 1}: {title}", fontsize="medium")
        ax.set_ylabel("mean |psi(x)|^2")
    axes[-1].set_xlabel("x")
    handles, _ = axes[0].get_legend_handles_labels()
    handles += [
        Patch(color="0.85", label="disorder"),
        Patch(facecolor="none", edgecolor="tab:red", hatch="//", label="absorbing layer"),
    ]
    figure.legend(handles=handles, fontsize="small", ncol=4, loc="outside upper center")
    if len(shown) < len(points):
        figure.suptitle(f"{len(shown)} of {len(points)} points shown", fontsize="small")
    return figure


def _panels_of(count: int, most: int) -> list[int]:
    """At most ``most`` of ``count`` indices, evenly spread, first and last included."""
    if count <= most:
        return list(range(count))
    return sorted({round(i * (count - 1) / (most - 1)) for i in range(most)})


def momentum_figure(store: Store):
    """Mean momentum distribution ``<|phi(k)|^2>``, one panel per snapshot, one line per point."""
    return _profile_figure(store, "momentum", log=False)


def summary(store: Store, fits: list[LengthSeries] | None = None) -> str:
    """A plain-text table of every finished point, and the localization-length fits."""
    names = short_names(store.sweep)
    headers = [names[p] for p in store.sweep] + ["runs", "<T>", "±", "exp<ln T>", "<ln T>", "±", "<R>", "s"]
    rows = []
    for point in store.points:
        result = point.result
        t, r = result.transmission, result.reflection
        rows.append(
            [format_value(point.parameters[p]) for p in store.sweep]
            + [
                str(point.count),
                f"{t.mean:.5g}",
                f"{t.stderr:.2g}",
                f"{t.typical:.4g}",
                f"{t.log_mean:.4g}",
                f"{t.log_stderr:.2g}",
                f"{r.mean:.5g}",
                f"{point.wall_time:.3g}",
            ]
        )
    widths = [max(len(h), *(len(row[i]) for row in rows)) if rows else len(h) for i, h in enumerate(headers)]
    lines = [
        f"{store.title}: {len(store.points)} of {store.total} points "
        f"(mottle {store.mottle_version}, {store.path})",
        "  ".join(h.rjust(w) for h, w in zip(headers, widths, strict=True)),
    ]
    lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths, strict=True)) for row in rows]
    if store.missing:
        lines.append(
            f"missing points: {', '.join(str(i + 1) for i in store.missing)} (resume with mottle run)"
        )
    fits = localization_fits(store) if fits is None else fits
    if fits:
        lines.append("localization length (amplitude), <ln T> = a - 2L/xi:")
        for fit in fits:
            lines.append(
                f"  {fit.label}: xi = {fit.fit.localization_length:.4g} ± {fit.fit.stderr:.2g} "
                f"from {fit.lengths.size} lengths (a = {fit.fit.intercept:.3g})"
            )
    return "\n".join(lines) + "\n"


@dataclass
class Report:
    """What :func:`report` wrote: ``files`` (PNG figures, summary.txt) and the ``summary_text``."""

    out: Path
    files: list[Path] = field(default_factory=list)
    summary_text: str = ""
    fits: list[LengthSeries] = field(default_factory=list)


def report(store: Store | str, out: str | Path) -> Report:
    """Write the figures of ``store`` as PNG to ``out`` and a summary table ``summary.txt``."""
    if not isinstance(store, Store):
        store = open_store(store)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    done = Report(out)
    if not store.points:
        done.summary_text = f"{store.path}: no finished points yet\n"
        return done
    names = short_names(store.sweep)
    figures = [
        (f"transmission_vs_{_file_name(names[p])}.png", transmission_figure(store, p))
        for p in swept_numbers(store)
    ]
    done.fits = localization_fits(store)
    if done.fits:
        figures.append(("log_transmission_vs_length.png", log_transmission_figure(store)))
    if len(store.points[0].result.times):
        figures.append(("density.png", density_figure(store)))
        figures.append(("momentum.png", momentum_figure(store)))
    from .report_drive import drive_figures, drive_summary  # driven studies: <p^2>, momentum tails

    figures += drive_figures(store)
    for name, figure in figures:
        path = out / name
        figure.savefig(path, dpi=110)
        done.files.append(path)
    done.summary_text = summary(store, done.fits) + drive_summary(store)
    path = out / "summary.txt"
    path.write_text(done.summary_text, encoding="utf-8")
    done.files.append(path)
    return done


def _file_name(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]+", "_", name).strip("_")


__all__ = [
    "LengthSeries",
    "Report",
    "density_figure",
    "fit_series",
    "localization_fits",
    "log_transmission_figure",
    "momentum_figure",
    "report",
    "summary",
    "transmission_figure",
]
