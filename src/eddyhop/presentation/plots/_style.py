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

from ...errors import EddyhopError, InputDataError
from ...results.io import atomic_path

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


# What units "1" means for a dimensional quantity of a study without [output] length_unit /
# time_unit: the model's own units (those of 1/k and 1/(U k)), not "dimensionless".
MODEL_UNITS = {"time": "model time units", "length": "model length units",
               "length2": "model length units²", "rate": "per model time unit",
               "per_length": "per model length unit"}
# Variable names → the kind of quantity they hold (for units "1").
QUANTITY_KINDS = {
    "time": "time", "lag": "time", "aging_time": "time", "residence_time": "time",
    "crossover_time": "time", "tamsd_duration": "time",
    "msd": "length2", "msd_x": "length2", "msd_y": "length2", "var_x": "length2",
    "var_y": "length2", "aged_msd": "length2", "tamsd": "length2", "tamsd_mean": "length2",
    "track_x": "length", "track_y": "length", "flight_length": "length",
    "residence_pdf": "rate",
}
# ASCII formulas in long names → mathtext (the package's own spellings).
MATH_TEXT = (("<|X(t)-X(0)|^2>", r"$\langle|\mathbf{X}(t)-\mathbf{X}(0)|^2\rangle$"),
             ("<|X(t_a+lag)-X(t_a)|^2>",
              r"$\langle|\mathbf{X}(t_a+\tau)-\mathbf{X}(t_a)|^2\rangle$"),
             ("<dx^2> - <dx>^2", r"$\langle\Delta x^2\rangle-\langle\Delta x\rangle^2$"),
             ("<dy^2> - <dy>^2", r"$\langle\Delta y^2\rangle-\langle\Delta y\rangle^2$"),
             ("d ln variance / d ln t", r"$\alpha = d\ln\sigma^2/d\ln t$"),
             ("d log MSD / d log t", r"$\alpha = d\ln\mathrm{MSD}/d\ln t$"),
             ("var_x + var_y", r"$\sigma_x^2+\sigma_y^2$"),
             ("var_x", r"$\sigma_x^2$"), ("var_y", r"$\sigma_y^2$"))
_SUPERSCRIPTS = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def pretty_units(units: str) -> str:
    """CF-style unit text with exponents as superscripts: "mm2 s-1" → "mm² s⁻¹"."""
    import re

    return re.sub(r"(?<=[A-Za-zµ])(-?\d+)\b", lambda m: m.group(1).translate(_SUPERSCRIPTS),
                  str(units))


def units_text(units, kind: str | None = None) -> str:
    """" [units]" for a label; for units "1", " (<model units>)" when ``kind`` says the
    quantity has a dimension (a time, a length, …), else " (dimensionless)"."""
    if units is None or units == "":
        return ""
    if str(units) == "1":
        return f" ({MODEL_UNITS[kind]})" if kind in MODEL_UNITS else " (dimensionless)"
    return f" [{pretty_units(units)}]"


def math_text(text: str) -> str:
    """``text`` with the package's ASCII formulas (MATH_TEXT) written as mathtext."""
    for ascii_form, math in MATH_TEXT:
        text = text.replace(ascii_form, math)
    return text


def quantity_kind(name) -> str | None:
    """The kind of quantity a variable named ``name`` holds (see QUANTITY_KINDS)."""
    name = str(name or "")
    if name in QUANTITY_KINDS:
        return QUANTITY_KINDS[name]
    if name.startswith(("msd", "var_", "aged_msd")):
        return "length2"
    return None


def label(da, fallback: str | None = None, width: int = 48, kind: str | None = None) -> str:
    """Axis label "long name [units]" from a DataArray's attributes, wrapped to ``width``;
    package formulas as mathtext, units "1" of a dimensional quantity said as model units."""
    name = da.attrs.get("long_name") or fallback or da.name or ""
    kind = kind or quantity_kind(da.name)
    text = math_text(str(name)) if da.attrs.get("long_name") or fallback else str(name)
    units = units_text(da.attrs.get("units"), kind)
    if "$" in text:  # never break inside a formula
        return text + ("\n" + units.strip() if len(text) + len(units) > width else units)
    return textwrap.fill(f"{text}{units}", width)


def math_label(symbol: str, units, kind: str) -> str:
    """A mathtext ``symbol`` with its units (model units for "1")."""
    return f"{symbol}{units_text(units, kind)}"


def time_label(units) -> str:
    return f"time since release $t${units_text(units, 'time')}"


class PlainLogMinor:
    """Minor-tick labels of a log axis spanning under ~1.5 decades, written plainly ("40",
    "0.2") at mantissas 2 and 5, instead of "4×10¹"; none on wider axes."""

    def __new__(cls):
        from matplotlib.ticker import Formatter

        class _Formatter(Formatter):
            def __call__(self, x, pos=None):
                if x <= 0 or self.axis is None:
                    return ""
                low, high = sorted(self.axis.get_view_interval())
                if low <= 0 or high / low > 30:
                    return ""
                mantissa = round(x / 10 ** np.floor(np.log10(x)), 6)
                return f"{x:g}" if mantissa in (2.0, 5.0) else ""

            def format_ticks(self, values):
                # the same labels as calling the formatter per tick, with the axis range
                # read once per draw instead of once per minor tick (dozens per decade)
                self.set_locs(values)
                if self.axis is not None:
                    low, high = sorted(self.axis.get_view_interval())
                    if low <= 0 or high / low > 30:
                        return ["" for _ in values]
                return [self(value, i) for i, value in enumerate(values)]

        return _Formatter()


class DecadeLabels:
    """Major-tick labels of a log axis: "10²", "10⁻³" in plain text with superscript digits.

    matplotlib's ``LogFormatterMathtext`` writes them as math (``$\\mathdefault{10^{2}}$``),
    and every tick label then goes through the math-text parser and layout once per
    renderer (the layout pass, the PNG and the PDF): ≈ 0.1 s per figure.  The superscript
    characters need no math layout and read the same.  A label that is not a plain power of
    ten (a fractional exponent, another base) keeps matplotlib's math text."""

    def __new__(cls):
        import re

        from matplotlib.ticker import LogFormatterMathtext

        power = re.compile(r"^\$\\mathdefault\{(-?)10\^\{(-?\d+)\}\}\$$")

        class _DecadeLabels(LogFormatterMathtext):
            def __call__(self, x, pos=None):
                text = super().__call__(x, pos)
                match = power.match(text)
                if match is None:
                    return text
                sign, exponent = match.groups()
                return f"{'−' if sign else ''}10{exponent.translate(_SUPERSCRIPTS)}"

        return _DecadeLabels()


def tidy_log_axes(ax) -> None:
    """Log axes of ``ax`` labelled as 10ⁿ at decades and plainly at 2 and 5 within a
    narrow range (never "4×10¹")."""
    for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
        if scale == "log":
            axis.set_major_formatter(DecadeLabels())
            axis.set_minor_formatter(PlainLogMinor())


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
    figure.text(0.005, 0.004, text, fontsize=6.5, color=GUIDE, ha="left", va="bottom",
                gid="provenance_caption")


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
    try:
        return _save_each(figure, path, formats, dpi)
    except Exception:
        # A user label with math markup that does not parse (a stray ``$…$`` from a study
        # file) makes the draw fail: show such texts literally and save again.  Checking
        # every text before each save instead parsed all math twice (≈ 0.1 s per figure).
        if make_text_safe(figure) == 0:
            raise
        return _save_each(figure, path, formats, dpi)


def _save_each(figure, path: Path, formats, dpi: int) -> list[Path]:
    written = []
    engine = figure.get_layout_engine()
    try:
        for number, fmt in enumerate(formats):
            if number == 0 and engine is not None and fmt == "png":
                _lay_out_for_png(figure, engine, dpi)
            if engine is not None and (number == 1 or fmt == "png"):
                # The layout (in figure coordinates) is computed once, for the first format:
                # by _lay_out_for_png, or by the first savefig.  Later saves keep it.  No
                # engine at all (not the "none" placeholder): with any engine set, savefig
                # first runs a whole draw without output only to let the engine lay out.
                figure.set_layout_engine(None)
            target = path.parent / f"{path.name}.{fmt}"
            with atomic_path(target) as temporary:
                figure.savefig(temporary, format=fmt, dpi=dpi, metadata=_metadata(fmt))
            written.append(target)
    finally:
        if engine is not None and figure.get_layout_engine() is not engine:
            figure.set_layout_engine(engine)
    return written


def _lay_out_for_png(figure, engine, dpi) -> None:
    """Lay ``figure`` out exactly as ``savefig(format="png", dpi=dpi)`` would, without drawing.

    savefig runs the engine inside a complete draw (artists, ticks, texts, paths) with no
    output, then draws again for real; the layout itself needs only text extents from an Agg
    renderer at the saving resolution, which this gives the engine directly.  The PNG is
    pixel-identical (tests/test_plots.py compares both ways).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if not isinstance(figure.canvas, FigureCanvasAgg):
        FigureCanvasAgg(figure)  # the canvas savefig would switch to for a PNG
    screen_dpi = figure.dpi
    figure.dpi = dpi
    try:
        engine.execute(figure)
    except ValueError:  # as Figure.draw: a layout that cannot be solved leaves positions as set
        pass
    finally:
        figure.dpi = screen_dpi


def _metadata(fmt):
    from ...results.provenance import figure_metadata

    return figure_metadata(fmt)  # software versions and command line
