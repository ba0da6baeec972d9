"""The figures of studies on 2D and 3D grids: images of the mean density and of the mean momentum
distribution (one row per point, at most :data:`MAX_POINTS`, one column per snapshot, at most
:data:`MAX_PANELS`; a 3D grid is shown summed over axis 2), and the angle-averaged momentum
distribution at the last snapshot, one line per point.

:func:`box_figures` is what :func:`mottle.cli.report.figures` draws for such a study instead of the
1D line profiles. Every image holds exactly the stored numbers (``EnsembleResult.density`` and
``.momentum``, summed over axis 2 in 3D), so a test can read them back.
"""

from __future__ import annotations

import numpy as np

from ..dynamics.nd import radial_momentum
from ..studies.study import short_names

MAX_POINTS = 3
MAX_PANELS = 4
MAX_LEGEND = 10


def is_box(store) -> bool:
    """Whether the store's points live on a 2D or 3D grid (their axes are stored one by one)."""
    return bool(store.points) and isinstance(store.points[0].result.x, tuple)


def _spread(count: int, most: int) -> list[int]:
    if count <= most:
        return list(range(count))
    return sorted({round(i * (count - 1) / (most - 1)) for i in range(most)})


def _plane(values: np.ndarray) -> np.ndarray:
    """A 2D image of one snapshot's profile: itself in 2D, summed over axis 2 in 3D."""
    return values if values.ndim == 2 else values.sum(axis=2)


def _images(store, quantity: str):
    from matplotlib.figure import Figure

    points = [store.points[n] for n in _spread(len(store.points), MAX_POINTS)]
    names = short_names(store.sweep)
    times = points[0].result.times
    panels = _spread(len(times), MAX_PANELS)
    figure = Figure(figsize=(3.0 * len(panels) + 0.8, 2.8 * len(points)), layout="constrained")
    axes = figure.subplots(len(points), len(panels), squeeze=False)
    for row, point in zip(axes, points, strict=True):
        result = point.result
        first, second = (result.x if quantity == "density" else result.k)[:2]
        profile = result.density if quantity == "density" else result.momentum
        for ax, snapshot in zip(row, panels, strict=True):
            image = _plane(profile[snapshot])
            extent = (first[0], first[-1], second[0], second[-1])
            shown = ax.imshow(image.T, origin="lower", extent=extent, aspect="auto", cmap="viridis")
            ax.set_title(f"{point.label(names)}  t = {times[snapshot]:.4g}", fontsize="small")
            ax.set_xlabel("x_0" if quantity == "density" else "k_0")
            ax.set_ylabel("x_1" if quantity == "density" else "k_1")
            figure.colorbar(shown, ax=ax, shrink=0.8)
            if quantity == "momentum":  # the populated wavenumbers only
                populated = np.argwhere(image > 1e-4 * image.max()) if image.max() > 0 else None
                if populated is not None and populated.size:
                    low, high = populated.min(axis=0), populated.max(axis=0)
                    pad = 3
                    ax.set_xlim(first[max(low[0] - pad, 0)], first[min(high[0] + pad, first.size - 1)])
                    ax.set_ylim(second[max(low[1] - pad, 0)], second[min(high[1] + pad, second.size - 1)])
    what = "mean |psi(x)|^2" if quantity == "density" else "mean |phi(k)|^2"
    summed = " (summed over axis 2)" if np.ndim(points[0].result.density) == 4 else ""
    figure.suptitle(f"{what}{summed}; {len(points)} of {len(store.points)} points", fontsize="small")
    return figure


def density_image_figure(store):
    """Images of the mean density ``<|psi(x)|^2>`` in the plane of axes 0 and 1."""
    return _images(store, "density")


def momentum_image_figure(store):
    """Images of the mean momentum distribution ``<|phi(k)|^2>`` in the plane of axes 0 and 1."""
    return _images(store, "momentum")


def radial_momentum_figure(store):
    """The angle-averaged mean momentum distribution ``n(|k|)`` at the last snapshot, per point."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(6.4, 3.8), layout="constrained")
    ax = figure.subplots()
    names = short_names(store.sweep)
    shown = _spread(len(store.points), 12)
    for number, index in enumerate(shown):
        point = store.points[index]
        q, n = radial_momentum(point.result.k, point.result.momentum)
        ax.plot(q, n[-1], linewidth=1, label=point.label(names) if number < MAX_LEGEND else None)
    ax.set_xlabel("|k|")
    ax.set_ylabel("angle-averaged mean |phi(k)|^2")
    ax.set_title(f"t = {store.points[0].result.times[-1]:.4g}", fontsize="medium")
    if len(shown) > 1:
        ax.legend(fontsize="x-small")
    return figure


def box_figures(store) -> list[tuple[str, object]]:
    """The figures of a 2D/3D study (empty for a 1D one or one without snapshots)."""
    if not is_box(store) or not len(store.points[0].result.times):
        return []
    return [
        ("density.png", density_image_figure(store)),
        ("momentum.png", momentum_image_figure(store)),
        ("radial_momentum.png", radial_momentum_figure(store)),
    ]
