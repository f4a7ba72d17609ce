"""The MSD exponent a random walk with the measured tails would give, beside the measured α.

From the streamed cell-hopping histograms (``analysis.hopping``), the power-law tails are
fitted by :func:`eddyhop.analysis.hopping.fit_tails` (truncated-Pareto maximum likelihood):
residence times, density ψ(t) ∝ t^(−μ_w), and flight lengths between traps (eddy sides),
density ∝ ℓ^(−μ_f).  With γ = μ − 1 the tail index of the survival function:

* **Continuous-time random walk** with those waiting times and short jumps (Montroll & Weiss
  1965, J. Math. Phys. 6, 167; the long-time law as in Shlesinger 1974, J. Stat. Phys. 10,
  421, and the review Metzler & Klafter 2000, Phys. Rep. 339, 1, eq. (33) — equation number
  from memory): MSD ∝ t^γw for 0 < γw < 1, ∝ t for γw > 1 (finite mean waiting time; a
  logarithmic correction at γw = 1 is not resolved here).  ``ctrw_alpha`` = min(γw, 1).
* **Lévy walk** with flights at constant speed (duration ∝ length, so the duration tail index
  is γf) (Shlesinger, Klafter & Wong 1982, J. Stat. Phys. 27, 499; the MSD exponents as
  tabulated by Zumofen & Klafter 1993, Phys. Rev. E 47, 851 — from memory): α = 2 for
  0 < γf < 1 (ballistic), α = 3 − γf for 1 < γf < 2, α = 1 for γf > 2 (logarithmic
  corrections at γf = 1 and 2 not resolved).  ``levy_walk_alpha``.

Checked formulas: the CTRW exponent γ follows from ψ̃(s) ≈ 1 − (τs)^γ in the Montroll–Weiss
propagator, giving ⟨x²⟩̃(s) ∝ 1/(s·(τs)^γ), so ⟨x²⟩ ∝ t^γ; the Lévy-walk middle branch from
⟨x²⟩(t) ≈ v²∫₀ᵗ(t−τ)·2·P(flight longer than τ)dτ ∝ t^(3−γf) for 1 < γf < 2.

Each prediction carries the standard error of its tail exponent propagated through the
formula (zero on a flat branch) and the verdict of that power-law fit: a prediction from a
rejected or undetermined tail is flagged so, and when the exponential tail is preferred
(Vuong test) the walk has finite moments and predicts α = 1.  The measured α is the local
exponent at the last output time (``alpha``, jackknife se); ``*_alpha_z`` is
(measured − predicted)/√(se² + se²).  These are checks of the trapping picture, not a model of
the run: nothing here is used to extrapolate.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ._common import require, var
from .exponents import local_exponent
from .hopping import fit_tails
from .verdicts import ACCEPTED, DEFAULT_SIGNIFICANCE, UNDETERMINED, verdict_attrs


def ctrw_exponent(gamma: float) -> tuple[float, float]:
    """(α, dα/dγ) of a CTRW with waiting-time tail index γ (see module doc)."""
    if not gamma > 0:
        return math.nan, math.nan
    return (gamma, 1.0) if gamma < 1 else (1.0, 0.0)


def levy_walk_exponent(gamma: float) -> tuple[float, float]:
    """(α, dα/dγ) of a Lévy walk with flight-duration tail index γ (see module doc)."""
    if not gamma > 0:
        return math.nan, math.nan
    if gamma < 1:
        return 2.0, 0.0
    if gamma < 2:
        return 3.0 - gamma, -1.0
    return 1.0, 0.0


def _prediction(fit, formula):
    """(α, se, verdict) from a tail fit through ``formula``."""
    if fit["preferred"] == "exponential":
        return 1.0, 0.0, ACCEPTED  # finite moments: normal diffusion
    mu, mu_se = fit["pow_exponent"], fit["pow_exponent_se"]
    alpha, slope = formula(mu - 1.0)
    if not math.isfinite(alpha):
        return math.nan, math.nan, UNDETERMINED
    return alpha, abs(slope) * mu_se, int(fit["pow_verdict"])


def walk_model_exponents(ds: xr.Dataset, *,
                         significance: float = DEFAULT_SIGNIFICANCE) -> xr.Dataset:
    """``ctrw_alpha``, ``levy_walk_alpha`` (with ``_se``, ``_verdict``, ``_z``) and the
    measured ``alpha_measured`` (± se) per start region; see the module docstring."""
    require(ds, ["time", "msd", "residence_count", "residence_time_edges"],
            "walk_model_exponents")
    measured = local_exponent(ds)
    edges = ds["residence_time_edges"].values
    test = "power-law tail fit of hopping.fit_tails (Pearson chi-square)"

    def one(part, alpha_part):
        alpha = float(alpha_part["alpha"].values[-1])
        alpha_se = float(alpha_part["alpha_se"].values[-1])
        out = {"alpha_measured": var((), alpha, "measured local exponent at the last output "
                                     "time", "1"),
               "alpha_measured_se": var((), alpha_se, "standard error of alpha_measured "
                                        "(jackknife)", "1")}
        sources = {"ctrw": (part["residence_count"].values, edges, ctrw_exponent,
                            "continuous-time random walk with the residence-time tail")}
        if "flight_count" in part.variables and "flight_length_edges" in part.variables:
            sources["levy_walk"] = (part["flight_count"].values,
                                    part["flight_length_edges"].values, levy_walk_exponent,
                                    "Levy walk with the flight-length tail")
        for name, (counts, bin_edges, formula, what) in sources.items():
            fit = fit_tails(counts, bin_edges, None, significance)
            value, se, verdict = _prediction(fit, formula)
            z = (alpha - value) / math.hypot(alpha_se, se) if math.isfinite(
                alpha_se) and (alpha_se > 0 or se > 0) else math.nan
            out[f"{name}_alpha"] = var((), value, f"MSD exponent of a {what}", "1",
                                       tail_exponent=float(fit["pow_exponent"]),
                                       tail_preferred=str(fit["preferred"]))
            out[f"{name}_alpha_se"] = var((), se, f"standard error of {name}_alpha (tail "
                                          "exponent's se through the formula)", "1")
            out[f"{name}_alpha_verdict"] = var((), np.int8(verdict), f"verdict of the tail "
                                               f"fit behind {name}_alpha", "1",
                                               **verdict_attrs(test, significance))
            out[f"{name}_alpha_z"] = var((), z, f"(measured - {name} prediction) / combined "
                                         "standard error", "1")
        return xr.Dataset(out)

    if "start" not in ds.dims:
        return one(ds, measured)
    parts = [one(ds.isel(start=i), measured.isel(start=i)) for i in range(ds.sizes["start"])]
    return xr.concat(parts, dim="start").assign_coords(start=ds["start"].values)


