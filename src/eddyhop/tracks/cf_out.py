"""Tracked trajectories of a run written as a CF Discrete Sampling Geometries file.

Layout: the contiguous ragged array of CF conventions ch. 9 (``featureType = "trajectory"``):
dimension ``trajectory`` (one per tracked particle and start region) and ``obs`` (all samples,
trajectory after trajectory); ``row_size`` (trajectory) with ``sample_dimension = "obs"``;
``trajectory_id`` (``cf_role = "trajectory_id"``); ``time``, ``x``, ``y`` on ``obs`` with
``standard_name`` time / projection_x_coordinate / projection_y_coordinate and the run's
units.  Positions are unwrapped (continuous in the plane), as the run tracks them.
Model time has no calendar: a dimensionless time has ``units = "1"``; a dimensional one
(``output.time_unit``) is written as "<unit> since 1970-01-01 00:00:00" with the epoch standing
for the release (the ``comment`` attribute says so), which CF-aware tools decode.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputDataError

TIME_UNITS = {"s", "second", "seconds", "min", "minute", "minutes", "h", "hour", "hours",
              "d", "day", "days", "ms", "us"}


def trajectories_dataset(ds: xr.Dataset) -> xr.Dataset:
    """The CF trajectory Dataset of the tracked particles of run result ``ds``."""
    if "track_x" not in ds.variables or "track_y" not in ds.variables:
        raise InputDataError("no tracked trajectories to write: set [run] tracked = N (N > 0) "
                             "in the study")
    order = ("particle", "track_time")
    if "start" in ds.dims:
        labels = [str(v) for v in ds["start"].values]
        parts = [ds.isel(start=i) for i in range(ds.sizes["start"])]
    else:
        labels = [str(ds["start"].values) if "start" in ds.coords else "ensemble"]
        parts = [ds]
    times = np.asarray(ds["track_time"].values, dtype=np.float64)
    xs, ys, ids, starts = [], [], [], []
    for label, part in zip(labels, parts):
        x = part["track_x"].transpose(*order).values
        y = part["track_y"].transpose(*order).values
        keep = np.all(np.isfinite(x), axis=1) & np.all(np.isfinite(y), axis=1)
        for i in np.flatnonzero(keep):
            xs.append(x[i])
            ys.append(y[i])
            ids.append(f"{label}:{i}" if len(labels) > 1 else str(i))
            starts.append(label)
    n, samples = len(xs), times.size
    length_unit = str(ds["track_x"].attrs.get("units", "1"))
    time_unit = str(ds["track_time"].attrs.get("units", "1"))
    if time_unit in TIME_UNITS:
        time_attrs = {"units": f"{time_unit} since 1970-01-01 00:00:00",
                      "comment": "time since the release; the epoch stands for the release "
                                 "(model time has no calendar)"}
    else:
        time_attrs = {"units": time_unit, "comment": "model time since the release "
                                                     "(dimensionless: no calendar)"}
    obs = ("obs",)
    out = xr.Dataset(
        {
            "trajectory_id": (("trajectory",), np.array(ids, dtype=object),
                              {"cf_role": "trajectory_id",
                               "long_name": "tracked particle (start label:index)"}),
            "row_size": (("trajectory",), np.full(n, samples, dtype=np.int32),
                         {"long_name": "number of samples of this trajectory",
                          "sample_dimension": "obs"}),
            "start_label": (("trajectory",), np.array(starts, dtype=object),
                            {"long_name": "start region of the trajectory"}),
            "time": (obs, np.tile(times, n), {"standard_name": "time", "axis": "T",
                                              "long_name": "time", **time_attrs}),
            "x": (obs, np.concatenate(xs) if n else np.zeros(0),
                  {"standard_name": "projection_x_coordinate", "axis": "X",
                   "long_name": "x position (unwrapped)", "units": length_unit}),
            "y": (obs, np.concatenate(ys) if n else np.zeros(0),
                  {"standard_name": "projection_y_coordinate", "axis": "Y",
                   "long_name": "y position (unwrapped)", "units": length_unit}),
        })
    attrs = {k: v for k, v in ds.attrs.items() if k not in ("analysis_steps",
                                                            "analysis_options")}
    attrs.update({"Conventions": "CF-1.8", "featureType": "trajectory",
                  "eddyhop_kind": "trajectories",
                  "title": f"tracked trajectories: {ds.attrs.get('title', 'eddyhop run')}"})
    out.attrs = attrs
    return out


def write_trajectories(ds: xr.Dataset, path) -> None:
    """Write the tracked trajectories of run result ``ds`` to ``path`` atomically as a CF
    trajectory file (module text)."""
    from ..results.io import atomic_path, check_output_path

    target = check_output_path(path)
    out = trajectories_dataset(ds)
    encoding = {name: {"_FillValue": None} for name in ("time", "x", "y", "row_size")}
    with atomic_path(target) as temporary:
        out.to_netcdf(temporary, engine="netcdf4", format="NETCDF4", encoding=encoding)
