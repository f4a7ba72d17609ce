"""Passage times across a period cell (κ = 0) and the form of their divergence."""

from __future__ import annotations

import math

import numpy as np
import pytest

from eddyhop.analysis.passage import passage_divergence
from eddyhop.engine.passage import passage_times
from eddyhop.errors import StudyError
from eddyhop.flows.compiled import evaluate_gradient
from eddyhop.study.spec import parse_study

EPSILON = 0.4


def noise_free(flow):
    return parse_study({"flow": flow, "noise": {"kappa": 0.0},
                        "run": {"particles": 1, "dt": 0.1, "t_end": 1.0}})


def saddle_rate(study, point):
    """λ = sqrt(−det ∇u) at a hyperbolic point (trace ∇u = 0 for an incompressible flow)."""
    ux, uy, vx, vy = (float(g[0]) for g in evaluate_gradient(study.flow.model, study.flow.params,
                                                          np.array([point[0]]),
                                                          np.array([point[1]])))
    return math.sqrt(-(ux * vy - uy * vx))


def cats_eye_passages(distances):
    """Cat's-eye flow, U = k = 1: on the section x = π/2, ψ = sin y, so the jet |ψ| < ε is
    |y| < arcsin ε and the separatrix ψ = ε meets the section at y_s = arcsin ε."""
    study = noise_free({"family": "cats_eye", "epsilon": EPSILON})
    separatrix = math.asin(EPSILON)
    return study, passage_times(study, separatrix - distances, axis="x", at=math.pi / 2)


def test_passage_time_near_a_saddle_grows_like_log_over_lambda():
    """Near a hyperbolic point a trajectory at distance d from the stable manifold spends
    (1/λ) ln(1/d) + O(1) there (linearisation at a saddle; Guckenheimer & Holmes 1983,
    *Nonlinear Oscillations, Dynamical Systems, and Bifurcations of Vector Fields*, Springer,
    §6.1, Dulac map near a saddle — section from memory).  A jet streamline of the cat's-eye
    flow passes two saddles per period in x (b = k(x + y) grows by 4π), so T ≈ (2/λ) ln(1/d).
    λ = Uk sqrt(1 − ε²) for this flow; here taken from the family's own gradient."""
    study, ds = cats_eye_passages(np.geomspace(1e-10, 1e-3, 15))
    lam = saddle_rate(study, (0.0, 0.0))
    assert lam == pytest.approx(math.sqrt(1 - EPSILON**2), rel=1e-12)
    assert ds.attrs["separatrix_entry"] == pytest.approx(math.asin(EPSILON), abs=1e-14)
    fit = passage_divergence(ds)
    # O(d ln d) corrections at d ≤ 1e-3 change the slope by well under 0.1 %
    assert float(fit.passage_log_slope) == pytest.approx(2.0 / lam, rel=1e-3)
    assert fit.passage_log_verdict.item() == 0  # accepted
    assert fit.passage_power_verdict.item() == 1  # rejected
    assert fit.passage_divergence_form.item() == 0  # logarithmic
    assert float(fit.passage_power_exponent_se) > 0


def test_distribution_is_normalised_and_flux_weighted():
    _, ds = cats_eye_passages(np.linspace(0.01, 0.8, 40))
    edges = ds.passage_time_bin_edges.values
    assert np.sum(ds.passage_time_pdf.values * np.diff(edges)) == pytest.approx(1.0)
    assert np.all(ds.passage_status.values == 0)
    assert ds.passage_time.attrs["units"] == "T"


def test_closed_streamlines_are_flagged():
    """Cat's-eye section x = π/2: entries beyond y_s sit on closed eddy streamlines."""
    study = noise_free({"family": "cats_eye", "epsilon": EPSILON})
    ds = passage_times(study, np.array([0.1, 1.2]), axis="x", at=math.pi / 2, t_max=200.0)
    assert np.isfinite(ds.passage_time.values[0]) and np.isnan(ds.passage_time.values[1])
    assert list(ds.passage_status.values) == [0, 1]


@pytest.mark.parametrize(("flow", "axis", "at", "field"), [
    ({"family": "shear"}, "y", 0.5, "section y = 0.5"),  # u = U sin ky is parallel to it
    ({"family": "cellular"}, "x", math.pi / 2, "section x = 1.5708"),  # closed cells only
])
def test_a_section_the_flow_never_crosses_is_refused(flow, axis, at, field):
    with pytest.raises(StudyError) as info:
        passage_times(noise_free(flow), np.linspace(0.1, 3.0, 8), axis=axis, at=at,
                      t_max=100.0)
    assert field in str(info.value) and "\n" not in str(info.value)


def test_noisy_or_time_dependent_study_is_refused():
    noisy = parse_study({"flow": {"family": "cats_eye", "epsilon": 0.4},
                         "noise": {"kappa": 0.1}, "run": {"particles": 1, "dt": 0.1,
                                                          "t_end": 1.0}})
    with pytest.raises(StudyError, match=r"noise\.kappa"):
        passage_times(noisy, [0.1])
    moving = noise_free({"family": "oscillating_cellular", "B": 0.3, "omega": 1.0})
    with pytest.raises(StudyError, match=r"flow\.family"):
        passage_times(moving, [0.1])


@pytest.mark.slow
def test_passage_past_a_no_slip_cylinder_diverges_like_inverse_square_root():
    """Square lattice of cylinders (solid fraction 0.2, U = k = 1, mean flow along x): the
    streamline y = π hits the cylinder centred at (π, π) at its front stagnation point.  With
    no slip, ψ − ψ_wall ∝ n² next to the wall, so a streamline d away upstream passes at
    n ∝ √d with speed ∝ √d and T ∝ d^(−1/2) — a fact of the trade for Stokes flow past
    no-slip bodies (no single source is cited for it here).  The Brinkman-penalised field
    smears the wall over a grid cell, so the law holds for d above that scale: at resolution
    256 the local exponent stays within 0.48–0.57 for d ∈ [0.005, 0.15] (measured), and
    tracers closer than d ≈ 2e-3 creep through the penalised layer."""
    study = noise_free({"family": "obstacles", "solid_fraction": 0.2, "U": 1.0, "k": 1.0,
                        "resolution": 256})
    distances = np.geomspace(0.008, 0.15, 8)
    ds = passage_times(study, math.pi + distances, axis="x", at=0.0, separatrix=math.pi,
                       t_max=2000.0)
    fit = passage_divergence(ds)
    beta, se = float(fit.passage_power_exponent), float(fit.passage_power_exponent_se)
    # 0.03: the spread of the measured local exponent over the range (resolution-limited)
    assert abs(beta - 0.5) < 0.03 and se < 0.01
    assert fit.passage_power_verdict.item() == 0 and fit.passage_log_verdict.item() == 1
    assert fit.passage_divergence_form.item() == 1  # power


def test_passage_figure_draws_the_points_both_fits_and_the_verdict(tmp_path):
    """The figure shows every crossed entry, both divergence forms with their verdicts (the
    rejected power form dashed and named REJECTED) and the distribution."""
    from eddyhop.presentation.plots import available_figures
    from eddyhop.presentation.plots._style import save_figure
    from eddyhop.presentation.plots.catalogue import FIGURES

    _, ds = cats_eye_passages(np.geomspace(1e-8, 1e-3, 10))
    ds = ds.merge(passage_divergence(ds))
    assert "passage" in available_figures(ds)
    fig = FIGURES["passage"][0](ds)
    left = fig.axes[0]
    labels = [line.get_label() for line in left.get_lines()]
    assert labels[0] == "passage times" and len(left.get_lines()[0].get_xdata()) == 10
    assert any("ln(1/d)" in t and "(accepted)" in t for t in labels)
    power = [line for line in left.get_lines() if "β" in line.get_label()]
    assert power and "REJECTED" in power[0].get_label() and power[0].get_linestyle() == "--"
    assert "logarithmic" in fig._suptitle.get_text()
    save_figure(fig, tmp_path / "passage")
    assert (tmp_path / "passage.png").stat().st_size > 0
