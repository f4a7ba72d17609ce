"""MSD figures: log-log MSD with regimes and reference slopes, start regions compared, α(t).

Conventions: ``msd = <|X(t) − X(0)|²>`` of the unwrapped displacement (``eddyhop.results.dataset``);
the apparent diffusivity ``(var_x + var_y)/(4 t)`` removes any mean drift, and tends to the
isotropic part of D_eff at long times (for a 2-D diffusion ⟨|ΔX|²⟩ = 4 D t; common practice).
"""

from __future__ import annotations

import numpy as np

from . import _regimes
from ._style import (
    GUIDE,
    caption,
    label,
    new_figure,
    positive,
    pretty_units,
    provenance_line,
    require,
    require_finite,
    select_start,
    start_labels,
    start_name,
    styles,
    tidy_log_axes,
    title,
)

RUN_HINT = "make it with `eddyhop run STUDY.toml` (or eddyhop.simulate)"


def _regime_note(ax, ds, start, where=None, starts=None):
    """Shade the regimes of ``start`` (or, given several ``starts``, draw each start's own
    regimes as a strip); returns the legend entries naming the classes (a heading first)."""
    from matplotlib.lines import Line2D

    if starts is not None and len(starts) > 1:
        colours = [colour for _, (colour, _) in zip(starts, styles())]
        bands = _regimes.strips(ax, ds, starts, colours)
        start = None
    else:
        bands = _regimes.shade(ax, ds, start)
    if not bands:
        return []
    handles = [b for b in bands if b.get_label() and not b.get_label().startswith("_")]
    handles += [line for line in ax.get_lines() if line.get_gid() == "crossover"][:1]
    if "start" not in ds.dims:
        heading = "regimes"
    elif start is None:
        heading = "regimes (a strip per start)"
    else:
        heading = f"regimes (start {start_name(ds, start)})"
    return [Line2D([], [], ls="none", label=heading), *handles]


def _legend(figure, handles):
    """One legend right of the axes (start curves, then regime classes): never over data."""
    from matplotlib.lines import Line2D

    legend = figure.legend(handles=[Line2D([], [], ls="none", label="start region"), *handles],
                           loc="outside right upper", fontsize=7.5, frameon=False,
                           handlelength=2.2)
    for text in legend.get_texts():  # headings in bold
        if text.get_text() == "start region" or text.get_text().startswith("regimes"):
            text.set_fontweight("bold")
    return legend


def _guide(ax, t, anchor_t, anchor_y, exponent, text, left=True):
    """Dashed reference power law y ∝ t^exponent through (anchor_t, anchor_y).

    ``left``: label left of the line's middle (the early guide, which rises above the
    curves); otherwise under the line's left end, running right (the late guide, drawn under
    every curve: the rising line moves away from the text)."""
    y = anchor_y * (t / anchor_t) ** exponent
    (line,) = ax.plot(t, y, color=GUIDE, lw=1.0, ls=(0, (4, 3)), zorder=1)
    line.set_gid(f"guide_slope_{exponent:g}")
    at = len(t) // 2 if left else 0
    ax.annotate(text, (t[at], y[at]), textcoords="offset points",
                xytext=(-6, 0) if left else (2, -4), fontsize=8, color=GUIDE,
                ha="right" if left else "left", va="center" if left else "top")
    return line


def msd_figure(ds, *, variable: str = "msd", start=None, guides: bool = True,
               regimes: bool = True, band: bool = True):
    """MSD against time on log-log axes, one curve per start region.

    Shading ±2 standard errors (when ``<variable>_se`` exists), the analysed regime intervals
    (when ``eddyhop analyse`` has run) and dashed reference slopes t² (ballistic) and t¹
    (diffusive) anchored at the first and last points.  ``start`` restricts to one region.
    """
    what = f"the {variable} figure"
    require(ds, [variable, "time"], what, RUN_HINT)
    figure, ax = new_figure(width=7.6)
    t = ds["time"].values
    starts = [start] if start is not None else start_labels(ds)
    drawn = []
    handles = []
    for label_, (colour, style) in zip(starts, styles()):
        part = select_start(ds, label_)
        y = require_finite(part[variable].values, variable, what)
        good = positive(t, y)
        name = start_name(ds, label_)
        handles += ax.plot(t[good], y[good], color=colour, ls=style, lw=1.8, label=name,
                           gid=f"data_{name}")
        se_name = f"{variable}_se"
        if band and se_name in part:
            se = np.nan_to_num(part[se_name].values)
            low = np.maximum(y - 2 * se, y * 1e-3)
            ax.fill_between(t[good], low[good], (y + 2 * se)[good], color=colour, alpha=0.18,
                            lw=0)
        drawn.append((t[good], y[good]))
    regime_handles = _regime_note(ax, ds, start if start is not None else starts[0],
                                  starts=starts) if regimes else []
    if guides and drawn:
        tt, yy = drawn[0]
        early = tt[: max(3, len(tt) // 4)]
        late = tt[-max(3, len(tt) // 4):]
        _guide(ax, early, tt[0], yy[0], 2.0, "∝ t²  ballistic", left=True)
        # a factor 3 below the lowest curve's last point, so that neither the line nor its
        # label (under the line) meets a curve that steepens late
        lowest = min(y_[-1] for _, y_ in drawn)
        _guide(ax, late, tt[-1], lowest / 3.0, 1.0, "∝ t  diffusive", left=False)
    ax.set_xscale("log")
    ax.set_yscale("log")
    tidy_log_axes(ax)
    ax.set_xlabel(label(ds["time"]))
    ax.set_ylabel(label(ds[variable]))
    ax.grid(True, which="major", alpha=0.3)
    _legend(figure, handles + regime_handles)
    ax.set_title(title(ds.attrs.get("title", "")), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def starts_figure(ds):
    """Start regions compared: MSD (top) and apparent diffusivity over κ (bottom).

    The lower panel shows ``(var_x + var_y) / (4 κ t)``: 1 for pure molecular diffusion, and
    the ratio D_eff/κ once the run reaches its long-time effective-diffusion regime.
    """
    what = "the start-region comparison"
    require(ds, ["msd", "var_x", "var_y", "time"], what, RUN_HINT)
    kappa = float(ds.attrs.get("kappa", np.nan))
    figure, (top, bottom) = new_figure(2, 1, height=6.4, sharex=True)
    t = ds["time"].values
    for label_, (colour, style) in zip(start_labels(ds), styles()):
        part = select_start(ds, label_)
        name = start_name(ds, label_)
        y = require_finite(part["msd"].values, "msd", what)
        good = positive(t, y)
        top.plot(t[good], y[good], color=colour, ls=style, lw=1.8, label=name)
        spread = part["var_x"].values + part["var_y"].values
        apparent = spread / (4.0 * t)
        if kappa > 0:
            apparent = apparent / kappa
        ok = positive(t, apparent)
        bottom.plot(t[ok], apparent[ok], color=colour, ls=style, lw=1.8, label=name)
    for ax in (top, bottom):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.grid(True, which="major", alpha=0.3)
    from matplotlib.ticker import LogLocator, NullFormatter, ScalarFormatter

    bottom.yaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    bottom.yaxis.set_major_formatter(ScalarFormatter())
    bottom.yaxis.set_minor_formatter(NullFormatter())
    if kappa > 0:
        bottom.axhline(1.0, color=GUIDE, lw=1.0, ls=(0, (4, 3)))
        bottom.annotate("molecular diffusion alone", (t[-1], 1.0), textcoords="offset points",
                        xytext=(-2, 4), fontsize=8, color=GUIDE, ha="right")
        bottom.set_ylabel("apparent diffusivity over κ\n"
                          r"$(\sigma_x^2+\sigma_y^2)/(4\kappa t)$ (dimensionless)")
    else:
        bottom.set_ylabel(r"apparent diffusivity $(\sigma_x^2+\sigma_y^2)/(4t)$"
                          f"{_units_over_time(ds)}")
    top.set_ylabel(label(ds["msd"], width=34))
    bottom.set_xlabel(label(ds["time"]))
    top.legend(title="start region", fontsize=8, title_fontsize=8, loc="upper left",
               bbox_to_anchor=(1.01, 1.0), frameon=False)
    tidy_log_axes(top)  # the shared time axis too; the lower y axis keeps 1-2-5 labels
    top.set_title(title(f"Start regions compared — {ds.attrs.get('title', '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def _units_over_time(ds):
    length = ds["msd"].attrs.get("units", "1")
    time = ds["time"].attrs.get("units", "1")
    if length == "1" and time == "1":
        return " (model length units² per model time unit)"
    return f" [{pretty_units(length)} / {pretty_units(time)}]"


EXPONENT_NAMES = ("alpha", "local_exponent")


def exponent_variable(ds) -> str:
    """Name of the analysed local-exponent variable α(t) = d log MSD / d log t."""
    for name in EXPONENT_NAMES:
        if name in ds.variables:
            return name
    raise _missing_analysis(ds, "the local-exponent figure", "alpha (the local exponent)")


def _missing_analysis(ds, what, name):
    from ...errors import InputDataError

    return InputDataError(f"{what} needs {name}, which this Dataset lacks; run "
                          f"`eddyhop analyse RESULT.nc` (or eddyhop.analysis.analyse) first")


def exponent_figure(ds, *, start=None, regimes: bool = True):
    """Local exponent α(t) = d log MSD / d log t on a log time axis, one curve per start.

    Horizontal guides at α = 2 (ballistic), 1 (diffusive) and ½ (the intermediate regime of
    tracer spreading along the separatrix network of cellular flows; Young, Pumir & Pomeau 1989,
    "Anomalous diffusion of tracer in convection rolls", Phys. Fluids A 1, 462 — recalled from
    memory).  The band is ±2 jackknife standard errors (``alpha_se``) when present.
    """
    what = "the local-exponent figure"
    name = exponent_variable(ds)
    time_name = ds[name].dims[-1]
    figure, ax = new_figure(width=7.6)
    t = ds[time_name].values
    starts = [start] if start is not None else start_labels(ds)
    handles = []
    extremes = []
    for label_, (colour, style) in zip(starts, styles()):
        part = select_start(ds, label_)
        alpha = require_finite(part[name].values, name, what)
        good = np.isfinite(alpha) & (t > 0)
        extremes.append(alpha[good])
        handles += ax.plot(t[good], alpha[good], color=colour, ls=style, lw=1.8,
                           label=start_name(ds, label_), gid=f"data_{start_name(ds, label_)}")
        se_name = f"{name}_se"
        if se_name in part:
            se = np.nan_to_num(part[se_name].values)
            ax.fill_between(t[good], (alpha - 2 * se)[good], (alpha + 2 * se)[good],
                            color=colour, alpha=0.18, lw=0)
            extremes += [(alpha - 2 * se)[good], (alpha + 2 * se)[good]]
    from matplotlib.transforms import blended_transform_factory

    edge = blended_transform_factory(ax.transAxes, ax.transData)
    for level, text in ((2.0, "ballistic"), (1.0, "diffusive"), (0.5, r"$\alpha = 1/2$")):
        ax.axhline(level, color=GUIDE, lw=0.9, ls=(0, (4, 3)), zorder=1)
        # named in the margin right of the axes, never on a curve
        ax.text(1.01, level, text, transform=edge, fontsize=7.5, color=GUIDE, va="center",
                ha="left", gid=f"guide_label_{level:g}")
    regime_handles = _regime_note(ax, ds, start if start is not None else starts[0],
                                  starts=starts) if regimes else []
    ax.set_xscale("log")
    tidy_log_axes(ax)
    # the axis holds every value of α and its ±2 SE band (α may dip below 0 when the spread
    # shrinks, e.g. in a bounded or oscillating flow)
    top = max([2.4] + [float(np.nanmax(y)) + 0.15 for y in extremes])
    bottom = min([-0.1] + [float(np.nanmin(y)) - 0.1 for y in extremes])
    ax.set_ylim(bottom, top)
    ax.set_xlabel(label(ds[time_name]))
    ax.set_ylabel(label(ds[name], fallback="local exponent d log MSD / d log t"))
    ax.grid(True, which="major", alpha=0.3)
    _legend(figure, handles + regime_handles)
    ax.set_title(title(f"Local exponent — {ds.attrs.get('title', '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
