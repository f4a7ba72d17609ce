"""Shared figure plumbing: palette, axis labels from attributes, input checks, saving.

Figures are built on :class:`matplotlib.figure.Figure` directly (no ``pyplot``), so library
code never touches global state, never opens a window and works with any backend.

Palette: the eight-colour set of Okabe & Ito (2008), "Color Universal Design (CUD): how to make
figures and presentations that are friendly to colorblind people" (web publication, J*FLY),
which stays distinguishable under the common forms of colour-vision deficiency.  Line styles
vary together with colour so that curves also survive greyscale printing.
"""

from __future__ import annotations

import textwrap
from itertools import cycle
from pathlib import Path

import numpy as np

from ..errors import EddyhopError, InputDataError
from ..io import atomic_path

# Okabe–Ito colours, black first (reference curves use grey instead).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000",
           "#F0E442")
LINESTYLES = ("-", "--", "-.", ":")
GUIDE = "#6E6E6E"  # reference slopes and asymptotes
SEPARATRIX = "#D55E00"
# Diverging map for exponents centred on α = 1 (ColorBrewer PuOr is marked colour-blind safe).
EXPONENT_CMAP = "PuOr_r"
# Sequential map for stream-function contours (perceptually uniform, colour-blind safe).
CONTOUR_CMAP = "cividis"

FORMATS = ("png", "pdf", "svg")


def styles():
    """Endless (colour, linestyle) pairs for successive curves."""
    return cycle(zip(PALETTE, cycle(LINESTYLES)))


def new_figure(nrows=1, ncols=1, *, width=6.4, height=4.4, **subplot_kw):
    """A Figure (Agg canvas, no pyplot) and its axes array squeezed like ``plt.subplots``."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width, height), layout="constrained")
    axes = figure.subplots(nrows, ncols, squeeze=True, **subplot_kw)
    return figure, axes


def units_text(units) -> str:
    if units is None or units == "":
        return ""
    if str(units) == "1":
        return " (dimensionless)"
    return f" [{units}]"


def label(da, fallback: str | None = None, width: int = 48) -> str:
    """Axis label "long name [units]" from a DataArray's attributes, wrapped to ``width``."""
    name = da.attrs.get("long_name") or fallback or da.name or ""
    return textwrap.fill(f"{name}{units_text(da.attrs.get('units'))}", width)


def require(ds, names, what: str, how: str) -> None:
    """Raise :class:`InputDataError` unless every variable/coordinate in ``names`` exists.

    ``what`` says which figure needs them, ``how`` which command or setting makes them.
    """
    missing = [n for n in names if n not in ds.variables]
    if missing:
        raise InputDataError(f"{what} needs {', '.join(missing)}, which this Dataset lacks; "
                             f"{how}")


def require_finite(values, name: str, what: str) -> np.ndarray:
    """Values with at least one finite entry, else a clear error (an all-NaN curve)."""
    array = np.asarray(values, dtype=float)
    if not np.isfinite(array).any():
        raise InputDataError(f"{what}: {name} holds no finite values (all NaN or missing)")
    return array


def title(text: str, width: int = 72) -> str:
    """A figure or axes title wrapped to ``width`` characters."""
    return textwrap.fill(text, width)


def start_labels(ds) -> list:
    """Labels of the start regions (one entry ``None`` when ``start`` is not a dimension)."""
    if "start" in ds.dims:
        return [str(v) for v in ds["start"].values]
    return [None]


def select_start(ds, start):
    return ds if start is None else ds.sel(start=start)


def start_name(ds, start) -> str:
    if start is not None:
        return str(start)
    if "start" in ds.coords:
        return str(ds["start"].values)
    return "ensemble"


def positive(x, y):
    """Mask of points drawable on log-log axes."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    return np.isfinite(x) & np.isfinite(y) & (x > 0) & (y > 0)


def caption(figure, text: str) -> None:
    """Small provenance line at the bottom of a figure, in a strip kept free of axes."""
    engine = figure.get_layout_engine()
    if engine is not None and hasattr(engine, "set"):
        engine.set(rect=(0.0, 0.03, 1.0, 0.97))
    figure.text(0.005, 0.004, text, fontsize=6.5, color=GUIDE, ha="left", va="bottom")


def provenance_line(ds) -> str:
    attrs = ds.attrs
    parts = [f"{attrs.get('flow_family', '?')} flow"]
    peclet = attrs.get("peclet")
    if peclet is not None:
        try:
            parts.append(f"Pe = {float(peclet):.4g}")
        except (TypeError, ValueError):
            parts.append(f"Pe = {peclet}")
    elif attrs.get("eddyhop_kind") == "sweep":
        parts.append(f"sweep of {attrs.get('sweep_points', '?')} points")
    if "integrator" in attrs:
        parts.append(f"{attrs['integrator']}, dt = {attrs.get('dt', '?')}")
    if "seed" in attrs:
        parts.append(f"seed {attrs['seed']}")
    parts.append(f"eddyhop {attrs.get('eddyhop_version', '?')}")
    return " · ".join(parts)


def literal_text(text: str) -> str:
    """``text`` with every unescaped ``$`` escaped, so matplotlib shows it literally."""
    out, escaped = [], False
    for char in str(text):
        out.append("\\$" if char == "$" and not escaped else char)
        escaped = char == "\\" and not escaped
    return "".join(out)


def make_text_safe(figure) -> int:
    """Show literally every text of ``figure`` whose math markup does not parse.

    Labels, units and titles come from study files and result attributes (user text); a
    stray ``$…$`` in them would otherwise abort drawing with a mathtext parse error.  The
    package's own math labels parse and are kept.  Returns how many texts were changed."""
    from matplotlib.font_manager import FontProperties
    from matplotlib.mathtext import MathTextParser
    from matplotlib.text import Text

    parser = MathTextParser("path")
    changed = 0
    for artist in figure.findobj(Text):
        text = artist.get_text()
        dollars = text.count("$") - text.count("\\$")
        if dollars == 0 or dollars % 2 or not artist.get_parse_math():
            continue  # matplotlib treats the text as math only with an even count of $
        try:  # it lays out (and parses) each line on its own
            for line in text.split("\n"):
                parser.parse(line, dpi=72, prop=FontProperties())
        except Exception:
            artist.set_text(literal_text(text))
            changed += 1
    return changed


def save_figure(figure, path, formats=("png",), dpi: int = 150) -> list[Path]:
    """Write ``figure`` to ``path`` with each suffix in ``formats``; atomic per file.

    ``path`` is a file stem: ``.<format>`` is appended (a trailing figure suffix such as
    ``.png`` is dropped first), so dotted stems like ``run.analysed_msd`` keep every part.

    Each file is drawn into a temporary file in the target directory and renamed, so an
    interrupted save never leaves a half-written figure.  Returns the written paths.
    """
    path = Path(path)
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise EddyhopError(f"output directory {str(parent)!r} does not exist; create it first")
    if path.suffix.lstrip(".").lower() in FORMATS:
        path = path.with_suffix("")
    for fmt in formats:
        if fmt not in FORMATS:
            raise EddyhopError(f"figure format {fmt!r} is not supported; choose from "
                               + ", ".join(FORMATS))
    make_text_safe(figure)
    written = []
    engine = figure.get_layout_engine()
    try:
        for number, fmt in enumerate(formats):
            if number == 1 and engine is not None:
                # the layout (in figure coordinates, independent of dpi and file format) was
                # computed by the first save; the later formats reuse it instead of paying
                # for the constrained-layout solve again (~10 % of a save)
                figure.set_layout_engine("none")
            target = path.parent / f"{path.name}.{fmt}"
            with atomic_path(target) as temporary:
                figure.savefig(temporary, format=fmt, dpi=dpi, metadata=_metadata(fmt))
            written.append(target)
    finally:
        if engine is not None and figure.get_layout_engine() is not engine:
            figure.set_layout_engine(engine)
    return written


def _metadata(fmt):
    from .. import __version__

    creator = f"eddyhop {__version__}"
    if fmt == "png":
        return {"Software": creator}
    if fmt == "pdf":
        return {"Creator": creator}
    return {"Creator": creator} if fmt == "svg" else None
