"""The streamline-preserving integrator ``projected_rk45`` (steady flows, κ = 0).

Claims: ψ(X(t)) = ψ(X(0)) to round-off whatever the horizon; the position error against a very
fine reference (SciPy's DOP853 at rtol = atol = 1e-13) stays within the tolerance asked, which
is an error per advective time (eddy sides per 1/(U k)); fixed-step RK4 at the same dt drifts;
results do not depend on chunking; bad input is one line naming the field.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import eddyhop
from eddyhop.errors import StudyError
from eddyhop.flows.compiled import evaluate_psi, evaluate_velocity
from eddyhop.study.spec import parse_study_text

EPS = np.finfo(float).eps
GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0

FLOWS = {
    # irrational drift direction: open streamlines that never close on the torus
    "drifting": ('family = "drifting_cellular"\ndrift_x = 0.3\n'
                 f"drift_y = {0.3 * GOLDEN!r}"),
    "cats_eye": 'family = "cats_eye"\nepsilon = 0.4',
    "cellular": 'family = "cellular"',
}


def study_text(flow, *, integrator="", tolerance="", particles=32, t_end=50.0, dt=0.5,
               kappa=0.0, chunk=""):
    lines = ["schema_version = 1", "[flow]", flow, "[noise]", f"kappa = {kappa}",
             "[start]", 'kind = "uniform"', "[run]", f"particles = {particles}",
             f"dt = {dt}", f"t_end = {t_end}", "n_times = 10", f"tracked = {particles}",
             "track_samples = 51", "progress = false", "seed = 3"]
    if integrator:
        lines.append(f'integrator = "{integrator}"')
    if tolerance:
        lines.append(f"tolerance = {tolerance}")
    if chunk:
        lines.append(f"chunk = {chunk}")
    return "\n".join(lines) + "\n"


def tracks(ds):
    """(x0, y0, x[p, s], y[p, s], times) of the tracked particles (one start region)."""
    x = ds.track_x.values.reshape(-1, ds.track_x.shape[-1])
    y = ds.track_y.values.reshape(-1, ds.track_y.shape[-1])
    return (ds.track_x0.values.ravel(), ds.track_y0.values.ravel(), x, y,
            ds.track_time.values)


def psi_drift(study, ds):
    """max |ψ(X(t)) − ψ(X(0))| over tracked samples, and the round-off scale of ψ there:
    ε U (|X| + ℓ) (an argument k|X| known to ε k|X| changes ψ by about ε U |X|)."""
    x0, y0, x, y, _ = tracks(ds)
    model, values = study.flow.model, study.flow.params
    psi0 = evaluate_psi(model, values, x0, y0)[:, None]
    drift = np.abs(evaluate_psi(model, values, x, y) - psi0)
    scale = EPS * 1.5 * (np.abs(x) + np.abs(y) + math.pi)
    return drift, scale


@pytest.mark.parametrize("name", sorted(FLOWS))
def test_psi_is_kept_to_round_off_and_rk4_drifts(name):
    text = study_text(FLOWS[name], t_end=2000.0, particles=64)
    study = parse_study_text(text)
    assert study.run.integrator == "projected_rk45"  # the default for steady κ = 0 flows
    drift, scale = psi_drift(study, eddyhop.simulate(study, progress=False))
    # 64 ulps of the round-off scale: the projection stops at 16 ε of it (streamline.py)
    assert np.all(drift <= 64 * scale), float(np.max(drift / scale))
    rk4 = parse_study_text(study_text(FLOWS[name], integrator="rk4", t_end=2000.0,
                                      particles=64, dt=0.1))
    rk4_drift, rk4_scale = psi_drift(rk4, eddyhop.simulate(rk4, progress=False))
    assert np.max(rk4_drift / rk4_scale) > 1e3


@pytest.mark.parametrize("name", sorted(FLOWS))
@pytest.mark.parametrize("tolerance", [1e-6, 1e-9])
def test_position_error_within_the_tolerance_asked(name, tolerance):
    """Error against DOP853 (Hairer, Nørsett & Wanner 1993, via SciPy's solve_ivp) at
    rtol = atol = 1e-13 over 50 advective times: at most tolerance × ℓ × U k t."""
    study = parse_study_text(study_text(FLOWS[name], tolerance=repr(tolerance)))
    x0, y0, x, y, times = tracks(eddyhop.simulate(study, progress=False))
    model, values = study.flow.model, study.flow.params

    def rhs(_, z):
        u, v = evaluate_velocity(model, values, z[:1], z[1:])
        return [u[0], v[0]]

    allowed = tolerance * math.pi * times  # ℓ = π, U k = 1
    for i in range(6):
        ref = solve_ivp(rhs, (0.0, times[-1]), [x0[i], y0[i]], method="DOP853", rtol=1e-13,
                        atol=1e-13, t_eval=times)
        error = np.hypot(ref.y[0] - x[i], ref.y[1] - y[i])
        assert np.all(error <= allowed + 1e-11), float(np.max(error[1:] / allowed[1:]))


def test_chunks_do_not_change_the_numbers():
    text = study_text(FLOWS["cats_eye"], particles=300, t_end=20.0)
    a = eddyhop.simulate(parse_study_text(text), progress=False)
    b = eddyhop.simulate(parse_study_text(study_text(FLOWS["cats_eye"], particles=300,
                                                     t_end=20.0, chunk=37)), progress=False)
    assert np.array_equal(a.msd.values, b.msd.values)
    assert np.array_equal(a.track_x.values, b.track_x.values)


def test_stagnation_points_and_eddy_centres():
    """Tracers on a hyperbolic corner stay there; tracers next to an eddy centre (|∇ψ| → 0)
    keep their level and do not stall the run."""
    text = study_text('family = "cellular"', t_end=200.0).replace(
        'kind = "uniform"', 'kind = "centre"\nradius = 1e-6')
    study = parse_study_text(text)
    drift, scale = psi_drift(study, eddyhop.simulate(study, progress=False))
    assert np.all(drift <= 64 * scale)
    corner = parse_study_text(study_text('family = "cellular"', t_end=50.0).replace(
        'kind = "uniform"', 'kind = "point"\nx = 0.0\ny = 0.0'))
    _, _, x, y, _ = tracks(eddyhop.simulate(corner, progress=False))
    assert np.all(x == 0.0) and np.all(y == 0.0)


@pytest.mark.parametrize(("flow", "extra", "field"), [
    ('family = "cellular"', {"kappa": 0.01}, "noise.kappa"),
    ('family = "oscillating_cellular"\nB = 0.5\nomega = 1.0', {}, "flow.family"),
])
def test_refuses_noise_and_time_dependent_flows(flow, extra, field):
    text = study_text(flow, integrator="projected_rk45", kappa=extra.get("kappa", 0.0))
    with pytest.raises(StudyError) as info:
        parse_study_text(text)
    message = str(info.value)
    assert "\n" not in message and field in message and "projected_rk45" in message


def test_time_dependent_flow_defaults_to_rk4_and_tolerance_needs_the_scheme():
    text = study_text('family = "oscillating_cellular"\nB = 0.5\nomega = 1.0')
    assert parse_study_text(text).run.integrator == "rk4"
    with pytest.raises(StudyError, match=r"run\.tolerance"):
        parse_study_text(study_text(FLOWS["cellular"], integrator="rk4", tolerance="1e-6"))


@pytest.mark.slow
def test_psi_kept_over_a_million_period_crossings():
    """One tracer on an open streamline of the golden-mean drifting flow, 10⁶ crossings of a
    period cell 2π/k (along x, the drift's main direction); ψ stays within 64 ε of its
    round-off scale ε U |X| at every sample.  The drift speed makes a crossing ≈ 2π/|V|."""
    flow = 'family = "drifting_cellular"\ndrift_x = 1.2\n' f"drift_y = {1.2 * GOLDEN!r}"
    t_end = 1e6 * 2.0 * math.pi / 1.2 * 1.01
    text = study_text(flow, particles=1, t_end=t_end, dt=t_end / 1000, tolerance="1e-6")
    study = parse_study_text(text)
    ds = eddyhop.simulate(study, progress=False)
    drift, scale = psi_drift(study, ds)
    _, _, x, _, _ = tracks(ds)
    assert np.min(np.abs(x[:, -1])) / (2.0 * math.pi) > 1e6
    assert np.all(drift <= 64 * scale), float(np.max(drift / scale))


def test_uninitialised_scratch_does_not_change_a_step():
    """The kernel's scratch is np.empty: whatever it holds (here nan, inf or zeros) must not
    enter a step (weight-0 stage terms once turned 0 × nan into a step that never ended)."""
    from eddyhop.engine.streamline import (
        WORK_ROWS,
        advance_tile_projected,
        scheme_parameters,
        start_tile,
    )
    from eddyhop.flows import get_family

    family = get_family("cats_eye")
    values = family.validate({"epsilon": 0.4})
    fp = family.pack(values)
    nq = scheme_parameters(np.zeros(3), 1e-8, math.pi, 1.0)
    rng = np.random.default_rng(0)
    xs, ys = rng.uniform(0, 6, 16), rng.uniform(0, 6, 16)
    ends = []
    for fill in (0.0, np.nan, np.inf):
        work = np.full((WORK_ROWS, 128), fill)
        x_new, y_new = np.full(128, fill), np.full(128, fill)
        start_tile(family.code, fp, xs, ys, 0.5, 16, work)
        advance_tile_projected(family.code, fp, nq, xs, ys, 0.0, 0.5, 16, x_new, y_new, work)
        ends.append((x_new[:16].copy(), y_new[:16].copy()))
    for x_end, y_end in ends[1:]:
        assert np.array_equal(x_end, ends[0][0]) and np.array_equal(y_end, ends[0][1])
