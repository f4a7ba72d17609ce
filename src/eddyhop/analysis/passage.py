"""How passage times diverge at the separatrix: logarithmic or power law, with a verdict.

Input: a Dataset from ``eddyhop.engine.passage.passage_times`` (``passage_time`` and
``separatrix_distance`` on ``entry``).  Two forms are fitted to the crossed entries with
0 < d ≤ ``max_distance``:

* logarithmic ``T = a + b ln(1/d)``: what a hyperbolic stagnation point gives, b = n/λ for n
  close passages of saddles with eigenvalue λ per period cell;
* power law ``T = A d^(−β)``: what a degenerate stagnation point gives (no-slip walls: β = ½).

Both are linear least-squares fits (in T, resp. ln T).  Passage times are deterministic and
accurate to the integrator's tolerance, so the goodness of fit asks a stated question: does
the form describe every fitted time within ``relative_tolerance`` (σ_i = tol·T_i; default 1 %)?
χ² = Σ (residual/σ)² with n − 2 degrees of freedom and its p-value give the verdict
(``verdicts.py``).  A rejected form keeps its numbers but its standard errors are widened by
√(χ²/dof).  ``passage_divergence_form`` names the form accepted alone; when both or neither are
accepted it is ``undetermined`` (widen the range of d, or the data follow neither form).
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr
from scipy import stats

from ..errors import InputDataError
from ._common import AnalysisOptionError
from .verdicts import ACCEPTED, DEFAULT_SIGNIFICANCE, verdict_attrs, verdict_from_p

FORMS = ("logarithmic", "power", "undetermined")
MIN_POINTS = 4


def _linear_fit(x, y, sigma):
    """Weighted straight line y = c0 + c1 x: (c0, c1, se0, se1, chi2, dof)."""
    w = 1.0 / sigma**2
    design = np.stack([np.ones_like(x), x], axis=1)
    normal = design.T @ (design * w[:, None])
    covariance = np.linalg.inv(normal)
    coefficients = covariance @ (design.T @ (w * y))
    residual = y - design @ coefficients
    chi2 = float(np.sum(w * residual**2))
    return (coefficients[0], coefficients[1], math.sqrt(covariance[0, 0]),
            math.sqrt(covariance[1, 1]), chi2, x.size - 2)


def passage_divergence(ds: xr.Dataset, *, max_distance: float | None = None,
                       relative_tolerance: float = 0.01,
                       significance: float = DEFAULT_SIGNIFICANCE) -> xr.Dataset:
    """Fit both divergence forms to T(d); see the module docstring for the variables."""
    missing = [v for v in ("passage_time", "separatrix_distance") if v not in ds]
    if missing:
        raise InputDataError(f"passage_divergence needs {', '.join(missing)}; compute them "
                             "with eddyhop.engine.passage.passage_times")
    if not 0.0 < relative_tolerance < 1.0:
        raise AnalysisOptionError(f"relative_tolerance = {relative_tolerance:g}; allowed: "
                                  "(0, 1)")
    if not 0.0 < significance < 1.0:
        raise AnalysisOptionError(f"significance = {significance:g}; allowed: (0, 1)")
    times = ds["passage_time"].values
    distance = ds["separatrix_distance"].values
    keep = np.isfinite(times) & np.isfinite(distance) & (distance > 0)
    if max_distance is not None:
        if not max_distance > 0:
            raise AnalysisOptionError(f"max_distance = {max_distance:g}; allowed: > 0")
        keep &= distance <= max_distance
    out = xr.Dataset()
    n = int(np.sum(keep))
    log_inverse = np.log(1.0 / distance[keep]) if n else np.zeros(0)
    results = {}
    if n >= MIN_POINTS and np.ptp(log_inverse) > 0:
        t = times[keep]
        results["log"] = _linear_fit(log_inverse, t, relative_tolerance * t)
        results["power"] = _linear_fit(log_inverse, np.log(t), np.full(n, relative_tolerance))
    verdicts = {}
    for name, (value_name, value_long, value_units, offset_long, offset_units) in {
        "log": ("passage_log_slope", "passage time gained per e-fold of 1/d, b in "
                "T = a + b ln(1/d)", "T", "a in T = a + b ln(1/d)", "T"),
        "power": ("passage_power_exponent", "exponent beta in T = A d^-beta",
                  "1", "ln A in T = A d^-beta (A in T L^beta)", "1"),
    }.items():
        if name in results:
            c0, c1, se0, se1, chi2, dof = results[name]
            p_value = float(stats.chi2.sf(chi2, dof)) if dof > 0 else math.nan
            verdict = verdict_from_p(p_value, significance)
            widen = math.sqrt(chi2 / dof) if verdict != ACCEPTED and dof > 0 else 1.0
            widen = max(widen, 1.0)
            values = (c1, se1 * widen, c0, se0 * widen, chi2 / dof if dof else math.nan,
                      p_value)
        else:
            verdict = 2
            values = (math.nan,) * 6
        verdicts[name] = verdict
        test = (f"chi-square with sigma = {relative_tolerance:g} x T (does the form describe "
                "every fitted time within that fraction?)")
        out[value_name] = ((), values[0], {"long_name": value_long, "units": value_units})
        out[f"{value_name}_se"] = ((), values[1], {
            "long_name": f"standard error of {value_name} (widened by sqrt(chi2/dof) when "
                         "rejected)", "units": value_units})
        prefix = value_name.rsplit("_", 1)[0]
        out[f"{prefix}_offset"] = ((), values[2], {"long_name": offset_long,
                                                   "units": offset_units})
        out[f"{prefix}_offset_se"] = ((), values[3], {"long_name": f"standard error of "
                                                      f"{prefix}_offset", "units": offset_units})
        out[f"{prefix}_chi2_dof"] = ((), values[4], {"long_name": f"chi2/dof of the {name} fit",
                                                     "units": "1"})
        out[f"{prefix}_p_value"] = ((), values[5], {"long_name": f"p-value of the {name} fit",
                                                    "units": "1"})
        out[f"{prefix}_verdict"] = ((), np.int8(verdict), {
            "long_name": f"verdict of the {name} form", **verdict_attrs(test, significance)})
    accepted = [name for name in ("log", "power") if verdicts[name] == ACCEPTED]
    form = {"log": 0, "power": 1}[accepted[0]] if len(accepted) == 1 else 2
    out["passage_divergence_form"] = ((), np.int8(form), {
        "long_name": "form of the passage-time divergence at the separatrix",
        "flag_values": np.array([0, 1, 2], dtype=np.int8), "flag_meanings": " ".join(FORMS)})
    fitted = distance[keep]
    out["passage_fit_points"] = ((), n, {"long_name": "entries used in the divergence fits",
                                         "units": "1"})
    out["passage_fit_min_distance"] = ((), float(np.min(fitted)) if n else math.nan, {
        "long_name": "smallest separatrix distance fitted", "units": "L"})
    out["passage_fit_max_distance"] = ((), float(np.max(fitted)) if n else math.nan, {
        "long_name": "largest separatrix distance fitted", "units": "L"})
    return out
