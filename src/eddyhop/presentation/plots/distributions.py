"""Figures of analysis outputs that had none: displacement PDFs, kurtosis, the moment spectrum
ν(q)/q, and a sweep's MSD curves collapsed by the boundary-layer time.

Conventions (``eddyhop.analysis.moments``): ``displacement_pdf_x`` is the density of the
scaled displacement (Δx − mean)/std of the tracked tracers at each ``pdf_time``; a Gaussian
is the standard normal drawn for reference.  ``kurtosis_x`` is ⟨Δx⁴⟩/⟨Δx²⟩² of the centred
displacement, 3 for a Gaussian.  ν(q) is the late-time exponent of ⟨|ΔX|^q⟩ ∝ t^ν(q);
ν(q)/q is constant for self-similar transport (½ for diffusion) and varies with q for
"strongly anomalous" transport (Castiglione, Mazzino, Muratore-Ginanneschi & Vulpiani 1999,
Physica D 134, 75 — recalled from memory).
"""

from __future__ import annotations

import numpy as np

from ...errors import InputDataError
from ._style import (
    GUIDE,
    caption,
    new_figure,
    provenance_line,
    require,
    select_start,
    start_labels,
    start_name,
    styles,
    tidy_log_axes,
    time_label,
    title,
)

ANALYSE_HINT = "run `eddyhop analyse RESULT.nc` (or eddyhop.analysis.analyse) first"
# below this many tracked tracers a 41-bin density is mostly empty bins: said on the figure
FEW_TRACKED = 50


def displacement_pdf_figure(ds):
    """Density of the scaled displacement along x and y at each PDF time, per start (one
    panel row per start), on a log density axis with the standard normal in grey."""
    what = "the displacement-PDF figure"
    require(ds, ["displacement_pdf_x", "displacement_pdf_y"], what,
            ANALYSE_HINT + " on a run with tracked tracers (run.tracked = N)")
    starts = start_labels(ds)
    figure, axes = new_figure(len(starts), 2, width=7.2, height=2.6 * len(starts) + 0.8,
                              sharex=True, sharey=True)
    axes = np.atleast_2d(axes)
    z = ds["scaled_displacement"].values.astype(float)
    gauss = np.exp(-0.5 * z ** 2) / np.sqrt(2 * np.pi)
    times = ds["pdf_time"].values.astype(float)
    tunits = ds["pdf_time"].attrs.get("units", "1")
    shown = "" if tunits in ("", "1") else f" {tunits}"
    count = ds.sizes.get("particle")
    tracked = f" ({count} tracked tracers)" if count else ""
    for row, start in enumerate(starts):
        part = select_start(ds, start)
        for column, axis in enumerate(("x", "y")):
            ax = axes[row, column]
            density = part[f"displacement_pdf_{axis}"].values.astype(float)
            for index, (colour, style) in zip(range(times.size), styles()):
                good = np.isfinite(density[index]) & (density[index] > 0)
                ax.plot(z[good], density[index][good], color=colour, ls=style, lw=1.5,
                        drawstyle="steps-mid",
                        label=f"$t$ = {times[index]:.3g}{shown}",
                        gid=f"pdf_{start}_{axis}_{index}")
            ax.plot(z, gauss, color=GUIDE, lw=1.0, ls=(0, (4, 3)), label="standard normal",
                    gid="gaussian")
            ax.set_yscale("log")
            finite = density[np.isfinite(density)]
            ax.set_ylim(1e-4, max(1.0, 2.0 * float(finite.max())) if finite.size else 1.0)
            ax.set_title(f"{'Δx' if axis == 'x' else 'Δy'} · {start_name(ds, start)}",
                         fontsize=9)
            ax.grid(True, which="major", alpha=0.3)
            if count is not None and count < FEW_TRACKED:
                ax.text(0.5, 0.04, f"only {count} tracked tracers: too few for a density",
                        transform=ax.transAxes, ha="center", va="bottom", fontsize=7.5,
                        color="#B04A00", fontweight="bold", gid="too_few_tracers")
            if row == len(starts) - 1:
                ax.set_xlabel(f"$(\\Delta {axis} - \\langle\\Delta {axis}\\rangle)"
                              f"/\\sigma_{axis}$ (dimensionless)")
            if column == 0:
                ax.set_ylabel("probability density\n(dimensionless)")
    handles, labels = axes[0, 0].get_legend_handles_labels()
    figure.legend(handles, labels, loc="outside right upper", fontsize=7.5, frameon=False)
    figure.suptitle(title(f"Displacement distributions{tracked} — "
                          f"{ds.attrs.get('title', '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def kurtosis_figure(ds):
    """Kurtosis of the x and y displacements against time (log time), per start, with the
    Gaussian value 3."""
    what = "the kurtosis figure"
    require(ds, ["kurtosis_x", "kurtosis_y", "time"], what, ANALYSE_HINT)
    figure, ax = new_figure(width=7.2)
    t = ds["time"].values.astype(float)
    pairs = styles()
    for start in start_labels(ds):
        part = select_start(ds, start)
        for axis in ("x", "y"):
            colour, style = next(pairs)
            values = part[f"kurtosis_{axis}"].values.astype(float)
            good = np.isfinite(values) & (t > 0)
            ax.plot(t[good], values[good], color=colour, ls=style, lw=1.6,
                    label=f"{'Δx' if axis == 'x' else 'Δy'}, {start_name(ds, start)}",
                    gid=f"kurtosis_{start}_{axis}")
    ax.axhline(3.0, color=GUIDE, lw=0.9, ls=(0, (4, 3)), zorder=1)
    from matplotlib.transforms import blended_transform_factory

    ax.text(1.01, 3.0, "Gaussian", transform=blended_transform_factory(ax.transAxes,
                                                                       ax.transData),
            fontsize=7.5, color=GUIDE, va="center", gid="guide_label_3")
    ax.set_xscale("log")
    tidy_log_axes(ax)
    ax.set_xlabel(time_label(ds["time"].attrs.get("units", "1")))
    ax.set_ylabel(r"kurtosis $\langle\Delta x^4\rangle/\langle\Delta x^2\rangle^2$"
                  "\n(dimensionless)")
    ax.grid(True, which="major", alpha=0.3)
    figure.legend(loc="outside right upper", fontsize=7.5, frameon=False)
    ax.set_title(title(f"Kurtosis — {ds.attrs.get('title', '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def moment_spectrum_figure(ds):
    """ν(q)/q against the order q with ±2 SE bars, per start; ½ (diffusion) and 1
    (ballistic) as guides."""
    what = "the moment-spectrum figure"
    require(ds, ["moment_exponent_over_order", "order"], what, ANALYSE_HINT)
    figure, ax = new_figure(width=6.4)
    q = ds["order"].values.astype(float)
    for start, (colour, style) in zip(start_labels(ds), styles()):
        part = select_start(ds, start)
        values = part["moment_exponent_over_order"].values.astype(float)
        if not np.isfinite(values).any():
            raise InputDataError(f"{what}: moment_exponent_over_order holds no finite values")
        se = part["moment_exponent_over_order_se"].values.astype(float) \
            if "moment_exponent_over_order_se" in part.variables else None
        ax.errorbar(q, values, yerr=None if se is None else 2 * np.nan_to_num(se),
                    color=colour, ls=style, marker="o", ms=4, capsize=3, lw=1.4,
                    label=start_name(ds, start), gid=f"spectrum_{start}")
    for level, text in ((0.5, "diffusive ½"), (1.0, "ballistic 1")):
        ax.axhline(level, color=GUIDE, lw=0.9, ls=(0, (4, 3)), zorder=1)
        from matplotlib.transforms import blended_transform_factory

        ax.text(1.01, level, text, transform=blended_transform_factory(ax.transAxes,
                                                                       ax.transData),
                fontsize=7.5, color=GUIDE, va="center", gid=f"guide_label_{level:g}")
    ax.set_xlabel("order $q$ of the moment $\\langle|\\Delta\\mathbf{X}|^q\\rangle$")
    ax.set_ylabel("$\\nu(q)/q$ (dimensionless)")
    ax.grid(True, which="major", alpha=0.3)
    figure.legend(loc="outside right upper", fontsize=7.5, frameon=False,
                  title="start region (±2 SE)", title_fontsize=7.5)
    ax.set_title(title(f"Moment spectrum — {ds.attrs.get('title', '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def collapse_figure(ds, *, start=None):
    """A Péclet sweep's MSD curves against t / t_BL, with t_BL = 1/(κk²Pe^½) the
    boundary-layer time (``time_scale_boundary_layer``), and the MSD over its value
    4κ·t_BL·(D_eff/κ scale) left as MSD·k² — curves that collapse share the mechanism."""
    from .sweep import _peclet_dimension, flow_parameters

    what = "the collapse figure"
    pe_dim = _peclet_dimension(ds, what)
    require(ds, ["msd", "time"], what, "run a Péclet sweep and merge it")
    family, params, _ = flow_parameters(ds)
    k = float(params.get("k", 1.0)) if isinstance(params, dict) else 1.0
    if "time_scale_boundary_layer" in ds.variables:
        scale = ds["time_scale_boundary_layer"]
    else:
        from ...sweeps.scaling import time_scales

        scale = time_scales(ds)["boundary_layer"]
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(1, len(starts), width=4.2 * len(starts) + 1.8, height=4.0,
                              sharey=True)
    axes = np.atleast_1d(axes)
    t = ds["time"].values.astype(float)
    for ax, label_ in zip(axes, starts):
        part = select_start(ds, label_)
        part_scale = scale.sel(start=label_) if label_ is not None and "start" in scale.dims \
            else scale
        for value, (colour, style) in zip(np.atleast_1d(ds[pe_dim].values), styles()):
            msd = part["msd"].sel({pe_dim: value}).values.astype(float)
            t_bl = float(np.asarray(part_scale.sel({pe_dim: value}).values).ravel()[0])
            good = np.isfinite(msd) & (msd > 0) & (t > 0)
            ax.plot(t[good] / t_bl, msd[good] * k ** 2, color=colour, ls=style, lw=1.5,
                    label=f"Pe = {float(value):.3g}", gid=f"collapse_{label_}_{value}")
        ax.set_xscale("log")
        ax.set_yscale("log")
        tidy_log_axes(ax)
        ax.set_xlabel(r"$t/t_\mathrm{BL}$, $t_\mathrm{BL} = 1/(\kappa k^2\mathrm{Pe}^{1/2})$")
        ax.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
        ax.grid(True, which="major", alpha=0.3)
    axes[0].set_ylabel(r"$\langle|\Delta\mathbf{X}|^2\rangle\,k^2$ (dimensionless)")
    handles, labels = axes[0].get_legend_handles_labels()
    figure.legend(handles, labels, loc="outside right upper", fontsize=7.5, frameon=False)
    figure.suptitle(title(f"MSD against the boundary-layer time — "
                          f"{ds.attrs.get('title', family or '')}"), fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
