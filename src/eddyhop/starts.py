"""Start-position samplers: where in the flow an ensemble begins.

Every region samples uniformly by area inside its set, within one spatial period cell
``[0, Lx) × [0, Ly)`` of the flow (``2π/k`` along an unbounded direction).  Sampling uses a NumPy
``Generator`` seeded from (study seed, start index) and draws all N starts at once, so starts do
not depend on chunking or workers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import StudyError

KINDS = ("uniform", "point", "box")


@dataclass(frozen=True)
class StartRegion:
    """A start region: ``kind``, a label used as the ``start`` coordinate, and its parameters."""

    kind: str
    label: str
    params: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"kind": self.kind, "label": self.label, **self.params}


_PARAMS = {"uniform": (), "point": ("x", "y"), "box": ("x_min", "x_max", "y_min", "y_max")}


def parse_start(table: dict, flow, where: str = "start") -> StartRegion:
    if not isinstance(table, dict):
        raise StudyError(f"{where}: expected a table, got {table!r}")
    table = dict(table)
    kind = table.pop("kind", "uniform")
    if kind not in KINDS:
        raise StudyError(f"{where}.kind = {kind!r} is not a known start region; choose one of: "
                         + ", ".join(KINDS))
    label = table.pop("label", kind)
    if not isinstance(label, str) or not label:
        raise StudyError(f"{where}.label: expected a non-empty string, got {label!r}")
    allowed = _PARAMS[kind]
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise StudyError(f"{where}: unknown key(s) {', '.join(unknown)} for start kind "
                         f"{kind!r}; allowed: kind, label" + "".join(f", {a}" for a in allowed))
    params = {}
    for name in allowed:
        if name not in table:
            raise StudyError(f"{where}.{name} is required for start kind {kind!r}")
        value = table[name]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(
                value):
            raise StudyError(f"{where}.{name}: expected a finite number, got {value!r}")
        params[name] = float(value)
    if kind == "box":
        if params["x_min"] >= params["x_max"] or params["y_min"] >= params["y_max"]:
            raise StudyError(f"{where}: box needs x_min < x_max and y_min < y_max, got "
                             f"{params}")
    return StartRegion(kind=kind, label=label, params=params)


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
    lx, ly = family.period(values)
    fallback = 2.0 * math.pi / family.wavenumber(values)
    return (lx or fallback, ly or fallback)


def sample_starts(region: StartRegion, family, values, n: int, seed: int,
                  start_index: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """N start positions for ``region`` (float64 arrays), reproducible from (seed, start_index)."""
    rng = np.random.default_rng([seed, start_index, 0x5EED])
    lx, ly = period_cell(family, values)
    if region.kind == "uniform":
        return rng.uniform(0.0, lx, n), rng.uniform(0.0, ly, n)
    if region.kind == "point":
        return np.full(n, region.params["x"]), np.full(n, region.params["y"])
    p = region.params
    return rng.uniform(p["x_min"], p["x_max"], n), rng.uniform(p["y_min"], p["y_max"], n)


def area_fraction(region: StartRegion, family, values) -> float:
    """Area of the region as a fraction of one period cell (0 for a point)."""
    lx, ly = period_cell(family, values)
    if region.kind == "uniform":
        return 1.0
    if region.kind == "point":
        return 0.0
    p = region.params
    return (p["x_max"] - p["x_min"]) * (p["y_max"] - p["y_min"]) / (lx * ly)
