"""Figures for papers: column sizes, a print style, natural units, and the data behind a figure.

* :data:`PAPER_SIZES` — single column 3.4 in (8.6 cm) and double column 7.0 in (17.8 cm)
  wide, the widths most physics journals set; :func:`resize` applies one to a Figure.
* :func:`figure_style` — a context in which figures are built with the ``print`` style
  (smaller type, thinner lines, serif text with Computer Modern mathtext) or ``screen`` (the
  default look).
* :func:`natural_units` — a copy of a result with time in units of the advective time
  1/(Uk) (t·Uk) and lengths in units of 1/k (MSD·k²), whatever the study's own units.
* :func:`figure_data` — every drawn curve of a Figure as an ``xarray.Dataset`` (one pair of
  variables per labelled line), so the numbers behind a figure can be exported.
"""

from __future__ import annotations

import contextlib
import re

import numpy as np

PAPER_SIZES = {"single": (3.4, 2.6), "double": (7.0, 3.9)}
STYLES = {
    "screen": {},
    "print": {"font.size": 8, "axes.titlesize": 8, "axes.labelsize": 8,
              "xtick.labelsize": 7, "ytick.labelsize": 7, "legend.fontsize": 7,
              "lines.linewidth": 1.1, "axes.linewidth": 0.6, "grid.linewidth": 0.4,
              "font.family": "serif", "mathtext.fontset": "cm", "savefig.dpi": 600},
}


def check_choice(value, allowed, option):
    from ...errors import EddyhopError

    if value is not None and value not in allowed:
        raise EddyhopError(f"{option} {value!r} is not allowed; choose from "
                           + ", ".join(allowed))
    return value


@contextlib.contextmanager
def figure_style(style: str = "screen"):
    """Build figures inside this context to give them ``style`` (a key of STYLES)."""
    from matplotlib import rc_context

    check_choice(style, STYLES, "--style")
    with rc_context(STYLES[style]):
        yield


def resize(figure, size: str):
    """Give ``figure`` the width of a journal column (``single`` or ``double``).

    Type is scaled with the width (never below 5.5 pt, the smallest size journals print),
    legends beside the axes move below them in columns (a column is too narrow for a side
    legend), and the height keeps the aspect ratio of the axes."""
    from matplotlib.text import Text

    check_choice(size, PAPER_SIZES, "--size")
    width, height = PAPER_SIZES[size]
    old_width, old_height = figure.get_size_inches()
    scale = min(1.0, max(0.7, width / old_width))
    for text in figure.findobj(Text):
        text.set_fontsize(max(5.5, text.get_fontsize() * scale))
    for text in list(figure.texts):  # the provenance line is for screens, not for print
        if text.get_gid() == "provenance_caption":
            text.remove()
    for legend in list(figure.legends):
        handles = list(legend.legend_handles)
        labels = [t.get_text() for t in legend.texts]
        size_pt = legend.texts[0].get_fontsize() if legend.texts else 6.0
        legend.remove()
        figure.legend(handles, labels, loc="outside lower center", frameon=False,
                      ncol=2 if width < 5 else 4, fontsize=size_pt, handlelength=1.8,
                      columnspacing=1.0)
    figure.set_size_inches(width, max(height, old_height * width / old_width * 1.25))
    return figure


# ---- natural units -----------------------------------------------------------------------------
_TIMES = ("time", "lag", "aging_time", "regime_start", "regime_end", "crossover_time",
          "crossover_time_se", "track_time", "pdf_time", "residence_time")
_AREAS = ("msd", "msd_se", "msd_x", "msd_y", "msd_x_se", "msd_y_se", "var_x", "var_y",
          "aged_msd", "aged_msd_se", "tamsd")


NATURAL_NAMES = {
    "time": r"time since release $t\,Uk$", "lag": r"lag $\tau\,Uk$",
    "msd": r"$\langle|\Delta\mathbf{X}|^2\rangle\,k^2$",
    "var_x": r"$\sigma_x^2 k^2$", "var_y": r"$\sigma_y^2 k^2$",
    "aged_msd": r"aged MSD $\langle|\mathbf{X}(t_a+\tau)-\mathbf{X}(t_a)|^2\rangle\,k^2$",
}


def natural_units(ds):
    """Copy of ``ds`` with times × Uk and squared lengths × k² (labels say t·Uk and ·k²).

    U and k are the flow's velocity scale and wavenumber from the provenance; a file
    without them is refused with the field named."""
    from ...errors import InputDataError
    from .sweep import flow_parameters

    _family, params, _ = flow_parameters(ds)
    try:
        velocity = float(params.get("U", params.get("velocity_scale")))
        k = float(params.get("k"))
    except (TypeError, ValueError, AttributeError):
        raise InputDataError("natural units need the flow's U and k, which this file's "
                             "provenance (study_resolved / flow_U, flow_k) does not give; "
                             "use --units model") from None
    if not (velocity > 0 and k > 0):
        raise InputDataError(f"natural units need U > 0 and k > 0; this flow has U = "
                             f"{velocity:g}, k = {k:g}; use --units model")
    out = ds.copy()
    rate = velocity * k
    for name in _TIMES:
        if name in out.variables:
            attrs = dict(out[name].attrs)
            attrs["long_name"] = NATURAL_NAMES.get(name, f"{attrs.get('long_name', name)} ·Uk")
            attrs["units"] = ""
            out = out.assign_coords({name: out[name] * rate}) if name in out.coords else \
                out.assign({name: out[name] * rate})
            out[name].attrs = attrs
    for name in _AREAS:
        if name in out.variables:
            attrs = dict(out[name].attrs)
            attrs["long_name"] = NATURAL_NAMES.get(name, f"{attrs.get('long_name', name)} ·k²")
            attrs["units"] = ""
            out[name] = out[name] * k * k
            out[name].attrs = attrs
    out.attrs["axis_units"] = "natural: t·Uk, lengths·k"
    return out


# ---- the numbers behind a figure ------------------------------------------------------------
def _safe(text) -> str:
    return re.sub(r"[^A-Za-z0-9]+", "_", str(text)).strip("_")[:60] or "line"


def figure_data(figure):
    """Every labelled or tagged curve of ``figure`` as Dataset variables
    ``axes<i>_<name>_x`` and ``_y`` on their own dimension, with the axis labels and the line
    label as attributes."""
    import xarray as xr

    out = xr.Dataset(attrs={"eddyhop_kind": "figure_data"})
    for index, ax in enumerate(figure.axes):
        for number, line in enumerate(ax.get_lines()):
            label = line.get_label()
            gid = line.get_gid()
            if (not label or label.startswith("_")) and not gid:
                continue
            x, y = (np.asarray(v, dtype=float) for v in line.get_data())
            if x.size == 0:
                continue
            name = f"axes{index}_{_safe(gid or label)}"
            if f"{name}_x" in out.variables:
                name += f"_{number}"
            dim = f"{name}_point"
            out[f"{name}_x"] = (dim, x, {"long_name": ax.get_xlabel(),
                                         "curve": str(label)})
            out[f"{name}_y"] = (dim, y, {"long_name": ax.get_ylabel(),
                                         "curve": str(label)})
    return out
