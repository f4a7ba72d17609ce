"""Several results side by side: curves on one time grid, differences in standard errors.

:func:`compare` takes two or more results — Monte Carlo runs (different starts, Péclet
numbers, integrators or dt) and/or noise-free references written by ``eddyhop reference`` —
and returns one :class:`xarray.Dataset` with a ``series`` dimension (one entry per result
and start region) on a common ``time`` coordinate:

* ``msd``, ``msd_se``, ``spread`` (var_x + var_y), ``alpha``, ``alpha_se`` per series;
* ``msd_z`` and ``alpha_z``: z(t) = (y_i − y_0)/√(se_i² + se_0²), the difference from the
  first series (the *baseline*) in standard errors; NaN where neither side has an error
  (two noise-free curves) — a reference has no sampling error, so against it z is the
  Monte Carlo error alone;
* the table of scalar quantities (:func:`comparison_table`): D_xx, D_yy, D_eff, D_eff/κ,
  the last common MSD, each with its standard error, the difference from the baseline, its
  z and a verdict in words.

Time grids: when the results share their output times the curves are used as they are;
otherwise each is interpolated (linearly in ln t, ln y) onto the baseline's times inside the
range every result covers, and the Dataset says so in its ``time_grid`` attribute.  Results
of different flow families, sweeps, or files without ``msd`` are refused in one line naming
the file.  z(t) values at neighbouring times are correlated (the same particles); read them
as a curve, not as independent tests.
"""

from __future__ import annotations

import math
import os
import warnings
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import InputDataError

# |z| below 2: consistent; 2 to 3: tension; above 3: differ (two-sided normal tail
# probabilities 4.6 % and 0.27 %).
Z_TENSION = 2.0
Z_DIFFER = 3.0
SCALARS = (("D_xx", "D_xx_se"), ("D_yy", "D_yy_se"), ("D_eff", "D_eff_se"),
           ("D_eff_over_kappa", "D_eff_over_kappa_se"))
SHOWN = {"D_eff_over_kappa": "D_eff/κ"}
REFERENCE_TENSOR = {"D_xx": "homogenized_dxx", "D_yy": "homogenized_dyy"}


class UnitsDifferWarning(UserWarning):
    """The compared results are in different units (numbers compared as given)."""


def _name(source, index):
    if isinstance(source, (str, os.PathLike)):
        return Path(source).stem
    return str(getattr(source, "attrs", {}).get("title") or f"result {index + 1}")


def _open(source, index):
    from ..results.io import open_result, require_kind

    if isinstance(source, (str, os.PathLike)):
        ds = open_result(source)
        if ds.attrs.get("eddyhop_kind") == "sweep":
            raise InputDataError(f"{str(source)!r} is a merged sweep; compare takes runs and "
                                 "references: give point files (FOLDER/points/<id>.nc)")
        ds = require_kind(ds, source, ("monte_carlo", "reference", "measured"), "compare")
        shown = str(source)
    else:
        ds = source
        shown = _name(source, index)
        if ds.attrs.get("eddyhop_kind") == "sweep":
            raise InputDataError(f"{shown!r} is a merged sweep; compare takes runs and "
                                 "references (select one point of the sweep first)")
    for needed in ("msd", "time"):
        if needed not in ds.variables:
            raise InputDataError(f"{shown!r} lacks {needed}, which the comparison needs; give "
                                 "a file written by `eddyhop run` or `eddyhop reference`")
    return ds, shown


def _analysed(ds):
    """``ds`` with the local exponent and D_eff (analysed in memory when missing)."""
    if "alpha" in ds.variables:
        return ds
    from ..analysis import analyse
    from ..errors import EddyhopError

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # verdicts are read from the flags below
            return analyse(ds)
    except EddyhopError:
        return ds


def _starts(ds, wanted):
    if "start" in ds.dims:
        labels = [str(v) for v in ds["start"].values]
    else:
        labels = [str(ds["start"].values) if "start" in ds.coords else None]
    if wanted is None:
        return labels
    chosen = [s for s in labels if s in wanted]
    return chosen


def _part(ds, start):
    return ds.sel(start=start) if start is not None and "start" in ds.dims else ds


def _on_grid(t_from, values, t_to):
    """Interpolate ``values`` from ``t_from`` onto ``t_to`` (linear in ln t; in ln y for a
    positive curve, so power laws stay exact)."""
    values = np.asarray(values, dtype=float)
    if np.array_equal(t_from, t_to):
        return values
    x_from, x_to = np.log(t_from), np.log(t_to)
    positive = np.all(values[np.isfinite(values)] > 0)
    if positive:
        return np.exp(np.interp(x_to, x_from, np.log(values), left=np.nan, right=np.nan))
    return np.interp(x_to, x_from, values, left=np.nan, right=np.nan)


def compare(sources, *, labels=None, starts=None, analyse: bool = True) -> xr.Dataset:
    """Overlay ``sources`` (paths or Datasets; the first is the baseline) — see the module
    docstring.  ``labels`` names each source (default: file stem or title); ``starts``
    restricts to these start-region labels.  ``analyse``: compute α(t) and D_eff in memory
    for results not yet analysed.  Raises :class:`InputDataError` for fewer than two
    results, a sweep, a missing variable, different flow families or no common time range.
    """
    sources = list(sources)
    if len(sources) < 2:
        raise InputDataError(f"compare needs two or more results; got {len(sources)}")
    if labels is not None and len(labels) != len(sources):
        raise InputDataError(f"labels: {len(labels)} given for {len(sources)} results; give "
                             "one per result")
    opened = [_open(source, i) for i, source in enumerate(sources)]
    names = list(labels) if labels is not None else [_name(s, i) for i, s in enumerate(sources)]
    # measured tracks (eddyhop tracks) carry no flow family: they sit beside any model
    modelled = [ds for ds, _ in opened if ds.attrs.get("eddyhop_kind") != "measured"]
    families = {str(ds.attrs.get("flow_family", "?")) for ds in modelled} or {"measured"}
    if len(families) > 1:
        shown = ", ".join(f"{shown!r}: {ds.attrs.get('flow_family', '?')}"
                          for ds, shown in opened)
        raise InputDataError(f"compare needs results of one flow family; these differ "
                             f"({shown})")
    units = {shown: (str(ds["msd"].attrs.get("units", "1")),
                     str(ds["time"].attrs.get("units", "1"))) for ds, shown in opened}
    if len(set(units.values())) > 1:  # e.g. measured tracks in mm and s beside a model in 1/k
        warnings.warn("compare: the results' units differ ("
                      + "; ".join(f"{shown!r}: MSD {m}, time {t}" for shown, (m, t) in
                                  units.items())
                      + "); the numbers are compared as given — scale one of them first "
                        "(e.g. give the model's length and time units in its study)",
                      UnitsDifferWarning, stacklevel=2)
    if analyse:
        opened = [(_analysed(ds), shown) for ds, shown in opened]
    grids = [np.asarray(ds["time"].values, dtype=float) for ds, _ in opened]
    base = grids[0]
    same = all(g.shape == base.shape and np.allclose(g, base, rtol=1e-12) for g in grids)
    if same:
        common = base
        grid_note = "shared output times"
    else:
        low = max(float(g[g > 0].min()) for g in grids)
        high = min(float(g.max()) for g in grids)
        common = base[(base >= low * (1 - 1e-12)) & (base <= high * (1 + 1e-12))]
        if common.size < 2:
            raise InputDataError(
                "compare: the results' time ranges do not overlap ("
                + "; ".join(f"{shown!r}: {g[g > 0].min():g} … {g.max():g}"
                            for (_, shown), g in zip(opened, grids)) + ")")
        grid_note = (f"interpolated (ln t, ln y) onto the baseline's times in the common "
                     f"range {common[0]:g} … {common[-1]:g}")
    series, columns = [], {k: [] for k in ("msd", "msd_se", "spread", "alpha", "alpha_se")}
    scalars = {k: [] for k in ("D_xx", "D_xx_se", "D_yy", "D_yy_se", "D_eff", "D_eff_se",
                               "D_eff_over_kappa", "D_eff_over_kappa_se", "deff_converged",
                               "kappa", "peclet", "dt")}
    kinds, sources_shown, integrators = [], [], []
    for (ds, shown), name, grid in zip(opened, names, grids):
        chosen = _starts(ds, starts)
        if not chosen:
            raise InputDataError(f"{shown!r} has none of the start regions {list(starts)}")
        kind = str(ds.attrs.get("eddyhop_kind", "monte_carlo"))
        noise_free = kind == "reference"
        for start in chosen:
            part = _part(ds, start)
            series.append(name if start is None or len(chosen) == 1 else f"{name}: {start}")
            kinds.append(kind if kind in ("reference", "measured") else "monte_carlo")
            sources_shown.append(shown)
            integrators.append(str(ds.attrs.get("integrator", "")))
            t = grid

            def curve(var, part=part, t=t, noise_free=noise_free):
                if var not in part.variables:
                    return np.zeros(common.size) if noise_free and var.endswith("_se") \
                        else np.full(common.size, np.nan)
                return _on_grid(t, part[var].values, common)

            columns["msd"].append(curve("msd"))
            columns["msd_se"].append(curve("msd_se"))
            spread = part["var_x"].values + part["var_y"].values \
                if "var_x" in part.variables and "var_y" in part.variables else None
            columns["spread"].append(_on_grid(t, spread, common) if spread is not None
                                     else np.full(common.size, np.nan))
            columns["alpha"].append(curve("alpha"))
            columns["alpha_se"].append(curve("alpha_se"))
            kappa = _float(ds.attrs.get("kappa"))
            for key, se_key in SCALARS:
                value = _scalar(part, key)
                se = _scalar(part, se_key)
                if noise_free and key in REFERENCE_TENSOR:
                    value = _scalar(ds, REFERENCE_TENSOR[key])
                    se = 0.0 if math.isfinite(value) else math.nan
                if noise_free and key == "D_eff":
                    value = 0.5 * (_scalar(ds, "homogenized_dxx") + _scalar(ds,
                                                                          "homogenized_dyy"))
                    se = 0.0 if math.isfinite(value) else math.nan
                if noise_free and key == "D_eff_over_kappa" and kappa > 0:
                    value = 0.5 * (_scalar(ds, "homogenized_dxx")
                                   + _scalar(ds, "homogenized_dyy")) / kappa
                    se = 0.0 if math.isfinite(value) else math.nan
                scalars[key].append(value)
                scalars[se_key].append(se)
            scalars["deff_converged"].append(_convergence_word(part, noise_free))
            scalars["kappa"].append(kappa)
            scalars["peclet"].append(_float(ds.attrs.get("peclet")))
            scalars["dt"].append(_float(ds.attrs.get("dt")))
    if len(series) < 2:
        raise InputDataError("compare needs two or more curves; the results give one")
    if len(set(series)) < len(series):
        series = [f"{s} [{i + 1}]" for i, s in enumerate(series)]
    out = xr.Dataset(coords={"series": ("series", series), "time": ("time", common,
                                                                     dict(opened[0][0]["time"]
                                                                          .attrs))})
    units = dict(opened[0][0]["msd"].attrs)
    for key, rows in columns.items():
        attrs = {"units": units.get("units", "1")} if key != "alpha" and key != "alpha_se" \
            else {"units": "1"}
        out[key] = (("series", "time"), np.vstack(rows), attrs)
    out["msd"].attrs["long_name"] = "mean-squared displacement"
    out["msd_se"].attrs["long_name"] = "standard error of the mean-squared displacement"
    out["spread"].attrs["long_name"] = "spread about the mean displacement var_x + var_y"
    out["alpha"].attrs["long_name"] = "local exponent"
    out["alpha_se"].attrs["long_name"] = "standard error of the local exponent"
    for key in ("msd", "alpha"):
        y, se = out[key].values, out[f"{key}_se"].values
        combined = np.sqrt(se ** 2 + se[0] ** 2)
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(combined > 0, (y - y[0]) / combined, np.nan)
        out[f"{key}_z"] = (("series", "time"), z, {
            "long_name": f"difference of {key} from the baseline in standard errors", "units": "1"})
    for key, values in scalars.items():
        dtype = object if key == "deff_converged" else float
        out[key] = ("series", np.asarray(values, dtype=dtype))
    out["kind"] = ("series", np.asarray(kinds, dtype=object))
    out["source"] = ("series", np.asarray(sources_shown, dtype=object))
    out["integrator"] = ("series", np.asarray(integrators, dtype=object))
    out.attrs.update({"eddyhop_kind": "comparison", "baseline": series[0],
                      "time_grid": grid_note, "flow_family": families.pop(),
                      "title": "comparison: " + ", ".join(dict.fromkeys(names))})
    return out


def _float(value) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _scalar(part, name) -> float:
    if name not in part.variables:
        return math.nan
    values = np.asarray(part[name].values, dtype=float).ravel()
    return float(values[0]) if values.size else math.nan


def _convergence_word(part, noise_free):
    if noise_free:
        return "noise-free reference"
    if "deff_converged" not in part.variables:
        return "not analysed"
    from ..analysis.verdicts import flag_meaning

    return {"diffusive": "diffusive regime reached", "undetermined": "UNDETERMINED",
            "too_short": "RUN TOO SHORT", "bounded": "BOUNDED"}.get(
        flag_meaning(part["deff_converged"]), "unknown")


def verdict(z) -> str:
    """Words for a difference of ``z`` standard errors (thresholds at the top of the module)."""
    if not math.isfinite(z):
        return "no error estimate"
    size = abs(z)
    if size < Z_TENSION:
        return "consistent"
    if size < Z_DIFFER:
        return "tension (2–3 SE)"
    return "DIFFER (> 3 SE)"


def comparison_table(comparison: xr.Dataset) -> list[dict]:
    """Rows ``{quantity, series, value, se, difference, z, verdict}`` of the scalar quantities
    (D_xx, D_yy, D_eff, D_eff/κ and the MSD at the last common time) of every series, the
    difference and z taken against the baseline (the first series).  A D value whose run did
    not confirm the diffusive regime carries that word in ``verdict``."""
    rows = []
    last = comparison["msd"].isel(time=-1).values
    last_se = comparison["msd_se"].isel(time=-1).values
    t_last = float(comparison["time"].values[-1])
    quantities = [(SHOWN.get(key, key), comparison[key].values, comparison[se].values)
                  for key, se in SCALARS]
    quantities.append((f"MSD(t = {t_last:g})", last, last_se))
    status = comparison["deff_converged"].values
    for key, values, errors in quantities:
        if not np.isfinite(values).any():
            continue
        for i, name in enumerate(comparison["series"].values):
            value, se = float(values[i]), float(errors[i])
            difference = value - float(values[0]) if i else math.nan
            combined = math.sqrt(se ** 2 + float(errors[0]) ** 2) if i else math.nan
            z = difference / combined if i and combined > 0 else math.nan
            words = "baseline" if i == 0 else verdict(z)
            if key.startswith("D") and status[i] not in ("diffusive regime reached",
                                                         "noise-free reference"):
                words += f"; D_eff {status[i]}"
            rows.append({"quantity": key, "series": str(name), "value": value, "se": se,
                         "difference": difference, "z": z, "verdict": words})
    return rows


def table_lines(comparison: xr.Dataset) -> list[str]:
    """The comparison table as plain-text lines (what ``eddyhop compare`` prints)."""
    from .text import _pm

    rows = comparison_table(comparison)
    out = [f"comparison against the baseline '{comparison.attrs['baseline']}' "
           f"(time grid: {comparison.attrs['time_grid']}):"]
    width = max([len(r["series"]) for r in rows] + [6])
    quantity = None
    for row in rows:
        if row["quantity"] != quantity:
            quantity = row["quantity"]
            out.append(f"  {quantity}:")
        value = _pm(row["value"], row["se"]) if row["se"] != 0 \
            else f"{row['value']:.6g} (noise-free)"
        text = f"    {row['series']:<{width}}  {value}"
        if math.isfinite(row["difference"]):
            text += f"   Δ = {row['difference']:+.3g}"
            if math.isfinite(row["z"]):
                text += f" = {row['z']:+.2f} SE"
        out.append(text + f"   {row['verdict']}")
    return out


def table_csv(comparison: xr.Dataset) -> str:
    """The comparison table as CSV text (one header comment line naming the baseline)."""
    import csv
    import io

    buffer = io.StringIO()
    buffer.write(f"# eddyhop comparison; baseline: {comparison.attrs['baseline']}; time grid: "
                 f"{comparison.attrs['time_grid']}\n")
    writer = csv.DictWriter(buffer, fieldnames=["quantity", "series", "value", "se",
                                                "difference", "z", "verdict"])
    writer.writeheader()
    for row in comparison_table(comparison):
        writer.writerow({k: (f"{v:.8g}" if isinstance(v, float) else v) for k, v in row.items()})
    return buffer.getvalue()
