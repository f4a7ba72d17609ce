"""Merging a sweep folder into one Dataset with the swept parameters as dimensions.

``combine = "product"`` sweeps give one dimension per swept parameter (``peclet``, ``epsilon``,
``start`` …) in the order of the ``[sweep]`` table; ``zip`` sweeps give one ``point`` dimension
with every swept parameter as a coordinate along it.  Each point is analysed first (when the
analysis package is installed) so derived quantities (effective diffusivities, crossover times,
regimes) come per point.  Points not (yet) computed are NaN and flagged in ``point_status``.
Per-point κ, Pe, U and k become variables on the swept dimensions (unless swept themselves), so
the scaling summary and figures need no attributes.  Attributes common to every point are kept;
the merged file's own provenance replaces the rest.
"""

from __future__ import annotations

import importlib
import importlib.util
import json
import warnings

import numpy as np

from ..errors import EddyhopError
from .manifest import Manifest, sha256_file

STATUS_CODES = {"done": 0, "failed": 1, "pending": 2, "running": 2}
STATUS_MEANINGS = "done failed not_computed"
PER_POINT = {  # variable: (attribute of a point file, long name, symbolic units)
    "kappa": ("kappa", "molecular diffusivity kappa of the point", "L2 T-1"),
    "peclet": ("peclet", "Péclet number of the point", "1"),
    "velocity_scale": ("flow_U", "velocity scale U of the point's flow", "L T-1"),
    "wavenumber": ("flow_k", "wavenumber k of the point's flow", "L-1"),
}
# Attributes that describe one point only; never carried into the merged file.
POINT_ONLY_ATTRS = {"history", "study_resolved", "sweep_point", "sweep_parameters",
                    "step_size_warnings", "title", "summary", "study_toml", "study_file"}


def analysis_function():
    """``eddyhop.analysis.analyse`` when the analysis package is installed, else ``None``."""
    if importlib.util.find_spec("eddyhop.analysis") is None:
        return None
    return getattr(importlib.import_module("eddyhop.analysis"), "analyse", None)


def _number(value):
    if isinstance(value, str):
        return np.inf if value == "inf" else np.nan
    return float(value)


def _blank(template):
    """A copy of ``template`` with every data value missing (for points not computed)."""
    blank = template.copy(deep=True)
    for name, var in blank.data_vars.items():
        if var.dtype.kind in "fc":
            blank[name] = var.copy(data=np.full(var.shape, np.nan, dtype=var.dtype))
        elif var.dtype.kind in "iub":
            blank[name] = var.copy(data=np.full(var.shape, np.nan))
        else:
            blank[name] = var.copy(data=np.full(var.shape, "", dtype=object))
    return blank


def _load_point(manifest, entry, analyse, verify):
    from ..results.io import open_result

    path = manifest.directory / entry["file"]
    if not path.exists():
        raise EddyhopError(f"point {entry['id']}: its file {str(path)!r} is missing; run "
                           "`eddyhop sweep` on the study again to recompute it")
    if verify and sha256_file(path) != entry["sha256"]:
        raise EddyhopError(f"point {entry['id']}: {str(path)!r} fails its checksum (changed "
                           "or damaged since it was written); run `eddyhop sweep` on the study "
                           "with the same --out to recompute it")
    ds = open_result(path)
    notes = []
    if analyse is not None:
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                ds = analyse(ds)
        except EddyhopError as exc:
            notes.append(("analysis skipped", entry["id"], str(exc)))
        else:
            notes += [(w.category.__name__, entry["id"], str(w.message)) for w in caught]
    for name, (attr, _, _) in PER_POINT.items():
        if attr in ds.attrs:
            ds[name] = ((), _number(ds.attrs[attr]))
    return ds, notes


def _drop_constant_dims(variable):
    """``variable`` without the dimensions along which it does not vary (missing points, NaN,
    are ignored): κ of a Pe × start sweep depends on Pe only, U and k on nothing."""
    import warnings as _warnings

    for dim in list(variable.dims):
        values = variable.values
        axis = variable.dims.index(dim)
        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices
            high = np.nanmax(values, axis=axis)
            low = np.nanmin(values, axis=axis)
        if np.array_equal(high, low, equal_nan=True):
            variable = variable.reduce(np.nanmax, dim=dim).drop_vars(dim, errors="ignore")
    return variable


def _common_attrs(datasets) -> dict:
    first = datasets[0].attrs
    common = {}
    for key, value in first.items():
        if key in POINT_ONLY_ATTRS:
            continue
        same = all(key in d.attrs and np.array_equal(np.asarray(d.attrs[key]),
                                                     np.asarray(value)) for d in datasets[1:])
        if same:
            common[key] = value
    return common


def _nest(items: list, shape: list) -> list:
    """Row-major nested lists of ``items`` with the given shape (for ``combine_nested``)."""
    if len(shape) == 1:
        return list(items)
    size = int(np.prod(shape[1:]))
    return [_nest(items[i * size:(i + 1) * size], shape[1:]) for i in range(shape[0])]


def prepare_point(manifest, point_id: str, *, analyse: bool = True) -> tuple:
    """A written point's file read back and analysed, as ``merge_sweep`` would (its sha256
    checked), for ``merge_sweep(prepared=...)``: ``(sha256, Dataset, notes)``.  The sweep
    calls it for each point as soon as the point is written, so that the analysis of one
    point overlaps the computation of the others instead of all of it waiting for the end."""
    entry = manifest.entry(point_id)
    function = analysis_function() if analyse else None
    ds, notes = _load_point(manifest, entry, function, verify=True)
    return entry["sha256"], function is not None, ds, notes


def merge_sweep(directory, *, analyse: bool = True, verify: bool = True, scaling: bool = True,
                peclet_range=None, prepared: dict | None = None):
    """One Dataset from the points of sweep folder ``directory`` (see the module docstring).

    ``analyse``: apply ``eddyhop.analysis.analyse`` to each point when available.  ``verify``:
    check every point file against its manifest checksum (a mismatch is an error).
    ``scaling``: for a sweep over ``noise.peclet``, add the variables of
    ``scaling.scaling_summary`` (fits restricted to ``peclet_range = (low, high)`` if given).
    ``prepared``: point id → ``prepare_point(...)`` of points already read and analysed; one
    is used only if its checksum is the manifest's (and the file's, with ``verify``) and it
    was analysed as asked, so the result is the same as without it.
    """
    import xarray as xr

    from .. import __version__
    from ..results.io import CONVENTIONS, units_for

    manifest = Manifest.read(directory)
    data = manifest.data
    axes = data["axes"]
    combine = data["combine"]
    units = units_for(data.get("length_unit", "1"), data.get("time_unit", "1"))
    function = analysis_function() if analyse else None
    entries = sorted(manifest.points, key=lambda e: e["index"])
    loaded, notes = {}, []
    prepared = prepared or {}
    for entry in entries:
        if entry["status"] != "done":
            continue
        ready = prepared.get(entry["id"])
        if (ready is not None and ready[0] == entry["sha256"]
                and ready[1] == (function is not None)
                and (not verify or sha256_file(manifest.directory / entry["file"])
                     == entry["sha256"])):
            loaded[entry["id"]], point_notes = ready[2], ready[3]
        else:
            loaded[entry["id"]], point_notes = _load_point(manifest, entry, function, verify)
        notes += point_notes
    if not loaded:
        counts = manifest.counts()
        raise EddyhopError(f"no point of the sweep in {str(manifest.directory)!r} has completed "
                           f"({counts['failed']} failed, {counts['pending'] + counts['running']} "
                           "not computed); nothing to merge")
    template = next(iter(loaded.values()))
    # NaN stand-in for points not computed (built only when there is one: it copies a point)
    blank = _blank(template) if len(loaded) < len(entries) else None
    dims = [a["dim"] for a in axes] if combine == "product" else ["point"]

    def placed(entry):
        ds = loaded.get(entry["id"], blank)
        values = entry["parameters"]
        if combine == "product":
            for axis in reversed(axes):  # expand_dims prepends: the first axis ends outermost
                value = values[axis["address"]]
                ds = ds.drop_vars(axis["dim"], errors="ignore").expand_dims({axis["dim"]: [value]})
            return ds
        ds = ds.drop_vars([a["dim"] for a in axes], errors="ignore").expand_dims(
            point=[entry["index"]])
        return ds.assign_coords({a["dim"]: ("point", [values[a["address"]]]) for a in axes})

    options = {"data_vars": "all", "coords": "different", "compat": "equals", "join": "outer",
               "combine_attrs": "override"}
    pieces = [placed(e) for e in entries]
    if combine == "product":
        merged = xr.combine_nested(_nest(pieces, [len(a["values"]) for a in axes]),
                                   concat_dim=dims, **options)
    else:
        merged = xr.concat(pieces, dim="point", **options)
    shape = [len(a["values"]) for a in axes] if combine == "product" else [len(entries)]
    status = np.array([STATUS_CODES[e["status"]] for e in entries], dtype=np.int8)
    for variable in merged.variables.values():
        variable.encoding = {}  # on-disk dtypes of one point file do not bind the merged file
    merged["point_status"] = (dims, status.reshape(shape), {
        "long_name": "status of the sweep point", "flag_values": np.array([0, 1, 2], np.int8),
        "flag_meanings": STATUS_MEANINGS})
    merged["point_id"] = (dims, np.array([e["id"] for e in entries], dtype=object)
                          .reshape(shape), {"long_name": "id of the sweep point (file stem)"})
    for name, (_, long_name, symbol) in PER_POINT.items():
        if name in merged.data_vars:
            merged[name] = _drop_constant_dims(merged[name]).assign_attrs(
                long_name=long_name, units=units(symbol))
    for axis in axes:
        attrs = {"long_name": axis["long_name"]}
        if axis["units"] is not None:
            attrs["units"] = units(axis["units"])
        if axis["address"] == "noise.peclet":
            from ..engine.noise import PECLET_DEFINITIONS

            convention = data.get("peclet_convention", "wavenumber")
            attrs["definition"] = PECLET_DEFINITIONS[convention]
            attrs["convention"] = convention
        merged[axis["dim"]].attrs = attrs
    if combine == "zip":
        merged["point"].attrs = {"long_name": "index of the sweep point", "units": "1"}
    merged.attrs = _merged_attrs(manifest, list(loaded.values()), notes, __version__,
                                 CONVENTIONS)
    _note_undetermined(merged)
    if scaling and "peclet" in merged.dims:
        from ..errors import InputDataError
        from .scaling import scaling_summary

        try:
            summary = scaling_summary(merged, peclet_range=peclet_range)
        except InputDataError as exc:
            merged.attrs["scaling_note"] = f"no scaling summary: {exc}"
        else:
            for name, variable in summary.data_vars.items():
                merged[name] = variable
            fitted = [str(n)[:-len("_exponent_lower")] for n in summary.data_vars
                      if str(n).endswith("_exponent_lower")]
            merged.attrs["scaling_fits"] = " ".join(fitted)
            if fitted:
                merged.attrs["scaling_note"] = (
                    "fits against Pe of D/kappa and of crossover times: variables *_exponent "
                    "with *_exponent_lower/upper (confidence interval) and *_prefactor")
            else:
                merged.attrs["scaling_note"] = (
                    "time scales only: no effective-diffusivity or crossover-time variables "
                    "to fit (the analysis package adds them per point)")
    return merged


def _note_undetermined(merged) -> None:
    """Say in the attributes how many results have no confirmed diffusive regime: counts per
    ``deff_converged`` meaning (``sweep_deff_status``), ``sweep_undetermined_points``, and a
    line in ``sweep_warnings`` when any D/kappa fit runs over undetermined points."""
    from .scaling import convergence_counts, convergence_text

    counts = convergence_counts(merged)
    if not counts:
        return
    undetermined = counts.get("undetermined", 0)
    merged.attrs["sweep_deff_status"] = convergence_text(counts)
    merged.attrs["sweep_undetermined_points"] = undetermined
    if undetermined:
        message = (f"D_eff undetermined at {undetermined} of {sum(counts.values())} results "
                   "(deff_converged = undetermined: too noisy to show the diffusive regime); "
                   "the D/kappa scaling fits include them and say so "
                   "(*_undetermined_points, *_fit_verdict)")
        previous = str(merged.attrs.get("sweep_warnings", "none"))
        merged.attrs["sweep_warnings"] = message if previous == "none" else \
            f"{previous} | {message}"


def _merged_attrs(manifest, datasets, notes, version, conventions) -> dict:

    data = manifest.data
    counts = manifest.counts()
    from ..results.provenance import history_line, input_lines

    inputs = input_lines([manifest.path])  # the manifest holds every point file's checksum
    messages = []
    not_done = counts["failed"] + counts["pending"] + counts["running"]
    if not_done:
        messages.append(f"{not_done} of {len(manifest.points)} sweep points are missing "
                        f"({counts['failed']} failed); their values are NaN (see point_status)")
    stepped = {}
    for e in manifest.points:
        for message in e.get("warnings", []):
            stepped.setdefault(message.split(" is ")[0], []).append((e["id"], message))
    for found in stepped.values():
        messages.append(_grouped("large time step", found))
    grouped = {}
    for category, point_id, message in notes:
        grouped.setdefault(category, []).append((point_id, message))
    for category, found in grouped.items():
        messages.append(_grouped(f"analysis ({category})", found))
    attrs = _common_attrs(datasets)
    attrs.update({
        "Conventions": conventions,
        "title": data.get("title", ""),
        "summary": (data.get("description") or data.get("title", "")) + " (parameter sweep)",
        "history": _point_history(datasets) + history_line(
            f"merge of {len(datasets)} point files of {manifest.directory}", inputs),
        "input_files": "\n".join(inputs),
        "eddyhop_version": version,
        "eddyhop_kind": "sweep",
        "sweep_fingerprint": data["fingerprint"],
        "sweep_combine": data["combine"],
        "sweep_axes": json.dumps([{k: a[k] for k in ("address", "dim", "values")}
                                  for a in data["axes"]]),
        "sweep_points": len(manifest.points),
        "sweep_points_done": counts["done"],
        "sweep_points_failed": counts["failed"],
        "sweep_warnings": " | ".join(messages) if messages else "none",
        "sweep_base_study": json.dumps(data.get("base_document", {}), sort_keys=True),
        "study_file": data.get("study_file") or "",  # "" is left out when written
        "study_toml": data.get("study_toml") or "",
        "comment": "Research estimate from a model flow. Not a validated engineering "
                   "correlation: for heat or mass transfer in real equipment use validated "
                   "methods and the applicable codes.",
    })
    return attrs


def _point_history(datasets) -> str:
    """The first point's history lines (the parent's provenance; points differ only in their
    parameters, recorded in sweep_axes), each ending in a newline; empty if it has none."""
    first = next(iter(datasets), None)
    text = str(first.attrs.get("history", "")).strip() if first is not None else ""
    return text + "\n" if text else ""


def _grouped(what: str, found: list) -> str:
    """One line for a message repeated over points: how many, which, and the first in full."""
    ids = [point_id for point_id, _ in found]
    shown = ", ".join(ids[:6]) + (", …" if len(ids) > 6 else "")
    return f"{what} at {len(ids)} point(s) ({shown}); e.g. {ids[0]}: {found[0][1]}"
