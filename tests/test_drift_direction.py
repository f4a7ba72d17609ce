"""Drift given as angle and speed or as a rotation number; variance along and across it."""

from __future__ import annotations

import math

import numpy as np
import pytest

import eddyhop
from eddyhop.analysis import analyse
from eddyhop.analysis.centring import transport_curve
from eddyhop.analysis.drift_frame import drift_frame_variance
from eddyhop.errors import StudyError
from eddyhop.flows import get_family
from eddyhop.flows.drift_direction import GOLDEN_MEAN
from eddyhop.study.spec import parse_study

FAMILY = get_family("drifting_cellular")


def test_forms_of_the_drift_resolve_to_the_same_components():
    golden = FAMILY.validate({"drift_speed": 0.5, "rotation_number": "golden"})
    assert golden["rotation_number"] == pytest.approx(GOLDEN_MEAN, rel=1e-15)
    assert golden["drift_y"] / golden["drift_x"] == pytest.approx(GOLDEN_MEAN, rel=1e-15)
    assert math.hypot(golden["drift_x"], golden["drift_y"]) == pytest.approx(0.5, rel=1e-15)
    polar = FAMILY.validate({"drift_speed": 0.5, "drift_angle": 30.0})
    assert polar["drift_x"] == pytest.approx(0.5 * math.cos(math.pi / 6), rel=1e-15)
    assert polar["drift_angle"] == pytest.approx(30.0, rel=1e-13)
    assert FAMILY.validate(polar) == polar  # recorded parameters re-validate unchanged
    plain = FAMILY.validate({"drift_x": 0.0, "drift_y": -0.2})
    assert plain["drift_angle"] == pytest.approx(-90.0) and plain["rotation_number"] == -math.inf


@pytest.mark.parametrize(("values", "field"), [
    ({"drift_speed": 0.5}, "flow.drift_speed"),
    ({"drift_angle": 10.0}, "flow.drift_angle"),
    ({"drift_speed": 0.5, "rotation_number": "silver"}, "flow.rotation_number"),
    ({"drift_speed": -1.0, "drift_angle": 0.0}, "flow.drift_speed"),
    ({"drift_x": 0.1, "drift_speed": 0.5, "drift_angle": 0.0}, "drift_x"),
])
def test_bad_drift_is_one_line_naming_the_field(values, field):
    with pytest.raises(StudyError) as info:
        FAMILY.validate(values)
    assert field in str(info.value) and "\n" not in str(info.value)


def run(flow, particles=2000, t_end=20.0, kappa=0.05):
    study = parse_study({"flow": {"family": "drifting_cellular", **flow},
                         "noise": {"kappa": kappa},
                         "run": {"particles": particles, "dt": 0.02, "t_end": t_end,
                                 "n_times": 8, "seed": 11, "progress": False,
                                 "step_check": False}})
    return eddyhop.simulate(study, progress=False)


def test_run_records_the_drift_and_reports_along_and_across():
    ds = run({"U": 0.0, "drift_speed": 1.0, "rotation_number": "golden"})
    assert ds.attrs["flow_rotation_number"] == pytest.approx(GOLDEN_MEAN)
    assert ds.attrs["flow_drift_angle"] == pytest.approx(math.degrees(math.atan(GOLDEN_MEAN)))
    frame = analyse(ds)
    t = frame.time.values
    # U = 0: pure diffusion carried by the drift, Var = 2κt in every direction (exact);
    # tolerance 4 jackknife standard errors
    for name in ("variance_along_drift", "variance_across_drift"):
        values = frame[name].values.ravel()
        se = frame[f"{name}_se"].values.ravel()
        assert np.all(np.abs(values - 2 * 0.05 * t) <= 4 * se)
    assert frame.variance_along_drift.attrs["units"]


def test_drift_along_x_frame_is_the_coordinate_variances():
    ds = run({"U": 1.0, "drift_x": 0.4}, particles=500, t_end=5.0)
    frame = drift_frame_variance(ds)
    part = ds.isel(start=0) if "start" in ds.dims else ds
    var_x = transport_curve(part, "x")[0]
    var_y = transport_curve(part, "y")[0]
    np.testing.assert_allclose(frame.variance_along_drift.values.ravel(), var_x, rtol=1e-12)
    np.testing.assert_allclose(frame.variance_across_drift.values.ravel(), var_y, rtol=1e-12)
