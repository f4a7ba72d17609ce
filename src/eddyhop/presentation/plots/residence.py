"""Cell residence-time and flight-length distributions (from ``[hopping]`` statistics).

Residence time: time a tracer spends in one eddy between two counted cell changes.  When the
Dataset is analysed, the exponential and power-law tail fits are drawn over the tail.  Flight: a
run of consecutive hops separated by less than ``hopping.flight_gap`` (default 1/(U k)),
measured in eddy sides.  Error bars are Poisson counting errors √n per bin (common practice).
"""

from __future__ import annotations

import math

import numpy as np

from ._style import (
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

HOPPING_HINT = ("set [hopping] enabled = true in the study and re-run "
                "`eddyhop run STUDY.toml`")


def _density(counts, edges):
    """Normalised density and its Poisson error per bin (NaN where a bin is empty)."""
    counts = np.asarray(counts, dtype=float)
    total = counts.sum()
    widths = np.diff(edges)
    density = np.where(counts > 0, counts / max(total, 1.0) / widths, np.nan)
    error = np.where(counts > 0, np.sqrt(counts) / max(total, 1.0) / widths, np.nan)
    return density, error


def _scalar(part, name):
    if name not in part.variables:
        return math.nan
    return float(np.asarray(part[name].values).ravel()[0])


def tail_fit_densities(part, edges):
    """Densities of the analysed tail fits over the tail bins (``eddyhop analyse``'s hopping).

    Both models are truncated to [t_min, t_max] and fitted to the tail's counts only, so on the
    whole distribution's density scale they are weighted by the tail fraction N_tail/N:
    exponential λ e^{−λ(t−t_min)} / (1 − e^{−λ(t_max−t_min)}), power law
    (μ−1) t^{−μ} / (t_min^{1−μ} − t_max^{1−μ}).  Returns {model: (t, density, label)}; a
    label says when the goodness-of-fit verdict of its model is rejected or undetermined.
    """
    low = _scalar(part, "residence_tail_start")
    n_tail = _scalar(part, "residence_tail_count")
    total = float(np.asarray(part["residence_count"].values).sum())
    if not (np.isfinite(low) and np.isfinite(n_tail) and total > 0):
        return {}
    high = float(edges[-1])
    t = np.geomspace(low, high, 80)
    weight = n_tail / total
    preferred = str(np.asarray(part["residence_preferred"].values).ravel()[0]) \
        if "residence_preferred" in part.variables else ""
    curves = {}
    rate = _scalar(part, "residence_exp_rate")
    if np.isfinite(rate) and rate > 0:
        density = weight * rate * np.exp(-rate * (t - low)) / -np.expm1(-rate * (high - low))
        curves["exponential"] = (t, density, f"exp. tail, 1/λ = {1 / rate:.3g}")
    mu = _scalar(part, "residence_pow_exponent")
    if np.isfinite(mu):
        if abs(mu - 1.0) < 1e-8:
            density = weight / (t * math.log(high / low))
        else:
            density = weight * (mu - 1.0) * t ** -mu / (low ** (1 - mu) - high ** (1 - mu))
        curves["power_law"] = (t, density, f"power-law tail, μ = {mu:.3g}")
    for model, (times, density, text) in list(curves.items()):
        verdict_name = f"residence_{'exp' if model == 'exponential' else 'pow'}_verdict"
        if verdict_name in part.variables:
            from ...analysis.verdicts import flag_meaning

            verdict = flag_meaning(part[verdict_name])
            if verdict in ("rejected", "undetermined"):
                text += f" ({verdict} by the χ² test)"  # never a bare number for a bad fit
        if model == preferred:
            text += " (preferred)"
        curves[model] = (times, density, text)
    return curves


def _fitted_tails(ax, part, edges, colour):
    styles = {"exponential": (0, (1, 1.5)), "power_law": (0, (5, 2, 1, 2))}
    for model, (t, density, text) in tail_fit_densities(part, edges).items():
        ax.plot(t, density, color=colour, lw=1.1, ls=styles[model], label=text,
                gid=f"fit_{model}")


def residence_figure(ds, *, start=None):
    """Residence-time density (left) and flight-length counts (right) on log-log axes."""
    what = "the residence-time figure"
    require(ds, ["residence_count", "residence_time", "residence_time_edges"], what,
            HOPPING_HINT)
    starts = [start] if start is not None else start_labels(ds)
    with_flights = "flight_count" in ds and "flight_length_edges" in ds
    figure, axes = new_figure(1, 2 if with_flights else 1, width=10.0 if with_flights else 6.4,
                              height=4.4)
    axes = np.atleast_1d(axes)
    edges = ds["residence_time_edges"].values
    centres = ds["residence_time"].values
    drawn = 0
    for label_, (colour, _style) in zip(starts, styles()):
        part = select_start(ds, label_)
        name = start_name(ds, label_)
        density, error = _density(part["residence_count"].values, edges)
        good = np.isfinite(density)
        if good.sum() == 0:
            continue
        drawn += 1
        bars = axes[0].errorbar(centres[good], density[good], yerr=error[good], color=colour,
                                marker="o", ms=3, lw=1.2, capsize=0, label=name)
        bars.lines[0].set_gid(f"data_{name}")
        _fitted_tails(axes[0], part, edges, colour)
        if with_flights:
            f_density, f_error = _density(part["flight_count"].values,
                                          ds["flight_length_edges"].values)
            f_good = np.isfinite(f_density)
            if f_good.any():
                bars = axes[1].errorbar(ds["flight_length"].values[f_good],
                                        f_density[f_good], yerr=f_error[f_good], color=colour,
                                        marker="s", ms=3, lw=1.2, capsize=0, label=name)
                bars.lines[0].set_gid(f"data_{name}")
    if drawn == 0:
        from ...errors import InputDataError

        raise InputDataError(f"{what}: no completed cell residence was recorded (every "
                             "residence_count is zero); run longer (run.t_end) or at a lower "
                             "Péclet number so tracers change cells")
    axes[0].set_xlabel(label(ds["residence_time"]))
    axes[0].set_ylabel(label(ds["residence_pdf"], width=40) if "residence_pdf" in ds
                       else "probability density of cell residence times")
    axes[0].set_title("Cell residence times", fontsize=9)
    if with_flights:
        axes[1].set_xlabel(label(ds["flight_length"]))
        axes[1].set_ylabel("probability density of flight lengths\n(per eddy side)")
        axes[1].set_title("Flight lengths (runs of quick hops)", fontsize=9)
    fitted = any(str(line.get_gid()).startswith("fit_") for line in axes[0].get_lines())
    from ._style import tidy_log_axes

    for ax in np.atleast_1d(axes):
        ax.set_xscale("log")
        ax.set_yscale("log")
        tidy_log_axes(ax)
        ax.grid(True, which="major", alpha=0.3)
    # one legend beside the panels (the start colours are shared), never over the data
    handles, labels = np.atleast_1d(axes)[0].get_legend_handles_labels()
    figure.legend(handles, [text.replace(" (rejected by the χ² test)", "\n(rejected by the χ² "
                                         "test)") for text in labels],
                  loc="outside right upper", fontsize=7,
                  frameon=False, title="start region" + (" and tail fits" if fitted else ""),
                  title_fontsize=7.5)
    figure.suptitle(title(f"Trapping statistics — {ds.attrs.get('title', '')}", 110),
                    fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
