"""Lagrangian velocity figures: autocorrelation with its running integral, and the spectrum.

Both read the variables of ``analysis.velocity_statistics`` (computed here when the Dataset is
not analysed).  The running-integral panel draws κ + ∫₀^τ C_ii, which tends to the Green–Kubo
diffusivity D_ii; the MSD-based D_xx, D_yy (when analysed) are drawn beside it for comparison.
"""

from __future__ import annotations

import math

import numpy as np

from ._style import (
    GUIDE,
    PALETTE,
    caption,
    label,
    new_figure,
    provenance_line,
    require,
    select_start,
    start_labels,
    start_name,
    styles,
    title,
)

VELOCITY_HINT = ("add a [velocity_correlation] table (reference_times, lag_max, lag_step) to "
                 "the study and re-run `eddyhop run STUDY.toml`")
_RAW = ["velocity_correlation_xx", "correlation_lag", "reference_time"]


def _with_statistics(ds, what):
    require(ds, _RAW, what, VELOCITY_HINT)
    if "velocity_autocorrelation_x" in ds.variables:
        return ds
    from ...analysis._common import merge_into
    from ...analysis.velocity import velocity_statistics

    return merge_into(ds, velocity_statistics(ds))


def _band(ax, x, y, se, colour):
    if se is None:
        return
    se = np.nan_to_num(se)
    ax.fill_between(x, y - 2 * se, y + 2 * se, color=colour, alpha=0.18, lw=0)


def velocity_correlation_figure(ds, *, start=None):
    """Normalised autocorrelation ρ_i(τ) (top) and κ + ∫₀^τ C_ii (bottom) per start region."""
    what = "the velocity-correlation figure"
    ds = _with_statistics(ds, what)
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(2, len(starts), width=4.4 * len(starts) + 1.2, height=6.6,
                              sharex=True)
    axes = np.asarray(axes).reshape(2, len(starts))
    lag = ds["correlation_lag"].values
    refs = ds["reference_time"].values
    try:
        kappa = float(ds.attrs.get("kappa", 0.0))
    except (TypeError, ValueError):
        kappa = 0.0
    kappa = kappa if math.isfinite(kappa) else 0.0
    for column, label_ in enumerate(starts):
        part = select_start(ds, label_)
        top, bottom = axes[0, column], axes[1, column]
        curves = styles()
        for r in range(refs.size):
            for c in "xy":
                colour, style = next(curves)
                suffix = f"u_{c}, t_r = {refs[r]:g}"
                rho = part[f"velocity_autocorrelation_{c}"].isel(reference_time=r).values
                top.plot(lag, rho, color=colour, ls=style, lw=1.6, label=suffix)
                _band(top, lag, rho,
                      part[f"velocity_autocorrelation_{c}_se"].isel(reference_time=r).values,
                      colour)
        curves = styles()
        for c in "xy":
            colour, style = next(curves)
            name = f"green_kubo_running_D_{c}{c}"
            running = part[name].values
            if not np.isfinite(running).any():  # Green–Kubo not applicable: the bare integral
                running = kappa + part[f"velocity_correlation_integral_{c}{c}"].isel(
                    reference_time=0).values
            final = f"green_kubo_D_{c}{c}"
            text = ""
            if final in part and np.isfinite(part[final].values):
                text = (f" → D_{c}{c} = {float(part[final].values):.4g} ± "
                        f"{float(part[final + '_se'].values):.2g}")
            bottom.plot(lag, running, color=colour, ls=style, lw=1.8,
                        label=f"kappa + integral of C_{c}{c}{text}")
            _band(bottom, lag, running, part[name + "_se"].values, colour)
            msd_name = f"D_{c}{c}"
            if msd_name in part and np.isfinite(part[msd_name].values):
                value = float(part[msd_name].values)
                bottom.axhline(value, color=colour, lw=1.0, ls=(0, (1, 2)),
                               label=f"D_{c}{c} from the MSD = {value:.4g}")
        top.axhline(0.0, color=GUIDE, lw=0.8)
        top.grid(True, alpha=0.3)
        bottom.grid(True, alpha=0.3)
        top.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
        top.legend(fontsize=7, loc="upper right")
        bottom.legend(fontsize=7, loc="lower right")
        bottom.set_xlabel(label(ds["correlation_lag"]))
    axes[0, 0].set_ylabel("velocity autocorrelation C_ii(lag)/C_ii(0)")
    axes[1, 0].set_ylabel(_axis_label("Green-Kubo running D_ii (all t_r)",
                                         ds["velocity_correlation_integral_xx"]))
    figure.suptitle(title(f"Lagrangian velocity correlation — {ds.attrs.get('title', '')}",
                          60 * len(starts)), fontsize=10)
    caption(figure, provenance_line(ds) + "; bands: ±2 standard errors")
    return figure


def _axis_label(text, da):
    """"text [units]" from a DataArray's units."""
    units = da.attrs.get("units")
    return f"{text}" + (f" [{units}]" if units not in (None, "", "1") else "")


def velocity_spectrum_figure(ds, *, start=None):
    """Power spectra S_x(ω), S_y(ω) of the Lagrangian velocity (log axis), per start region."""
    what = "the velocity-spectrum figure"
    ds = _with_statistics(ds, what)
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(1, len(starts), width=4.4 * len(starts) + 1.2, height=4.4,
                              sharey=True)
    axes = np.atleast_1d(axes)
    omega = ds["angular_frequency"].values
    refs = ds["reference_time"].values
    for ax, label_ in zip(axes, starts):
        part = select_start(ds, label_)
        floor, peak = math.inf, 0.0
        for r in range(refs.size if refs.size > 1 else 0):  # each t_r, faint
            for c, colour in zip("xy", PALETTE):
                spectrum = part[f"velocity_spectrum_{c}"].isel(reference_time=r).values
                ax.plot(omega, np.where(spectrum > 0, spectrum, np.nan), color=colour,
                        lw=0.6, alpha=0.35)
        for (colour, style), c in zip(styles(), "xy"):
            spectrum = part[f"velocity_spectrum_mean_{c}"].values
            se = np.nan_to_num(part[f"velocity_spectrum_mean_{c}_se"].values)
            good = spectrum > 0
            if good.any():
                floor = min(floor, float(spectrum[good].max()) * 1e-5)
                peak = max(peak, float(spectrum[good].max()) * 3.0)
            ax.plot(omega, np.where(good, spectrum, np.nan), color=colour, ls=style, lw=1.8,
                    label=f"S_{c}" + (f" (covariance averaged over {refs.size} reference "
                                      "times)" if refs.size > 1 else f", t_r = {refs[0]:g}"))
            ax.fill_between(omega, np.maximum(spectrum - 2 * se, 1e-300), spectrum + 2 * se,
                            color=colour, alpha=0.18, lw=0)
        ax.set_yscale("log")
        if math.isfinite(floor):
            ax.set_ylim(floor, peak)
        ax.grid(True, which="major", alpha=0.3)
        ax.set_xlabel(label(ds["angular_frequency"]))
        ax.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
        ax.legend(fontsize=7.5, loc="upper right")
    spectrum_da = ds["velocity_spectrum_mean_x"]
    axes[0].set_ylabel(_axis_label("velocity power spectrum S_i(omega), two-sided",
                                   spectrum_da))
    window = spectrum_da.attrs.get("window", "?")
    figure.suptitle(title(f"Lagrangian velocity spectrum — {ds.attrs.get('title', '')}",
                          60 * len(starts)), fontsize=10)
    caption(figure, provenance_line(ds) + f"; Blackman-Tukey ({window}); faint: each t_r")
    return figure
