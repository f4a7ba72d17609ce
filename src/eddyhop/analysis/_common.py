"""Shared plumbing of the analysis layer: input checks, per-start application, labels.

Analyses are functions ``Dataset → Dataset`` that return only the variables they derive; each
variable carries ``long_name`` and ``units``.  A Dataset may or may not have a ``start``
dimension; :func:`per_start` applies a single-start analysis to every start region and stacks
the results (ragged dimensions such as ``regime`` are padded: NaN for numbers, "" for labels).
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ..errors import EddyhopError, InputDataError


class AnalysisOptionError(EddyhopError, ValueError):
    """An analysis option is out of range; the message names the option, value and range."""


# Where each input variable comes from (quoted in error messages).
SOURCES = {
    "msd": "any eddyhop result (eddyhop run, or the deterministic reference solver)",
    "time": "any eddyhop result (eddyhop run, or the deterministic reference solver)",
    "aged_msd": "a study with an [aging] table (times = [...]) run with eddyhop run",
    "track_x": "a study with [run] tracked = N (N > 0) run with eddyhop run",
    "abs_moment": "a study with [moments] orders = [...] run with eddyhop run",
    "residence_count": "a study with [hopping] enabled = true run with eddyhop run",
}


def require(ds: xr.Dataset, names, analysis: str) -> None:
    """Raise :class:`InputDataError` naming the missing variables and what produces them."""
    missing = [n for n in names if n not in ds.variables]
    if missing:
        hints = sorted({SOURCES.get(n, SOURCES.get(n.rsplit("_", 1)[0], "eddyhop run"))
                        for n in missing})
        raise InputDataError(f"{analysis} needs variable(s) {', '.join(missing)}, which this "
                             f"Dataset lacks; they are written by {'; '.join(hints)}")


def check_range(name, value, low=-math.inf, high=math.inf, low_open=False, high_open=False,
                integer=False):
    """Validate one numeric option; return it as float (or int)."""
    kind = "an integer" if integer else "a number"
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise AnalysisOptionError(f"option {name}: expected {kind}, got {value!r}")
    if integer and int(value) != value:
        raise AnalysisOptionError(f"option {name}: expected {kind}, got {value!r}")
    value = int(value) if integer else float(value)
    below = value <= low if low_open else value < low
    above = value >= high if high_open else value > high
    if (not integer and math.isnan(value)) or below or above:
        left = "(" if low_open else "["
        right = ")" if high_open else "]"
        raise AnalysisOptionError(f"option {name} = {value:g} is outside the allowed range "
                                  f"{left}{low:g}, {high:g}{right}")
    return value


def var(dims, data, long_name: str, units: str | None = None, **attrs) -> xr.Variable:
    """A labelled variable (``long_name`` always, ``units`` unless the data are labels)."""
    out = {"long_name": long_name}
    if units is not None:
        out["units"] = units
    out.update(attrs)
    return xr.Variable(dims, data, attrs=out)


# ---- units -----------------------------------------------------------------------------------
def time_units(ds) -> str:
    return str(ds["time"].attrs.get("units", "1")) if "time" in ds.variables else "1"


def msd_units(ds) -> str:
    return str(ds["msd"].attrs.get("units", "1")) if "msd" in ds.variables else "1"


def per_time(units: str, tunits: str) -> str:
    """``units`` divided by the time unit (CF/udunits style: "m2 s-1")."""
    if tunits == "1":
        return units
    if units == "1":
        return f"{tunits}-1"
    return f"{units} {tunits}-1"


def times(units: str, tunits: str) -> str:
    if tunits == "1":
        return units
    if units == "1":
        return tunits
    return f"{units} {tunits}"


# ---- physical scales from provenance -----------------------------------------------------------
def _attr_number(ds, name):
    value = ds.attrs.get(name)
    try:
        value = float(value)
    except (TypeError, ValueError):
        return math.nan
    return value if math.isfinite(value) else math.nan


def flow_scales(ds) -> dict:
    """U, k, κ from the provenance attributes and the time scales they define (NaN if unknown).

    ``advective`` = 1/(U k); ``diffusive`` = 1/(κ k²) (diffusion across a cell);
    ``boundary_layer`` = 1/(κ k² Pe^{1/2}) with Pe = U/(κ k) (wavenumber convention, whatever
    the run's own convention): the time to diffuse across a cell at D_eff ∝ κ Pe^{1/2}, the
    separatrix boundary-layer time scale.
    """
    velocity = _attr_number(ds, "flow_U")
    k = _attr_number(ds, "flow_k")
    kappa = _attr_number(ds, "kappa")
    with np.errstate(divide="ignore", invalid="ignore"):
        advective = 1.0 / (velocity * k) if velocity > 0 and k > 0 else math.nan
        diffusive = 1.0 / (kappa * k * k) if kappa > 0 and k > 0 else math.nan
        peclet = velocity / (kappa * k) if kappa > 0 and k > 0 and velocity > 0 else math.nan
        boundary = diffusive / math.sqrt(peclet) if peclet == peclet else math.nan
    return {"U": velocity, "k": k, "kappa": kappa, "peclet": peclet, "advective": advective,
            "diffusive": diffusive, "boundary_layer": boundary}


# ---- per-start application -----------------------------------------------------------------------
def per_start(ds: xr.Dataset, function) -> xr.Dataset:
    """Apply ``function`` (single-start Dataset → Dataset) to each start region and stack."""
    if "start" not in ds.dims:
        return function(ds)
    parts = []
    for i in range(ds.sizes["start"]):
        part = function(ds.isel(start=i))
        parts.append(part.drop_vars([n for n in ("start",) if n in part.variables]))
    return stack_starts(parts, ds["start"])


def _fill_for(dtype):
    if dtype.kind == "f" or dtype.kind == "c":
        return np.nan
    if dtype.kind in "iu":
        return -1
    if dtype.kind == "b":
        return False
    if dtype.kind in "US":
        return ""
    return None


def stack_starts(parts, start_coord) -> xr.Dataset:
    """Concatenate per-start Datasets along ``start``, padding dimensions of unequal size."""
    sizes: dict[str, int] = {}
    for part in parts:
        for dim, size in part.sizes.items():
            sizes[dim] = max(sizes.get(dim, 0), size)
    padded = []
    for part in parts:
        out = {}
        for name, variable in part.variables.items():
            if name in part.dims and name in part.coords:
                continue  # dimension coordinates are rebuilt below
            pad = {d: (0, sizes[d] - variable.sizes[d]) for d in variable.dims
                   if variable.sizes[d] < sizes[d]}
            if pad:
                fill = _fill_for(variable.dtype)
                data = np.asarray(variable.values)
                widths = [pad.get(d, (0, 0)) for d in variable.dims]
                if data.dtype.kind in "US":
                    longest = max([len(str(v)) for v in data.ravel()] + [1])
                    data = data.astype(f"<U{longest}")
                data = np.pad(data, widths, constant_values=fill)
                variable = xr.Variable(variable.dims, data, attrs=variable.attrs)
            out[name] = variable
        coords = {}
        for dim in part.dims:
            if dim in part.coords:
                coord = part[dim]
                if coord.size == sizes[dim]:
                    coords[dim] = coord.variable
                # a ragged index coordinate (regime, crossover) is rebuilt by the caller
        padded.append(xr.Dataset(out, coords=coords))
    stacked = xr.concat(padded, dim="start", data_vars="all", coords="minimal",
                        compat="override", join="override")
    stacked = stacked.assign_coords(start=start_coord.values)
    stacked["start"].attrs.update(start_coord.attrs)
    for name in stacked.data_vars:
        # concat keeps the first part's attrs; every part labels the same way
        stacked[name].attrs.update(parts[0][name].attrs if name in parts[0] else {})
    return stacked


def merge_into(ds: xr.Dataset, derived: xr.Dataset) -> xr.Dataset:
    """``ds`` plus ``derived``; derived variables replace same-named ones (re-analysis)."""
    clash = [n for n in derived.variables if n in ds.variables and n not in derived.dims]
    clash_dims = [d for d in derived.dims if d in ds.dims and d not in ("start",)
                  and ds.sizes[d] != derived.sizes[d]]
    out = ds.drop_vars(clash, errors="ignore")
    if clash_dims:
        stale = [n for n, v in out.variables.items() if set(v.dims) & set(clash_dims)]
        out = out.drop_vars(stale, errors="ignore")
    return out.assign(derived.data_vars).assign_coords(
        {n: derived.coords[n] for n in derived.coords if n not in out.coords})
