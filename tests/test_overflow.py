"""Overflow is refused, not absorbed: flow amplitudes whose step k·|u|·dt leaves the range in
which the flow's sine and cosine are evaluated accurately (2**20 radians, flows/_trig.py LIMIT)
or overflows are refused at validation, one line naming the field, exit 2."""

from __future__ import annotations

import pytest

from eddyhop.errors import StudyError
from eddyhop.study.spec import MAX_STEP_PHASE, parse_study_text

from .test_output_safety import STUDY, invoke, refused

CELLULAR = 'family = "cellular"\nU = 1.0\n'


@pytest.mark.parametrize("flow, words", [
    # a Fourier amplitude of 1e30 was run as pure diffusion under strang_rk2, exit 0
    ('family = "fourier"\nU = 1.0\nmodes = [[1, 1, 1e30, 0.0]]\n', ["flow.modes", "2**20"]),
    ('family = "cellular"\nU = 1e50\n', ["flow.U = 1e+50", "2**20"]),
    ('family = "oscillating_cellular"\nU = 1.0\nB = 1e308\n', ["flow.B = 1e+308", "2**20"]),
    ('family = "drifting_cellular"\nU = 1.0\ndrift_x = 1e308\ndrift_y = 1e308\n',
     ["flow.drift", "inf"]),
])
def test_overflowing_amplitudes_are_refused(tmp_path, flow, words):
    path = tmp_path / "bad.toml"
    path.write_text(STUDY.replace(CELLULAR, flow))
    assert CELLULAR in STUDY
    checked = invoke(["validate", path])
    assert checked.exit_code == 2 and len(checked.output.strip().splitlines()) == 1
    assert all(word in checked.output for word in words), checked.output
    refused(invoke(["run", path, "--out", tmp_path / "x.nc"]), *words)
    assert not (tmp_path / "x.nc").exists()


def test_the_bound_is_the_step_phase():
    """U·k·dt at the bound is accepted, just above it refused (dt = 0.05, k = 1)."""
    at = MAX_STEP_PHASE / 0.05
    parse_study_text(STUDY.replace("U = 1.0", f"U = {at!r}"))
    with pytest.raises(StudyError, match=r"flow\.U"):
        parse_study_text(STUDY.replace("U = 1.0", f"U = {at * 1.01!r}"))


def test_runaway_displacement_is_a_blow_up_with_step_and_dt(tmp_path):
    """A drift of 2e7 passes validation (k·|u|·dt = 1e6 ≤ 2**20) but carries particles
    beyond 2**32/k ≈ 4.3e9 by t ≈ 215: reported as a blow-up naming step and dt, nothing
    written."""
    flow = 'family = "drifting_cellular"\nU = 1.0\ndrift_x = 2e7\n'
    path = tmp_path / "far.toml"
    path.write_text(STUDY.replace(CELLULAR, flow).replace("t_end = 2.0", "t_end = 300.0"))
    result = invoke(["run", path, "--out", tmp_path / "x.nc"])
    # a failed computation, not bad input: exit status 1, one line, no traceback
    assert result.exit_code == 1, result.output
    errors = [line for line in result.output.splitlines() if line.startswith("error:")]
    assert len(errors) == 1 and "Traceback" not in result.output, result.output
    line = errors[0]
    for word in ("runaway displacement", "step", "run.dt = 0.05", "2**32/k"):
        assert word in line, line
    assert not (tmp_path / "x.nc").exists()


def test_a_swept_amplitude_is_checked_point_by_point():
    text = STUDY + '\n[sweep]\n"flow.U" = [1.0, 1e50]\n'
    with pytest.raises(StudyError, match=r"flow\.U = 1e\+50"):
        parse_study_text(text)
