"""A regime named after an exponent whose interval excludes that exponent is marked, with one
note saying why (the class comes from the band the interval meets, analysis.regimes)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from eddyhop.presentation.report import regimes_html
from eddyhop.presentation.text import _regime_lines, misses_centre

TOLERANCES = ("bands: bounded alpha <= 0.2, diffusive |alpha-1| <= 0.2, ballistic |alpha-2| "
              "<= 0.2; label from the 0.95 interval")


def _table(alpha, lower, upper, labels):
    regime = ("regime",)
    return xr.Dataset({
        "regime_label": (regime, np.array(labels), {"tolerances": TOLERANCES}),
        "regime_start": (regime, np.arange(1.0, len(labels) + 1)),
        "regime_end": (regime, np.arange(2.0, len(labels) + 2)),
        "regime_alpha": (regime, np.array(alpha)),
        "regime_alpha_lower": (regime, np.array(lower)),
        "regime_alpha_upper": (regime, np.array(upper)),
    })


def test_only_named_classes_whose_interval_excludes_their_exponent_are_marked():
    assert misses_centre("diffusive", 1.155, 1.321)
    assert misses_centre("diffusive", 0.765, 0.895)
    assert misses_centre("ballistic", 1.828, 1.869)
    assert not misses_centre("diffusive", 0.95, 1.05)
    assert not misses_centre("ballistic", 1.9, 2.1)
    assert not misses_centre("subdiffusive", 0.6, 0.65)  # a gap class has no one exponent
    assert not misses_centre("diffusive", np.nan, 1.3)  # no interval: nothing to say


def test_summary_and_report_mark_the_same_regimes_and_explain_once():
    ds = _table([1.238, 0.632, 1.01], [1.155, 0.608, 0.97], [1.321, 0.655, 1.05],
                ["diffusive", "subdiffusive", "diffusive"])
    lines = _regime_lines(ds)
    marked = [line for line in lines if line.endswith(" *")]
    assert len(marked) == 1 and "1.238 (label interval [1.155, 1.321])" in marked[0]
    notes = [line for line in lines if line.lstrip().startswith("* ")]
    assert len(notes) == 1 and "diffusive |alpha-1| <= 0.2" in notes[0]
    page = regimes_html(ds)
    assert page.count("diffusive *") == 1 and page.count("the label interval excludes 1") == 1


def test_no_note_when_every_interval_contains_its_exponent():
    ds = _table([1.01, 1.95], [0.97, 1.9], [1.05, 2.02], ["diffusive", "ballistic"])
    assert not any("*" in line for line in _regime_lines(ds))
    assert "interval excludes" not in regimes_html(ds)


def test_sampled_regimes_show_their_standard_error_and_a_weak_support():
    """With batch-resampling errors: every exponent ± its standard error (the label interval
    only beside a mark), and "found in N % of batch resamples" for a regime found again in
    fewer than 95 % of them; the report shows the same error and the share."""
    ds = _table([1.238, 0.632, 1.01], [1.155, 0.608, 0.97], [1.321, 0.655, 1.05],
                ["diffusive", "subdiffusive", "diffusive"])
    ds["regime_alpha_se"] = ("regime", np.array([0.061, 0.02, 0.03]))
    ds["regime_support"] = ("regime", np.array([0.97, 0.62, 1.0]))
    lines = _regime_lines(ds)
    assert "alpha = 1.238 ± 0.061 (label interval [1.155, 1.321]) *" in lines[1]
    assert lines[2].endswith("alpha = 0.632 ± 0.02; found in 62% of batch resamples")
    assert lines[3].endswith("alpha = 1.010 ± 0.03")
    page = regimes_html(ds)
    assert "1.238 ± 0.061 (label interval [1.155, 1.321])" in page
    assert "62%" in page and "found again in batch resamples" in page
