"""MSD exponents a CTRW or Lévy walk with the measured hopping tails would give."""

from __future__ import annotations

import math

import pytest

import eddyhop
from eddyhop.analysis.walk_models import (
    ctrw_exponent,
    levy_walk_exponent,
    walk_model_exponents,
)
from eddyhop.study.spec import parse_study


@pytest.mark.parametrize(("gamma", "alpha"), [(0.5, 0.5), (0.9, 0.9), (1.5, 1.0), (3.0, 1.0)])
def test_ctrw_exponent(gamma, alpha):
    """Montroll & Weiss 1965 waiting-time tail t^-(1+γ): MSD ∝ t^min(γ, 1)."""
    assert ctrw_exponent(gamma)[0] == alpha


@pytest.mark.parametrize(("gamma", "alpha"), [(0.5, 2.0), (1.5, 1.5), (1.2, 1.8), (2.5, 1.0)])
def test_levy_walk_exponent(gamma, alpha):
    """Lévy walk (Shlesinger, Klafter & Wong 1982): α = 2, 3 − γ, 1 on the three branches."""
    assert levy_walk_exponent(gamma)[0] == pytest.approx(alpha)
    assert math.isnan(levy_walk_exponent(-1.0)[0])


def test_cellular_flow_walk_predictions_are_reported_beside_the_measured_alpha():
    study = parse_study({"flow": {"family": "cellular"}, "noise": {"peclet": 10.0},
                         "run": {"particles": 1000, "dt": 0.05, "t_end": 300.0, "n_times": 30,
                                 "seed": 5, "progress": False, "step_check": False},
                         "hopping": {"enabled": True}})
    out = walk_model_exponents(eddyhop.simulate(study, progress=False))
    for name in ("ctrw_alpha", "levy_walk_alpha", "alpha_measured"):
        assert name in out and out[name].attrs["units"] == "1"
    assert math.isfinite(float(out.alpha_measured))
    # at Pe = 10 trapping is short (exponential-like residences): both walks predict
    # normal diffusion or close to it, and the measured late α is near 1
    assert abs(float(out.alpha_measured) - 1.0) < 4 * float(out.alpha_measured_se) + 0.1
    assert out.ctrw_alpha_verdict.attrs["flag_meanings"] == "accepted rejected undetermined"
