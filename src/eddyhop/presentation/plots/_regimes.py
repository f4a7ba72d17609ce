"""Regime intervals and crossover times of an analysed Dataset, drawn on a time axis.

One start region: full-height bands (:func:`shade`).  Several: each start's own regimes as a
thin strip along the bottom of the axes, edged in that start's curve colour, with its
crossover times as ticks in the strip (:func:`strips`), so no start borrows another's regimes.

Reads ``regime_label``, ``regime_start``, ``regime_end`` (dimension ``regime``, padded with ""
and NaN when start regions have different numbers of regimes) and, when present,
``crossover_time`` (dimension ``crossover``), as written by ``eddyhop analyse``.
"""

from __future__ import annotations

import math

import numpy as np

from ...analysis.regimes import LABELS

# One tint per regime class in the order of LABELS (the one spelling of the labels): the
# diverging ColorBrewer PuOr scheme (Brewer, colorbrewer2.org; 11-class set, inner entries)
# ordered by α — purples below diffusive, near-white diffusive, oranges above — and a mid grey
# for undetermined.  Drawn opaque (SHADE_ALPHA) behind the curves.  Checked in
# tests/test_plots_colours.py: every pair keeps a CIEDE2000 difference ≥ 5 under normal vision
# and simulated protanopia, deuteranopia and tritanopia (Machado, Oliveira & Fernandes 2009;
# eddyhop.plots.colour_check); measured minimum 6.2 (tritanopia, bounded vs undetermined).
TINTS = dict(zip(LABELS, ("#b2abd2", "#d8daeb", "#f7f7f7", "#fee0b6", "#fdb863", "#e08214",
                          "#a0a0a0"), strict=True))
SHADE_ALPHA = 1.0
REGIME_VARIABLES = ("regime_label", "regime_start", "regime_end")


def has_regimes(ds) -> bool:
    return all(n in ds.variables for n in REGIME_VARIABLES)


def regimes_of(ds, start=None):
    """List of (label, first time, last time) of one start region's regimes, in time order."""
    if not has_regimes(ds):
        return []
    part = ds.sel(start=start) if start is not None and "start" in ds["regime_label"].dims \
        else ds
    labels = np.atleast_1d(part["regime_label"].values)
    first = np.atleast_1d(part["regime_start"].values).astype(float)
    last = np.atleast_1d(part["regime_end"].values).astype(float)
    if labels.ndim > 1:  # several starts but none chosen: the first one
        labels, first, last = labels[0], first[0], last[0]
    return [(str(a), float(b), float(c)) for a, b, c in zip(labels, first, last)
            if str(a) and math.isfinite(b) and math.isfinite(c)]


def crossovers_of(ds, start=None):
    if "crossover_time" not in ds.variables:
        return np.zeros(0)
    part = ds.sel(start=start) if start is not None and "start" in ds["crossover_time"].dims \
        else ds
    values = np.atleast_1d(part["crossover_time"].values).astype(float)
    if values.ndim > 1:
        values = values[0]
    return values[np.isfinite(values) & (values > 0)]


def shade(ax, ds, start=None):
    """Shade one start region's regimes as vertical bands and mark its crossover times with
    dotted lines.  Returns the band artists (their labels name the regime classes, so a legend
    built from them lists each class once)."""
    regimes = regimes_of(ds, start)
    bands = []
    seen = set()
    for index, (name, first, last) in enumerate(regimes):
        left = first if index == 0 else math.sqrt(regimes[index - 1][2] * first)
        right = last if index == len(regimes) - 1 else math.sqrt(last * regimes[index + 1][1])
        band = ax.axvspan(left, right, facecolor=TINTS.get(name, "#eeeeee"),
                          alpha=SHADE_ALPHA, edgecolor="#bdbdbd", lw=0.4,
                          zorder=0, label=name.replace("_", "-") if name not in seen else None)
        seen.add(name)
        band.set_gid(f"regime_{index}_{name}")
        bands.append(band)
    crossings = crossovers_of(ds, start)
    for index, value in enumerate(crossings):
        line = ax.axvline(value, color="#444444", lw=0.8, ls=(0, (1, 2)), zorder=1,
                          label="crossover time" if index == 0 else None)
        line.set_gid("crossover")
    return bands


STRIP_HEIGHT = 0.035  # axes fraction per start
STRIP_GAP = 0.01


def strips_top(count: int) -> float:
    """Axes fraction just above ``count`` strips (where a legend may start)."""
    return STRIP_GAP + count * (STRIP_HEIGHT + STRIP_GAP)


def strips(ax, ds, starts, colours):
    """Each start's regimes as a strip at the bottom of ``ax`` (one strip per start, in the
    order of ``starts``, edged in the matching colour of ``colours``) and its crossover times
    as ticks inside its strip.  Returns the band artists (one legend entry per class)."""
    bands = []
    seen = set()
    for row, (start, colour) in enumerate(zip(starts, colours)):
        bottom = STRIP_GAP + row * (STRIP_HEIGHT + STRIP_GAP)
        top = bottom + STRIP_HEIGHT
        regimes = regimes_of(ds, start)
        for index, (name, first, last) in enumerate(regimes):
            left = first if index == 0 else math.sqrt(regimes[index - 1][2] * first)
            right = last if index == len(regimes) - 1 else math.sqrt(
                last * regimes[index + 1][1])
            band = ax.axvspan(left, right, ymin=bottom, ymax=top,
                              facecolor=TINTS.get(name, "#eeeeee"), edgecolor=colour, lw=0.8,
                              zorder=2, label=name.replace("_", "-") if name not in seen
                              else None)
            seen.add(name)
            band.set_gid(f"regime_{start}_{index}_{name}")
            bands.append(band)
        if start is not None:
            ax.text(0.004, 0.5 * (bottom + top), str(start), transform=ax.transAxes,
                    fontsize=6, color=colour, fontweight="bold", va="center", ha="left",
                    zorder=4, gid=f"regime_strip_label_{start}")
        for index, value in enumerate(crossovers_of(ds, start)):
            line = ax.axvline(value, ymin=bottom, ymax=top, color="#444444", lw=1.0,
                              zorder=3, label="crossover time" if row == 0 and index == 0
                              else None)
            line.set_gid("crossover")
    return bands
