"""Scaling across a Péclet sweep: power-law exponents with confidence intervals, and crossover
times against the natural time scales of the flow.

Power law.  ``y = A Pe^β`` is fitted as a straight line in log–log coordinates by weighted least
squares, each point weighted by 1/σ² with σ = se(y)/y, the standard error of ln y to first order
(delta method); points without a standard error get equal weights (ordinary least squares).
The slope's standard error comes from the weighted normal equations, multiplied by the Birge
ratio sqrt(χ²/(n − 2)) when that exceeds one, so that the scatter of the points, not only
their stated errors, limits the interval.  This is common practice in the statistics of fits;
the Particle Data Group's Review of Particle Physics, for example, scales the error of an
average of N measurements by S = sqrt(χ²/(N − 1)) when S > 1 — here with the n − 2 degrees
of freedom of a two-parameter fit.  The interval is slope ± z · se (normal quantile).
Without standard errors the fit is ordinary least squares and the interval slope ± t_{n−2} · se
(Student t).

Goodness of fit.  Every fit with standard errors is tested: χ² = Σ wᵢ rᵢ² against the χ²
distribution with n − 2 degrees of freedom; ``<name>_fit_reduced_chi2``, ``_fit_p_value`` and
the flag ``_fit_verdict`` (accepted / rejected at 5 % / undetermined) are stored with each
fit.  A rejected fit keeps its Birge-widened interval (above), so it is never a tight number.

Effective diffusivity.  The fitted quantity is the enhancement ``D/κ``, independent of whether
Pe was varied through κ or U.  Points where no diffusivity is claimed (``deff_converged`` too
short, or a bounded spread) are left out and counted in ``<name>_excluded_points``;
undetermined points (too noisy to confirm the diffusive regime either way) enter with their
standard errors, which already weight them down, and are counted in
``<name>_undetermined_points``.  Flags are read through ``deff_converged``'s own
flag_meanings.  With fewer than 3 confirmed-diffusive points the fit's verdict is
undetermined whatever its χ²: it is a fit over numbers that are not shown to be long-time
limits, and the printouts say so.  Reference exponents at
large Pe: 1/2 for closed cellular flow (boundary-layer transport across the separatrices;
Shraiman 1987, Phys. Rev. A 36, 261; Rosenbluth, Berk, Doxas & Horton 1987, Phys. Fluids 30,
2636); 2 for a parallel shear u = U sin ky, where D_xx = κ + U²/(2κk²) (Taylor dispersion by
homogenization; Majda & Kramer 1999, Phys. Rep. 314, 237).

Crossover times.  Crossovers are matched across points by the pair of regimes they join (their
index changes with Pe as regimes appear or vanish) and fitted against Pe per pair, on a
``transition`` dimension; ``settled->diffusive`` is the last crossover into the diffusive
regime.  At fixed U
and k the natural scales go as Pe^0 (advective 1/(U k)), Pe^{1/2} (boundary layer
1/(κ k² Pe^{1/2})) and Pe^1 (cell diffusion 1/(κ k²)), Pe = U/(κ k); the fitted exponent says
which scale a crossover follows.  The scales themselves are ``time_scale_*`` variables.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass

import numpy as np

from ..analysis.verdicts import (
    DEFAULT_SIGNIFICANCE,
    UNDETERMINED,
    flag_value,
    verdict_attrs,
    verdict_from_p,
)
from ..errors import InputDataError

PECLET_DIMS = ("peclet",)
SCALES = {  # name: (description, exponent of the scale against Pe at fixed U and k)
    "advective": ("advective time 1/(U k)", 0.0),
    "boundary_layer": ("separatrix boundary-layer time 1/(kappa k^2 Pe^(1/2)), Pe = U/(kappa k)",
                       0.5),
    "diffusive": ("cell diffusion time 1/(kappa k^2)", 1.0),
}
DIFFUSIVITIES = ("D_eff", "D_xx", "D_yy")
REFERENCE_DEFF = ("large Pe: 1/2 for closed cells (Shraiman 1987; Rosenbluth et al. 1987), "
                  "2 for a parallel shear (Taylor dispersion; Majda & Kramer 1999)")


@dataclass(frozen=True)
class PowerLaw:
    """Fit of ``y = prefactor · x^exponent``; [``lower``, ``upper``] bounds the exponent.

    Goodness of fit: ``chi2`` (weighted sum of squared residuals of ln y), ``dof`` = n − 2,
    ``p_value`` = P(χ²_dof > chi2) when the points have standard errors (NaN without them:
    the scatter then sets the errors and nothing is left to test), and ``verdict``
    (0 accepted, 1 rejected at the significance level, 2 undetermined; see
    :mod:`eddyhop.analysis.verdicts`)."""

    exponent: float
    lower: float
    upper: float
    prefactor: float
    stderr: float
    n: int
    birge: float
    confidence: float
    chi2: float = math.nan
    dof: int = 0
    p_value: float = math.nan
    verdict: int = 2


def fit_power_law(x, y, se=None, *, confidence: float = 0.95,
                  significance: float = DEFAULT_SIGNIFICANCE) -> PowerLaw:
    """Weighted log–log fit of ``y ∝ x^β`` (see the module docstring), judged by χ².

    ``se``: optional standard errors of ``y``.  Points with non-finite or non-positive values
    (or standard errors, when given) are left out; at least 3 must remain.  With errors the
    fit is tested (χ² with n − 2 degrees of freedom) and ``verdict`` says accepted or
    rejected at ``significance``; a rejected fit's interval is already widened by the Birge
    ratio √(χ²/(n − 2)).  Without errors, or with no degree of freedom left, the verdict is
    undetermined.
    """
    from scipy import stats

    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    good = np.isfinite(x) & np.isfinite(y) & (x > 0) & (y > 0)
    if se is not None:
        se = np.asarray(se, dtype=float)
        good &= np.isfinite(se) & (se > 0)
    n = int(good.sum())
    if n < 3:
        raise InputDataError(f"a power-law fit needs at least 3 points with positive, finite "
                             f"values; {n} available")
    lx, ly = np.log(x[good]), np.log(y[good])
    weights = np.ones(n) if se is None else (y[good] / se[good]) ** 2
    design = np.stack([np.ones(n), lx], axis=1)
    normal = design.T @ (weights[:, None] * design)
    coefficients = np.linalg.solve(normal, design.T @ (weights * ly))
    residuals = ly - design @ coefficients
    dof = n - 2
    chi2 = float(np.sum(weights * residuals**2))
    covariance = np.linalg.inv(normal)
    if se is None:
        covariance = covariance * chi2 / dof if dof > 0 else covariance * np.nan
        birge = 1.0
        quantile = stats.t.ppf(0.5 + confidence / 2, dof)  # variance estimated from scatter
    else:
        birge = math.sqrt(chi2 / dof) if dof > 0 else 1.0
        covariance = covariance * max(1.0, birge) ** 2
        quantile = stats.norm.ppf(0.5 + confidence / 2)  # stated errors (scaled when needed)
    stderr = float(math.sqrt(covariance[1, 1]))
    half = float(quantile) * stderr
    slope = float(coefficients[1])
    p_value = float(stats.chi2.sf(chi2, dof)) if se is not None and dof > 0 else math.nan
    return PowerLaw(exponent=slope, lower=slope - half, upper=slope + half,
                    prefactor=float(math.exp(coefficients[0])), stderr=stderr, n=n,
                    birge=birge, confidence=confidence, chi2=chi2, dof=dof,
                    p_value=p_value, verdict=verdict_from_p(p_value, significance))


def peclet_dimension(ds) -> str:
    for name in PECLET_DIMS:
        if name in ds.dims:
            return name
    raise InputDataError("the scaling summary needs a sweep over the Péclet number "
                         "(\"noise.peclet\" in [sweep]); this Dataset has dimensions "
                         f"{', '.join(map(str, ds.dims)) or 'none'}")


def time_scales(ds) -> dict:
    """``{name: DataArray}`` of the three natural time scales per point, from the ``kappa``,
    ``velocity_scale`` and ``wavenumber`` variables of a merged sweep."""
    missing = [n for n in ("kappa", "velocity_scale", "wavenumber") if n not in ds.variables]
    if missing:
        raise InputDataError(f"the time scales need {', '.join(missing)} per point, which this "
                             "Dataset lacks; merge the sweep with `eddyhop merge`")
    kappa, velocity, k = ds["kappa"], ds["velocity_scale"], ds["wavenumber"]
    peclet = velocity / (kappa * k)
    return {
        "advective": 1.0 / (velocity * k),
        "boundary_layer": 1.0 / (kappa * k**2 * np.sqrt(peclet)),
        "diffusive": 1.0 / (kappa * k**2),
    }


FIT_COLUMNS = ("exponent", "lower", "upper", "prefactor", "n", "reduced_chi2", "p_value",
               "verdict", "undetermined", "excluded")
MIN_CONFIRMED = 3  # diffusive points a D/kappa fit needs before its verdict can be a verdict


def _fit_grid(values, se, pe, confidence, status=None):
    """Fit along the last axis for every index of the others → (..., len(FIT_COLUMNS)).

    ``status`` (same shape as ``values``, optional): per point 1 confirmed, 2 undetermined
    (entered in the fit, counted), 0 left out (too short, bounded: NaN in ``values``).  A fit
    with fewer than ``MIN_CONFIRMED`` confirmed points gets the verdict undetermined whatever
    its χ²: it describes points that are not shown to be long-time limits."""
    out = np.full((*values.shape[:-1], len(FIT_COLUMNS)), np.nan)
    for index in np.ndindex(*values.shape[:-1]):
        row = out[index]
        usable = np.isfinite(values[index]) & (values[index] > 0)
        if se is not None:
            usable &= np.isfinite(se[index]) & (se[index] > 0)
        if status is not None:
            row[8] = float(np.sum(usable & (status[index] == 2)))
            row[9] = float(np.sum(status[index] == 0))
        try:
            fit = fit_power_law(pe, values[index], None if se is None else se[index],
                                confidence=confidence)
        except InputDataError:
            row[4] = 0
            row[7] = UNDETERMINED
            continue
        verdict = fit.verdict
        if status is not None and np.sum(usable & (status[index] == 1)) < MIN_CONFIRMED:
            verdict = UNDETERMINED
        row[:8] = (fit.exponent, fit.lower, fit.upper, fit.prefactor, fit.n,
                   fit.chi2 / fit.dof if fit.dof > 0 else np.nan, fit.p_value, verdict)
    return out


def _store_fit(out, name, fits, dims, coords, what, reference, confidence, pe_used):
    import xarray as xr

    labels = {"exponent": f"fitted exponent beta of {what} ~ Pe^beta",
              "exponent_lower": f"lower bound of the {confidence:.0%} confidence interval of "
                                f"{name}_exponent",
              "exponent_upper": f"upper bound of the {confidence:.0%} confidence interval of "
                                f"{name}_exponent",
              "prefactor": f"fitted prefactor A of {what} = A Pe^beta",
              "fit_points": f"number of sweep points in the fit of {what} against Pe",
              "fit_reduced_chi2": f"chi-square per degree of freedom of the fit of {what} "
                                  "against Pe (NaN without standard errors)",
              "fit_p_value": f"goodness-of-fit p-value of the fit of {what} against Pe "
                             "(chi-square, n - 2 degrees of freedom)",
              "fit_verdict": f"verdict of the fit of {what} against Pe"}
    columns = {"exponent": 0, "exponent_lower": 1, "exponent_upper": 2, "prefactor": 3,
               "fit_points": 4, "fit_reduced_chi2": 5, "fit_p_value": 6, "fit_verdict": 7}
    for suffix, i in columns.items():
        data = fits[..., i]
        if suffix == "fit_points":
            data = np.where(np.isfinite(data), data, 0).astype(np.int64)
        elif suffix == "fit_verdict":
            data = np.where(np.isfinite(data), data, UNDETERMINED).astype(np.int8)
        out[f"{name}_{suffix}"] = xr.DataArray(data, dims=dims, coords=coords,
                                               attrs={"long_name": labels[suffix]})
        if suffix != "prefactor":
            out[f"{name}_{suffix}"].attrs["units"] = "1"
    out[f"{name}_fit_verdict"].attrs.update(verdict_attrs(
        "chi-square of the weighted log-log fit, n - 2 degrees of freedom; undetermined "
        "without standard errors, or for D/kappa with fewer than "
        f"{MIN_CONFIRMED} points confirmed diffusive", DEFAULT_SIGNIFICANCE))
    if name in DIFFUSIVITIES:
        counted = {"undetermined_points": (8, "sweep points in the fit whose diffusive regime "
                                              "is undetermined (deff_converged = "
                                              "undetermined): not confirmed long-time limits"),
                   "excluded_points": (9, "sweep points left out of the fit because no "
                                          "diffusivity is claimed there (run too short, or "
                                          "bounded spread)")}
        for suffix, (i, text) in counted.items():
            data = np.where(np.isfinite(fits[..., i]), fits[..., i], 0).astype(np.int64)
            out[f"{name}_{suffix}"] = xr.DataArray(data, dims=dims, coords=coords,
                                                   attrs={"long_name": text, "units": "1"})
    out[f"{name}_exponent"].attrs.update(
        confidence=confidence, method="weighted least squares of ln y on ln Pe (weights from the "
        "standard errors; interval widened by the Birge ratio when the scatter exceeds them); "
        "ordinary least squares with a Student-t interval when no standard errors exist",
        fit_peclet_min=float(np.min(pe_used)) if pe_used.size else np.nan,
        fit_peclet_max=float(np.max(pe_used)) if pe_used.size else np.nan,
        reference=reference)


def point_status(converged):
    """Per-point status of a ``deff_converged`` DataArray for the fits: 1 diffusive
    (confirmed), 2 undetermined (kept, counted), 0 anything else (too short, bounded,
    missing: left out).  Read through the variable's own flag_meanings."""
    values = np.asarray(converged.values, dtype=float)
    status = np.zeros(values.shape, dtype=np.int8)
    diffusive = flag_value(converged, "diffusive")
    undetermined = flag_value(converged, "undetermined")
    if diffusive is None:  # a file without flag attributes: 1 diffusive, 2 undetermined
        diffusive, undetermined = 1, 2
    status[values == float(diffusive)] = 1
    if undetermined is not None:
        status[values == float(undetermined)] = 2
    return status


def scaling_summary(ds, *, peclet_range=None, confidence: float = 0.95):
    """Dataset summarising the scaling of a merged Péclet sweep (see the module docstring).

    Fits, over every dimension except the Péclet one: ``<D>_exponent`` (+ ``_lower``,
    ``_upper``, ``_prefactor``, ``_fit_points``) of ``D/κ`` for each of D_eff, D_xx, D_yy
    present, and ``crossover_time_exponent`` … per regime pair on a ``transition``
    dimension.  Per point: ``time_scale_<name>`` for the advective,
    boundary-layer and cell-diffusion scales (unless the analysis already provides them).
    ``peclet_range = (low, high)`` restricts the fits, e.g. to the asymptotic regime.
    """
    import xarray as xr

    pe_dim = peclet_dimension(ds)
    pe = ds[pe_dim].values.astype(float)
    keep = np.ones(pe.size, dtype=bool)
    if peclet_range is not None:
        low, high = peclet_range
        keep = (pe >= low) & (pe <= high)
    out = xr.Dataset()
    time_units = ds["time"].attrs.get("units", "1") if "time" in ds.coords else "1"
    for name, value in time_scales(ds).items():
        if f"time_scale_{name}" not in ds.variables:
            out[f"time_scale_{name}"] = value.assign_attrs(long_name=SCALES[name][0],
                                                           units=time_units)

    def arrays(quantity, se, mask=None):
        moved = quantity.transpose(..., pe_dim)
        values = moved.values.astype(float).copy()
        errors = None if se is None else se.transpose(*moved.dims).values.astype(float)
        if mask is not None:
            bad = ~mask.transpose(*moved.dims).values.astype(bool)
            values[bad] = np.nan
        return values[..., keep], None if errors is None else errors[..., keep], moved.dims[:-1]

    kappa = ds["kappa"]
    for name in DIFFUSIVITIES:
        if name not in ds.data_vars or pe_dim not in ds[name].dims:
            continue
        mask = status = None
        if "deff_converged" in ds.data_vars:
            converged = ds["deff_converged"].broadcast_like(ds[name])
            flags = xr.DataArray(point_status(converged), dims=converged.dims,
                                 coords=converged.coords)
            mask = flags > 0  # diffusive and undetermined points enter the fit
        se = ds[f"{name}_se"] / kappa if f"{name}_se" in ds.data_vars else None
        values, errors, dims = arrays((ds[name] / kappa).broadcast_like(ds[name]),
                                      None if se is None else se.broadcast_like(ds[name]), mask)
        if mask is not None:
            status = flags.transpose(*dims, pe_dim).values[..., keep]
        fits = _fit_grid(values, errors, pe[keep], confidence, status)
        coords = {d: ds[d] for d in dims if d in ds.coords}
        _store_fit(out, name, fits, dims, coords, f"{name}/kappa", REFERENCE_DEFF, confidence,
                   pe[keep])
    if "crossover_time" in ds.data_vars and "crossover" in ds["crossover_time"].dims:
        _crossover_fits(ds, out, pe_dim, pe, keep, confidence, arrays)
    out.attrs = {"peclet_dimension": pe_dim, "confidence": confidence}
    return out


SETTLED = "settled->diffusive"


def _crossover_fits(ds, out, pe_dim, pe, keep, confidence, arrays):
    """Fit crossover times per *transition* (the pair of regimes a crossover joins), since the
    index of a crossover changes with Pe as regimes appear or vanish.  Per point the first
    crossover of each transition is used; ``settled->diffusive`` is the last crossover into
    the diffusive regime (when the spread settles to its long-time law).  Transitions seen at
    fewer than 3 Péclet numbers are left out."""
    import xarray as xr

    time = ds["crossover_time"]
    se = ds["crossover_time_se"] if "crossover_time_se" in ds.data_vars else None
    if "crossover_from" not in ds.data_vars or "crossover_to" not in ds.data_vars:
        return
    if time.sizes["crossover"] == 0:  # no point found any crossover: nothing to fit
        return
    other = [d for d in time.dims if d not in (pe_dim, "crossover")]
    order = (*other, pe_dim, "crossover")
    times = time.transpose(*order).values.astype(float)
    errors = None if se is None else se.broadcast_like(time).transpose(*order).values
    before = ds["crossover_from"].broadcast_like(time).transpose(*order).values.astype(str)
    after = ds["crossover_to"].broadcast_like(time).transpose(*order).values.astype(str)
    pairs = np.char.add(np.char.add(before, "->"), after)
    valid = np.isfinite(times) & (before != "") & (after != "")
    counts = Counter(str(p) for p in pairs[valid])
    labels = [SETTLED] + [label for label, _ in counts.most_common()]
    chosen_t, chosen_se, kept = [], [], []
    for label in labels:
        if label == SETTLED:
            hit = valid & (after == "diffusive")
            # last match along the crossover axis
            index = times.shape[-1] - 1 - np.argmax(hit[..., ::-1], axis=-1)
        else:
            hit = valid & (pairs == label)
            index = np.argmax(hit, axis=-1)
        found = np.take_along_axis(hit, index[..., None], -1)[..., 0]
        values = np.where(found, np.take_along_axis(times, index[..., None], -1)[..., 0],
                          np.nan)
        if (np.isfinite(values[..., keep]).sum(axis=-1) < 3).all():
            continue
        chosen_t.append(values)
        chosen_se.append(None if errors is None else np.where(
            found, np.take_along_axis(errors, index[..., None], -1)[..., 0], np.nan))
        kept.append(label)
    if not kept:
        return
    dims = ("transition", *other, pe_dim)
    coords = {d: ds[d] for d in other if d in ds.coords}
    coords[pe_dim] = ds[pe_dim]
    quantity = xr.DataArray(np.stack(chosen_t), dims=dims, coords=coords)
    spread = None if errors is None else xr.DataArray(np.stack(chosen_se), dims=dims,
                                                      coords=coords)
    values, errs, fit_dims = arrays(quantity, spread)
    fits = _fit_grid(values, errs, pe[keep], confidence)
    fit_coords = {d: coords[d] for d in fit_dims if d in coords}
    fit_coords["transition"] = np.array(kept, dtype=object)
    reference = ("scales at fixed U, k: advective Pe^0, boundary layer Pe^(1/2), cell "
                 "diffusion Pe^1")
    _store_fit(out, "crossover_time", fits, fit_dims, fit_coords, "crossover_time", reference,
               confidence, pe[keep])
    out["transition"].attrs = {
        "long_name": "regimes joined by a crossover (before->after); settled->diffusive is "
                     "the last crossover into the diffusive regime"}


def nearest_scale(exponent: float, lower: float, upper: float) -> str:
    """Which natural time scale(s) a crossover exponent is consistent with (plain words)."""
    inside = [name for name, (_, e) in SCALES.items() if lower <= e <= upper]
    if inside:
        return "consistent with the " + " and ".join(n.replace("_", "-") for n in inside) \
            + " scale"
    name = min(SCALES, key=lambda n: abs(SCALES[n][1] - exponent))
    return f"closest to the {name.replace('_', '-')} scale (Pe^{SCALES[name][1]:g}) but " \
           "outside its interval"


def convergence_counts(ds) -> dict:
    """How many results of a merged sweep carry each ``deff_converged`` meaning (its own
    flag_meanings: diffusive, undetermined, too_short, bounded …), plus "missing" for points
    not computed.  Empty when the sweep was merged without the analysis."""
    if "deff_converged" not in ds.variables:
        return {}
    flags = ds["deff_converged"]
    values = np.asarray(flags.values, dtype=float).ravel()
    meanings = str(flags.attrs.get("flag_meanings", "too_short diffusive undetermined")).split()
    codes = np.atleast_1d(np.asarray(flags.attrs.get("flag_values",
                                                     np.arange(len(meanings))), dtype=float))
    counts = {meaning: int(np.sum(values == code)) for code, meaning in zip(codes, meanings)}
    counts["missing"] = int(np.sum(~np.isfinite(values)))
    return counts


def convergence_text(counts: dict) -> str:
    """One phrase: "8 results: 3 diffusive, 5 undetermined" (zero counts left out)."""
    total = sum(counts.values())
    parts = [f"{n} {meaning.replace('_', ' ')}" for meaning, n in counts.items() if n]
    return f"{total} result{'s' if total != 1 else ''}: " + ", ".join(parts)
