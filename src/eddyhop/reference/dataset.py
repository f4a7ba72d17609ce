"""Reference curves → a labelled Dataset with the layout of a Monte Carlo run.

Same variable names, dimensions, long names and units as ``eddyhop.results.dataset`` for what both
produce (``msd, msd_x, msd_y, msd_xy, mean_dx, mean_dy, var_x, var_y`` on ``time``; a ``start``
dimension with several start regions, a scalar ``start`` coordinate with one), so analysis and
plots accept either and a user can overlay them.  There is no sampling error, hence no ``*_se``
or ``batch_*`` variables; the resolution error estimate is ``msd_resolution_error`` instead.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..results.dataset import COORD_ATTRS, VARIABLE_ATTRS
from ..results.io import provenance_attrs, units_for

EXTRA_ATTRS = {
    "msd_resolution_error": (
        "estimated relative error of msd from the spatial resolution: max over time of "
        "|msd(M) - msd(M')|/msd(M), M' ~ M/sqrt(2)", "1"),
    "modes": ("Fourier modes per direction used for this start region", "1"),
    "homogenized_dxx": ("homogenized effective diffusivity D_xx (cell problem)", "L2 T-1"),
    "homogenized_dyy": ("homogenized effective diffusivity D_yy (cell problem)", "L2 T-1"),
    "homogenized_dxy": ("homogenized effective diffusivity D_xy (cell problem)", "L2 T-1"),
    "homogenized_relative_error": (
        "estimated relative error of the homogenized tensor (change from the previous "
        "resolution)", "1"),
}


def _attrs(name, units):
    long_name, unit = VARIABLE_ATTRS[name] if name in VARIABLE_ATTRS else EXTRA_ATTRS[name]
    out = {"long_name": long_name}
    if unit is not None:
        out["units"] = units(unit)
    return out


def build_reference_dataset(study, times, regions, curves, area_fractions, homogenized=None,
                            extra_attrs=None) -> xr.Dataset:
    """Dataset of the moment curves of every start region (``curves[i]`` for ``regions[i]``).

    ``homogenized`` (a :class:`HomogenizedDiffusivity` or None) adds the tensor as scalar
    variables.  ``extra_attrs`` are global attributes on top of the study provenance.
    """
    units = units_for(study.output.length_unit, study.output.time_unit)
    per_start = []
    for curve, region, fraction in zip(curves, regions, area_fractions):
        time = ("time",)
        per_start.append(xr.Dataset({
            "msd": (time, curve.msd),
            "msd_x": (time, curve.msd_x),
            "msd_y": (time, curve.msd_y),
            "msd_xy": (time, curve.msd_xy),
            "mean_dx": (time, curve.mean_dx),
            "mean_dy": (time, curve.mean_dy),
            "var_x": (time, curve.var_x),
            "var_y": (time, curve.var_y),
            "msd_resolution_error": ((), curve.relative_error),
            "modes": ((), curve.modes),
            "start_kind": ((), region.kind),
            "start_area_fraction": ((), fraction),
        }))
    ds = xr.concat(per_start, dim="start", data_vars="all", coords="different",
                   compat="equals", join="outer")
    ds = ds.assign_coords(start=[r.label for r in regions], time=np.asarray(times, float))
    for name in ds.data_vars:
        ds[name].attrs.update(_attrs(name, units))
    for name in ("time", "start"):
        long_name, unit = COORD_ATTRS[name]
        ds[name].attrs["long_name"] = long_name
        if unit is not None:
            ds[name].attrs["units"] = units(unit)
    if len(regions) == 1:
        ds = ds.squeeze("start")
    if homogenized is not None:
        for name, value in (("homogenized_dxx", homogenized.d_xx),
                            ("homogenized_dyy", homogenized.d_yy),
                            ("homogenized_dxy", homogenized.d_xy),
                            ("homogenized_relative_error", homogenized.relative_error)):
            ds[name] = ((), float(value))
            ds[name].attrs.update(_attrs(name, units))
    ds.attrs.update(provenance_attrs(study, kind="reference", extra=extra_attrs or {}))
    return ds
