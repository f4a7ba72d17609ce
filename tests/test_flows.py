"""Flow families: incompressibility, ψ–velocity consistency, geometry, special cases.

Finite-difference checks use central differences with step h = 1e-5 (truncation error O(h²)
~ 1e-10 times the third derivative, round-off ~ 1e-16/h ~ 1e-11), so a tolerance of 1e-7 in units
of U k (for gradients) or U (for velocities) leaves a wide margin and still catches any sign or
factor error.
"""

from __future__ import annotations

import numpy as np
import pytest

from eddyhop.flows import FAMILIES, get_family
from eddyhop.flows.compiled import evaluate_gradient, evaluate_psi, evaluate_velocity

H = 1e-5
PARAMS = {
    "cellular": {"U": 1.3, "k": 2.0},
    "cats_eye": {"U": 0.7, "k": 1.5, "epsilon": 0.35},
    "shear": {"U": 2.0, "k": 0.5},
    "drifting_cellular": {"U": 1.0, "k": 1.0, "drift_x": 0.3, "drift_y": 0.3 * np.sqrt(2)},
    "oscillating_cellular": {"U": 1.0, "k": 1.0, "B": 0.4, "omega": 2.0},
    "fourier": {"U": 1.0, "k": 1.0, "modes": [[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.1],
                                             [2, 1, 0.05, -0.2]]},
}
# Families whose parameters need data made at test time (a grid file).
MADE_AT_TEST_TIME = {"gridded"}
PARAMS["obstacles"] = {"U": 1.0, "k": 1.0, "solid_fraction": 0.2, "resolution": 64}
ALL = sorted(FAMILIES)


@pytest.fixture(scope="module")
def grid_file(tmp_path_factory):
    """A cellular flow written on a 64×64 periodic grid (loaded back by the gridded family)."""
    from eddyhop.flows.grid_file import grid_dataset

    cellular = get_family("cellular")
    path = tmp_path_factory.mktemp("grid") / "cells.nc"
    grid_dataset(cellular, cellular.validate({"U": 1.0, "k": 1.0}), 64, length_unit="1").to_netcdf(
        path)
    return str(path)


@pytest.fixture(params=ALL)
def family_and_params(request, grid_file):
    family = get_family(request.param)
    values = {"file": grid_file} if request.param == "gridded" else PARAMS[request.param]
    return family, family.validate(values)


def _points(seed=3, n=200):
    rng = np.random.default_rng(seed)
    return rng.uniform(-7, 7, n), rng.uniform(-7, 7, n)


def test_every_family_has_test_parameters():
    assert set(PARAMS) | MADE_AT_TEST_TIME == set(FAMILIES)


def test_compiled_dispatch_calls_each_familys_own_functions(family_and_params):
    """The kernels reach a family only through the integer switch in ``flows/compiled.py``; a
    missing or wrong branch there must not silently give another (divergence-free) family."""
    import importlib

    family, params = family_and_params
    module = importlib.import_module(f"eddyhop.flows.{family.name}")
    p = family.pack(params)
    x, y = _points(seed=11, n=25)
    t = 0.37
    velocity = np.array(evaluate_velocity(family, params, x, y, t))
    psi = evaluate_psi(family, params, x, y, t)
    gradient = np.array(evaluate_gradient(family, params, x, y, t))
    for i in range(x.size):
        np.testing.assert_array_equal(velocity[:, i], module.velocity(x[i], y[i], t, p))
        assert psi[i] == module.psi(x[i], y[i], t, p)
        np.testing.assert_array_equal(gradient[:, i], module.gradient(x[i], y[i], t, p))


def test_unregistered_family_code_gives_nan_not_another_field():
    from eddyhop.flows import compiled

    p = get_family("cellular").pack({"U": 1.0, "k": 1.0})
    assert np.isnan(compiled.velocity(99, 0.3, 0.4, 0.0, p)).all()
    assert np.isnan(compiled.psi(99, 0.3, 0.4, 0.0, p))
    assert np.isnan(compiled.gradient(99, 0.3, 0.4, 0.0, p)).all()


def test_divergence_free_by_finite_differences(family_and_params):
    """∇·u = 0 for a stream-function flow (incompressible by construction)."""
    family, params = family_and_params
    x, y = _points()
    t = 0.37
    u_plus, _ = evaluate_velocity(family, params, x + H, y, t)
    u_minus, _ = evaluate_velocity(family, params, x - H, y, t)
    _, v_plus = evaluate_velocity(family, params, x, y + H, t)
    _, v_minus = evaluate_velocity(family, params, x, y - H, t)
    divergence = (u_plus - u_minus + v_plus - v_minus) / (2 * H)
    scale = family.velocity_scale(params) * family.wavenumber(params)
    assert np.max(np.abs(divergence)) < 1e-7 * scale


def test_velocity_is_curl_of_stream_function(family_and_params):
    """u = ∂ψ/∂y, v = −∂ψ/∂x (the package convention)."""
    family, params = family_and_params
    x, y = _points(4)
    t = 1.1
    u, v = evaluate_velocity(family, params, x, y, t)
    dpsi_dy = (evaluate_psi(family, params, x, y + H, t)
               - evaluate_psi(family, params, x, y - H, t)) / (2 * H)
    dpsi_dx = (evaluate_psi(family, params, x + H, y, t)
               - evaluate_psi(family, params, x - H, y, t)) / (2 * H)
    scale = max(family.velocity_scale(params), 1.0)
    assert np.max(np.abs(u - dpsi_dy)) < 1e-7 * scale
    assert np.max(np.abs(v + dpsi_dx)) < 1e-7 * scale


def test_gradient_matches_finite_differences(family_and_params):
    family, params = family_and_params
    x, y = _points(5)
    t = 0.2
    grads = evaluate_gradient(family, params, x, y, t)
    up, vp = evaluate_velocity(family, params, x + H, y, t)
    um, vm = evaluate_velocity(family, params, x - H, y, t)
    uyp, vyp = evaluate_velocity(family, params, x, y + H, t)
    uym, vym = evaluate_velocity(family, params, x, y - H, t)
    expected = ((up - um) / (2 * H), (uyp - uym) / (2 * H), (vp - vm) / (2 * H),
                (vyp - vym) / (2 * H))
    scale = family.velocity_scale(params) * family.wavenumber(params)
    for got, want in zip(grads, expected):
        assert np.max(np.abs(got - want)) < 1e-6 * scale


def test_velocity_is_spatially_periodic(family_and_params):
    family, params = family_and_params
    x, y = _points(6)
    lx, ly = family.period(params)
    u0, v0 = evaluate_velocity(family, params, x, y, 0.3)
    if lx is not None:
        u1, v1 = evaluate_velocity(family, params, x + lx, y, 0.3)
        np.testing.assert_allclose([u1, v1], [u0, v0], atol=1e-12)
    u2, v2 = evaluate_velocity(family, params, x, y + ly, 0.3)
    np.testing.assert_allclose([u2, v2], [u0, v0], atol=1e-12)


@pytest.mark.parametrize("name", ["cellular", "cats_eye", "drifting_cellular",
                                  "oscillating_cellular"])
def test_stagnation_points_are_stagnant_and_of_the_stated_type(name):
    """Elliptic points: det ∇u > 0 (rotation); hyperbolic: det ∇u < 0 (strain); at t = 0,
    the geometry's reference time (evaluate_* default)."""
    family = get_family(name)
    params = family.validate(PARAMS[name])
    points = family.stagnation_points(params)
    for kind, sign in (("elliptic", 1.0), ("hyperbolic", -1.0)):
        x, y = points[kind][:, 0], points[kind][:, 1]
        assert x.size == 4
        u, v = evaluate_velocity(family, params, x, y)
        assert np.max(np.abs(np.hypot(u, v))) < 1e-12
        a, b, c, d = evaluate_gradient(family, params, x, y)
        assert np.all(sign * (a * d - b * c) > 0)


def test_a_strong_drift_leaves_no_stagnation_point():
    """|V_x ± V_y| > U: the sum/difference equations have no solution (open streamlines)."""
    family = get_family("drifting_cellular")
    points = family.stagnation_points(family.validate({"drift_x": 0.8, "drift_y": 0.5}))
    assert points["elliptic"].shape == points["hyperbolic"].shape == (0, 2)


def test_drift_free_stagnation_points_are_the_cellular_ones():
    cellular, drifting = get_family("cellular"), get_family("drifting_cellular")
    for kind in ("elliptic", "hyperbolic"):
        got = drifting.stagnation_points(drifting.validate({"U": 1.3, "k": 2.0}))[kind]
        want = cellular.stagnation_points(cellular.validate({"U": 1.3, "k": 2.0}))[kind]
        np.testing.assert_allclose(sorted(map(tuple, got)), sorted(map(tuple, want)),
                                   atol=1e-12)


def test_cats_eye_separatrix_level_is_psi_at_hyperbolic_points():
    family = get_family("cats_eye")
    params = family.validate(PARAMS["cats_eye"])
    corners = family.stagnation_points(params)["hyperbolic"]
    levels = evaluate_psi(family, params, corners[:, 0], corners[:, 1])
    np.testing.assert_allclose(sorted(set(np.round(levels, 12))),
                               sorted(family.separatrix_levels(params)), atol=1e-12)


def test_cats_eye_at_epsilon_one_has_no_isolated_stagnation_point():
    family = get_family("cats_eye")
    points = family.stagnation_points(family.validate({"epsilon": 1.0}))
    assert points["elliptic"].shape == points["hyperbolic"].shape == (0, 2)


def test_cats_eye_at_epsilon_one_is_the_diagonal_shear():
    """ψ = (U/k)(sin kx sin ky + cos kx cos ky) = (U/k) cos k(x − y) (trigonometric identity)."""
    family = get_family("cats_eye")
    params = family.validate({"U": 1.2, "k": 0.8, "epsilon": 1.0})
    x, y = _points(7)
    np.testing.assert_allclose(evaluate_psi(family, params, x, y),
                               1.2 / 0.8 * np.cos(0.8 * (x - y)), atol=1e-12)


def test_fourier_modes_reproduce_the_cellular_flow():
    """sin kx sin ky = ½[cos k(x−y) − cos k(x+y)] (product-to-sum identity)."""
    cellular = get_family("cellular")
    fourier = get_family("fourier")
    cp = cellular.validate({"U": 1.0, "k": 1.0})
    fp = fourier.validate({"U": 1.0, "k": 1.0, "modes": [[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.0]]})
    x, y = _points(8)
    np.testing.assert_allclose(evaluate_velocity(fourier, fp, x, y),
                               evaluate_velocity(cellular, cp, x, y), atol=1e-13)


def test_oscillating_cells_are_shifted_cellular_flow():
    family = get_family("oscillating_cellular")
    params = family.validate({"U": 1.0, "k": 1.0, "B": 0.5, "omega": 3.0})
    cellular = get_family("cellular")
    cp = cellular.validate({"U": 1.0, "k": 1.0})
    x, y = _points(9)
    t = 0.4
    shift = 0.5 * np.sin(3.0 * t)
    np.testing.assert_allclose(evaluate_velocity(family, params, x, y, t),
                               evaluate_velocity(cellular, cp, x + shift, y), atol=1e-13)
    assert family.time_period(params) == pytest.approx(2 * np.pi / 3.0)
