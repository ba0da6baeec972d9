"""Figures and a text summary of a results store (matplotlib, no pyplot: no global state, no display).

Each ``*_figure`` function returns a ``matplotlib.figure.Figure`` whose lines
carry exactly the stored numbers, so what is drawn can be checked against the
store; :func:`report` saves them as PNG next to a plain-text summary. The
scalar figures and the summary are built on :meth:`Store.table` (one row per
point, swept values as numbers or labels, so a swept distribution or packet
spec groups by its label); the profile figures on :meth:`Store.dataset`, which
reads only the points drawn. :func:`figures` lists what is drawn, one
``*_figure`` function per figure.

Localization length: the amplitude convention (docs/validation.md), ``<ln T> = a - 2 L / xi``
for a slab of length L much longer than xi (Anderson, Thouless, Abrahams &
Fisher, Phys. Rev. B 22, 3519 (1980)), fitted by weighted least squares with
the standard errors of ``<ln T>`` as weights.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.fits import LocalizationFit, line_fit
from ..studies.store import Store, open_store
from ..studies.study import format_value, short_names

_LENGTH_PATH = re.compile(r"^system\.disorder\.(\d+)\.(start|stop)$")
MAX_LEGEND = 10
MAX_PANELS = 4
MAX_PROFILE_LINES = 12
"""The momentum figure draws at most this many points (evenly picked), so large studies stay quick."""


def _figure(rows: int = 1, columns: int = 1, height: float = 3.6):
    from matplotlib.figure import Figure

    figure = Figure(figsize=(6.4, height * rows), layout="constrained")
    axes = figure.subplots(rows, columns, squeeze=False)
    return figure, [ax for row in axes for ax in row]


def _numeric(values) -> bool:
    return all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)


def _columns(store: Store) -> dict[str, str]:
    """The table column of each swept path (its short name)."""
    return short_names(store.sweep)


def _groups(table, columns: list[str]) -> dict[tuple, Any]:
    """Rows of ``table`` grouped by their values in ``columns``, in order of first appearance.

    Swept values are numbers or labels in the table (a distribution or packet spec as its label
    string), so every key is hashable."""
    if not columns:
        return {(): table}
    keys = list(zip(*(table[column].tolist() for column in columns), strict=True))
    groups: dict[tuple, list[int]] = {}
    for row, key in enumerate(keys):
        groups.setdefault(key, []).append(row)
    return {key: table.iloc[rows] for key, rows in groups.items()}


def _group_label(columns: list[str], key: tuple) -> str:
    return ", ".join(f"{c}={format_value(v)}" for c, v in zip(columns, key, strict=True)) or "all points"


def swept_numbers(store: Store) -> list[str]:
    """The swept paths with numeric values (those a figure can have on its x axis)."""
    return [path for path, values in store.sweep.items() if _numeric(values) and len(values) > 1]


def transmission_figure(store: Store, parameter: str, table=None):
    """``<T>`` with its standard error against ``parameter``, one line per value of the other swept keys.

    The typical transmission ``exp<ln T>`` is drawn dashed in the same colour. Built on
    :meth:`Store.table <mottle.Store.table>` (pass ``table`` to reuse one).
    """
    table = store.table() if table is None else table
    names = _columns(store)
    column = names[parameter]
    others = [names[path] for path in store.sweep if path != parameter]
    figure, (ax,) = _figure()
    for number, (key, rows) in enumerate(_groups(table, others).items()):
        rows = rows.sort_values(column, kind="stable")
        x = rows[column].to_numpy(dtype=float)
        mean = rows["transmission_mean"].to_numpy()
        stderr = rows["transmission_stderr"].to_numpy()
        label = _group_label(others, key) if number < MAX_LEGEND else None
        drawn = ax.errorbar(x, mean, yerr=stderr, marker="o", capsize=3, label=label)
        typical = np.exp(rows["transmission_log_mean"].to_numpy())
        if np.any(np.isfinite(typical)):
            ax.plot(x, typical, linestyle="--", color=drawn.lines[0].get_color(), alpha=0.7)
    ax.set_xlabel(column)
    ax.set_ylabel("transmission  <T> (solid), exp<ln T> (dashed)")
    ax.set_title(f"{store.title}: transmission against {column}")
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
    """The length ``stop - start`` of disorder entry ``entry`` of a stored point."""
    disorder = point.resolved["system"]["disorder"][entry]
    return float(disorder["stop"]) - float(disorder["start"])


def sample_lengths(store: Store, table, entry: int) -> np.ndarray:
    """``stop - start`` of disorder entry ``entry`` for each row of ``table`` (swept or fixed ends)."""
    names = _columns(store)
    base = store.canonical["system"]["disorder"][entry]
    ends = {}
    for end in ("start", "stop"):
        path = f"system.disorder.{entry}.{end}"
        if path in store.sweep:
            ends[end] = table[names[path]].to_numpy(dtype=float)
        else:
            ends[end] = np.full(len(table), float(base[end]))
    return ends["stop"] - ends["start"]


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


def localization_fits(store: Store, table=None) -> list[LengthSeries]:
    """One fit of ``<ln T>`` against the sample length per value of the other swept keys."""
    found = length_path(store)
    if found is None:
        return []
    entry, paths = found
    table = store.table() if table is None else table
    if not len(table):
        return []
    table = table.assign(_length=sample_lengths(store, table, entry))
    names = _columns(store)
    others = [names[path] for path in store.sweep if path not in paths]
    fits = []
    for key, rows in _groups(table, others).items():
        rows = rows.sort_values("_length", kind="stable")
        fit = fit_series(
            rows["_length"].to_numpy(),
            rows["transmission_log_mean"].to_numpy(),
            rows["transmission_log_stderr"].to_numpy(),
            _group_label(others, key),
        )
        if fit is not None:
            fits.append(fit)
    return fits


def log_transmission_figure(store: Store, fits: list[LengthSeries] | None = None):
    """``<ln T>`` with error bars against the sample length, and the fitted ``a - 2L/xi`` lines."""
    figure, (ax,) = _figure()
    fits = localization_fits(store) if fits is None else fits
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


class _Profiles:
    """A store's profiles point by point, read through :meth:`Store.dataset <mottle.Store.dataset>`
    (lazily: only the points drawn are read)."""

    def __init__(self, store: Store):
        self.store = store
        self.dataset = store.dataset()
        self.indices = store.indices
        sizes = [len(values) for values in store.sweep.values()] if store.grid else [store.total]
        self.dims = [name for name in self.dataset.computed.dims]
        self.sizes = sizes

    def __len__(self) -> int:
        return len(self.indices)

    def _where(self, number: int) -> dict:
        index = int(self.indices[number])
        if not self.dims:
            return {}
        return dict(zip(self.dims, np.unravel_index(index, self.sizes), strict=True))

    def get(self, number: int, name: str) -> np.ndarray:
        """Profile ``name`` (``density``, ``momentum``...) of the ``number``-th finished point."""
        if name in self.dataset:
            return self.dataset[name].isel(self._where(number)).values
        return np.asarray(getattr(self.store.points[number].result, name))

    def axis(self, number: int, name: str) -> np.ndarray:
        """``time``, ``x`` or ``k`` of a point."""
        if name in self.dataset.coords:
            return self.dataset[name].values
        result = self.store.points[number].result
        return np.asarray(result.times if name == "time" else getattr(result, name))


def _panels(times) -> list[int]:
    count = len(times)
    if count <= MAX_PANELS:
        return list(range(count))
    return sorted({round(i * (count - 1) / (MAX_PANELS - 1)) for i in range(MAX_PANELS)})


def _profile_figure(store: Store, quantity: str, log: bool):
    profiles = _Profiles(store)
    axis = "x" if quantity == "density" else "k"
    times = profiles.axis(0, "time")
    panels = _panels(times)
    figure, axes = _figure(len(panels), 1, height=3.0)
    names = short_names(store.sweep)
    shown = _panels_of(len(store.points), MAX_PROFILE_LINES)
    points = [store.points[n] for n in shown]
    colours = _colours(len(points))
    curves = [(profiles.axis(n, axis), profiles.get(n, quantity)) for n in shown]
    for ax, snapshot in zip(axes, panels, strict=True):
        peak = 0.0
        for number, (point, (x, values)) in enumerate(zip(points, curves, strict=True)):
            y = values[snapshot]
            label = point.label(names) if number < MAX_LEGEND else None
            ax.plot(x, y, color=colours[number], linewidth=1, label=label)
            peak = max(peak, float(np.max(y)))
        if log:
            ax.set_yscale("log")
            if peak > 0:
                ax.set_ylim(peak * 1e-14, peak * 3)
        ax.set_title(f"t = {times[snapshot]:.4g}", fontsize="medium")
        ax.set_xlabel("x" if quantity == "density" else "wavenumber k")
        ax.set_ylabel("mean |psi(x)|^2" if quantity == "density" else "mean |phi(k)|^2")
        if quantity == "momentum" and peak > 0:
            # The populated wavenumbers of every point (their grids may differ).
            populated = np.concatenate([k[values[snapshot] > 1e-4 * peak] for k, values in curves])
            low, high = populated.min(), populated.max()
            ax.set_xlim(low - 0.1 * abs(low) - 1e-3, high + 0.1 * abs(high) + 1e-3)
    if 1 < len(points):
        axes[0].legend(fontsize="x-small")
    if len(points) < len(store.points):
        figure.suptitle(f"{len(points)} of {len(store.points)} points shown", fontsize="small")
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
    profiles = _Profiles(store)
    shown = _panels_of(len(points), MAX_DENSITY_PANELS)
    times = profiles.axis(0, "time")
    snapshots = _panels(times)
    figure, axes = _figure(len(shown), 1, height=2.6)
    names = short_names(store.sweep)
    colours = _colours(len(snapshots))
    for ax, number in zip(axes, shown, strict=True):
        point = points[number]
        x, density = profiles.axis(number, "x"), profiles.get(number, "density")
        disorder, layers = _regions(store, point)
        for start, stop in disorder:
            ax.axvspan(start, stop, color="0.85", zorder=0)
        for start, stop in layers:
            ax.axvspan(start, stop, facecolor="none", edgecolor="tab:red", hatch="//", alpha=0.5, zorder=0)
        peak = 0.0
        for colour, snapshot in zip(colours, snapshots, strict=True):
            y = density[snapshot]
            ax.plot(x, y, color=colour, linewidth=1, label=f"t = {times[snapshot]:.4g}")
            peak = max(peak, float(np.max(y)))
        ax.set_yscale("log")
        if peak > 0:
            ax.set_ylim(peak * 1e-14, peak * 3)
        ax.set_xlim(x[0], x[-1])
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
    """Mean momentum distribution ``<|phi(k)|^2>``, one panel per snapshot, one line per point (at most
    :data:`MAX_PROFILE_LINES`, evenly picked)."""
    return _profile_figure(store, "momentum", log=False)


def summary(store: Store, fits: list[LengthSeries] | None = None, table=None) -> str:
    """A plain-text table of every finished point, and the localization-length fits (built on
    :meth:`Store.table <mottle.Store.table>`)."""
    table = store.table() if table is None else table
    names = short_names(store.sweep)
    swept = [names[p] for p in store.sweep]
    headers = [*swept, "runs", "<T>", "±", "exp<ln T>", "<ln T>", "±", "<R>", "s"]
    rows = []
    for get in table.to_dict("records"):
        log_mean = get["transmission_log_mean"]
        rows.append(
            [format_value(_plain(get[name])) for name in swept]
            + [
                str(get["count"]),
                f"{get['transmission_mean']:.5g}",
                f"{get['transmission_stderr']:.2g}",
                f"{math.exp(log_mean) if math.isfinite(log_mean) else math.nan:.4g}",
                f"{log_mean:.4g}",
                f"{get['transmission_log_stderr']:.2g}",
                f"{get['reflection_mean']:.5g}",
                f"{get['wall_time']:.3g}",
            ]
        )
    widths = [max(len(h), *(len(row[i]) for row in rows)) if rows else len(h) for i, h in enumerate(headers)]
    lines = [
        f"{store.title}: {len(table)} of {store.total} points (mottle {store.mottle_version}, {store.path})",
        "  ".join(h.rjust(w) for h, w in zip(headers, widths, strict=True)),
    ]
    lines += ["  ".join(c.rjust(w) for c, w in zip(row, widths, strict=True)) for row in rows]
    missing = store.missing
    if missing:
        shown = ", ".join(str(i + 1) for i in missing[:50]) + (
            f" and {len(missing) - 50} more" if len(missing) > 50 else ""
        )
        lines.append(f"missing points: {shown} (resume with mottle run)")
    fits = localization_fits(store, table) if fits is None else fits
    if fits:
        lines.append("localization length (amplitude), <ln T> = a - 2L/xi:")
        for fit in fits:
            lines.append(
                f"  {fit.label}: xi = {fit.fit.localization_length:.4g} ± {fit.fit.stderr:.2g} "
                f"from {fit.lengths.size} lengths (a = {fit.fit.intercept:.3g})"
            )
    return "\n".join(lines) + "\n"


def _plain(value):
    """A table cell as a plain Python value (numpy scalars to int or float)."""
    return value.item() if isinstance(value, np.generic) else value


@dataclass
class Report:
    """What :func:`report` wrote: ``files`` (PNG figures, summary.txt) and the ``summary_text``."""

    out: Path
    files: list[Path] = field(default_factory=list)
    summary_text: str = ""
    fits: list[LengthSeries] = field(default_factory=list)


def figures(store: Store, table=None, fits: list[LengthSeries] | None = None) -> list[tuple[str, Any]]:
    """The report's figures as ``(file name, Figure)``: each comes from its own ``*_figure`` function,
    drawn when the store holds what it shows."""
    table = store.table() if table is None else table
    names = short_names(store.sweep)
    # No detector (a kicked rotor, a released condensate): no T to draw.
    counted = "transmission_mean" in table and bool(np.isfinite(table["transmission_mean"]).any())
    out: list[tuple[str, Any]] = [
        (f"transmission_vs_{_file_name(names[p])}.png", transmission_figure(store, p, table))
        for p in (swept_numbers(store) if counted else [])
    ]
    fits = localization_fits(store, table) if fits is None else fits
    if fits:
        out.append(("log_transmission_vs_length.png", log_transmission_figure(store, fits)))
    from .report_nd import box_figures, is_box  # 2D/3D studies: images and radial profiles

    if is_box(store):
        out += box_figures(store)
    elif len(_Profiles(store).axis(0, "time")):
        out.append(("density.png", density_figure(store)))
        out.append(("momentum.png", momentum_figure(store)))
    from .report_drive import drive_figures  # driven studies: <p^2>, momentum tails

    out += drive_figures(store)
    return out


def report(store: Store | str, out: str | Path) -> Report:
    """Write the figures of ``store`` as PNG to ``out`` and a summary table ``summary.txt``."""
    if not isinstance(store, Store):
        store = open_store(store)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    done = Report(out)
    table = store.table()
    if not len(table):
        done.summary_text = f"{store.path}: no finished points yet\n"
        return done
    from .report_drive import drive_summary  # driven studies: <p^2> at the first and last snapshot

    done.fits = localization_fits(store, table)
    for name, figure in figures(store, table, done.fits):
        path = out / name
        figure.savefig(path, dpi=110)
        done.files.append(path)
    done.summary_text = summary(store, done.fits, table) + drive_summary(store)
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
    "figures",
    "fit_series",
    "localization_fits",
    "log_transmission_figure",
    "momentum_figure",
    "report",
    "summary",
    "transmission_figure",
]
