"""Axis labels and ticks: model units said as such, mathtext formulas, plain log ticks."""

from __future__ import annotations

import numpy as np
import xarray as xr

from eddyhop.presentation.plots._style import (
    label,
    new_figure,
    pretty_units,
    tidy_log_axes,
    units_text,
)


def test_units_one_of_a_time_is_model_units_not_dimensionless():
    time = xr.DataArray([1.0], dims="time", name="time",
                        attrs={"long_name": "time since release", "units": "1"})
    assert label(time) == "time since release (model time units)"
    alpha = xr.DataArray([1.0], dims="time", name="alpha",
                         attrs={"long_name": "local exponent", "units": "1"})
    assert label(alpha) == "local exponent (dimensionless)"
    pdf = xr.DataArray([1.0], dims="t", name="residence_pdf",
                       attrs={"long_name": "density of residence times", "units": "1"})
    assert "per model time unit" in label(pdf)
    assert units_text("s-1") == " [s⁻¹]" and pretty_units("mm2 s-1") == "mm² s⁻¹"


def test_package_formulas_become_mathtext():
    msd = xr.DataArray([1.0], dims="time", name="msd", attrs={
        "long_name": "mean-squared displacement <|X(t)-X(0)|^2>", "units": "mm2"})
    text = label(msd)
    assert r"$\langle|\mathbf{X}(t)-\mathbf{X}(0)|^2\rangle$" in text and "[mm²]" in text
    assert "<|X" not in text
    from matplotlib.mathtext import MathTextParser

    MathTextParser("path").parse(text[text.index("$"):text.rindex("$") + 1])


def test_log_ticks_read_plainly_on_a_narrow_axis():
    figure, ax = new_figure()
    ax.plot([30.0, 80.0], [30.0, 80.0])
    ax.set_xscale("log")
    ax.set_yscale("log")
    tidy_log_axes(ax)
    figure.draw_without_rendering()
    shown = [t.get_text() for t in ax.yaxis.get_minorticklabels() if t.get_text()]
    assert "50" in shown and not any("times" in s or "×" in s for s in shown)
    # a wide axis labels decades only
    ax.set_ylim(1e-3, 1e3)
    figure.draw_without_rendering()
    assert not [t.get_text() for t in ax.yaxis.get_minorticklabels() if t.get_text()]
    assert np.isfinite(ax.get_ylim()).all()


def test_log_decades_are_plain_superscripts_not_math_text():
    # a power of ten needs no math layout (each math label is parsed once per renderer); any
    # other label keeps matplotlib's math text
    from eddyhop.presentation.plots._style import DecadeLabels

    _figure, ax = new_figure()
    ax.set_xscale("log")
    ax.set_xlim(1e-3, 1e3)
    tidy_log_axes(ax)
    formatter = ax.xaxis.get_major_formatter()
    assert isinstance(formatter, DecadeLabels().__class__.__mro__[1])  # a LogFormatterMathtext
    assert formatter.format_ticks([1e-3, 1.0, 10.0, 1e3]) == ["10⁻³", "10⁰", "10¹", "10³"]
    assert "$" not in "".join(formatter.format_ticks([1e-2, 1e2]))
    assert formatter(0.0).startswith("$")  # not a power of ten: math text as before
