"""Study validation: every bad input gets one clear message naming field, value and range."""

from __future__ import annotations

import math

import pytest

from eddyhop.errors import StudyError
from eddyhop.noise import convert_peclet, kappa_from_peclet, peclet_from_kappa
from eddyhop.spec import load_study, parse_study_text
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
        ({"moments": {"orders": [0.0, 2.0]}}, ["moments.orders", "0"]),
        ({"start": {"kind": "nowhere"}}, ["start.kind", "nowhere"]),
        ({"run": {"workers": 0}}, ["run.workers", "0"]),
        ({"run": {"times": [0.5, 0.2, 1.0]}}, ["run.times", "increasing"]),
        ({"run": {"times": [0.5, 3.0]}}, ["run.times", "run.t_end"]),
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
    assert study.run.integrator == "rk4"
    assert study.noise.peclet is None
    assert study.starts[0].kind == "uniform"
