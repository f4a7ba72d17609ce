"""Batch-folded ensemble sums → a labelled ``xarray.Dataset`` with CF-style attributes.

Every quantity analysis depends on is a variable or coordinate (``time``, ``lag``,
``aging_time``, ``order``, ``batch``, ``start``); attributes carry units, long names and
provenance only.  Displacements are unwrapped: ΔX = X(t) − X(0) in the plane, never folded
back into a period cell.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..engine.kernel import MOMENT_COLUMNS, N_BASE
from ..engine.stepcheck import CHECK_COLUMNS
from .io import provenance_attrs, units_for
from .optional_dask import spare_unused_dask
from .velocity_dataset import COORD_ATTRS as _VELOCITY_COORD_ATTRS
from .velocity_dataset import VARIABLE_ATTRS as _VELOCITY_ATTRS
from .velocity_dataset import velocity_coords, velocity_data

spare_unused_dask()  # building the Dataset must not import dask.array (optional_dask.py)

_COL = {name: i for i, name in enumerate(MOMENT_COLUMNS)}
_CHECK_COL = {name: i for i, name in enumerate(CHECK_COLUMNS)}
# step-check column → variable suffix (check_fine_<suffix>, check_coarse_<suffix>)
_CHECK_NAMES = {"dx": "mean_dx", "dy": "mean_dy", "dx2": "msd_x", "dy2": "msd_y",
                "dxdy": "msd_xy"}


def _per_start(start, result, units):
    """Data variables of one start region (no ``start`` dimension yet)."""
    schedule = result.schedule
    counts = start.batch_counts  # [B]
    n = counts.sum()
    totals = start.moments.sum(axis=0)  # [T, C]
    mean = totals / n
    time = ("time",)
    mean_dx, mean_dy = mean[:, _COL["dx"]], mean[:, _COL["dy"]]
    msd_x, msd_y = mean[:, _COL["dx2"]], mean[:, _COL["dy2"]]
    msd = msd_x + msd_y
    denominator = max(n - 1.0, 1.0)

    def standard_error(second, fourth):
        return np.sqrt(np.maximum(fourth - second**2, 0.0) * n / denominator / n)

    var_x = msd_x - mean_dx**2
    var_y = msd_y - mean_dy**2
    central4_x = (mean[:, _COL["dx4"]] - 4 * mean_dx * mean[:, _COL["dx3"]]
                  + 6 * mean_dx**2 * msd_x - 3 * mean_dx**4)
    central4_y = (mean[:, _COL["dy4"]] - 4 * mean_dy * mean[:, _COL["dy3"]]
                  + 6 * mean_dy**2 * msd_y - 3 * mean_dy**4)
    with np.errstate(invalid="ignore", divide="ignore"):
        kurt_x = np.where(var_x > 0, central4_x / var_x**2, np.nan)
        kurt_y = np.where(var_y > 0, central4_y / var_y**2, np.nan)
    batch_mean = start.moments / counts[:, None, None]
    data = {
        "msd": (time, msd),
        "msd_x": (time, msd_x),
        "msd_y": (time, msd_y),
        "msd_xy": (time, mean[:, _COL["dxdy"]]),
        "mean_dx": (time, mean_dx),
        "mean_dy": (time, mean_dy),
        "var_x": (time, var_x),
        "var_y": (time, var_y),
        "msd_se": (time, standard_error(msd, mean[:, _COL["r4"]])),
        "msd_x_se": (time, standard_error(msd_x, mean[:, _COL["dx4"]])),
        "msd_y_se": (time, standard_error(msd_y, mean[:, _COL["dy4"]])),
        "kurtosis_x": (time, kurt_x),
        "kurtosis_y": (time, kurt_y),
        "n_particles": ((), int(n)),
        "batch_count": (("batch",), counts),
        "batch_mean_dx": (("batch", "time"), batch_mean[:, :, _COL["dx"]]),
        "batch_mean_dy": (("batch", "time"), batch_mean[:, :, _COL["dy"]]),
        "batch_msd_x": (("batch", "time"), batch_mean[:, :, _COL["dx2"]]),
        "batch_msd_y": (("batch", "time"), batch_mean[:, :, _COL["dy2"]]),
        "batch_msd_xy": (("batch", "time"), batch_mean[:, :, _COL["dxdy"]]),
        "start_kind": ((), start.kind),
        "start_area_fraction": ((), start.area_fraction),
    }
    if start.check_counts is not None:
        # step check: per check-batch means of the fine (dt) and coarse (2·dt) paths of the
        # same particles on the same Brownian path (coarse NaN at odd output steps)
        check_counts = start.check_counts
        data["check_count"] = (("check_batch",), check_counts)
        for path, sums in (("fine", start.check_fine), ("coarse", start.check_coarse)):
            means = sums / check_counts[:, None, None]
            for column, name in _CHECK_NAMES.items():
                data[f"check_{path}_{name}"] = (("check_batch", "time"),
                                                means[:, :, _CHECK_COL[column]])
    if result.orders.size:
        q = result.orders.size
        abs_moments = mean[:, N_BASE:N_BASE + 3 * q].reshape(-1, q, 3)
        data["abs_moment_x"] = (("order", "time"), abs_moments[:, :, 0].T)
        data["abs_moment_y"] = (("order", "time"), abs_moments[:, :, 1].T)
        data["abs_moment"] = (("order", "time"), abs_moments[:, :, 2].T)
        batch_abs = batch_mean[:, :, N_BASE:N_BASE + 3 * q].reshape(
            batch_mean.shape[0], -1, q, 3)[:, :, :, 2]
        data["batch_abs_moment"] = (("batch", "order", "time"), batch_abs.transpose(0, 2, 1))
    if schedule.aging_steps.size:
        aged = start.aged.sum(axis=0) / n  # [A, L, 4]
        valid = schedule.aged_valid()
        aged = np.where(valid[:, :, None], aged, np.nan)
        dims = ("aging_time", "lag")
        data["aged_msd"] = (dims, aged[:, :, 0])
        data["aged_msd_x"] = (dims, aged[:, :, 1])
        data["aged_msd_y"] = (dims, aged[:, :, 2])
        batch_aged = start.aged[:, :, :, 0] / counts[:, None, None]
        data["batch_aged_msd"] = (("batch", *dims), np.where(valid[None], batch_aged, np.nan))
        data["aged_msd_se"] = (dims, np.sqrt(np.maximum(aged[:, :, 3] - aged[:, :, 0] ** 2, 0)
                                             / max(n - 1.0, 1.0)))
    if start.velocity is not None:
        data.update(velocity_data(start))
    if start.tracks.shape[0]:
        data["track_x"] = (("particle", "track_time"), start.tracks[:, :, 0])
        data["track_y"] = (("particle", "track_time"), start.tracks[:, :, 1])
    if start.residence_counts.sum() > 0 or start.hops > 0:
        widths = np.diff(result.residence_edges)
        total = max(start.residence_counts.sum(), 1.0)
        data["residence_count"] = (("residence_time",), start.residence_counts)
        data["residence_pdf"] = (("residence_time",), start.residence_counts / total / widths)
        data["flight_count"] = (("flight_length",), start.flight_counts)
        data["hop_rate"] = ((), start.hops / (n * schedule.times[-1]))
    return data


VARIABLE_ATTRS = {
    "msd": ("mean-squared displacement <|X(t)-X(0)|^2>", "L2"),
    "msd_x": ("mean-squared displacement along x <dx^2>", "L2"),
    "msd_y": ("mean-squared displacement along y <dy^2>", "L2"),
    "msd_xy": ("mixed second moment <dx dy>", "L2"),
    "mean_dx": ("mean displacement along x", "L"),
    "mean_dy": ("mean displacement along y", "L"),
    "var_x": ("variance of the x displacement <dx^2> - <dx>^2", "L2"),
    "var_y": ("variance of the y displacement <dy^2> - <dy>^2", "L2"),
    "msd_se": ("standard error of msd over particles", "L2"),
    "msd_x_se": ("standard error of msd_x over particles", "L2"),
    "msd_y_se": ("standard error of msd_y over particles", "L2"),
    "kurtosis_x": ("kurtosis of the x displacement (3 for a Gaussian)", "1"),
    "kurtosis_y": ("kurtosis of the y displacement (3 for a Gaussian)", "1"),
    "n_particles": ("number of particles in the ensemble", "1"),
    "batch_count": ("particles per batch", "1"),
    "batch_mean_dx": ("batch mean of dx", "L"),
    "batch_mean_dy": ("batch mean of dy", "L"),
    "batch_msd_x": ("batch mean of dx^2", "L2"),
    "batch_msd_y": ("batch mean of dy^2", "L2"),
    "batch_msd_xy": ("batch mean of dx dy", "L2"),
    "start_kind": ("kind of start region", None),
    "start_area_fraction": ("area of the start region as a fraction of a period cell", "1"),
    "abs_moment_x": ("absolute moment <|dx|^q>", "Lq"),
    "abs_moment_y": ("absolute moment <|dy|^q>", "Lq"),
    "abs_moment": ("absolute moment <|X(t)-X(0)|^q>", "Lq"),
    "batch_abs_moment": ("batch mean of |X(t)-X(0)|^q", "Lq"),
    "batch_aged_msd": ("batch mean of |X(t_a+lag)-X(t_a)|^2", "L2"),
    "aged_msd": ("aged mean-squared displacement <|X(t_a+lag)-X(t_a)|^2>", "L2"),
    "aged_msd_x": ("aged mean-squared displacement along x", "L2"),
    "aged_msd_y": ("aged mean-squared displacement along y", "L2"),
    "aged_msd_se": ("standard error of aged_msd over particles", "L2"),
    "track_x": ("x position of a tracked particle (unwrapped)", "L"),
    "track_y": ("y position of a tracked particle (unwrapped)", "L"),
    "residence_count": ("number of completed cell residences per time bin", "1"),
    "residence_pdf": ("probability density of cell residence times", "T-1"),
    "flight_count": ("number of flights per length bin (flight between two traps)", "1"),
    "hop_rate": ("cell changes per particle per unit time", "T-1"),
    "check_count": ("particles per check batch of the step check", "1"),
}
_CHECK_TEXT = {"mean_dx": ("dx", "L"), "mean_dy": ("dy", "L"), "msd_x": ("dx^2", "L2"),
               "msd_y": ("dy^2", "L2"), "msd_xy": ("dx dy", "L2")}
for _path, _step in (("fine", "at run.dt (the run's own paths)"),
                     ("coarse", "at 2 run.dt on the same Brownian path; NaN at odd steps")):
    for _name, (_what, _unit) in _CHECK_TEXT.items():
        VARIABLE_ATTRS[f"check_{_path}_{_name}"] = (
            f"step check: check-batch mean of {_what}, {_path} path {_step}", _unit)

COORD_ATTRS = {
    "time": ("time since release", "T"),
    "lag": ("lag after the aging time", "T"),
    "aging_time": ("aging time t_a (reference time of aged displacements)", "T"),
    "order": ("order q of the absolute moment", "1"),
    "batch": ("index of a contiguous batch of particles", "1"),
    "check_batch": ("index of a contiguous batch of the step check's subsample", "1"),
    "particle": ("index of a tracked particle", "1"),
    "track_time": ("time of a tracked-trajectory sample", "T"),
    "residence_time": ("cell residence time (geometric bin centre)", "T"),
    "flight_length": ("flight length in eddy sides (geometric bin centre)", "1"),
    "start": ("label of the start region", None),
}
VARIABLE_ATTRS.update(_VELOCITY_ATTRS)
COORD_ATTRS.update(_VELOCITY_COORD_ATTRS)


def _label(name, table, units, n_orders=None):
    long_name, unit = table[name]
    attrs = {"long_name": long_name}
    if unit is not None:
        attrs["units"] = units(unit)
    return attrs


def step_check_weak_order(study) -> float:
    """Weak order p that the step check's Richardson estimate uses: the scheme's
    (``integrators.SCHEME_ORDERS``), but at most 1 where tracers reflect at solid walls (the
    symmetrized reflection is weak order 1: Bossy, Gobet & Talay 2004, J. Appl. Probab. 41,
    877–889, quoted from memory; docs/obstacles_and_grids.md measures 0.89 ± 0.08)."""
    from ..engine.integrators import SCHEME_ORDERS

    order = SCHEME_ORDERS[study.run.integrator][1]
    return min(order, 1.0) if study.flow.model.has_walls else order


def build_dataset(study, result) -> xr.Dataset:
    """Dataset of a Monte Carlo run (``start`` is a dimension when the study has several)."""
    schedule = result.schedule
    units = units_for(study.output.length_unit, study.output.time_unit)
    per_start = [xr.Dataset({k: v for k, v in _per_start(s, result, units).items()})
                 for s in result.starts]
    ds = xr.concat(per_start, dim="start", data_vars="all", coords="different",
                   compat="equals", join="outer")
    ds = ds.assign_coords(start=[s.label for s in result.starts])
    coords = {
        "time": schedule.times,
        "batch": np.arange(result.batches),
    }
    if "check_count" in ds:
        coords["check_batch"] = np.arange(ds.sizes["check_batch"])
    if result.orders.size:
        coords["order"] = result.orders
    if schedule.aging_steps.size:
        coords["aging_time"] = schedule.aging_steps * schedule.dt
        coords["lag"] = schedule.lag_steps * schedule.dt
    if schedule.vc_ref_steps.size:
        coords.update(velocity_coords(schedule))
    if "track_x" in ds:
        coords["particle"] = np.arange(ds.sizes["particle"])
        coords["track_time"] = schedule.track_steps * schedule.dt
        ds["track_x0"] = (("start", "particle"), np.stack([s.track_starts[:, 0]
                                                           for s in result.starts]))
        ds["track_y0"] = (("start", "particle"), np.stack([s.track_starts[:, 1]
                                                           for s in result.starts]))
    if "residence_count" in ds:
        edges = result.residence_edges
        coords["residence_time"] = np.sqrt(edges[:-1] * edges[1:])
        coords["flight_length"] = np.sqrt(result.flight_edges[:-1] * result.flight_edges[1:])
        ds["residence_time_edges"] = (("residence_time_edge",), edges)
        ds["flight_length_edges"] = (("flight_length_edge",), result.flight_edges)
    ds = ds.assign_coords(coords)
    for name in ds.data_vars:
        if name in VARIABLE_ATTRS:
            ds[name].attrs.update(_label(name, VARIABLE_ATTRS, units))
    for name in ds.coords:
        if name in COORD_ATTRS:
            ds[name].attrs.update(_label(name, COORD_ATTRS, units))
    if "track_x0" in ds:
        ds["track_x0"].attrs.update({"long_name": "start x of a tracked particle",
                                     "units": units("L")})
        ds["track_y0"].attrs.update({"long_name": "start y of a tracked particle",
                                     "units": units("L")})
    if "residence_time_edges" in ds:
        ds["residence_time_edges"].attrs.update({"long_name": "residence-time bin edges",
                                                 "units": units("T")})
        ds["flight_length_edges"].attrs.update({"long_name": "flight-length bin edges in "
                                                "eddy sides", "units": "1"})
    if len(result.starts) == 1:
        ds = ds.squeeze("start")
    extra = {
        "block_size": result.block_size,
        "n_batches": result.batches,
        "step_size_warnings": " | ".join(result.warnings) if result.warnings else "none",
        "step_check_particles": result.step_check_particles,
    }
    if result.step_check_particles:
        extra["step_check_weak_order"] = step_check_weak_order(study)
    # data-driven families: how faithful the simulated field is to its source (a family hook)
    extra.update(study.flow.model.field_attributes(study.flow.params))
    ds.attrs.update(provenance_attrs(study, kind="monte_carlo", extra=extra))
    return ds
