"""The [sweep] table: schema, points, units and every bad input with a clear message.

No simulation runs here; these tests only parse study documents.
"""

from __future__ import annotations

import copy
import math

import pytest

from eddyhop.errors import StudyError
from eddyhop.study.spec import parse_study

BASE = {
    "title": "sweep spec test",
    "flow": {"family": "cats_eye", "U": 1.0, "k": 1.0, "epsilon": 0.2},
    "noise": {"kappa": 0.1},
    "start": [{"kind": "uniform", "label": "whole"},
              {"kind": "box", "label": "corner", "x_min": 0.0, "x_max": 0.3, "y_min": 0.0,
               "y_max": 0.3}],
    "run": {"particles": 64, "dt": 0.01, "t_end": 1.0, "n_times": 5, "seed": 1,
            "progress": False},
}


def study_with(sweep: dict, **sections):
    document = copy.deepcopy(BASE)
    document.update(copy.deepcopy(sections))
    document["sweep"] = sweep
    return parse_study(document)


def test_product_of_log_range_and_labels_in_order():
    sweep = study_with({"noise.peclet": {"first": 1.0, "last": 1000.0, "per_decade": 1,
                                         "scale": "log"},
                        "start": ["corner", "whole"]}).sweep
    assert sweep.dims == ("peclet", "start")
    assert sweep.shape == (4, 2)
    assert sweep.axes[0].values == (1.0, 10.0, 100.0, 1000.0)  # end points exact (geomspace)
    points = sweep.points()
    assert [p.id for p in points] == [f"pt{i:04d}" for i in range(8)]
    # the last axis varies fastest
    assert [(p.values["noise.peclet"], p.values["start"]) for p in points[:3]] == [
        (1.0, "corner"), (1.0, "whole"), (10.0, "corner")]


def test_point_document_replaces_kappa_by_peclet_and_selects_one_start():
    sweep = study_with({"noise.peclet": [5.0, 50.0], "start": ["corner"]}).sweep
    point = sweep.points()[1]
    document = sweep.point_document(point)
    assert document["noise"] == {"peclet": 50.0}
    assert document["start"]["label"] == "corner"
    assert "sweep" not in document
    study = sweep.point_study(point)
    # Pe = U/(kappa k) (wavenumber convention): kappa = 1/50
    assert study.noise.kappa == pytest.approx(1.0 / 50.0, rel=1e-15)
    assert [r.label for r in study.starts] == ["corner"]


def test_nested_tables_equal_dotted_keys():
    dotted = study_with({"flow.epsilon": [0.0, 0.5, 1.0]}).sweep
    nested = study_with({"flow": {"epsilon": [0.0, 0.5, 1.0]}}).sweep
    assert dotted.axes == nested.axes


def test_zip_walks_lists_together():
    sweep = study_with({"combine": "zip", "noise.peclet": [1.0, 10.0, 100.0],
                        "run.seed": [4, 5, 6]}).sweep
    assert sweep.dims == ("point",)
    assert [(p.values["noise.peclet"], p.values["run.seed"]) for p in sweep.points()] == [
        (1.0, 4), (10.0, 5), (100.0, 6)]


def test_start_parameter_and_linear_range():
    sweep = study_with({"start.corner.x_max": {"first": 0.2, "last": 0.6, "count": 3}}).sweep
    axis = sweep.axes[0]
    assert axis.dim == "start_corner_x_max" and axis.units == "L"
    assert axis.values == pytest.approx((0.2, 0.4, 0.6), abs=1e-15)
    study = sweep.point_study(sweep.points()[2])
    assert study.starts[1].params["x_max"] == pytest.approx(0.6)


def test_units_of_axes_are_symbolic():
    sweep = study_with({"noise.kappa": [0.1, 0.2], "flow.U": [1.0, 2.0], "flow.k": [1.0, 2.0],
                        "flow.epsilon": [0.0, 1.0]}).sweep
    assert [a.units for a in sweep.axes] == ["L2 T-1", "L T-1", "L-1", "1"]


def test_fingerprint_ignores_cosmetics_but_not_numbers():
    a = study_with({"noise.peclet": [1.0, 10.0]}).sweep.fingerprint()
    retitled = study_with({"noise.peclet": [1.0, 10.0]}, title="another title",
                          output={"length_unit": "m", "time_unit": "s"})
    assert retitled.sweep.fingerprint() == a
    more_workers = copy.deepcopy(BASE["run"]) | {"workers": 2, "chunk": 512}
    assert study_with({"noise.peclet": [1.0, 10.0]}, run=more_workers).sweep.fingerprint() == a
    assert study_with({"noise.peclet": [1.0, 11.0]}).sweep.fingerprint() != a
    other_seed = copy.deepcopy(BASE["run"]) | {"seed": 2}
    assert study_with({"noise.peclet": [1.0, 10.0]}, run=other_seed).sweep.fingerprint() != a


@pytest.mark.parametrize(
    "sweep, words",
    [
        ({"noise.viscosity": [1.0]}, ["noise.viscosity", "unknown parameter", "noise.peclet"]),
        ({"flow.omega": [1.0]}, ["flow.omega", "unknown", "flow.epsilon"]),
        ({"drift.x": [1.0]}, ["drift.x", "unknown"]),
        ({"noise.peclet": []}, ["noise.peclet", "empty"]),
        ({"noise.peclet": {"first": 1.0, "last": 10.0, "count": 0}}, ["count = 0", "empty"]),
        ({"noise.peclet": {"first": 0.0, "last": 10.0, "count": 3, "scale": "log"}},
         ["first = 0", "positive"]),
        ({"noise.peclet": {"first": 10.0, "last": -1.0, "count": 3, "scale": "log"}},
         ["last = -1", "positive"]),
        ({"noise.peclet": {"first": 1.0, "last": 10.0, "per_decade": 2}},
         ["per_decade", "log"]),
        ({"noise.peclet": {"first": 1.0, "last": 20.0, "per_decade": 2, "scale": "log"}},
         ["decades", "whole number"]),
        ({"noise.peclet": {"first": 1.0, "last": 10.0}}, ["count or per_decade"]),
        ({"noise.peclet": {"first": 1.0, "last": 10.0, "count": 3, "scale": "cubic"}},
         ["scale", "cubic", "log"]),
        ({"noise.peclet": {"first": 1.0, "last": 10.0, "count": 3, "step": 2}}, ["step"]),
        ({"noise.peclet": [1.0, 1.0]}, ["distinct"]),
        ({"noise.peclet": [1.0, "ten"]}, ["noise.peclet", "[1]", "ten"]),
        ({"noise.peclet": 10.0}, ["list", "range"]),
        ({"flow.epsilon": [0.5, 1.5]}, ["sweep point pt0001", "epsilon=1.5", "flow.epsilon",
                                        "[0, 1]"]),
        ({"run.dt": [0.01, 0.02]}, ["run.dt", "cannot be swept", "time grid"]),
        ({"run.particles": [10, 20]}, ["run.particles", "cannot be swept"]),
        ({"run.seed": {"first": 1.0, "last": 5.0, "count": 3}}, ["run.seed", "list"]),
        ({"run.seed": [1, 2.5]}, ["run.seed", "integer"]),
        ({"start": ["corner", "middle"]}, ["middle", "not a start-region label", "corner"]),
        ({"start.x_max": [0.1]}, ["several start regions", "start.<label>.x_max"]),
        ({"start.corner.radius": [0.1]}, ["corner", "no numeric parameter", "x_max"]),
        ({"start.centre.x": [0.1]}, ["no start region labelled 'centre'"]),
        ({"start": ["corner"], "start.corner.x_max": [0.4]}, ["not both"]),
        ({"noise.peclet": [1.0], "noise.kappa": [0.1]}, ["same diffusivity"]),
        ({"combine": "zip", "noise.peclet": [1.0, 2.0], "flow.U": [1.0]}, ["zip", "equal"]),
        ({"combine": "diagonal", "noise.peclet": [1.0]}, ["sweep.combine", "diagonal"]),
        ({}, ["no parameter to sweep", "noise.peclet"]),
    ],
)
def test_bad_sweeps_name_the_problem(sweep, words):
    with pytest.raises(StudyError) as info:
        study_with(sweep)
    message = str(info.value)
    for word in words:
        assert word in message, (word, message)


def test_fixed_part_errors_read_as_without_a_sweep():
    document = copy.deepcopy(BASE)
    document["run"]["dt"] = -1.0
    document["sweep"] = {"noise.peclet": [1.0, 2.0]}
    with pytest.raises(StudyError, match=r"^run\.dt = -1"):
        parse_study(document)


def test_log_range_values_are_reproducible_floats():
    sweep = study_with({"noise.peclet": {"first": 1.0, "last": 100.0, "per_decade": 2,
                                         "scale": "log"}}).sweep
    values = sweep.axes[0].values
    assert len(values) == 5 and values[0] == 1.0 and values[-1] == 100.0
    assert values[1] == pytest.approx(math.sqrt(10.0), rel=1e-14)
