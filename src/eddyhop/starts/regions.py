"""Start regions: where in the flow an ensemble begins, sampled uniformly by area.

A study lists one or more ``[[start]]`` tables; each becomes a :class:`StartRegion` (a *kind*,
a label used as the ``start`` coordinate, checked parameters).  Built-in kinds, for every flow
family (ψ-based kinds use the periodic part ψ_p of the stream function at t = 0, see
``geometry.py``; numerically for user Fourier flows and the drifting and oscillating
families):

==============  ====================================================================================
kind            region (inside one period cell, repeated periodically)
==============  ====================================================================================
``uniform``     the whole period cell
``centre``      discs of ``radius`` around the eddy centres (elliptic points), or with ``band`` = f
                the ψ-level band |ψ_p − ψ_c| < f·(ψ_max − ψ_min) around each centre's level ψ_c
``separatrix``  the band |ψ_p − ψ_s| < ``delta``·(ψ_max − ψ_min) around every separatrix level ψ_s,
                ``delta`` ∈ (0, 1)
``hyperbolic``  discs of ``radius`` around the stagnation corners (hyperbolic points)
``jet``         open channels between the lowest and highest separatrix levels (cat's-eye jets,
                ε > 0); ``margin`` ∈ [0, 0.5) keeps that fraction of the channel's ψ-width away
                from each separatrix
``box``         ``x_min ≤ x < x_max``, ``y_min ≤ y < y_max``
``level_band``  ``psi_min ≤ ψ_p ≤ psi_max`` (in units of ψ: velocity × length)
``point``       every particle at (``x``, ``y``)
==============  ====================================================================================

Sampling is uniform by area: rejection against the region's mask, drawn all at once (in a
fixed sequence of vectorised rounds) from a NumPy ``Generator`` seeded by (study seed, start
index), so starts never depend on chunking or workers.  The proposal is the period cell or,
for disc kinds, the discs' bounding boxes; points covered by several proposal boxes (modulo
the period) are thinned by their coverage so the result stays exactly uniform.  Sampled
positions are not wrapped: a disc around a corner at (0, 0) yields points on both sides of 0.

Extending: another module may add a kind (or replace one for a single flow family, e.g. a
fluid-only ``uniform`` for an obstacle flow) with :func:`register_region_kind`; see
``docs/analysis.md``.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..errors import StudyError, range_text
from .geometry import FlowGeometry


@dataclass(frozen=True)
class StartRegion:
    """A start region: ``kind``, a label used as the ``start`` coordinate, and its parameters."""

    kind: str
    label: str
    params: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"kind": self.kind, "label": self.label, **self.params}


@dataclass(frozen=True)
class RegionKind:
    """How one kind of start region is read, tested and sampled.

    ``parse(table, geometry, where) -> dict``: checked parameters from the ``[[start]]`` table
    (without ``kind`` and ``label``); raise :class:`StudyError` naming ``where.key``.  Values
    must be plain numbers/strings (they go into the output's provenance).
    ``mask(params, geometry, x, y) -> bool array``: membership of points (any shape; periodic).
    Optional: ``proposal(params, geometry) -> (m, 4) array`` of boxes (x0, x1, y0, y1), each
    no larger than a period, whose periodic images cover the region (default: the period
    cell); ``area(params, geometry) -> float``, the area as a fraction of a period cell
    (default: counted on a 1024² midpoint grid); ``sample(params, geometry, n, rng) -> (x, y)``
    to bypass rejection sampling.  ``family`` restricts the kind to one flow family; a
    family-specific kind takes precedence over a generic one of the same name.
    """

    name: str
    summary: str
    parse: Callable
    mask: Callable
    proposal: Callable | None = None
    area: Callable | None = None
    sample: Callable | None = None
    family: str | None = None


_REGISTRY: dict[str, dict[str | None, RegionKind]] = {}


def register_region_kind(kind: RegionKind, *, replace: bool = False) -> RegionKind:
    """Add a start-region kind (generic, or for ``kind.family`` only).

    Registering an existing (name, family) pair raises unless ``replace=True``.
    """
    slot = _REGISTRY.setdefault(kind.name, {})
    if kind.family in slot and not replace:
        owner = "every family" if kind.family is None else f"family {kind.family!r}"
        raise ValueError(f"start kind {kind.name!r} is already registered for {owner}; "
                         "pass replace=True to override")
    slot[kind.family] = kind
    return kind


def unregister_region_kind(name: str, family: str | None = None) -> None:
    """Remove a registration made by :func:`register_region_kind` (for tests and plugins)."""
    slot = _REGISTRY.get(name, {})
    slot.pop(family, None)
    if not slot:
        _REGISTRY.pop(name, None)


def kind_names(family: str | None = None) -> tuple[str, ...]:
    """Kinds usable with ``family`` (all registered names when ``family`` is None)."""
    if family is None:
        return tuple(_REGISTRY)
    return tuple(name for name, slot in _REGISTRY.items() if None in slot or family in slot)


def __getattr__(name):
    if name == "KINDS":  # live view: includes kinds registered by other modules
        return kind_names()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def get_region_kind(name: str, family_name: str, where: str = "start") -> RegionKind:
    slot = _REGISTRY.get(name)
    if not slot or (family_name not in slot and None not in slot):
        raise StudyError(f"{where}.kind = {name!r} is not a known start region for flow family "
                         f"{family_name!r}; choose one of: " + ", ".join(kind_names(family_name)))
    return slot.get(family_name) or slot[None]


# ---- reading helpers (public: kinds registered elsewhere may use them) -----------------------
def read_number(table: dict, key: str, where: str, default=None, low=-math.inf, high=math.inf,
                low_open=False, high_open=False) -> float:
    """A finite number ``table[key]`` in the given range, or ``default`` (``None``: required)."""
    if key not in table:
        if default is None:
            raise StudyError(f"{where}.{key} is required")
        return float(default)
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise StudyError(f"{where}.{key}: expected a finite number, got {value!r}")
    value = float(value)
    below = value <= low if low_open else value < low
    above = value >= high if high_open else value > high
    if below or above:
        raise StudyError(f"{where}.{key} = {value:g} is outside the allowed range "
                         f"{range_text(low, high, low_open, high_open)}")
    return value


def reject_unknown(table: dict, allowed, kind: str, where: str) -> None:
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise StudyError(f"{where}: unknown key(s) {', '.join(unknown)} for start kind "
                         f"{kind!r}; allowed: kind, label" + "".join(f", {a}" for a in allowed))


# ---- built-in kinds ----------------------------------------------------------------------------
def _whole_cell(params, geo):
    lx, ly = geo.period
    return np.array([[0.0, lx, 0.0, ly]])


def _parse_nothing(table, geo, where):
    reject_unknown(table, (), "uniform", where)
    return {}


def _mask_all(params, geo, x, y):
    return np.ones(np.shape(x), dtype=bool)


def _sample_uniform(params, geo, n, rng):
    lx, ly = geo.period
    return rng.uniform(0.0, lx, n), rng.uniform(0.0, ly, n)


def _parse_point(table, geo, where):
    reject_unknown(table, ("x", "y"), "point", where)
    return {"x": read_number(table, "x", where), "y": read_number(table, "y", where)}


def _mask_point(params, geo, x, y):
    """The single given point nearest (periodically) to the region's point: a discrete delta
    for grid-based solvers."""
    x = np.asarray(x, dtype=np.float64)
    out = np.zeros(x.shape, dtype=bool)
    if x.size == 0:
        return out
    dx, dy = geo.periodic_offset(x, y, np.array([[params["x"], params["y"]]]))
    out.flat[int(np.argmin((dx[0] ** 2 + dy[0] ** 2).ravel()))] = True
    return out


def _sample_point(params, geo, n, rng):
    return np.full(n, params["x"]), np.full(n, params["y"])


def _parse_box(table, geo, where):
    names = ("x_min", "x_max", "y_min", "y_max")
    reject_unknown(table, names, "box", where)
    params = {name: read_number(table, name, where) for name in names}
    if params["x_min"] >= params["x_max"] or params["y_min"] >= params["y_max"]:
        raise StudyError(f"{where}: box needs x_min < x_max and y_min < y_max, got {params}")
    return params


def _mask_box(params, geo, x, y):
    lx, ly = geo.period

    def inside(value, low, high, period):
        # some periodic image of value lies in [low, high)
        return np.ceil((high - value) / period) - np.ceil((low - value) / period) >= 1

    return (inside(np.asarray(x, float), params["x_min"], params["x_max"], lx)
            & inside(np.asarray(y, float), params["y_min"], params["y_max"], ly))


def _sample_box(params, geo, n, rng):
    return (rng.uniform(params["x_min"], params["x_max"], n),
            rng.uniform(params["y_min"], params["y_max"], n))


def _area_box(params, geo):
    """Box area over the period-cell area (exceeds 1 for a box larger than a cell)."""
    return ((params["x_max"] - params["x_min"]) * (params["y_max"] - params["y_min"])
            / geo.cell_area)


def _need_points(geo, which, kind, where):
    points = geo.elliptic if which == "elliptic" else geo.hyperbolic
    if points.size == 0:
        what = "eddy centres (elliptic points)" if which == "elliptic" else \
            "stagnation corners (hyperbolic points)"
        raise StudyError(f"{where}: start kind {kind!r} is empty for flow family "
                         f"{geo.family.name!r} with these parameters: the flow has no {what}")
    return points


def _disc_parser(kind, which):
    def parse(table, geo, where):
        allowed = ("radius", "band") if kind == "centre" else ("radius",)
        reject_unknown(table, allowed, kind, where)
        _need_points(geo, which, kind, where)
        if "band" in table:
            if "radius" in table:
                raise StudyError(f"{where}: give either radius (a disc) or band (a psi-level "
                                 "band) for start kind 'centre', not both")
            return {"band": read_number(table, "band", where, low=0.0, high=1.0, low_open=True,
                                        high_open=True)}
        half_spacing = 0.5 * min(geo.period)
        radius = read_number(table, "radius", where, default=0.1 * geo.eddy_side, low=0.0,
                             high=half_spacing, low_open=True)
        return {"radius": radius}

    return parse


def _disc_mask(which):
    def mask(params, geo, x, y):
        points = geo.elliptic if which == "elliptic" else geo.hyperbolic
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if "band" in params:
            dx, dy = geo.periodic_offset(x, y, points)
            nearest = np.argmin(dx * dx + dy * dy, axis=0)
            level = geo.psi(points[:, 0], points[:, 1])[nearest]
            span = geo.psi_span[1] - geo.psi_span[0]
            return np.abs(geo.psi(x, y) - level) < params["band"] * span
        out = np.zeros(x.shape, dtype=bool)
        r2 = params["radius"] ** 2
        for px, py in points:  # loop keeps memory O(n) for many points
            dx, dy = geo.periodic_offset(x, y, np.array([[px, py]]))
            out |= (dx[0] ** 2 + dy[0] ** 2) < r2
        return out

    return mask


def _disc_proposal(which):
    def proposal(params, geo):
        if "band" in params:
            return _whole_cell(params, geo)
        points = geo.elliptic if which == "elliptic" else geo.hyperbolic
        r = params["radius"]
        return np.column_stack([points[:, 0] - r, points[:, 0] + r,
                                points[:, 1] - r, points[:, 1] + r])

    return proposal


def _disc_area(which):
    def area(params, geo):
        if "band" in params:
            return None
        points = geo.elliptic if which == "elliptic" else geo.hyperbolic
        r = params["radius"]
        if points.shape[0] > 1:
            dx, dy = geo.periodic_offset(points[:, 0], points[:, 1], points)
            distance = np.hypot(dx, dy)
            np.fill_diagonal(distance, np.inf)
            if distance.min() < 2 * r:
                return None  # overlapping discs: count on the grid
        return points.shape[0] * math.pi * r * r / geo.cell_area

    return area


def _parse_separatrix(table, geo, where):
    reject_unknown(table, ("delta",), "separatrix", where)
    delta = read_number(table, "delta", where, default=0.05, low=0.0, high=1.0, low_open=True,
                        high_open=True)
    if not geo.separatrix_levels:
        raise StudyError(f"{where}: start kind 'separatrix' is empty for flow family "
                         f"{geo.family.name!r} with these parameters: the flow has no "
                         "separatrices (no hyperbolic stagnation points)")
    return {"delta": delta}


def _mask_separatrix(params, geo, x, y):
    psi = geo.psi(x, y)
    width = params["delta"] * (geo.psi_span[1] - geo.psi_span[0])
    out = np.zeros(psi.shape, dtype=bool)
    for level in geo.separatrix_levels:
        out |= np.abs(psi - level) < width
    return out


def _jet_limits(params, geo):
    levels = geo.separatrix_levels
    low, high = levels[0], levels[-1]
    width = high - low
    return low + params["margin"] * width, high - params["margin"] * width


def _parse_jet(table, geo, where):
    reject_unknown(table, ("margin",), "jet", where)
    margin = read_number(table, "margin", where, default=0.0, low=0.0, high=0.5, high_open=True)
    if len(geo.separatrix_levels) < 2:
        hint = f" ({geo.family.empty_jet_hint})" if geo.family.empty_jet_hint else ""
        raise StudyError(f"{where}: start kind 'jet' is empty for flow family "
                         f"{geo.family.name!r} with these parameters: there are no open "
                         f"channels between two distinct separatrix levels{hint}")
    return {"margin": margin}


def _mask_jet(params, geo, x, y):
    low, high = _jet_limits(params, geo)
    psi = geo.psi(x, y)
    return (psi > low) & (psi < high)


def _parse_level_band(table, geo, where):
    reject_unknown(table, ("psi_min", "psi_max"), "level_band", where)
    low = read_number(table, "psi_min", where)
    high = read_number(table, "psi_max", where)
    if low >= high:
        raise StudyError(f"{where}: level_band needs psi_min < psi_max, got {low:g} >= {high:g}")
    span = geo.psi_span
    if high < span[0] or low > span[1]:
        raise StudyError(f"{where}: level_band [{low:g}, {high:g}] is empty: psi of flow "
                         f"family {geo.family.name!r} ranges over [{span[0]:.6g}, "
                         f"{span[1]:.6g}]")
    return {"psi_min": low, "psi_max": high}


def _mask_level_band(params, geo, x, y):
    psi = geo.psi(x, y)
    return (psi >= params["psi_min"]) & (psi <= params["psi_max"])


for _kind in (
    RegionKind("uniform", "the whole period cell", _parse_nothing, _mask_all,
               area=lambda p, g: 1.0, sample=_sample_uniform),
    RegionKind("centre", "discs of radius r (default 0.1 eddy side) around eddy centres, or "
               "the psi band |psi - psi_c| < band*(psi range) around each centre",
               _disc_parser("centre", "elliptic"), _disc_mask("elliptic"),
               proposal=_disc_proposal("elliptic"), area=_disc_area("elliptic")),
    RegionKind("separatrix", "band |psi - psi_sep| < delta*(psi range) around the separatrices",
               _parse_separatrix, _mask_separatrix),
    RegionKind("hyperbolic", "discs of radius r (default 0.1 eddy side) around stagnation "
               "corners", _disc_parser("hyperbolic", "hyperbolic"), _disc_mask("hyperbolic"),
               proposal=_disc_proposal("hyperbolic"), area=_disc_area("hyperbolic")),
    RegionKind("jet", "open channels between the separatrix levels (cat's-eye, epsilon > 0)",
               _parse_jet, _mask_jet),
    RegionKind("box", "x_min <= x < x_max, y_min <= y < y_max", _parse_box, _mask_box,
               area=_area_box, sample=_sample_box),
    RegionKind("level_band", "psi_min <= psi <= psi_max", _parse_level_band, _mask_level_band),
    RegionKind("point", "all particles at (x, y)", _parse_point, _mask_point,
               area=lambda p, g: 0.0, sample=_sample_point),
):
    register_region_kind(_kind)


# ---- geometry cache ------------------------------------------------------------------------------
_GEOMETRY_CACHE: dict = {}


def flow_geometry(family, values) -> FlowGeometry:
    """The (cached) :class:`FlowGeometry` of a family and its checked parameter values."""
    key = (family.name, repr(sorted(values.items())))
    geometry = _GEOMETRY_CACHE.get(key)
    if geometry is None:
        if len(_GEOMETRY_CACHE) >= 64:
            _GEOMETRY_CACHE.clear()
        geometry = _GEOMETRY_CACHE[key] = FlowGeometry(family, dict(values))
    return geometry


# ---- public API ---------------------------------------------------------------------------------
def parse_start(table: dict, flow, where: str = "start") -> StartRegion:
    """One ``[start]`` table → :class:`StartRegion`; ``flow`` is the study's ``FlowSpec``."""
    if not isinstance(table, dict):
        raise StudyError(f"{where}: expected a table, got {table!r}")
    table = dict(table)
    family = flow.model
    kind_name = table.pop("kind", "uniform")
    if not isinstance(kind_name, str):
        raise StudyError(f"{where}.kind: expected a string, got {kind_name!r}")
    kind = get_region_kind(kind_name, family.name, where)
    label = table.pop("label", kind_name)
    if not isinstance(label, str) or not label:
        raise StudyError(f"{where}.label: expected a non-empty string, got {label!r}")
    geo = flow_geometry(family, flow.params)
    params = kind.parse(table, geo, where)
    region = StartRegion(kind=kind_name, label=label, params=params)
    if kind_name != "point" and _area(region, kind, geo) <= 0.0:
        raise StudyError(f"{where}: start region {label!r} ({kind_name}, {params}) is empty "
                         f"for flow family {family.name!r} with these parameters")
    return region


def parse_starts(value, flow) -> tuple[StartRegion, ...]:
    """One table or a list of tables (``[[start]]``) → start regions with unique labels."""
    tables = value if isinstance(value, list) else [value]
    if not tables:
        raise StudyError("start: the list of start regions is empty")
    regions = tuple(parse_start(t, flow, f"start[{i}]" if isinstance(value, list) else "start")
                    for i, t in enumerate(tables))
    labels = [r.label for r in regions]
    if len(set(labels)) != len(labels):
        raise StudyError(f"start: labels must be unique, got {labels}; give each a 'label'")
    return regions


def period_cell(family, values) -> tuple[float, float]:
    """(Lx, Ly) of one period cell; 2π/k along a direction in which the flow is uniform."""
    return flow_geometry(family, values).period


def _area(region: StartRegion, kind: RegionKind, geo: FlowGeometry) -> float:
    key = (id(kind), repr(sorted(region.params.items())))
    cache = geo.__dict__.setdefault("_area_cache", {})
    if key not in cache:
        value = kind.area(region.params, geo) if kind.area is not None else None
        if value is None:
            value = geo.grid_fraction(lambda x, y: kind.mask(region.params, geo, x, y))
        cache[key] = float(value)
    return cache[key]


def area_fraction(region: StartRegion, family, values) -> float:
    """Area of the region as a fraction of one period cell (0 for a point).

    Exact for uniform, box and non-overlapping discs; otherwise the fraction of a 1024 × 1024
    midpoint grid of the period cell inside the region (relative error ~1e-3 for thin bands).
    """
    geo = flow_geometry(family, values)
    return _area(region, get_region_kind(region.kind, family.name), geo)


def region_mask(region: StartRegion, family, values, x, y) -> np.ndarray:
    """Boolean array (shape of ``x``): which points (x, y) belong to the region.

    Periodic: a point is inside when its image in the period cell is.  For ``point`` the mask
    marks the single given point nearest to (x, y) (a discrete delta for grid solvers).
    """
    geo = flow_geometry(family, values)
    kind = get_region_kind(region.kind, family.name)
    x, y = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    return np.asarray(kind.mask(region.params, geo, x, y), dtype=bool)


def sample_starts(region: StartRegion, family, values, n: int, seed: int,
                  start_index: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """N start positions for ``region`` (float64 arrays), reproducible from (seed, start_index).

    Raises :class:`StudyError` if the region is empty for this flow (e.g. ``jet`` at ε = 0).
    """
    rng = np.random.default_rng([seed, start_index, 0x5EED])
    geo = flow_geometry(family, values)
    kind = get_region_kind(region.kind, family.name)
    if kind.sample is not None:
        x, y = kind.sample(region.params, geo, n, rng)
        return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    fraction = _area(region, kind, geo)
    if fraction <= 0.0:
        raise StudyError(f"start region {region.label!r} ({region.kind}) is empty for flow "
                         f"family {family.name!r} with these parameters")
    boxes = (kind.proposal or _whole_cell)(region.params, geo)
    return _rejection_sample(lambda x, y: kind.mask(region.params, geo, x, y), boxes, geo, n,
                             rng, fraction, region.label)


def _coverage(boxes: np.ndarray, period, x, y) -> np.ndarray:
    """How many proposal boxes contain a periodic image of each point (x, y)."""
    lx, ly = period
    total = np.zeros(x.shape)
    for x0, x1, y0, y1 in boxes:
        cx = np.ceil((x1 - x) / lx) - np.ceil((x0 - x) / lx)
        cy = np.ceil((y1 - y) / ly) - np.ceil((y0 - y) / ly)
        total += cx * cy
    return total


def _rejection_sample(mask, boxes, geo: FlowGeometry, n, rng, fraction, label):
    boxes = np.atleast_2d(np.asarray(boxes, dtype=np.float64))
    lx, ly = geo.period
    widths = boxes[:, 1] - boxes[:, 0]
    heights = boxes[:, 3] - boxes[:, 2]
    if np.any(widths <= 0) or np.any(heights <= 0) or np.any(widths > lx * (1 + 1e-12)) or \
            np.any(heights > ly * (1 + 1e-12)):
        raise ValueError("proposal boxes must have positive size no larger than a period")
    areas = widths * heights
    probabilities = areas / areas.sum()
    # expected acceptance: region area over total proposal area (coverage thinning included)
    rate = min(1.0, max(fraction * geo.cell_area / areas.sum(), 1e-9))
    xs, ys = [], []
    have = 0
    drawn = 0
    while have < n:
        need = n - have
        m = int(min(max(1.25 * need / rate + 64, 1024), 1 << 22))
        if len(boxes) > 1:
            which = rng.choice(len(boxes), size=m, p=probabilities)
        else:
            which = np.zeros(m, dtype=np.int64)
        x = boxes[which, 0] + widths[which] * rng.random(m)
        y = boxes[which, 2] + heights[which] * rng.random(m)
        keep = np.asarray(mask(x, y), dtype=bool)
        if len(boxes) > 1:
            keep &= rng.random(m) * _coverage(boxes, geo.period, x, y) < 1.0
        xs.append(x[keep])
        ys.append(y[keep])
        have += int(keep.sum())
        drawn += m
        if have == 0 and drawn > 50_000_000:
            raise StudyError(f"start region {label!r}: no point found in {drawn} draws; the "
                             "region is empty or too thin to sample")
    return np.concatenate(xs)[:n], np.concatenate(ys)[:n]
