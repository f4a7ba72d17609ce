"""Regime tints stay distinguishable under simulated colour-vision deficiency, read from the
drawn matplotlib artists (blended as drawn), with the colour science checked against its
published test data."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from eddyhop.analysis.regimes import LABELS
from eddyhop.presentation.plots import _regimes
from eddyhop.presentation.plots._style import new_figure
from eddyhop.presentation.plots.colour_check import (
    MACHADO_2009,
    ciede2000,
    simulate,
    smallest_difference,
    srgb_to_lab,
)

# Regime classes must differ by ΔE00 ≥ 5 after blending and simulation (module docstring of
# eddyhop.plots.colour_check: ≈1 is the threshold of perception; 5 is told apart at a glance).
MIN_DELTA_E = 5.0
VISIONS = (None, "deuteranopia", "protanopia", "tritanopia")


@pytest.mark.parametrize("lab1, lab2, expected", [
    # Sharma, Wu & Dalal 2005, Color Res. Appl. 30, 21, Table 1: pairs 1, 2 and 7 (values
    # to 4 decimals as published)
    ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
    ((50.0, 3.1571, -77.2803), (50.0, 0.0, -82.7485), 2.8615),
    ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
])
def test_ciede2000_matches_the_published_test_data(lab1, lab2, expected):
    assert ciede2000(lab1, lab2) == pytest.approx(expected, abs=1e-4)


def test_simulation_keeps_white_white_and_lab_of_white_is_100():
    for matrix in MACHADO_2009.values():
        np.testing.assert_allclose(matrix.sum(axis=1), 1.0, atol=1e-5)
    for deficiency in MACHADO_2009:
        np.testing.assert_allclose(simulate(np.ones(3), deficiency), 1.0, atol=1e-5)
    np.testing.assert_allclose(srgb_to_lab(np.ones(3)), (100.0, 0.0, 0.0), atol=1e-3)


def test_red_and_green_merge_under_deuteranopia():
    """The simulation does what it claims: a red/green pair far apart in normal vision
    comes close under deuteranopia."""
    pair = {"red": "#d62728", "green": "#2ca02c"}
    normal = smallest_difference(pair)[0]
    deutan = smallest_difference(pair, deficiency="deuteranopia")[0]
    assert normal > 40 and deutan < normal / 2


def _every_class_dataset():
    times = np.geomspace(0.01, 100.0, len(LABELS) + 1)
    return xr.Dataset({
        "regime_label": ("regime", np.array(LABELS, dtype=object)),
        "regime_start": ("regime", times[:-1] * 1.05),
        "regime_end": ("regime", times[1:] / 1.05),
    })


def _drawn_colours(bands):
    """{class: sRGB as seen on white} from the band artists (face colour blended by its
    alpha, as the Agg renderer composites)."""
    seen = {}
    for band in bands:
        name = band.get_gid().rsplit("_", 1)[-1] if "super_ballistic" not in band.get_gid() \
            else "super_ballistic"
        rgba = np.asarray(band.get_facecolor(), dtype=float)
        seen[name] = rgba[3] * rgba[:3] + (1 - rgba[3]) * np.ones(3)
    return seen


@pytest.mark.parametrize("drawing", ["shade", "strips"])
@pytest.mark.parametrize("vision", VISIONS)
def test_drawn_regime_tints_are_distinct_under_colour_blindness(drawing, vision):
    ds = _every_class_dataset()
    _figure, ax = new_figure()
    ax.set_xscale("log")
    bands = _regimes.shade(ax, ds) if drawing == "shade" else \
        _regimes.strips(ax, ds, [None], ["#000000"])
    colours = _drawn_colours(bands)
    assert set(colours) == set(LABELS)
    labs = {name: srgb_to_lab(simulate(rgb, vision) if vision else rgb)
            for name, rgb in colours.items()}
    names = sorted(labs)
    worst = min((ciede2000(labs[a], labs[b]), a, b) for i, a in enumerate(names)
                for b in names[i + 1:])
    assert worst[0] >= MIN_DELTA_E, worst


def test_tints_are_ordered_by_lightness_on_each_side_of_diffusive():
    """Purples darken below diffusive and oranges darken above it, so the order of the
    classes reads without colour vision."""
    lightness = {name: srgb_to_lab(np.asarray(
        __import__("matplotlib.colors", fromlist=["to_rgb"]).to_rgb(colour)))[0]
        for name, colour in _regimes.TINTS.items()}
    assert lightness["bounded"] < lightness["subdiffusive"] < lightness["diffusive"]
    assert lightness["diffusive"] > lightness["superdiffusive"] > lightness["ballistic"] \
        > lightness["super_ballistic"]
