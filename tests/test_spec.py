"""Study validation: every bad input gets one clear message naming field, value and range."""

from __future__ import annotations

import math

import pytest

from eddyhop.engine.noise import convert_peclet, kappa_from_peclet, peclet_from_kappa
from eddyhop.errors import StudyError
from eddyhop.study.spec import load_study, parse_study_text
from tests.conftest import make_study


@pytest.mark.parametrize(
    "sections, words",
    [
        ({"run": {"particles": 0}}, ["run.particles", "0", "[1"]),
        ({"run": {"particles": -5}}, ["run.particles", "-5"]),
        ({"run": {"dt": 0.0}}, ["run.dt", "(0"]),
        ({"run": {"dt": -0.1}}, ["run.dt", "-0.1"]),
        ({"flow": {"family": "cats_eye", "epsilon": 1.5}}, ["flow.epsilon", "1.5", "[0, 1]"]),
        ({"noise": {"kappa": -1.0, "_replace": True}}, ["noise.kappa", "-1"]),
        ({"flow": {"family": "vortex_street"}}, ["flow.family", "vortex_street", "cellular"]),
        ({"run": {"integrator": "leapfrog"}}, ["run.integrator", "leapfrog", "milstein"]),
        ({"run": {"n_times": 1}}, ["run.n_times", "1"]),
        ({"run": {"t_first": 5.0}}, ["run.t_first", "run.t_end"]),
        ({"run": {"t_end": 0.01}}, ["run.dt", "run.t_end"]),
        ({"run": {"particle": 10}}, ["run", "'particle'", "particles"]),
        ({"flow": {"wavelength": 2.0}}, ["wavelength", "cellular"]),
        ({"noise": {"kappa": 0.1}}, ["exactly one", "noise.kappa", "noise.peclet"]),
        ({"run": {"integrator": "rk4"}}, ["rk4", "kappa = 0"]),
        ({"noise": {"kappa": 0.1, "model": "modulated", "modulation": 0.5, "_replace": True},
          "run": {"integrator": "strang_rk2"}}, ["strang_rk2", "additive"]),
        ({"aging": {"times": [5.0]}}, ["aging.times", "run.t_end"]),
        ({"aging": {"times": [1.0, 0.5]}}, ["aging.times", "increasing"]),
        ({"moments": {"orders": [0.0, 2.0]}}, ["moments.orders[0] = 0.0", "(0, inf)"]),
        # non-finite values (TOML allows inf and nan literals) are refused, never run
        ({"noise": {"kappa": math.inf, "_replace": True}}, ["noise.kappa", "inf", "[0, inf)"]),
        ({"noise": {"peclet": math.nan, "_replace": True}}, ["noise.peclet", "nan"]),
        ({"flow": {"U": math.inf}}, ["flow.U", "inf", "[0, inf)"]),
        ({"run": {"t_end": math.inf}}, ["run.t_end", "inf"]),
        ({"start": {"kind": "nowhere"}}, ["start.kind", "nowhere"]),
        ({"run": {"workers": 0}}, ["run.workers", "0"]),
        ({"run": {"times": [0.5, 0.2, 1.0]}}, ["run.times", "increasing"]),
        ({"run": {"times": [0.5, 3.0]}}, ["run.times", "run.t_end"]),
        ({"run": {"times": [0.001, 0.5]}}, ["run.times", "0.001", "run.dt = 0.02"]),
        ({"run": {"times": [0.5, 0.505, 1.0]}}, ["run.times", "0.5", "0.505", "same step"]),
        ({"flow": {"family": "fourier", "U": 1.0, "k": 1.0, "modes": [[0, 0, 1.0, 0.0]],
                   "_replace": True}}, ["flow.modes[0]", "(0, 0)"]),
    ],
)
def test_bad_input_names_field_value_and_range(sections, words):
    with pytest.raises(StudyError) as info:
        make_study(**sections)
    message = str(info.value)
    for word in words:
        assert word in message, (word, message)


def test_unknown_top_level_table():
    with pytest.raises(StudyError, match="'flows'"):
        parse_study_text('[flows]\nfamily = "cellular"\n')


def test_not_toml(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("this is = = not toml\n")
    with pytest.raises(StudyError, match="not valid TOML"):
        load_study(path)


def test_missing_file(tmp_path):
    with pytest.raises(StudyError, match="does not exist"):
        load_study(tmp_path / "absent.toml")


def test_schema_version_checked():
    with pytest.raises(StudyError, match="schema_version"):
        parse_study_text('schema_version = 99\n[flow]\nfamily = "cellular"\n')


def test_peclet_conventions_differ_by_pi():
    """Pe = U/(κk) (wavenumber) vs Pe_ℓ = U(π/k)/κ (eddy side ℓ = π/k): Pe_ℓ = π Pe."""
    assert peclet_from_kappa(2.0, 0.5, 0.1) == pytest.approx(40.0)
    assert peclet_from_kappa(2.0, 0.5, 0.1, "cell_side") == pytest.approx(40.0 * math.pi)
    assert convert_peclet(40.0, "wavenumber", "cell_side") == pytest.approx(40.0 * math.pi)
    assert kappa_from_peclet(2.0, 0.5, 40.0 * math.pi, "cell_side") == pytest.approx(0.1)
    study = make_study(noise={"peclet": 50.0, "peclet_convention": "cell_side"})
    assert study.noise.kappa == pytest.approx(math.pi / 50.0)


def test_defaults_resolve():
    study = make_study(noise={"kappa": 0.0, "_replace": True})
    # steady flow without noise: the streamline-preserving scheme (benchmarks/bench_streamline.py)
    assert study.run.integrator == "projected_rk45"
    assert study.run.tolerance == 1e-8
    assert study.noise.peclet is None
    assert study.starts[0].kind == "uniform"


# ---- step-size warnings ----------------------------------------------------------------------
@pytest.mark.parametrize(
    "sections, phrase",
    [
        # static rules apply to Euler-type steps without the measured step check:
        # dt·U·k = 0.2 > 0.01: Euler-type steps distort eddy orbits
        ({"run": {"dt": 0.2, "t_end": 4.0, "integrator": "euler_maruyama",
                  "step_check": False}}, "advective times 1/(U k)"),
        # dt·κ·k² = 0.02 > 0.01 with Pe = 0.5 (κ = 2): the cell diffusion time is resolved badly
        ({"noise": {"peclet": 0.5}, "run": {"dt": 0.01, "integrator": "euler_maruyama",
                                            "step_check": False}}, "cell diffusion times"),
        # period 2π/ω = 0.628 with dt = 0.02: 31 steps per period < 50
        ({"flow": {"family": "oscillating_cellular", "B": 0.3, "omega": 10.0},
          "noise": {"peclet": 10.0}}, "flow period"),
    ],
)
def test_each_step_size_warning_fires_once_per_run(sections, phrase):
    import warnings

    import eddyhop
    from eddyhop.engine.runner import StepSizeWarning

    study = make_study(**sections)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        eddyhop.simulate(study, workers=2, chunk=64, progress=False)
    messages = [str(w.message) for w in caught if issubclass(w.category, StepSizeWarning)]
    assert len([m for m in messages if phrase in m]) == 1, messages
    assert all("run.dt" in m for m in messages)


def test_a_strong_drift_counts_in_the_advective_step_check():
    """dt·U·k = 0.005 for the cells, but a drift of 8 U makes the peak speed ≈ 9 U (Euler–
    Maruyama without the measured check: static limit 0.01)."""
    from eddyhop.engine.runner import step_size_warnings

    run = {"dt": 0.005, "integrator": "euler_maruyama", "step_check": False}
    calm = make_study(flow={"family": "drifting_cellular"}, run=run)
    windy = make_study(flow={"family": "drifting_cellular", "drift_x": 8.0}, run=run)
    assert not [m for m in step_size_warnings(calm) if "advective" in m]
    assert [m for m in step_size_warnings(windy) if "advective" in m and "peak speed" in m]


def test_small_steps_give_no_step_size_warning():
    from eddyhop.engine.runner import step_size_warnings

    assert step_size_warnings(make_study()) == []


def test_study_built_in_code_records_its_toml():
    """Provenance: a study made from a dict (notebooks, sweeps) carries TOML text that parses
    back to the same document and to the same resolved study."""
    import numpy as np
    import tomllib

    from eddyhop.study.spec import parse_study

    document = {
        "title": 'tray "A" — cores',
        "flow": {"family": "fourier", "U": 1.0, "k": np.float64(1.0),
                 "modes": [[1, -1, 0.5, 0.0], [2, 1, 0.05, -0.2]]},
        "noise": {"peclet": 10.0},
        "start": [{"kind": "uniform"}, {"kind": "box", "label": "c", "x_min": 0.0,
                                        "x_max": 0.3, "y_min": 0.0, "y_max": 1}],
        "run": {"particles": 256, "dt": 0.02, "t_end": 2.0, "progress": False},
    }
    study = parse_study(document)
    assert tomllib.loads(study.source_text) == document
    assert parse_study_text(study.source_text).as_dict() == study.as_dict()


def test_step_limit_matches_the_random_streams():
    from eddyhop.engine import rng
    from eddyhop.study import spec

    assert spec.STEP_LIMIT == rng.STEP_LIMIT
    with pytest.raises(StudyError, match="steps exceeds"):
        make_study(run={"dt": 1e-12, "t_end": 1e3})
