"""Sweep figures: D_eff against the Péclet number with asymptotes, and α(t, Pe) as a map.

Input is a merged sweep Dataset (``eddyhop merge DIR --out sweep.nc``) whose swept parameters
are dimensions (e.g. ``peclet``), analysed with ``eddyhop analyse`` so that it holds effective
diffusivities and the local exponent.
"""

from __future__ import annotations

import json

import numpy as np

from ...errors import EddyhopError, InputDataError
from ._style import (
    EXPONENT_CMAP,
    GUIDE,
    PALETTE,
    caption,
    label,
    new_figure,
    provenance_line,
    select_start,
    start_labels,
    start_name,
    tidy_log_axes,
    title,
)
from .asymptotes import asymptotes

PECLET_NAMES = ("peclet", "Pe", "pe", "noise.peclet")
SWEEP_HINT = ("run a sweep and merge it: `eddyhop sweep STUDY.toml` then "
              "`eddyhop merge DIR --out sweep.nc`")
ANALYSE_HINT = "run `eddyhop analyse SWEEP.nc` (or eddyhop.analysis.analyse) first"
COMPONENTS = ("xx", "yy", "xy")


def sweep_dimension(ds):
    """Name of the swept dimension (the Péclet number preferred), or ``None`` for one run.

    A merged sweep names its dimensions in the ``sweep_axes`` attribute (``point`` for a zipped
    sweep); a Dataset with a ``peclet`` dimension counts as a sweep too.
    """
    for name in PECLET_NAMES:
        if name in ds.dims:
            return name
    text = ds.attrs.get("sweep_axes")
    if text:
        try:
            dims = [axis["dim"] for axis in json.loads(text)]
        except (ValueError, KeyError, TypeError):
            dims = []
        if "point" in ds.dims:
            return "point"
        for dim in dims:
            if dim in ds.dims:
                return dim
    return None


def _peclet_dimension(ds, what):
    for name in PECLET_NAMES:
        if name in ds.dims:
            return name
    raise InputDataError(f"{what} needs a Dataset with a swept Péclet dimension "
                         f"({' or '.join(PECLET_NAMES[:1])}); this one has dimensions "
                         f"{', '.join(map(str, ds.dims)) or 'none'}: {SWEEP_HINT}")


def deff_variables(ds) -> dict:
    """{component: (estimate, low, high)} of the effective-diffusivity variables present."""
    found = {}
    for component in COMPONENTS:
        for name in (f"D_{component}", f"deff_{component}", f"D_eff_{component}"):
            if name in ds.variables:
                bounds = [None, None]
                for i, suffixes in enumerate((("_low", "_lo", "_ci_low", "_lower"),
                                              ("_high", "_hi", "_ci_high", "_upper"))):
                    for suffix in suffixes:
                        if f"{name}{suffix}" in ds.variables:
                            bounds[i] = f"{name}{suffix}"
                            break
                found[component] = (name, bounds[0], bounds[1])
                break
    return found


def flow_parameters(ds):
    """(family name, checked params, Pe convention) from the provenance attributes.

    A single run carries ``study_resolved``; a merged sweep keeps the ``flow_*`` attributes
    common to all its points (values may be stored as text).
    """
    from ...flows import get_family

    family_name = ds.attrs.get("flow_family")
    params = {}
    text = ds.attrs.get("study_resolved")
    if text:
        try:
            flow = json.loads(text)["flow"]
            family_name = family_name or flow["family"]
            params = dict(flow["params"])
        except (ValueError, KeyError, TypeError):
            params = {}
    if not params:
        for key, value in ds.attrs.items():
            if key.startswith("flow_") and key != "flow_family":
                try:
                    params[key[len("flow_"):]] = json.loads(value) if isinstance(value, str) \
                        else value
                except ValueError:
                    continue
    convention = ds.attrs.get("peclet_convention", "wavenumber")
    if not family_name:
        return None, params, convention
    try:
        family = get_family(str(family_name))
        from ._flow import as_study_params

        checked = family.validate(as_study_params(
            {k: v for k, v in params.items()
             if k in {p.name for p in family.parameters} or k == "modes"}))
    except EddyhopError:
        return str(family_name), params, convention
    return family.name, checked, convention


def _kappa(ds, pe_dim, family, params, convention):
    """κ at each swept Pe: a ``kappa`` variable if present, else κ = U/(Pe k) (convention)."""
    if "kappa" in ds.variables and pe_dim in ds["kappa"].dims:
        return ds["kappa"].values.astype(float)
    from ...engine.noise import kappa_from_peclet

    peclet = ds[pe_dim].values.astype(float)
    velocity = float(params.get("U", 1.0))
    wavenumber = float(params.get("k", 1.0))
    return np.array([kappa_from_peclet(velocity, wavenumber, p, convention) for p in peclet])


def _reduce_to_pe(da, pe_dim, start):
    """1-D values along ``pe_dim`` (one start region selected)."""
    if start is not None and "start" in da.dims:
        da = da.sel(start=start)
    extra = [d for d in da.dims if d != pe_dim]
    if extra:
        raise InputDataError(f"{da.name} has extra dimensions {extra} besides {pe_dim}; "
                             "select one value of each first (Dataset.sel)")
    return da.values.astype(float)


def deff_peclet_figure(ds, *, start=None, components=("xx", "yy")):
    """D_eff/κ against Pe on log-log axes, with confidence intervals and the asymptotes.

    Markers: analysed estimates with their confidence interval; grey lines: the low-Pe (and,
    for cellular flows, high-Pe) asymptotes of :mod:`eddyhop.presentation.plots.asymptotes`.
    """
    what = "the D_eff-vs-Pe figure"
    pe_dim = _peclet_dimension(ds, what)
    variables = deff_variables(ds)
    wanted = [c for c in components if c in variables]
    if not wanted:
        raise InputDataError(f"{what} needs D_xx/D_yy (effective diffusivity), which this "
                             f"Dataset lacks; {ANALYSE_HINT}")
    family, params, convention = flow_parameters(ds)
    peclet = ds[pe_dim].values.astype(float)
    kappa = _kappa(ds, pe_dim, family, params, convention)
    starts = [start] if start is not None else start_labels(ds)
    starts = [s for s in starts if s is not None] or [None]
    figure, ax = new_figure(width=7.8)
    markers = {"xx": "o", "yy": "s", "xy": "^"}
    series = [(label_, component) for label_ in starts for component in wanted]
    # series at the same Pe are spread sideways by a few hundredths of a decade so that no
    # marker hides another (the true Pe is the middle of each group)
    offsets = 10.0 ** (0.018 * (np.arange(len(series)) - 0.5 * (len(series) - 1)))
    status = _point_status(ds, pe_dim)
    open_drawn = False
    for index, (label_, component) in enumerate(series):
        estimate, low, high = variables[component]
        y = _reduce_to_pe(ds[estimate], pe_dim, label_) / kappa
        if not np.isfinite(y).any():
            raise InputDataError(f"{what}: {estimate} holds no finite values")
        colour = PALETTE[index % len(PALETTE)]
        name = f"$D_{{{component}}}/\\kappa$" + (f" ({label_})" if label_ is not None
                                                 and len(starts) > 1 else "")
        x = peclet * offsets[index]
        confirmed = status(label_)
        yerr = None
        if low and high:
            lo = _reduce_to_pe(ds[low], pe_dim, label_) / kappa
            hi = _reduce_to_pe(ds[high], pe_dim, label_) / kappa
            yerr = np.vstack([np.clip(y - lo, 0, None), np.clip(hi - y, 0, None)])
        ax.errorbar(x[confirmed], y[confirmed], yerr=None if yerr is None
                    else yerr[:, confirmed], color=colour, marker=markers[component], ls="none",
                    ms=5, capsize=3, label=name + (" (CI)" if yerr is not None else ""),
                    gid=f"points_{label_}_{component}")
        if (~confirmed).any():  # not a confirmed long-time limit: open markers
            ax.errorbar(x[~confirmed], y[~confirmed], yerr=None if yerr is None
                        else yerr[:, ~confirmed], color=colour, marker=markers[component],
                        mfc="white", ls="none", ms=5, capsize=3, alpha=0.9,
                        gid=f"unconfirmed_{label_}_{component}")
            open_drawn = True
        _draw_fit(ax, ds, component, label_, colour, peclet)
    if open_drawn:
        from matplotlib.lines import Line2D

        ax.add_line(Line2D([], [], color=GUIDE, marker="o", mfc="white", ls="none",
                           label="open: diffusive regime not confirmed\n(undetermined, too "
                                 "short or bounded)", gid="unconfirmed_key"))
    from ...engine.noise import convert_peclet

    pe_wavenumber = np.array([convert_peclet(p, convention, "wavenumber") for p in peclet])
    fine = np.geomspace(pe_wavenumber.min() / 1.5, pe_wavenumber.max() * 1.5, 200)
    fine_axis = np.array([convert_peclet(p, "wavenumber", convention) for p in fine])
    dashes = {"low": (0, (4, 3)), "high": (0, (1, 1.5)), "exact": "-"}
    drawn = set()
    for component in wanted:
        for text, curve, kind in asymptotes(family or "", params, fine, component):
            key = (text, kind)
            if key in drawn:
                continue
            drawn.add(key)
            # drawn only where each expansion is meant to hold (Pe ≲ 2 and Pe ≳ 5)
            if kind == "low":
                keep = fine <= 2.0
            elif kind == "high":
                keep = fine >= 5.0
            else:
                keep = np.ones_like(fine, dtype=bool)
            if keep.sum() < 2:
                continue
            ax.plot(fine_axis[keep], curve[keep], color=GUIDE, lw=1.2, ls=dashes[kind],
                    label=f"{text} (D_{component})", zorder=1)
    ax.set_xscale("log")
    ax.set_yscale("log")
    tidy_log_axes(ax)
    convention_text = _peclet_text(ds.attrs.get("peclet_definition", "Pe = U/(kappa k)"))
    ax.set_xlabel(f"Péclet number, {convention_text} (dimensionless)")
    ax.set_ylabel("effective over molecular diffusivity\n$D/\\kappa$ (dimensionless)")
    ax.grid(True, which="major", alpha=0.3)
    figure.legend(fontsize=7, loc="outside right upper", frameon=False)  # off the data
    ax.set_title(title(f"Effective diffusivity — {ds.attrs.get('title', family or '')}"),
                 fontsize=10)
    caption(figure, provenance_line(ds))
    return figure


def _peclet_text(text: str) -> str:
    """The stored Péclet definition ("Pe = U/(kappa k)") in mathtext."""
    return "$" + str(text).replace("kappa", "\\kappa").replace("pi", "\\pi") \
        .replace("Pe", "\\mathrm{Pe}") + "$" if "$" not in str(text) else str(text)


def _point_status(ds, pe_dim):
    """start → boolean mask along Pe of the points with a confirmed diffusive regime."""
    from ...analysis.verdicts import flag_meaning

    def confirmed(start):
        if "deff_converged" not in ds.variables:
            return np.ones(ds.sizes[pe_dim], dtype=bool)
        flags = _reduce_to_pe(ds["deff_converged"], pe_dim, start)
        return np.array([flag_meaning(ds["deff_converged"], v) == "diffusive"
                         if np.isfinite(v) else False for v in flags])

    return confirmed


def _draw_fit(ax, ds, component, start, colour, peclet):
    """The fitted power law D/κ = A Pe^β of one component and start over its fitted range,
    labelled with β and its interval; dashed and marked when the fit is rejected."""
    from ...analysis.verdicts import flag_meaning

    name = f"D_{component}"
    key = f"{name}_exponent"
    if key not in ds.variables or f"{name}_prefactor" not in ds.variables:
        return None
    exponent = ds[key]
    pick = {"start": start} if start is not None and "start" in exponent.dims else {}
    try:
        beta = float(exponent.sel(pick).values)
        prefactor = float(ds[f"{name}_prefactor"].sel(pick).values)
        low = float(ds[f"{key}_lower"].sel(pick).values)
        high = float(ds[f"{key}_upper"].sel(pick).values)
    except (TypeError, ValueError):
        return None  # more dimensions than a start: not drawn
    if not (np.isfinite(beta) and np.isfinite(prefactor)):
        return None
    verdict = flag_meaning(ds[f"{name}_fit_verdict"],
                           ds[f"{name}_fit_verdict"].sel(pick).values) \
        if f"{name}_fit_verdict" in ds.variables else ""
    first = float(exponent.attrs.get("fit_peclet_min", np.min(peclet)))
    last = float(exponent.attrs.get("fit_peclet_max", np.max(peclet)))
    x = np.geomspace(first, last, 50)
    who = f"$D_{{{component}}}/\\kappa$" + (f" ({start})" if start is not None else "")
    text = f"fit {who} $\\propto\\mathrm{{Pe}}^{{{beta:.2f}}}$ [{low:.2f}, {high:.2f}]"
    if verdict == "rejected":
        text += " REJECTED"
    elif verdict == "undetermined":
        text += " (undetermined)"
    (line,) = ax.plot(x, prefactor * x ** beta, color=colour, lw=1.0,
                      ls=(0, (5, 2)) if verdict == "rejected" else "-", alpha=0.8,
                      label=text, gid=f"fit_{start}_{component}")
    return line


def exponent_map_figure(ds, *, start=None):
    """Local exponent α(t, Pe) as a colour map: time (log) across, Pe (log) up, α centred on 1."""
    from matplotlib.colors import TwoSlopeNorm

    from .msd import exponent_variable

    what = "the α(t, Pe) map"
    pe_dim = _peclet_dimension(ds, what)
    name = exponent_variable(ds)
    time_name = ds[name].dims[-1]
    starts = [start] if start is not None else start_labels(ds)
    figure, axes = new_figure(1, len(starts), width=5.0 * len(starts) + 1.4, height=4.4,
                              sharey=True)
    axes = np.atleast_1d(axes)
    peclet = ds[pe_dim].values.astype(float)
    t = ds[time_name].values.astype(float)
    norm = TwoSlopeNorm(vmin=0.0, vcenter=1.0, vmax=2.0)
    mesh = None
    for ax, label_ in zip(axes, starts):
        part = select_start(ds, label_)
        alpha = part[name].transpose(pe_dim, time_name).values.astype(float)
        if not np.isfinite(alpha).any():
            raise InputDataError(f"{what}: {name} holds no finite values")
        mesh = ax.pcolormesh(t, peclet, np.ma.masked_invalid(alpha), cmap=EXPONENT_CMAP,
                             norm=norm, shading="nearest")
        if peclet.size > 1 and t.size > 1:
            ax.contour(t, peclet, np.ma.masked_invalid(alpha), levels=[0.5, 1.5],
                       colors=[GUIDE], linewidths=0.8)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(label(ds[time_name]))
        ax.set_title(f"start: {start_name(ds, label_)}", fontsize=9)
    axes[0].set_ylabel(f"Péclet number, {_peclet_text(ds.attrs.get('peclet_definition', 'Pe'))}"
                       " (dimensionless)")
    bar = figure.colorbar(mesh, ax=list(axes), extend="both")
    bar.set_label(r"local exponent $\alpha = d\ln\mathrm{MSD}/d\ln t$")
    figure.suptitle(title(f"α(t, Pe) — {ds.attrs.get('title', '')}; contours at α = ½ and 3/2"),
                    fontsize=10)
    caption(figure, provenance_line(ds))
    return figure
