"""Start-region sampler: membership, uniformity by area, area fractions, errors, registry.

Uniformity is checked with Pearson's χ² on a grid of the period cell: expected counts are
proportional to the area of the region inside each grid square (counted on a fine sub-grid,
independently of the sampler's rejection step).  With a fixed seed each test is deterministic;
the threshold p > 1e-3 would fail by chance once in a thousand seeds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from eddyhop import starts as S
from eddyhop.errors import StudyError
from eddyhop.flows import get_family
from eddyhop.spec import FlowSpec


def flow(name, **params):
    family = get_family(name)
    return FlowSpec(family=name, params=family.validate(params))


CELLULAR = flow("cellular")
CATS_EYE = flow("cats_eye", epsilon=0.5)
IRREGULAR = flow("fourier", modes=[[1, 0, 1.0, 0.0], [0, 1, 0.5, 0.0], [1, 1, 0.0, 0.3]])
FAMILIES = {
    "cellular": CELLULAR,
    "cats_eye": CATS_EYE,
    "shear": flow("shear"),
    "drifting_cellular": flow("drifting_cellular", drift_x=0.3, drift_y=0.1),
    "oscillating_cellular": flow("oscillating_cellular", B=0.3, omega=1.0),
    "fourier_cells": flow("fourier", modes=[[1, -1, 0.5, 0.0], [1, 1, -0.5, 0.0]]),
    "fourier_irregular": IRREGULAR,
}
TABLES = {
    "uniform": {"kind": "uniform"},
    "centre": {"kind": "centre", "radius": 0.4},
    "centre_band": {"kind": "centre", "band": 0.08},
    "separatrix": {"kind": "separatrix", "delta": 0.03},
    "hyperbolic": {"kind": "hyperbolic", "radius": 0.4},
    "jet": {"kind": "jet"},
    "box": {"kind": "box", "x_min": -1.0, "x_max": 1.5, "y_min": 0.5, "y_max": 2.0},
    "level_band": {"kind": "level_band", "psi_min": 0.2, "psi_max": 0.6},
}
# (family, kind) pairs that are empty by construction: the family has no such structure
EMPTY = {("shear", k) for k in ("centre", "centre_band", "separatrix", "hyperbolic", "jet")} | {
    (f, "jet") for f in ("cellular", "drifting_cellular", "oscillating_cellular",
                         "fourier_cells")}


def sample(spec, table, n=3000, seed=11, index=0):
    region = S.parse_start(table, spec)
    x, y = S.sample_starts(region, spec.model, spec.params, n, seed, index)
    return region, x, y


@pytest.mark.parametrize("family", sorted(FAMILIES))
@pytest.mark.parametrize("kind", sorted(TABLES))
def test_every_kind_every_family_lies_inside_or_is_reported_empty(family, kind):
    spec = FAMILIES[family]
    if (family, kind) in EMPTY:
        with pytest.raises(StudyError, match="empty"):
            S.parse_start(TABLES[kind], spec)
        return
    region, x, y = sample(spec, TABLES[kind])
    assert x.shape == y.shape == (3000,)
    assert np.all(S.region_mask(region, spec.model, spec.params, x, y))
    fraction = S.area_fraction(region, spec.model, spec.params)
    assert 0.0 < fraction <= 1.0


def _chi2_p(spec, table, n=20000, grid=12, sub=48, seed=5):
    region, x, y = sample(spec, table, n=n, seed=seed)
    lx, ly = S.period_cell(spec.model, spec.params)
    ix = np.floor(np.mod(x, lx) / lx * grid).astype(int) % grid
    iy = np.floor(np.mod(y, ly) / ly * grid).astype(int) % grid
    observed = np.bincount(iy * grid + ix, minlength=grid * grid).astype(float)
    # area of the region in each grid square, from a (grid*sub)^2 midpoint grid
    m = grid * sub
    gx, gy = np.meshgrid((np.arange(m) + 0.5) * lx / m, (np.arange(m) + 0.5) * ly / m)
    inside = S.region_mask(region, spec.model, spec.params, gx, gy).astype(float)
    area = inside.reshape(grid, sub, grid, sub).sum(axis=(1, 3)).ravel()
    expected = n * area / area.sum()
    assert observed[area == 0].sum() == 0  # nothing lands where the region has no area
    used = expected >= 5
    chi2 = ((observed[used] - expected[used]) ** 2 / expected[used]).sum()
    return stats.chi2.sf(chi2, used.sum() - 1)


@pytest.mark.parametrize("spec, table", [
    (CELLULAR, TABLES["separatrix"]),
    (CELLULAR, {"kind": "centre", "radius": 0.7}),
    (CELLULAR, {"kind": "hyperbolic", "radius": 0.6}),  # discs wrap across the cell edges
    (CELLULAR, TABLES["centre_band"]),
    (CATS_EYE, TABLES["jet"]),
    (CATS_EYE, {"kind": "hyperbolic", "radius": 1.2}),  # overlapping discs: coverage thinning
    (IRREGULAR, TABLES["level_band"]),
    (IRREGULAR, TABLES["separatrix"]),
    (CELLULAR, TABLES["box"]),
])
def test_samples_are_uniform_by_area(spec, table):
    assert _chi2_p(spec, table) > 1e-3


def test_separatrix_area_fraction_matches_quadrature():
    """Cellular flow, U = k = 1: |sin x sin y| < c with c = δ·2 (ψ range is [−1, 1]).
    For uniform x, the fraction of y with |sin y| < c/|sin x| is (2/π) arcsin(min(1, ·))."""
    delta = 0.03
    c = 2 * delta

    def inner(x):
        ratio = c / max(abs(math.sin(x)), 1e-300)
        return 1.0 if ratio >= 1 else 2 / math.pi * math.asin(ratio)

    exact = integrate.quad(inner, 0, math.pi, limit=200, points=[math.asin(c),
                                                                  math.pi - math.asin(c)])[0]
    exact /= math.pi
    region = S.parse_start({"kind": "separatrix", "delta": delta}, CELLULAR)
    assert S.area_fraction(region, CELLULAR.model, CELLULAR.params) == pytest.approx(exact,
                                                                                     rel=3e-3)


def test_jet_area_fraction_matches_quadrature():
    """Cat's eye, U = k = 1: ψ = ½[(1+ε) cos u − (1−ε) cos v] with (u, v) = (x−y, x+y)
    uniform on the torus; the jets are |ψ| < ε, i.e. cos v ∈ ((a cos u − 2ε)/b,
    (a cos u + 2ε)/b) with a = 1+ε, b = 1−ε; that set of v has measure fraction
    (arccos c₁ − arccos c₂)/π."""
    eps = 0.5
    a, b = 1 + eps, 1 - eps

    def inner(u):
        c1 = np.clip((a * math.cos(u) - 2 * eps) / b, -1, 1)
        c2 = np.clip((a * math.cos(u) + 2 * eps) / b, -1, 1)
        return (math.acos(c1) - math.acos(c2)) / math.pi

    exact = integrate.quad(inner, 0, math.pi, limit=200)[0] / math.pi
    region = S.parse_start({"kind": "jet"}, CATS_EYE)
    assert S.area_fraction(region, CATS_EYE.model, CATS_EYE.params) == pytest.approx(exact,
                                                                                     rel=3e-3)


def test_disc_area_is_exact_and_agrees_with_the_grid():
    region = S.parse_start({"kind": "centre", "radius": 0.5}, CELLULAR)
    exact = 4 * math.pi * 0.25 / (2 * math.pi) ** 2
    assert S.area_fraction(region, CELLULAR.model, CELLULAR.params) == pytest.approx(exact)
    geo = S.flow_geometry(CELLULAR.model, CELLULAR.params)
    counted = geo.grid_fraction(lambda x, y: S.region_mask(region, CELLULAR.model,
                                                           CELLULAR.params, x, y))
    assert counted == pytest.approx(exact, rel=2e-3)


def test_sampling_is_reproducible_and_depends_on_start_index():
    _, x1, y1 = sample(CELLULAR, TABLES["separatrix"], seed=3, index=1)
    _, x2, y2 = sample(CELLULAR, TABLES["separatrix"], seed=3, index=1)
    _, x3, _ = sample(CELLULAR, TABLES["separatrix"], seed=3, index=2)
    assert np.array_equal(x1, x2) and np.array_equal(y1, y2)
    assert not np.array_equal(x1, x3)


def test_numerical_geometry_matches_the_closed_form_cellular_flow():
    reference = S.flow_geometry(CELLULAR.model, CELLULAR.params)
    for name in ("fourier_cells", "oscillating_cellular", "drifting_cellular"):
        spec = FAMILIES[name]
        geo = S.flow_geometry(spec.model, spec.params)
        for which in ("elliptic", "hyperbolic"):
            got = getattr(geo, which)
            want = getattr(reference, which)
            assert got.shape == want.shape, (name, which)
            assert np.allclose(np.sort(got, axis=0), np.sort(want, axis=0), atol=1e-7)
        assert np.allclose(geo.separatrix_levels, [0.0], atol=1e-9)


def test_point_mask_marks_the_nearest_grid_node():
    region = S.parse_start({"kind": "point", "x": 1.0, "y": 2.0}, CELLULAR)
    gx, gy = np.meshgrid(np.linspace(0, 2 * math.pi, 33)[:-1], np.linspace(0, 2 * math.pi,
                                                                             33)[:-1])
    mask = S.region_mask(region, CELLULAR.model, CELLULAR.params, gx, gy)
    assert mask.sum() == 1
    j, i = np.argwhere(mask)[0]
    assert abs(gx[j, i] - 1.0) <= math.pi / 32 and abs(gy[j, i] - 2.0) <= math.pi / 32
    assert S.area_fraction(region, CELLULAR.model, CELLULAR.params) == 0.0


@pytest.mark.parametrize("spec, table, message", [
    (flow("cats_eye", epsilon=0.0), {"kind": "jet"}, "empty.*epsilon > 0"),
    (CELLULAR, {"kind": "separatrix", "delta": 0.0}, r"delta = 0 is outside.*\(0, 1\)"),
    (CELLULAR, {"kind": "separatrix", "delta": 1.0}, r"delta = 1 is outside"),
    (CELLULAR, {"kind": "separatrix", "delta": 1.5}, r"delta = 1.5 is outside"),
    (CELLULAR, {"kind": "centre", "radius": 0.2, "band": 0.1}, "not both"),
    (CELLULAR, {"kind": "centre", "width": 0.2}, "unknown key"),
    (CELLULAR, {"kind": "level_band", "psi_min": 2.0, "psi_max": 3.0}, "empty"),
    (CELLULAR, {"kind": "level_band", "psi_min": 0.5, "psi_max": 0.2}, "psi_min < psi_max"),
    (CELLULAR, {"kind": "box", "x_min": 1, "x_max": 0, "y_min": 0, "y_max": 1}, "x_min <"),
    (CELLULAR, {"kind": "vortex"}, "not a known start region"),
    (flow("shear"), {"kind": "centre"}, "no eddy centres"),
])
def test_bad_start_tables_raise_clear_errors(spec, table, message):
    with pytest.raises(StudyError, match=message):
        S.parse_start(table, spec)


def test_a_registered_kind_can_override_one_family_only():
    def parse(table, geo, where):
        S.reject_unknown(table, ("half",), "left_half", where)
        return {"half": S.read_number(table, "half", where, default=0.5, low=0, high=1)}

    def mask(params, geo, x, y):
        return np.mod(np.asarray(x), geo.period[0]) < params["half"] * geo.period[0]

    generic = S.RegionKind("left_half", "left part of the cell", parse, mask)
    narrow = S.RegionKind("uniform", "cellular only: left half", parse, mask, family="cellular")
    S.register_region_kind(generic)
    S.register_region_kind(narrow)
    try:
        assert "left_half" in S.KINDS
        with pytest.raises(ValueError, match="already registered"):
            S.register_region_kind(generic)
        region, x, _ = sample(CELLULAR, {"kind": "uniform"}, n=2000)
        assert np.all(np.mod(x, 2 * math.pi) < math.pi)  # overridden for this family
        assert S.area_fraction(region, CELLULAR.model, CELLULAR.params) == pytest.approx(
            0.5, abs=1e-3)
        _, x, _ = sample(CATS_EYE, {"kind": "uniform"}, n=2000)
        assert np.mod(x, 2 * math.pi).max() > math.pi  # other families keep the built-in
        _, x, _ = sample(CATS_EYE, {"kind": "left_half", "half": 0.25}, n=500)
        assert np.all(np.mod(x, 2 * math.pi) < 0.5 * math.pi)
    finally:
        S.unregister_region_kind("uniform", family="cellular")
        S.unregister_region_kind("left_half")
    assert "left_half" not in S.KINDS
    assert S.get_region_kind("uniform", "cellular").family is None


def test_simulated_dataset_records_each_start_region():
    import eddyhop
    from tests.conftest import make_study

    study = make_study(start=[{"kind": "separatrix", "label": "sep", "delta": 0.05},
                              {"kind": "centre", "label": "core", "radius": 0.3}],
                       run={"particles": 64, "t_end": 0.2, "n_times": 4})
    ds = eddyhop.simulate(study, progress=False)
    assert list(ds["start"].values) == ["sep", "core"]
    assert list(ds["start_kind"].values) == ["separatrix", "centre"]
    for region in study.starts:
        expected = S.area_fraction(region, study.flow.model, study.flow.params)
        assert float(ds["start_area_fraction"].sel(start=region.label)) == pytest.approx(
            expected)
