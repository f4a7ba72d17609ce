"""The ``[sweep]`` table of a study: which parameters vary, over which values, and the points.

Schema (TOML)::

    [sweep]
    combine = "product"                    # or "zip": lists walked together, equal lengths
    "noise.peclet" = { first = 10.0, last = 1e4, per_decade = 2, scale = "log" }
    "flow.epsilon" = [0.0, 0.5, 1.0]       # an explicit list
    start = ["centre", "separatrix"]       # labels of the study's [[start]] regions

Every swept parameter is addressed as ``section.name``:

* ``noise.peclet``, ``noise.kappa``, ``noise.modulation`` (setting one of peclet/kappa replaces
  the other in the point's study);
* ``flow.<parameter>`` for any numeric parameter of the study's flow family (``U``, ``k``,
  ``epsilon``, ``drift_x``, ``B`` …);
* ``start`` (region labels; each point then runs one region), ``start.<parameter>`` for the
  study's only start region or ``start.<label>.<parameter>`` (e.g. ``start.x_max`` of a box);
* ``run.seed`` (integers: statistically independent replicas).

The nested form ``[sweep.noise]`` / ``peclet = [...]`` is read the same way.  A value is a list
or a range table ``{first, last, count | per_decade, scale = "linear" | "log"}`` (end points
included; ``per_decade`` only with ``scale = "log"``).  Parameters that change the time grid
or the batch layout (``run.dt``, ``run.t_end``, ``run.particles`` …) cannot be swept: points of
one sweep share one ``time`` coordinate in the merged Dataset.

A point is a plain study: the base document (without ``[sweep]``) with the point's values set,
validated by ``spec.parse_study``.  The spec knows nothing of running or files.
"""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
import math
from dataclasses import dataclass

import numpy as np

from ..errors import StudyError

COMBINE = ("product", "zip")
SCALES = ("linear", "log")
RANGE_KEYS = {"first", "last", "count", "per_decade", "scale"}
MAX_POINTS = 100_000

# Symbolic units (see ``io.units_for``) of flow parameters by their declared kind.
FLOW_UNITS = {"velocity": "L T-1", "wavenumber": "L-1", "length": "L", "frequency": "T-1",
              "1": "1"}
NOISE_PARAMETERS = {
    "peclet": ("Péclet number", "1"),
    "kappa": ("molecular diffusivity kappa", "L2 T-1"),
    "modulation": ("relative amplitude a of the modulated diffusivity", "1"),
}
# Symbolic units of numeric start-region parameters.  A start kind with another numeric parameter
# can still be swept; add its units here so that the merged coordinate carries them.
START_UNITS = {"x": "L", "y": "L", "x_min": "L", "x_max": "L", "y_min": "L", "y_max": "L",
               "radius": "L", "delta": "1", "band": "1", "margin": "1", "psi_min": "L2 T-1",
               "psi_max": "L2 T-1"}
NOT_SWEEPABLE = {
    "run.dt": "it changes the time grid",
    "run.t_end": "it changes the time grid",
    "run.n_times": "it changes the time grid",
    "run.t_first": "it changes the time grid",
    "run.spacing": "it changes the time grid",
    "run.particles": "it changes the batch layout",
    "run.batches": "it changes the batch layout",
    "run.workers": "it never changes the numbers (use --workers)",
    "run.chunk": "it never changes the numbers",
}
# Dimension names already used inside a point's Dataset.
RESERVED_DIMS = {"time", "batch", "check_batch", "order", "lag", "aging_time", "particle",
                 "track_time", "residence_time", "flight_length", "residence_time_edge",
                 "flight_length_edge", "point"}


@dataclass(frozen=True)
class Axis:
    """One swept parameter: its address, merged-Dataset dimension name and values.

    ``units`` is symbolic (``"L T-1"`` …, resolved with the study's output units) or ``None``
    for start-region labels; ``kind`` is ``"float"``, ``"int"`` or ``"label"``.
    """

    address: str
    dim: str
    values: tuple
    kind: str
    long_name: str
    units: str | None

    def as_dict(self) -> dict:
        return {"address": self.address, "dim": self.dim, "values": list(self.values),
                "kind": self.kind, "long_name": self.long_name, "units": self.units}


@dataclass(frozen=True)
class SweepPoint:
    """One point: ``index`` in sweep order, an ``id`` (file stem) and its values by address."""

    index: int
    id: str
    values: dict

    def describe(self, axes) -> str:
        return ", ".join(f"{a.dim}={_short(self.values[a.address])}" for a in axes)


def _short(value) -> str:
    return f"{value:.6g}" if isinstance(value, float) else str(value)


@dataclass(frozen=True)
class SweepSpec:
    """A validated ``[sweep]``: axes, how they combine and the base study document (as JSON)."""

    combine: str
    axes: tuple
    base_json: str
    start_labels: tuple = ()

    @property
    def shape(self) -> tuple:
        if self.combine == "zip":
            return (len(self.axes[0].values),)
        return tuple(len(a.values) for a in self.axes)

    @property
    def dims(self) -> tuple:
        return ("point",) if self.combine == "zip" else tuple(a.dim for a in self.axes)

    @property
    def n_points(self) -> int:
        return int(np.prod(self.shape))

    def base_document(self) -> dict:
        return json.loads(self.base_json)

    def points(self) -> list[SweepPoint]:
        """Every point in sweep order (product: the last axis varies fastest)."""
        if self.combine == "zip":
            rows = zip(*(a.values for a in self.axes))
        else:
            rows = itertools.product(*(a.values for a in self.axes))
        width = max(4, len(str(self.n_points - 1)))
        return [SweepPoint(index=i, id=f"pt{i:0{width}d}",
                           values={a.address: v for a, v in zip(self.axes, row)})
                for i, row in enumerate(rows)]

    def point_document(self, point: SweepPoint) -> dict:
        """The plain study document of ``point`` (no ``[sweep]`` table)."""
        document = self.base_document()
        for address, value in point.values.items():
            _apply(document, address, value, self.start_labels)
        return document

    def point_study(self, point: SweepPoint, source_text: str = "", source_path: str = ""):
        # the study parser is handed over by ``spec.parse_study`` (see :func:`parse_sweep`):
        # the schema of one study sits beside this module, not below it
        return self._parse_study(self.point_document(point), source_text=source_text,
                                 source_path=source_path)

    def fingerprint(self) -> str:
        """sha256 of everything that determines the numbers of every point (resolved per-point
        studies and the package version), blind to title, description, output units and
        workers/chunk/progress.  Two sweeps share a fingerprint iff they compute the same."""
        from .. import __version__

        digest = hashlib.sha256()
        digest.update(f"eddyhop {__version__}\n".encode())
        digest.update(json.dumps([a.as_dict() for a in self.axes], sort_keys=True).encode())
        digest.update(self.combine.encode())
        for point in self.points():
            resolved = self.point_study(point).as_dict()
            for key in ("title", "description", "output", "sweep"):
                resolved.pop(key, None)
            for key in ("workers", "chunk", "progress"):
                resolved["run"].pop(key, None)
            digest.update(json.dumps(resolved, sort_keys=True, default=str).encode())
        return digest.hexdigest()

    def as_dict(self) -> dict:
        return {"combine": self.combine, "axes": [a.as_dict() for a in self.axes]}


# ---- applying a value to a document ------------------------------------------------------------
def _start_tables(document) -> list:
    value = document.get("start", {"kind": "uniform"})
    return value if isinstance(value, list) else [value]


def _find_start(document, label, labels):
    """The ``[[start]]`` table of region ``label`` (regions keep the order of their tables)."""
    return _start_tables(document)[list(labels).index(label)]


def _apply(document: dict, address: str, value, labels) -> None:
    parts = address.split(".")
    if parts[0] == "noise":
        noise = document.setdefault("noise", {})
        if parts[1] in ("peclet", "kappa"):
            noise.pop("kappa" if parts[1] == "peclet" else "peclet", None)
        noise[parts[1]] = value
    elif parts[0] in ("flow", "run"):
        document.setdefault(parts[0], {})[parts[1]] = value
    elif parts == ["start"]:
        document["start"] = copy.deepcopy(_find_start(document, value, labels))
    elif len(parts) == 2:
        _start_tables(document)[0][parts[1]] = value  # the study's only region, in place
    else:
        _find_start(document, parts[1], labels)[parts[2]] = value


# ---- parsing ---------------------------------------------------------------------------------
def _flatten(table: dict, prefix: str = "") -> dict:
    """``{"noise": {"peclet": [...]}}`` → ``{"noise.peclet": [...]}``; range tables are leaves."""
    out = {}
    for key, value in table.items():
        address = f"{prefix}{key}"
        is_range = isinstance(value, dict) and ("first" in value or "last" in value)
        if isinstance(value, dict) and not is_range and value:
            out.update(_flatten(value, f"{address}."))
        else:
            out[address] = value
    return out


def _numeric_start_params(region) -> list[str]:
    return [name for name, value in region.params.items()
            if isinstance(value, (int, float)) and not isinstance(value, bool)]


def sweepable(base_study) -> list[str]:
    """Addresses that can be swept in this (validated, sweep-free) study."""
    names = [f"noise.{name}" for name in NOISE_PARAMETERS]
    names += [f"flow.{p.name}" for p in base_study.flow.model.parameters]
    names += ["run.seed", "start"]
    regions = base_study.starts
    for region in regions:
        prefix = "start." if len(regions) == 1 else f"start.{region.label}."
        names += [prefix + name for name in _numeric_start_params(region)]
    return names


def _resolve(address: str, base_study) -> tuple[str, str, str, str | None]:
    """(dim, kind, long_name, units) of a sweepable address, or a StudyError saying why not."""
    where = f'sweep."{address}"'
    parts = address.split(".")
    if address in NOT_SWEEPABLE:
        raise StudyError(f"{where}: {address} cannot be swept because {NOT_SWEEPABLE[address]}; "
                         "run one sweep per value instead")
    if parts[0] == "noise" and len(parts) == 2 and parts[1] in NOISE_PARAMETERS:
        long_name, units = NOISE_PARAMETERS[parts[1]]
        return parts[1], "float", long_name, units
    if parts[0] == "flow" and len(parts) == 2:
        for p in base_study.flow.model.parameters:
            if p.name == parts[1]:
                return p.name, "float", p.description, FLOW_UNITS.get(p.units, "1")
    if address == "run.seed":
        return "seed", "int", "random seed of the point's ensemble", "1"
    if parts[0] == "start":
        regions = {r.label: r for r in base_study.starts}
        if len(parts) == 1:
            return "start", "label", "label of the start region", None
        if len(parts) == 2 and len(regions) > 1:
            raise StudyError(f"{where}: the study has several start regions "
                             f"({', '.join(regions)}); address one as start.<label>.{parts[1]}")
        if len(parts) == 3 and parts[1] not in regions:
            raise StudyError(f"{where}: no start region labelled {parts[1]!r}; labels: "
                             f"{', '.join(regions)}")
        if len(parts) <= 3:
            region = regions[parts[1]] if len(parts) == 3 else base_study.starts[0]
            name = parts[-1]
            numeric = _numeric_start_params(region)
            if name in numeric:
                dim = f"start_{name}" if len(parts) == 2 else f"start_{region.label}_{name}"
                return (dim, "float", f"{name} of start region '{region.label}' ({region.kind})",
                        START_UNITS.get(name))
            raise StudyError(f"{where}: start region '{region.label}' of kind '{region.kind}' "
                             f"has no numeric parameter {name!r}; it has: "
                             f"{', '.join(numeric) or 'none'}")
    raise StudyError(f"{where}: unknown parameter {address!r}; parameters that can be swept in "
                     f"this study: {', '.join(sweepable(base_study))}")


def _range_values(spec: dict, where: str) -> list[float]:
    unknown = sorted(set(spec) - RANGE_KEYS)
    if unknown:
        raise StudyError(f"{where}: unknown key(s) {', '.join(unknown)} in a range; allowed: "
                         f"{', '.join(sorted(RANGE_KEYS))}")
    scale = spec.get("scale", "linear")
    if scale not in SCALES:
        raise StudyError(f"{where}.scale = {scale!r} is not allowed; choose one of: "
                         + ", ".join(SCALES))
    bounds = []
    for key in ("first", "last"):
        if key not in spec:
            raise StudyError(f"{where}.{key} is required in a range")
        value = spec[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) \
                or not math.isfinite(value):
            raise StudyError(f"{where}.{key}: expected a finite number, got {value!r}")
        if scale == "log" and value <= 0:
            raise StudyError(f"{where}.{key} = {value!r}: a log range needs positive bounds "
                             "(first > 0 and last > 0)")
        bounds.append(float(value))
    first, last = bounds
    if ("count" in spec) == ("per_decade" in spec):
        raise StudyError(f"{where}: give exactly one of count or per_decade")
    if "per_decade" in spec:
        per_decade = spec["per_decade"]
        if scale != "log":
            raise StudyError(f"{where}.per_decade needs scale = \"log\"")
        if isinstance(per_decade, bool) or not isinstance(per_decade, int) or per_decade < 1:
            raise StudyError(f"{where}.per_decade = {per_decade!r}: expected an integer >= 1")
        decades = abs(math.log10(last / first))
        count = round(decades * per_decade) + 1
        if abs(decades * per_decade - round(decades * per_decade)) > 1e-9:
            raise StudyError(f"{where}: first = {first:g} and last = {last:g} span "
                             f"{decades:.4g} decades, not a whole number of steps of "
                             f"1/{per_decade} decade; adjust the bounds or use count")
    else:
        count = spec["count"]
        if isinstance(count, bool) or not isinstance(count, int):
            raise StudyError(f"{where}.count: expected an integer, got {count!r}")
    if count < 1:
        raise StudyError(f"{where}.count = {count}: the range is empty; give count >= 1")
    if count > MAX_POINTS:  # before the values are built: a count of 10⁸ must answer at once
        raise StudyError(f"{where}.count = {count} exceeds the limit of {MAX_POINTS} sweep "
                         "points; split the sweep")
    if count == 1 and first != last:
        raise StudyError(f"{where}: count = 1 cannot span first = {first:g} to last = {last:g}")
    if count > 1 and first == last:
        raise StudyError(f"{where}: first = last = {first:g} gives {count} identical values")
    if count == 1:
        return [first]
    values = np.geomspace(first, last, count) if scale == "log" else np.linspace(first, last,
                                                                                  count)
    return [float(v) for v in values]


def _axis_values(raw, kind: str, where: str, labels: list[str]) -> tuple:
    if isinstance(raw, dict):
        if kind != "float":
            raise StudyError(f"{where}: ranges are for real-valued parameters; give an explicit "
                             "list" + (" of integers" if kind == "int" else " of start labels"))
        values = _range_values(raw, where)
    elif isinstance(raw, list):
        if not raw:
            raise StudyError(f"{where} = []: the list is empty; give at least one value")
        values = []
        for i, item in enumerate(raw):
            if kind == "label":
                if item not in labels:
                    raise StudyError(f"{where}[{i}] = {item!r} is not a start-region label; "
                                     f"labels: {', '.join(labels)}")
                values.append(item)
            elif kind == "int":
                if isinstance(item, bool) or not isinstance(item, int) or item < 0:
                    raise StudyError(f"{where}[{i}] = {item!r}: expected a non-negative integer")
                values.append(item)
            else:
                if isinstance(item, bool) or not isinstance(item, (int, float)) \
                        or not math.isfinite(item):
                    raise StudyError(f"{where}[{i}] = {item!r}: expected a finite number")
                values.append(float(item))
    else:
        raise StudyError(f"{where}: expected a list of values or a range table "
                         "{first, last, count | per_decade, scale}, got " + repr(raw))
    if len(set(values)) != len(values):
        raise StudyError(f"{where}: values must be distinct, got {values}")
    return tuple(values)


def parse_sweep(table: dict, document: dict, source_path: str = "", *, parse_study) -> SweepSpec:
    """Validate a ``[sweep]`` table against its study ``document`` and return the spec.

    The base study (the document without ``[sweep]``) and then every point are validated with
    ``parse_study`` (``spec.parse_study``, which calls this function for a ``[sweep]`` table and
    passes itself), so a point out of a parameter's range is reported here, naming it.
    A data file the flow names (``flow.file``) is resolved once against ``source_path`` (the
    study file), so that points find it wherever they run.
    """
    if not isinstance(table, dict):
        raise StudyError(f"sweep: expected a table, got {table!r}")
    table = dict(table)
    combine = table.pop("combine", "product")
    if combine not in COMBINE:
        raise StudyError(f"sweep.combine = {combine!r} is not allowed; choose one of: "
                         + ", ".join(COMBINE))
    base = {k: copy.deepcopy(v) for k, v in document.items() if k != "sweep"}
    # errors of the fixed part of the study read as they would without a sweep
    base_study = parse_study(base, source_path=source_path)
    resolved_file = base_study.flow.params.get("file")
    if isinstance(resolved_file, str) and isinstance(base.get("flow"), dict) \
            and "file" in base["flow"]:
        base["flow"]["file"] = resolved_file
    entries = _flatten(table)
    if not entries:
        raise StudyError('sweep: no parameter to sweep; add e.g. "noise.peclet" = [10, 100] '
                         "(can be swept: " + ", ".join(sweepable(base_study)) + ")")
    labels = [r.label for r in base_study.starts]
    axes = []
    for address, raw in entries.items():
        dim, kind, long_name, units = _resolve(address, base_study)
        values = _axis_values(raw, kind, f'sweep."{address}"', labels)
        axes.append(Axis(address=address, dim=dim, values=values, kind=kind,
                         long_name=long_name, units=units))
    addresses = [a.address for a in axes]
    if "start" in addresses and any(a.startswith("start.") for a in addresses):
        raise StudyError("sweep: sweep either the start region (start = [labels]) or its "
                         "parameters (start.<name>), not both")
    if "noise.peclet" in addresses and "noise.kappa" in addresses:
        raise StudyError('sweep: "noise.peclet" and "noise.kappa" fix the same diffusivity; '
                         "sweep one of them")
    dims = [a.dim for a in axes]
    clashes = sorted({d for d in dims if dims.count(d) > 1} | (set(dims) & RESERVED_DIMS))
    if clashes:
        raise StudyError(f"sweep: dimension name(s) {', '.join(clashes)} clash; rename the "
                         "start region label(s) involved")
    if combine == "zip":
        lengths = {a.address: len(a.values) for a in axes}
        if len(set(lengths.values())) > 1:
            raise StudyError(f"sweep.combine = \"zip\" needs lists of equal length, got {lengths}")
    try:
        base_json = json.dumps(base, sort_keys=False, allow_nan=False)
    except (TypeError, ValueError):
        raise StudyError("sweep: a study with a [sweep] table may hold only numbers, strings, "
                         "booleans, lists and tables (no dates or non-finite numbers)") from None
    spec = SweepSpec(combine=combine, axes=tuple(axes), base_json=base_json,
                     start_labels=tuple(labels))
    object.__setattr__(spec, "_parse_study", parse_study)  # not a field: no effect on eq/asdict
    if spec.n_points > MAX_POINTS:
        raise StudyError(f"sweep: {spec.n_points} points exceed the limit of {MAX_POINTS}; "
                         "split the sweep")
    for point in spec.points():
        try:
            spec.point_study(point)
        except StudyError as exc:
            raise StudyError(f"sweep point {point.id} ({point.describe(spec.axes)}): {exc}") \
                from None
    return spec
