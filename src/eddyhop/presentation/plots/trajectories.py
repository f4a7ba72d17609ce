"""Tracked trajectories drawn over stream-function contours, separatrices and stagnation points.

Trajectories are stored unwrapped (``track_x``, ``track_y`` in the plane, never folded), so the
figure draws them in the unwrapped plane over ψ tiled across the region they visit; each period
cell of the flow is the same picture.  Separatrices (ψ on ``family.separatrix_levels``) are drawn
in a distinct colour and weight; elliptic points (eddy centres) as dots, hyperbolic points as
crosses.  For a time-dependent flow ψ is drawn at t = 0 (said in the title).
"""

from __future__ import annotations

import math

import numpy as np

from ._flow import flow_of
from ._style import (
    CONTOUR_CMAP,
    GUIDE,
    SEPARATRIX,
    caption,
    label,
    new_figure,
    provenance_line,
    require,
    require_finite,
    select_start,
    start_labels,
    start_name,
    styles,
)

TRACK_HINT = ("set run.tracked = N (> 0) in the study and re-run `eddyhop run STUDY.toml`")
MAX_GRID = 500  # ψ samples per axis


def _extent(x, y, cell):
    xs, ys = x[np.isfinite(x)], y[np.isfinite(y)]
    margin = 0.35 * cell
    x0, x1 = xs.min() - margin, xs.max() + margin
    y0, y1 = ys.min() - margin, ys.max() + margin
    # at least about one eddy in each direction, so the picture shows the flow's structure
    if x1 - x0 < 1.2 * cell:
        middle = 0.5 * (x0 + x1)
        x0, x1 = middle - 0.6 * cell, middle + 0.6 * cell
    if y1 - y0 < 1.2 * cell:
        middle = 0.5 * (y0 + y1)
        y0, y1 = middle - 0.6 * cell, middle + 0.6 * cell
    return x0, x1, y0, y1


def _tiled_points(points, period, extent):
    """Copies of one period cell's points ``(n, 2)`` that fall inside ``extent``."""
    if points.size == 0:
        return points
    x0, x1, y0, y1 = extent
    lx, ly = period
    shifts_x = [0.0] if lx is None else [i * lx for i in range(math.floor((x0 - points[:, 0]
                                                                             .max()) / lx),
                                                                  math.ceil(x1 / lx) + 1)]
    shifts_y = [0.0] if ly is None else [j * ly for j in range(math.floor((y0 - points[:, 1]
                                                                             .max()) / ly),
                                                                  math.ceil(y1 / ly) + 1)]
    tiled = np.concatenate([points + np.array([sx, sy]) for sx in shifts_x for sy in shifts_y])
    inside = ((tiled[:, 0] >= x0) & (tiled[:, 0] <= x1)
              & (tiled[:, 1] >= y0) & (tiled[:, 1] <= y1))
    return tiled[inside]


def draw_flow(ax, family, params, extent, *, levels: int = 14, t: float = 0.0):
    """ψ contours, separatrices and stagnation points of ``family`` over ``extent``.

    Returns the ContourSet of the separatrices (``None`` if the family has none).
    """
    from ...flows.compiled import evaluate_psi

    x0, x1, y0, y1 = extent
    cell = family.eddy_size(params)
    per_cell = 40
    nx = int(min(MAX_GRID, max(60, per_cell * (x1 - x0) / cell)))
    ny = int(min(MAX_GRID, max(60, per_cell * (y1 - y0) / cell)))
    gx, gy = np.meshgrid(np.linspace(x0, x1, nx), np.linspace(y0, y1, ny))
    psi = evaluate_psi(family, params, gx, gy, t)
    separatrix_levels = sorted(set(family.separatrix_levels(params)))
    low, high = float(psi.min()), float(psi.max())
    if high > low:
        # keep the spacing of ``levels`` per period-cell range of ψ, so a flow whose ψ has a
        # linear (drift) part still shows its eddies over a wide extent
        cell_low, cell_high = family.psi_range(params)
        span = cell_high - cell_low
        count = levels if span <= 0 else int(np.clip(levels * (high - low) / span, levels, 40))
        contour_levels = np.linspace(low, high, count + 2)[1:-1]
        ax.contour(gx, gy, psi, levels=contour_levels, cmap=CONTOUR_CMAP,
                   linewidths=0.6 if count == levels else 0.45, alpha=0.8, zorder=1)
    separatrices = None
    drawable = [v for v in separatrix_levels if low < v < high]
    if drawable:
        cells_across = max(x1 - x0, y1 - y0) / cell
        separatrices = ax.contour(gx, gy, psi, levels=drawable, colors=SEPARATRIX,
                                  linewidths=1.6 if cells_across <= 8 else 0.9,
                                  linestyles="-", zorder=2)
        separatrices.set_gid("separatrix")
    period = family.period(params)
    points = family.stagnation_points(params)
    elliptic = _tiled_points(points["elliptic"], period, extent)
    hyperbolic = _tiled_points(points["hyperbolic"], period, extent)
    if elliptic.size:
        ax.plot(elliptic[:, 0], elliptic[:, 1], ls="none", marker="o", ms=3.5, color=GUIDE,
                zorder=3, gid="elliptic_points")
    if hyperbolic.size:
        ax.plot(hyperbolic[:, 0], hyperbolic[:, 1], ls="none", marker="x", ms=5, mew=1.3,
                color=SEPARATRIX, zorder=3, gid="hyperbolic_points")
    return separatrices


def trajectories_figure(ds, *, start=None, max_tracks: int = 8):
    """Up to ``max_tracks`` tracked trajectories per start region over the flow's ψ contours.

    Circles mark release points, squares final positions.  One panel per start region.
    """
    what = "the trajectory figure"
    require(ds, ["track_x", "track_y"], what, TRACK_HINT)
    family, params = flow_of(ds)
    cell = family.eddy_size(params)
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(1, len(starts), width=4.6 * len(starts) + 0.8, height=5.0)
    axes = np.atleast_1d(axes)
    steady = family.time_period(params) is None and family.steady
    any_separatrix = False
    for ax, label_ in zip(axes, starts):
        part = select_start(ds, label_)
        x = require_finite(part["track_x"].values, "track_x", what)[:max_tracks]
        y = require_finite(part["track_y"].values, "track_y", what)[:max_tracks]
        extent = _extent(x, y, cell)
        any_separatrix = draw_flow(ax, family, params, extent) is not None or any_separatrix
        for row, (colour, _style) in zip(range(x.shape[0]), styles()):
            good = np.isfinite(x[row]) & np.isfinite(y[row])
            ax.plot(x[row, good], y[row, good], color=colour, lw=0.9, alpha=0.95, zorder=4,
                    gid=f"track_{row}")
            ax.plot(x[row, good][0], y[row, good][0], marker="o", ms=5, color=colour,
                    mec="white", zorder=5)
            ax.plot(x[row, good][-1], y[row, good][-1], marker="s", ms=5, color=colour,
                    mec="white", zorder=5)
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        width, height = extent[1] - extent[0], extent[3] - extent[2]
        if max(width, height) / min(width, height) < 4:
            ax.set_aspect("equal")
        ax.set_xlabel(label(ds["track_x"]))
        ax.set_ylabel(label(ds["track_y"]))
        ax.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
    when = "" if steady else " (ψ at t = 0)"
    t_last = float(ds["track_time"].values[-1]) if "track_time" in ds.coords else float("nan")
    figure.suptitle(f"Tracked tracers over ψ contours{when}, 0 ≤ t ≤ {t_last:g}"
                    + ("; separatrices in vermillion" if any_separatrix else ""), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
