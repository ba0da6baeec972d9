"""The figures of driven studies (time-dependent terms, a twisted boundary): ``<p^2>`` against time
or kicks on log-log axes, and the mean momentum distribution at the last snapshot on a log scale.

:func:`drive_figures` and :func:`drive_summary` are what :func:`mottle.cli.report.report` adds for
such a study; each figure's lines carry exactly the stored numbers (``EnsembleResult.momentum_squared``
and ``EnsembleResult.momentum``), so a test can read them back.
"""

from __future__ import annotations

import numpy as np

from ..studies.study import short_names

TIME_DEPENDENT = ("kicked", "modulated", "switched")
MAX_LEGEND = 10


def is_driven(resolved: dict) -> bool:
    """Whether a point's system has a time-dependent term or a (fixed or drawn) quasimomentum."""
    system = resolved.get("system", {})
    if system.get("quasimomentum") not in (None, 0.0):
        return True
    return any(entry.get("kind") in TIME_DEPENDENT for entry in system.get("potential", []))


def kick_period(store) -> float | None:
    """The kicks' period when every point is kicked by one term with the same period from t = 0
    (``<p^2>`` is then drawn against kicks, t / period), else None (drawn against t)."""
    periods = set()
    for point in store.points:
        kicks = [e for e in point.resolved["system"].get("potential", []) if e.get("kind") == "kicked"]
        if len(kicks) != 1 or float(kicks[0].get("start", 0.0)) != 0.0:
            return None
        periods.add(float(kicks[0]["period"]))
    return periods.pop() if len(periods) == 1 else None


def _figure(height: float = 3.8):
    from matplotlib.figure import Figure

    figure = Figure(figsize=(6.4, height), layout="constrained")
    return figure, figure.subplots()


def _colours(count: int):
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(0.85 * i / max(count - 1, 1)) for i in range(count)]


def momentum_squared_figure(store):
    """``<p^2>`` (mean over realizations, its standard error shaded) at each snapshot against the
    snapshot's time, or its number of kicks (:func:`kick_period`), log-log: one line per point."""
    figure, ax = _figure()
    names = short_names(store.sweep)
    period = kick_period(store)
    points = store.points
    for number, (point, colour) in enumerate(zip(points, _colours(len(points)), strict=True)):
        result = point.result
        stats = result.momentum_squared
        if not stats:
            continue
        x = np.asarray(result.times, dtype=float) / (period or 1.0)
        mean = np.array([s.mean for s in stats])
        stderr = np.array([s.stderr for s in stats])
        label = (point.label(names) if store.sweep else store.title) if number < MAX_LEGEND else None
        ax.plot(x, mean, color=colour, linewidth=1.2, label=label)
        if np.all(np.isfinite(stderr)):
            ax.fill_between(x, np.maximum(mean - stderr, mean * 1e-3), mean + stderr, color=colour, alpha=0.2)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("kicks  t / period" if period else "time t")
    ax.set_ylabel("<p^2>")
    ax.set_title(f"{store.title}: <p^2> against {'kicks' if period else 'time'}")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize="small")
    return figure


def momentum_distribution_figure(store):
    """The mean momentum distribution ``<|phi|^2>`` at the last snapshot against ``p = hbar k``, on
    a log scale (exponential tails are straight lines): one line per point."""
    figure, ax = _figure()
    names = short_names(store.sweep)
    points = store.points
    peak, reach = 0.0, 0.0
    last = None
    for number, (point, colour) in enumerate(zip(points, _colours(len(points)), strict=True)):
        result = point.result
        if not len(result.times):
            continue
        hbar = float(point.resolved["system"].get("hbar", 1.0))
        y = np.asarray(result.momentum[-1], dtype=float)
        p = hbar * np.asarray(result.k, dtype=float)
        label = (point.label(names) if store.sweep else store.title) if number < MAX_LEGEND else None
        ax.plot(p, y, color=colour, linewidth=1, label=label)
        peak = max(peak, float(np.max(y)))
        populated = np.flatnonzero(y > 1e-14 * max(float(np.max(y)), 1e-300))
        if populated.size:
            reach = max(reach, float(np.max(np.abs(p[populated]))))
        last = result.times[-1]
    ax.set_yscale("log")
    if peak > 0:
        ax.set_ylim(peak * 1e-15, peak * 3)
    if reach > 0:
        ax.set_xlim(-1.05 * reach, 1.05 * reach)
    ax.set_xlabel("momentum p = hbar k")
    ax.set_ylabel("mean |phi(k)|^2")
    when = "" if last is None else f" at t = {last:.4g}"
    ax.set_title(f"{store.title}: mean momentum distribution{when}", fontsize="medium")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize="small")
    return figure


def _driven_with_snapshots(store) -> bool:
    points = store.points
    return bool(points) and is_driven(points[0].resolved) and len(points[0].result.times) > 0


def drive_figures(store) -> list:
    """``[(file name, figure)]`` for a driven study with snapshots (none for any other study)."""
    if not _driven_with_snapshots(store):
        return []
    return [
        ("momentum_squared.png", momentum_squared_figure(store)),
        ("momentum_distribution.png", momentum_distribution_figure(store)),
    ]


def drive_summary(store) -> str:
    """``<p^2>`` at the first and the last snapshot of each point (empty for an undriven study)."""
    if not _driven_with_snapshots(store):
        return ""
    names = short_names(store.sweep)
    lines = ["<p^2> (mean ± standard error over realizations) at the first and the last snapshot:"]
    for point in store.points:
        result = point.result
        stats = result.momentum_squared
        first, last = stats[0], stats[-1]
        lines.append(
            f"  {point.label(names) if store.sweep else store.title}: "
            f"t = {result.times[0]:.4g}: {first.mean:.5g} ± {first.stderr:.2g}, "
            f"t = {result.times[-1]:.4g}: {last.mean:.5g} ± {last.stderr:.2g}"
        )
    return "\n".join(lines) + "\n"


__all__ = [
    "drive_figures",
    "drive_summary",
    "is_driven",
    "kick_period",
    "momentum_distribution_figure",
    "momentum_squared_figure",
]
