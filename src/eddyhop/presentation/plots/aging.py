"""Aging figure: aged MSD ⟨|X(t_a + τ) − X(t_a)|²⟩ against lag τ for each aging time t_a.

The unaged MSD (t_a = 0) is drawn in grey for comparison: in a stationary process every curve
would coincide with it; curves that depend on t_a show aging (common practice in the
anomalous-diffusion literature, e.g. Metzler, Jeon, Cherstvy & Barkai 2014, Phys. Chem. Chem.
Phys. 16, 24128, Sec. 2 on the aged MSD).
"""

from __future__ import annotations

import numpy as np

from ._style import (
    GUIDE,
    caption,
    label,
    new_figure,
    positive,
    provenance_line,
    require,
    select_start,
    start_labels,
    start_name,
    styles,
    tidy_log_axes,
    title,
)

AGING_HINT = ("set [aging] times = [...] in the study and re-run `eddyhop run STUDY.toml`")


def aging_figure(ds, *, start=None):
    """Aged MSD against lag, one curve per aging time; one panel per start region."""
    what = "the aging figure"
    require(ds, ["aged_msd", "aging_time", "lag"], what, AGING_HINT)
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(1, len(starts), width=4.2 * len(starts) + 1.2, height=4.4,
                              sharey=True)
    axes = np.atleast_1d(axes)
    lag = ds["lag"].values
    aging = ds["aging_time"].values
    any_finite = False
    for ax, label_ in zip(axes, starts):
        part = select_start(ds, label_)
        if "msd" in part and "time" in part.coords:
            t = part["time"].values
            y = part["msd"].values
            good = positive(t, y)
            ax.plot(t[good], y[good], color=GUIDE, lw=1.4, ls=(0, (4, 3)),
                    label="$t_a$ = 0 (unaged MSD)")
        for index, (colour, style) in zip(range(aging.size), styles()):
            y = part["aged_msd"].isel(aging_time=index).values
            good = positive(lag, y)
            if not good.any():
                continue
            any_finite = True
            ax.plot(lag[good], y[good], color=colour, ls=style, lw=1.8, marker="o", ms=2.5,
                    label=f"$t_a$ = {aging[index]:g}")
            if "aged_msd_se" in part:
                se = np.nan_to_num(part["aged_msd_se"].isel(aging_time=index).values)
                low = np.maximum(y - 2 * se, y * 1e-3)
                ax.fill_between(lag[good], low[good], (y + 2 * se)[good], color=colour,
                                alpha=0.18, lw=0)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.grid(True, which="major", alpha=0.3)
        ax.set_xlabel(label(ds["lag"]))
        ax.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
        tidy_log_axes(ax)
    if not any_finite:
        from ...errors import InputDataError

        raise InputDataError(f"{what}: aged_msd holds no finite positive values")
    axes[0].set_ylabel(label(ds["aged_msd"], width=40))
    handles, labels = axes[0].get_legend_handles_labels()
    figure.legend(handles, labels, loc="outside right upper", fontsize=7.5,
                  frameon=False)  # beside the panels, never over the data
    figure.suptitle(title(f"Aging — {ds.attrs.get('title', '')}", 60 * len(starts)),
                    fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
