"""Local exponent α(t) = d ln MSD / d ln t, total and per component, with jackknife errors.

The curve is the second moment the analyses interpret, from
:func:`eddyhop.analysis.centring.transport_curve` (the raw MSD, or the centred moment when
the ensemble mean moves); "MSD" below means that curve.

Estimator: local linear regression of ln MSD on ln t with tricube weights over a window of
``window`` decades centred on each output time (one-sided at the ends, at least 3 points);
see :func:`eddyhop.analysis._stats.local_log_slope`.  Uncertainty: jackknife over particle
batches (the same estimator applied to every delete-one-batch pooled MSD).  Reference
values: α = 2 ballistic, α = 1 diffusive (common practice in the field).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ._common import check_range, per_start, require, var
from ._stats import jackknife_se, local_log_slope
from .centring import transport_curve

# (output variable, MSD variable that must be present, transport_curve component)
COMPONENTS = (("alpha", "msd", "total"), ("alpha_x", "msd_x", "x"), ("alpha_y", "msd_y", "y"))
DEFAULT_WINDOW = 0.4


def alpha_with_replicates(ds, component: str = "total", window: float = DEFAULT_WINDOW):
    """(α(t), delete-one-batch replicates (B, T) or None, name of the moment used) of one
    start's second moment along ``component`` ("total", "x", "y"), taken from
    :func:`~eddyhop.analysis.centring.transport_curve`."""
    t = ds["time"].values
    values, replicates, name = transport_curve(ds, component)
    alpha = local_log_slope(t, values, window)
    if replicates is not None:
        replicates = local_log_slope(t, replicates, window)
    return alpha, replicates, name


def local_exponent(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW) -> xr.Dataset:
    """α(t), α_x(t), α_y(t) and their standard errors on ``time``.

    ``window``: width of the local fit in decades of t (0.05 … 3).  Components whose MSD
    variable is absent are skipped; ``msd`` itself is required.
    """
    window = check_range("window", window, 0.05, 3.0)
    require(ds, ["time", "msd"], "local_exponent")

    def one(part):
        out = {}
        for name, source, what in COMPONENTS:
            if source not in part.variables:
                continue
            alpha, replicates, source = alpha_with_replicates(part, what, window)
            se = jackknife_se(replicates)
            label = "" if what == "total" else f" along {what}"
            out[name] = var(("time",), alpha, f"local exponent d ln {source} / d ln t{label}",
                            "1", estimator=f"tricube-weighted local linear fit of ln {source} "
                            f"on ln t over {window:g} decades")
            out[f"{name}_se"] = var(("time",), np.full(alpha.shape, np.nan) if se is None
                                    else se, f"standard error of {name} (jackknife over "
                                    "particle batches; NaN without batches)", "1")
        return xr.Dataset(out, coords={"time": part["time"]})

    return per_start(ds, one)
