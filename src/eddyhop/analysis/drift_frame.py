"""Spreading along and across a mean drift: the displacement variance in the drift's frame.

With the drift direction e = (cos θ, sin θ) and its normal e⊥ = (−sin θ, cos θ), the
covariance matrix C of the displacement (centred on the ensemble mean,
:func:`eddyhop.analysis.centring.transport_curve`) gives

    Var_∥(t) = eᵀ C e  = cos²θ Var Δx + 2 sin θ cos θ Cov + sin²θ Var Δy,
    Var_⊥(t) = e⊥ᵀ C e⊥ = sin²θ Var Δx − 2 sin θ cos θ Cov + cos²θ Var Δy,

and the effective diffusivities along and across follow from their late-time growth
(D = Var/(2t) in the diffusive regime).  θ is the study's drift angle (``flow_drift_angle``,
recorded by drifting-cell studies, ``flows/drift_direction.py``), or given.  Uncertainties:
jackknife over particle batches (each replicate centred with its own mean).
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ._common import AnalysisOptionError, per_start, require, var
from ._stats import jackknife_se
from .centring import transport_curve


def drift_angle_of(ds) -> float:
    """The drift angle in degrees recorded in ``ds`` (``flow_drift_angle``, else from
    ``flow_drift_x``/``flow_drift_y``); NaN when the run has none."""
    attrs = ds.attrs
    if "flow_drift_angle" in attrs:
        return float(attrs["flow_drift_angle"])
    if "flow_drift_x" in attrs and "flow_drift_y" in attrs:
        vx, vy = float(attrs["flow_drift_x"]), float(attrs["flow_drift_y"])
        return math.degrees(math.atan2(vy, vx)) if (vx or vy) else math.nan
    return math.nan


def drift_frame_variance(ds: xr.Dataset, *, angle: float | None = None) -> xr.Dataset:
    """``variance_along_drift``, ``variance_across_drift`` (length², on ``time``), their
    ``_se``, and the late-time ratio ``diffusivity_ratio_along_across`` = Var_∥/Var_⊥ at the
    last time with its se.  ``angle``: the drift direction in degrees from x (default: the
    recorded one; a run without a drift needs it)."""
    require(ds, ["time", "msd_x", "msd_y", "msd_xy"], "drift_frame_variance")
    theta = drift_angle_of(ds) if angle is None else float(angle)
    if not math.isfinite(theta):
        raise AnalysisOptionError("drift_frame_variance: this run records no drift direction "
                                  "(flow_drift_angle); give angle = degrees from the x axis")
    c, s = math.cos(math.radians(theta)), math.sin(math.radians(theta))

    def frame(vx, vy, cov):
        along = c * c * vx + 2 * s * c * cov + s * s * vy
        across = s * s * vx - 2 * s * c * cov + c * c * vy
        return along, across

    def one(part):
        curves = [transport_curve(part, component) for component in ("x", "y", "xy")]
        along, across = frame(*(curve[0] for curve in curves))
        if all(curve[1] is not None for curve in curves):
            rep_along, rep_across = frame(*(curve[1] for curve in curves))
            se_along, se_across = jackknife_se(rep_along), jackknife_se(rep_across)
            with np.errstate(divide="ignore", invalid="ignore"):
                se_ratio = jackknife_se(rep_along[:, -1:] / rep_across[:, -1:])[0]
        else:
            se_along = se_across = np.full(along.shape, np.nan)
            se_ratio = math.nan
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = along[-1] / across[-1]
        out = {
            "variance_along_drift": var(("time",), along, "variance of the displacement along "
                                        "the mean drift", "L2", drift_angle_deg=theta),
            "variance_along_drift_se": var(("time",), se_along, "standard error of "
                                           "variance_along_drift (jackknife)", "L2"),
            "variance_across_drift": var(("time",), across, "variance of the displacement "
                                         "across (normal to) the mean drift", "L2",
                                         drift_angle_deg=theta),
            "variance_across_drift_se": var(("time",), se_across, "standard error of "
                                            "variance_across_drift (jackknife)", "L2"),
            "variance_ratio_along_across": var((), ratio, "variance along over variance "
                                               "across the drift at the last output time",
                                               "1"),
            "variance_ratio_along_across_se": var((), se_ratio, "standard error of "
                                                  "variance_ratio_along_across (jackknife)",
                                                  "1"),
        }
        return xr.Dataset(out, coords={"time": part["time"]})

    return per_start(ds, one)


def has_drift(ds) -> bool:
    """Whether ``ds`` records a nonzero mean drift of the flow (drifting-cell runs)."""
    speed = ds.attrs.get("flow_drift_speed")
    if speed is None and "flow_drift_x" in ds.attrs:
        speed = math.hypot(float(ds.attrs["flow_drift_x"]), float(ds.attrs.get(
            "flow_drift_y", 0.0)))
    try:
        return float(speed) > 0 and "msd_xy" in ds.variables
    except (TypeError, ValueError):
        return False


def drift_frame(ds: xr.Dataset) -> xr.Dataset:
    """:func:`drift_frame_variance` at the recorded drift angle (what ``analyse`` runs)."""
    return drift_frame_variance(ds)
