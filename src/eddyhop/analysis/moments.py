"""Higher moments and shape: the moment spectrum q ↦ ν(q) and displacement PDFs.

For the absolute moments ⟨|Δx|^q⟩, ⟨|Δy|^q⟩, ⟨|ΔX|^q⟩ (dims ``order``, ``time``):

* local exponents ν_q(t) = d ln⟨|ΔX|^q⟩ / d ln t (same estimator as α(t));
* the late-time spectrum ν(q): least-squares slope of ln⟨|ΔX|^q⟩ on ln t over the late window
  (the last ``fit_decades`` decades).  Self-similar (mono-scaling) transport has ν(q) = q ν(2)/2,
  i.e. ν(q)/q constant; a spectrum bending away from that line is *strong anomalous
  diffusion* (Castiglione, Mazzino, Muratore-Ginanneschi & Vulpiani 1999, Physica D 134, 75,
  "On strong anomalous diffusion").  ``moment_exponent_over_order`` reports ν(q)/q.
  Standard errors (``moment_exponent_se``, ``moment_exponent_over_order_se``): the fit
  repeated on every delete-one-batch pooled moment (``batch_abs_moment``), jackknife spread;
  the per-component spectra have no per-batch data and no error.

Displacement PDFs come from tracked trajectories: at chosen times, histograms of the scaled
displacement ξ = Δx/σ_x(t) (σ the standard deviation over the tracked particles), so shapes at
different times share one axis and a Gaussian is the reference.  The kurtosis of the whole
ensemble is in the run's own ``kurtosis_x``/``kurtosis_y``.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..errors import InputDataError
from ._common import AnalysisOptionError, check_range, per_start, require, var
from ._stats import batch_replicates, jackknife_se, late_window, local_log_slope, ols_slope
from .deff import DEFAULT_FIT_DECADES
from .exponents import DEFAULT_WINDOW

_PARTS = (("abs_moment", ""), ("abs_moment_x", "_x"), ("abs_moment_y", "_y"))


def _check_orders(ds, orders):
    stored = ds["order"].values
    if np.any(~(stored > 0)):
        raise InputDataError(f"moment_spectrum: the Dataset holds moment orders "
                             f"{list(stored)}; orders must be positive (q > 0)")
    if orders is None:
        return ds
    values = np.atleast_1d(np.asarray(orders, dtype=np.float64))
    if np.any(~(values > 0)):
        raise AnalysisOptionError(f"option orders = {list(values)}: moment orders must be "
                                  "positive (q > 0)")
    index = []
    for q in values:
        match = np.flatnonzero(np.isclose(stored, q))
        if match.size == 0:
            raise InputDataError(f"moment order {q:g} was not recorded; this Dataset has "
                                 f"orders {', '.join(f'{v:g}' for v in stored)} (set [moments] "
                                 "orders in the study and rerun)")
        index.append(int(match[0]))
    return ds.isel(order=index)


def moment_spectrum(ds: xr.Dataset, *, window: float = DEFAULT_WINDOW,
                    fit_decades: float = DEFAULT_FIT_DECADES, orders=None) -> xr.Dataset:
    """Local exponents of the absolute moments and the late-time spectrum ν(q)."""
    window = check_range("window", window, 0.05, 3.0)
    fit_decades = check_range("fit_decades", fit_decades, 0.0, 10.0, low_open=True)
    require(ds, ["time", "abs_moment", "order"], "moment_spectrum")
    ds = _check_orders(ds, orders)

    def one(part):
        t = part["time"].values
        window_mask = late_window(t, fit_decades)
        lt = np.log(t[window_mask])
        out = {}
        for source, suffix in _PARTS:
            if source not in part.variables:
                continue
            values = part[source].transpose("order", "time").values
            what = {"": "|X(t)-X(0)|", "_x": "|dx|", "_y": "|dy|"}[suffix]
            out[f"moment_alpha{suffix}"] = var(
                ("order", "time"), local_log_slope(t, values, window),
                f"local exponent d ln <{what}^q> / d ln t", "1")
            with np.errstate(divide="ignore", invalid="ignore"):
                logs = np.log(np.where(values > 0, values, np.nan))[:, window_mask]
            nu = ols_slope(lt, logs)[0]
            out[f"moment_exponent{suffix}"] = var(
                ("order",), nu, f"late-time scaling exponent nu(q) of <{what}^q> ~ t^nu(q)",
                "1")
        nu = out["moment_exponent"].values
        orders = part["order"].values
        out["moment_exponent_over_order"] = var(
            ("order",), nu / orders, "nu(q)/q (constant for self-similar transport)", "1")
        # jackknife over particle batches (only the total moment has per-batch means)
        reps = batch_replicates(part, "abs_moment", ("order", "time"))
        if reps is None:
            se = np.full(nu.shape, np.nan)
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                rep_logs = np.log(np.where(reps > 0, reps, np.nan))[:, :, window_mask]
            se = jackknife_se(ols_slope(lt, rep_logs)[0])
        how = "jackknife over particle batches; NaN without batch_abs_moment"
        out["moment_exponent_se"] = var(("order",), se, "standard error of moment_exponent",
                                        "1", estimator=how)
        out["moment_exponent_over_order_se"] = var(
            ("order",), se / orders, "standard error of moment_exponent_over_order", "1",
            estimator=how)
        return xr.Dataset(out, coords={"order": part["order"], "time": part["time"]})

    return per_start(ds, one)


def scaled_displacement_density(displacements, edges):
    """(density on the bins ``edges``, fraction outside them) of the displacements scaled to
    zero mean and unit standard deviation, (d − mean)/std; NaN for fewer than two finite
    values or no spread."""
    d = np.asarray(displacements, dtype=float)
    d = d[np.isfinite(d)]
    sigma = d.std() if d.size else 0.0
    if d.size < 2 or sigma <= 0:
        return np.full(len(edges) - 1, np.nan), np.nan
    counts, _ = np.histogram((d - d.mean()) / sigma, edges)
    return counts / (d.size * (edges[1] - edges[0])), 1.0 - counts.sum() / d.size


def displacement_pdf(ds: xr.Dataset, *, pdf_times=None, bins: int = 41,
                     extent: float = 5.0) -> xr.Dataset:
    """PDFs of the scaled displacements ξ = Δx/σ_x, Δy/σ_y of tracked particles at chosen
    times (default: the tracked sample times nearest T/100, T/10 and T).

    ``bins`` equal bins over ξ ∈ [−extent, extent]; particles outside are counted in
    ``pdf_outside_fraction``.
    """
    bins = check_range("bins", bins, 3, 10_000, integer=True)
    extent = check_range("extent", extent, 0.0, 100.0, low_open=True)
    require(ds, ["track_x", "track_y", "track_time"], "displacement_pdf")
    track_time = ds["track_time"].values
    if pdf_times is None:
        targets = np.array([track_time[-1] / 100, track_time[-1] / 10, track_time[-1]])
    else:
        targets = np.atleast_1d(np.asarray(pdf_times, dtype=np.float64))
        for value in targets:
            if not np.isfinite(value) or value <= 0 or value > track_time[-1] * (1 + 1e-9):
                raise InputDataError(f"displacement_pdf: time {value:g} is outside the tracked "
                                     f"run (0, {track_time[-1]:g}]")
    index = np.unique([int(np.argmin(np.abs(track_time - v))) for v in targets])
    index = index[index > 0]
    if index.size == 0:
        raise InputDataError("displacement_pdf: no tracked sample after t = 0")
    edges = np.linspace(-extent, extent, bins + 1)
    centres = 0.5 * (edges[:-1] + edges[1:])

    def one(part):
        out = {}
        for axis in ("x", "y"):
            track = part[f"track_{axis}"].transpose("particle", "track_time").values
            origin = (part[f"track_{axis}0"].values if f"track_{axis}0" in part.variables
                      else track[:, 0])
            pdf = np.zeros((index.size, bins))
            outside = np.zeros(index.size)
            for row, j in enumerate(index):
                pdf[row], outside[row] = scaled_displacement_density(track[:, j] - origin, edges)
            out[f"displacement_pdf_{axis}"] = var(
                ("pdf_time", "scaled_displacement"), pdf, f"probability density of the scaled "
                f"displacement (d{axis} - mean)/std of tracked particles", "1")
            out[f"pdf_outside_fraction_{axis}"] = var(
                ("pdf_time",), outside, f"fraction of tracked particles with |scaled d{axis}| "
                f"> {extent:g}", "1")
        return xr.Dataset(out)

    out = per_start(ds, one)
    return out.assign_coords(
        pdf_time=var(("pdf_time",), track_time[index], "time of a displacement PDF",
                     str(ds["track_time"].attrs.get("units", "1"))),
        scaled_displacement=var(("scaled_displacement",), centres, "scaled displacement "
                                "(displacement - mean)/std, bin centre", "1"))
