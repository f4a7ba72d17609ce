"""The comparison figure: several results overlaid on the same axes, with z(t) beneath.

Input is the Dataset of :func:`eddyhop.presentation.comparison.compare` (a ``series`` dimension on a
common ``time``).  Four panels sharing the time axis: MSD (log-log, ±2 SE bands), the
spread var_x + var_y about the mean, the local exponent α(t), and z(t) of the MSD against
the baseline (the first series) with the ±2 and ±3 SE lines.  A noise-free reference is
drawn in black, solid and without band; the legend sits below the panels, off the data.
"""

from __future__ import annotations

import numpy as np

from ._style import GUIDE, math_label, new_figure, positive, styles, time_label


def comparison_figure(comparison, *, width: float = 7.2, height: float = 7.6):
    """Overlay the series of ``comparison`` (see the module docstring); returns a Figure."""
    figure, axes = new_figure(2, 2, width=width, height=height, sharex=True)
    (msd_ax, spread_ax), (alpha_ax, z_ax) = axes
    t = comparison["time"].values.astype(float)
    handles = []
    mc_styles = styles()
    for i, name in enumerate(comparison["series"].values):
        reference = str(comparison["kind"].values[i]) == "reference"
        colour, style = ("#000000", "-") if reference else next(mc_styles)
        width_ = 1.2 if reference else 1.7
        msd = comparison["msd"].values[i]
        good = positive(t, msd)
        (line,) = msd_ax.plot(t[good], msd[good], color=colour, ls=style, lw=width_,
                              label=str(name), gid=f"series_{i}")
        handles.append(line)
        se = comparison["msd_se"].values[i]
        if not reference and np.isfinite(se).any():
            se = np.nan_to_num(se)
            msd_ax.fill_between(t[good], np.maximum(msd - 2 * se, msd * 1e-3)[good],
                                (msd + 2 * se)[good], color=colour, alpha=0.16, lw=0)
        spread = comparison["spread"].values[i]
        ok = positive(t, spread)
        spread_ax.plot(t[ok], spread[ok], color=colour, ls=style, lw=width_)
        alpha = comparison["alpha"].values[i]
        ok = np.isfinite(alpha) & (t > 0)
        alpha_ax.plot(t[ok], alpha[ok], color=colour, ls=style, lw=width_)
        alpha_se = comparison["alpha_se"].values[i]
        if not reference and np.isfinite(alpha_se[ok]).any():
            band = np.nan_to_num(alpha_se)
            alpha_ax.fill_between(t[ok], (alpha - 2 * band)[ok], (alpha + 2 * band)[ok],
                                  color=colour, alpha=0.16, lw=0)
        if i:
            z = comparison["msd_z"].values[i]
            ok = np.isfinite(z) & (t > 0)
            z_ax.plot(t[ok], z[ok], color=colour, ls=style, lw=width_, gid=f"z_{i}")
    for level, dash in ((2.0, (0, (4, 3))), (3.0, (0, (1, 2)))):
        for sign in (1, -1):
            z_ax.axhline(sign * level, color=GUIDE, lw=0.8, ls=dash, zorder=0)
    z_ax.axhline(0.0, color=GUIDE, lw=0.6)
    z_ax.text(0.99, 0.97, "dashed ±2 SE, dotted ±3 SE", transform=z_ax.transAxes,
              ha="right", va="top", fontsize=7, color=GUIDE)
    z_values = comparison["msd_z"].values[1:]
    finite = np.abs(z_values[np.isfinite(z_values)])
    limit = max(4.0, float(finite.max()) * 1.1) if finite.size else 4.0
    z_ax.set_ylim(-limit, limit)
    if not finite.size:
        z_ax.text(0.5, 0.5, "no standard errors on either side:\nz(t) undefined",
                  transform=z_ax.transAxes, ha="center", va="center", fontsize=8,
                  color=GUIDE)
    lows = [float(np.nanmin(comparison["alpha"].values))] \
        if np.isfinite(comparison["alpha"].values).any() else [0.0]
    highs = [float(np.nanmax(comparison["alpha"].values))] \
        if np.isfinite(comparison["alpha"].values).any() else [2.0]
    alpha_ax.set_ylim(min(-0.1, lows[0] - 0.15), max(2.2, highs[0] + 0.15))
    alpha_ax.axhline(1.0, color=GUIDE, lw=0.8, ls=(0, (4, 3)), zorder=0)
    for ax in axes.ravel():
        ax.set_xscale("log")
        ax.grid(True, which="major", alpha=0.3)
    msd_ax.set_yscale("log")
    spread_ax.set_yscale("log")
    time_attrs = comparison["time"].attrs
    units = comparison["msd"].attrs.get("units", "1")
    msd_ax.set_ylabel(math_label(r"$\langle|\Delta\mathbf{X}|^2\rangle$", units, "length2"))
    spread_ax.set_ylabel(math_label(r"$\sigma_x^2+\sigma_y^2$", units, "length2"))
    alpha_ax.set_ylabel(r"local exponent $\alpha(t)$")
    z_ax.set_ylabel(r"$z(t)$ of the MSD against" + "\n" + "the baseline (SE)")
    for ax in (alpha_ax, z_ax):
        ax.set_xlabel(time_label(time_attrs.get("units", "1")))
    figure.suptitle(f"{comparison.attrs.get('title', 'comparison')} (baseline: "
                    f"{comparison.attrs.get('baseline', '')})\n"
                    f"time grid: {comparison.attrs.get('time_grid', '')}", fontsize=9)
    figure.legend(handles=handles, loc="outside lower center", ncol=min(3, len(handles)),
                  fontsize=8, frameon=False)
    return figure
