"""Start-region sampler: membership, uniformity by area, area fractions, errors, registry.

Independence: membership and the χ² expected counts are checked against closed-form predicates
written here from the flows' formulas (eddy centres, corners, separatrix and centre levels,
jets), not against ``starts.region_mask``, the predicate the rejection sampler itself uses.
Only the user Fourier flow with irregular modes, whose centres and separatrix levels have no
closed form, is checked against ``region_mask`` (marked as a self-consistency check).

Uniformity is checked with Pearson's χ² on a 12 × 12 grid of the period cell (bins with
expected count ≥ 5), expected counts proportional to the region's area in each grid square by a
midpoint quadrature of the closed-form predicate on a 768² grid (measured: refining it to 2304²
moves no expected count by more than 0.1 Poisson standard deviations, 0.3 for the box whose
edges cut grid points); discs are
also checked exactly: equal counts per disc and, within a disc, r²/R² and the polar angle
uniform.  The threshold p > 1e-3 on SciPy's ``chi2.sf`` (``kstest`` for the continuous checks)
would fail by chance once in a thousand seeds for a correct sampler; the seed is fixed, so each
test is deterministic.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from eddyhop import starts as S
from eddyhop.errors import StudyError
from eddyhop.flows import get_family
from eddyhop.study.spec import FlowSpec


def flow(name, **params):
    family = get_family(name)
    return FlowSpec(family=name, params=family.validate(params))


CELLULAR = flow("cellular")
CELLULAR_K2 = flow("cellular", U=0.5, k=2.0)
CATS_EYE = flow("cats_eye", epsilon=0.5)
IRREGULAR = flow("fourier", modes=[[1, 0, 1.0, 0.0], [0, 1, 0.5, 0.0], [1, 1, 0.0, 0.3]])
FAMILIES = {
    "cellular": CELLULAR,
    "cellular_k2": CELLULAR_K2,
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
    (f, "jet") for f in ("cellular", "cellular_k2", "drifting_cellular",
                         "oscillating_cellular", "fourier_cells")}


def sample(spec, table, n=3000, seed=11, index=0):
    region = S.parse_start(table, spec)
    x, y = S.sample_starts(region, spec.model, spec.params, n, seed, index)
    return region, x, y


# ---- closed-form regions, written from the flow formulas --------------------------------------
# Cellular flow ψ = (U/k) sin kx sin ky (also the drifting family's periodic part, the
# oscillating family at t = 0 and the Fourier modes ½cos k(x − y) − ½cos k(x + y)): ∇ψ = 0 at
# the eddy centres ((π/2 + mπ)/k, (π/2 + nπ)/k), where ψ = ±U/k (the extremes, so the ψ range
# is [−U/k, U/k]), and at the corners (mπ/k, nπ/k), saddles on the separatrix level 0.
# Cat's-eye ψ = (U/k)(sin kx sin ky + ε cos kx cos ky) = (U/2k)[(1+ε) cos ku − (1−ε) cos kv]
# with u = x − y, v = x + y: ∇ψ = 0 where sin ku = sin kv = 0, i.e. (cos ku, cos kv) = (±1, ±1):
# (1, −1) and (−1, 1) are the extremes ±U/k at the same centres as above, (1, 1) and (−1, −1)
# saddles at the same corners, on the levels ±εU/k.  For 0 < ε < 1 the two separatrix levels
# differ and the open channels (jets) are the ψ between them, |ψ| < εU/k.
CELLULAR_LIKE = {"cellular", "cellular_k2", "drifting_cellular", "oscillating_cellular",
                 "fourier_cells"}


def _lattice_distance(x, y, x0, y0, step):
    """Distance from (x, y) to the nearest point of the square lattice (x0, y0) + step·Z²."""
    dx = np.asarray(x) - x0
    dy = np.asarray(y) - y0
    return np.hypot(dx - step * np.round(dx / step), dy - step * np.round(dy / step))


def closed_form(name, table):
    """Predicate (x, y) -> bool array of the region ``table`` for the flow ``FAMILIES[name]``
    from the formulas above, or None where the region has no closed form here."""
    params = FAMILIES[name].params
    kind = table["kind"]
    if kind == "uniform":
        return lambda x, y: np.ones(np.shape(x), dtype=bool)
    if kind == "box":
        return lambda x, y: ((x >= table["x_min"]) & (x < table["x_max"])
                             & (y >= table["y_min"]) & (y < table["y_max"]))
    if name == "shear":  # ψ = −(U/k) cos ky
        if kind == "level_band":
            return lambda x, y: _between(-params["U"] / params["k"] * np.cos(params["k"] * y),
                                         table)
        return None
    if name == "fourier_irregular":
        if kind != "level_band":
            return None
        return lambda x, y: _between(_fourier_psi(params, x, y), table)
    if name not in CELLULAR_LIKE and name != "cats_eye":
        return None
    U, k = params["U"], params["k"]
    amp = U / k
    eps = params.get("epsilon", 0.0)

    def psi(x, y):
        return amp * (np.sin(k * x) * np.sin(k * y) + eps * np.cos(k * x) * np.cos(k * y))

    span = 2 * amp  # ψ range [−U/k, U/k]
    if kind == "separatrix":
        delta = table["delta"]
        return lambda x, y: ((np.abs(psi(x, y) - eps * amp) < delta * span)
                             | (np.abs(psi(x, y) + eps * amp) < delta * span))
    if kind == "centre" and "radius" in table:
        return lambda x, y: _lattice_distance(x, y, np.pi / 2 / k, np.pi / 2 / k,
                                              np.pi / k) < table["radius"]
    if kind == "centre":  # ψ band around the nearest centre's level ±U/k
        return lambda x, y: np.abs(psi(x, y)) > amp - table["band"] * span
    if kind == "hyperbolic":
        return lambda x, y: _lattice_distance(x, y, 0.0, 0.0, np.pi / k) < table["radius"]
    if kind == "jet":  # margin 0: strictly between the separatrix levels −εU/k and εU/k
        return lambda x, y: np.abs(psi(x, y)) < eps * amp
    if kind == "level_band":
        return lambda x, y: _between(psi(x, y), table)
    return None


def _between(psi, table):
    return (psi >= table["psi_min"]) & (psi <= table["psi_max"])


def _fourier_psi(params, x, y):
    """ψ = (U/k) Σ_j [c_j cos k(m_j x + n_j y) + s_j sin k(m_j x + n_j y)]."""
    k = params["k"]
    total = np.zeros(np.broadcast(x, y).shape)
    for m, n, c, s_ in params["modes"]:
        theta = k * (m * np.asarray(x) + n * np.asarray(y))
        total = total + c * np.cos(theta) + s_ * np.sin(theta)
    return params["U"] / k * total


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
    predicate = closed_form(family, TABLES[kind])
    if predicate is None:
        # irregular Fourier flow: numerical centres/levels, no closed form (self-consistency)
        assert family == "fourier_irregular" and kind not in ("box", "level_band", "uniform")
        assert np.all(S.region_mask(region, spec.model, spec.params, x, y))
    else:
        assert np.all(predicate(x, y))
    fraction = S.area_fraction(region, spec.model, spec.params)
    assert 0.0 < fraction <= 1.0


def _chi2_p(spec, table, inside, n=20000, grid=12, sub=64, seed=5):
    """Pearson χ² p-value of the samples' grid counts against the area of ``inside`` (a
    predicate) in each grid square, from a (grid·sub)² midpoint quadrature."""
    _, x, y = sample(spec, table, n=n, seed=seed)
    lx, ly = S.period_cell(spec.model, spec.params)
    ix = np.floor(np.mod(x, lx) / lx * grid).astype(int) % grid
    iy = np.floor(np.mod(y, ly) / ly * grid).astype(int) % grid
    observed = np.bincount(iy * grid + ix, minlength=grid * grid).astype(float)
    m = grid * sub
    gx, gy = np.meshgrid((np.arange(m) + 0.5) * lx / m, (np.arange(m) + 0.5) * ly / m)
    area = inside(gx, gy).astype(float).reshape(grid, sub, grid, sub).sum(axis=(1, 3)).ravel()
    expected = n * area / area.sum()
    assert observed[area == 0].sum() == 0  # nothing lands where the region has no area
    used = expected >= 5
    chi2 = ((observed[used] - expected[used]) ** 2 / expected[used]).sum()
    return stats.chi2.sf(chi2, used.sum() - 1)


def _periodic_inside(predicate, lx, ly):
    """The region repeated periodically (the box kind is the only one given unwrapped)."""
    return lambda x, y: predicate(x, y) | predicate(x - lx, y) | predicate(x, y - ly) | \
        predicate(x - lx, y - ly)


CHI2_CASES = {
    "cellular separatrix": ("cellular", TABLES["separatrix"]),
    "cellular centre discs": ("cellular", {"kind": "centre", "radius": 0.7}),
    "cellular corner discs": ("cellular", {"kind": "hyperbolic", "radius": 0.6}),  # wrap edges
    "cellular centre band": ("cellular", TABLES["centre_band"]),
    "cellular k = 2 separatrix": ("cellular_k2", TABLES["separatrix"]),
    "cat's-eye jets": ("cats_eye", TABLES["jet"]),
    "cat's-eye separatrix": ("cats_eye", TABLES["separatrix"]),
    "cat's-eye corner discs": ("cats_eye", {"kind": "hyperbolic", "radius": 1.2}),
    "irregular level band": ("fourier_irregular", TABLES["level_band"]),
    "cellular level band": ("cellular", TABLES["level_band"]),
    "cellular box": ("cellular", TABLES["box"]),
}


@pytest.mark.parametrize("case", sorted(CHI2_CASES))
def test_samples_are_uniform_by_area(case):
    name, table = CHI2_CASES[case]
    spec = FAMILIES[name]
    inside = closed_form(name, table)
    if table["kind"] == "box":
        inside = _periodic_inside(inside, *S.period_cell(spec.model, spec.params))
    assert _chi2_p(spec, table, inside) > 1e-3


def test_irregular_separatrix_band_is_uniform_against_its_own_mask():
    """Self-consistency only: the irregular Fourier flow's separatrix levels are found
    numerically, so here the expected counts come from ``region_mask`` itself."""
    region = S.parse_start(TABLES["separatrix"], IRREGULAR)

    def inside(x, y):
        return S.region_mask(region, IRREGULAR.model, IRREGULAR.params, x, y)

    assert _chi2_p(IRREGULAR, TABLES["separatrix"], inside, sub=48) > 1e-3


@pytest.mark.parametrize("name, kind, radius, origin", [
    ("cellular", "centre", 0.7, math.pi / 2), ("cellular", "hyperbolic", 0.6, 0.0),
    ("cats_eye", "hyperbolic", 1.2, 0.0), ("cellular_k2", "centre", 0.4, math.pi / 4)])
def test_disc_samples_are_uniform_exactly(name, kind, radius, origin):
    """Discs of radius R around the lattice (origin + step·Z²)², step = π/k, four per period
    cell: uniform by area means equal counts per disc (χ², expected n/4 each, exact), r²/R²
    uniform on [0, 1) and the polar angle uniform on [−π, π) (Kolmogorov–Smirnov, exact
    distributions: the area within radius r of a disc is πr²)."""
    spec = FAMILIES[name]
    step = math.pi / spec.params["k"]
    _, x, y = sample(spec, {"kind": kind, "radius": radius}, n=20000, seed=7)
    jx = np.round((x - origin) / step)
    jy = np.round((y - origin) / step)
    dx = x - origin - step * jx
    dy = y - origin - step * jy
    r2 = (dx * dx + dy * dy) / radius**2
    assert r2.max() < 1.0
    which = (jx.astype(int) % 2) * 2 + (jy.astype(int) % 2)
    counts = np.bincount(which, minlength=4)
    assert stats.chisquare(counts).pvalue > 1e-3
    assert stats.kstest(r2, "uniform").pvalue > 1e-3
    assert stats.kstest(np.arctan2(dy, dx), stats.uniform(-math.pi, 2 * math.pi).cdf).pvalue > 1e-3


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
