"""Cell hopping and trapping: residence-time tails (exponential vs power law) and flights.

The engine bins completed cell residences (``residence_count`` on log-spaced
``residence_time_edges``) and flight lengths between traps (``flight_count``, in eddy sides).
Above a tail start t_min (option ``tail_start``; default: the lower edge of the bin holding
the median residence) both one-parameter tail models are fitted to the binned counts by
maximum likelihood, each truncated to [t_min, t_max] (t_max: last edge):

* exponential, density ∝ exp(−λ t): bin probabilities from the truncated exponential CDF;
* power law, density ∝ t^(−μ): bin probabilities from the truncated Pareto CDF.

Both are reported (parameter, standard error from the observed Fisher information, maximised
log-likelihood, Pearson χ² goodness-of-fit statistic with bins merged to ≥ 5 expected counts,
its degrees of freedom — merged bins − 2 — and p-value) with a verdict per model
(``residence_exp_verdict``, ``residence_pow_verdict``: accepted, rejected at
``significance``, or undetermined when too few bins remain for the test).  A rejected model's
standard error is multiplied by √(χ²/dof) (stated in its ``error_scale`` attribute): its
parameter describes a law the data refuse, and is never shown as a tight number.
The comparison is Vuong's normalised log-likelihood ratio z for non-nested models (Vuong 1989,
Econometrica 57, 307; applied to tails as in Clauset, Shalizi & Newman 2009, SIAM Rev. 51,
661): z > 0 favours the exponential; the preferred model is named when the two-sided p-value
is below ``significance``, else "undecided".
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from ._common import check_range, per_start, require, time_units, var
from .verdicts import (
    DEFAULT_SIGNIFICANCE,
    REJECTED,
    UNDETERMINED,
    verdict_attrs,
    verdict_from_p,
)

_MIN_TAIL_COUNT = 20
_TEST = ("Pearson chi-square of the binned tail, bins merged to >= 5 expected counts, "
         "merged bins - 2 degrees of freedom")


def _scaled_text(scale: float) -> str:
    if scale > 1.0:
        return (f"observed Fisher information, multiplied by sqrt(chi2/dof) = {scale:.3g} "
                "because the goodness-of-fit test rejects this tail model")
    return "observed Fisher information"


def _exp_probabilities(rate, left, right, low, high):
    norm = -math.expm1(-rate * (high - low))
    return (np.exp(-rate * (left - low)) - np.exp(-rate * (right - low))) / norm


def _pow_probabilities(mu, left, right, low, high):
    if abs(mu - 1.0) < 1e-8:
        return np.log(right / left) / math.log(high / low)
    s = 1.0 - mu
    # (r^s − l^s)/(h^s − a^s), written with logs relative to `low` for stability
    def term(x):
        return np.expm1(s * np.log(x / low))
    return (term(right) - term(left)) / term(np.asarray(high))


def _nll(probabilities, counts):
    p = np.maximum(probabilities, 1e-300)
    return -float((counts * np.log(p)).sum())


def _fit(family, counts, left, right, low, high):
    from scipy.optimize import minimize_scalar

    if family == "exponential":
        lo = math.log(1e-3 / (high - low))
        hi = math.log(50.0 / (right[0] - left[0]))

        def objective(z):
            return _nll(_exp_probabilities(math.exp(z), left, right, low, high), counts)
    else:
        lo, hi = -3.0, 12.0

        def objective(z):
            return _nll(_pow_probabilities(z, left, right, low, high), counts)
    best = minimize_scalar(objective, bounds=(lo, hi), method="bounded",
                           options={"xatol": 1e-10})
    z = float(best.x)
    h = 1e-4 * max(1.0, abs(z))
    curvature = (objective(z + h) - 2 * objective(z) + objective(z - h)) / (h * h)
    se_z = 1.0 / math.sqrt(curvature) if curvature > 0 else math.nan
    if family == "exponential":
        rate = math.exp(z)
        probabilities = _exp_probabilities(rate, left, right, low, high)
        return rate, rate * se_z, -best.fun, probabilities
    probabilities = _pow_probabilities(z, left, right, low, high)
    return z, se_z, -best.fun, probabilities


def _gof(counts, probabilities):
    """Pearson χ², its degrees of freedom and p-value, adjacent bins merged until each expects
    ≥ 5 (1 fitted parameter and the fixed total: groups − 2 degrees of freedom)."""
    from scipy import stats

    n = counts.sum()
    expected = n * probabilities
    observed_groups, expected_groups = [], []
    o_acc = e_acc = 0.0
    for o, e in zip(counts, expected):
        o_acc += o
        e_acc += e
        if e_acc >= 5:
            observed_groups.append(o_acc)
            expected_groups.append(e_acc)
            o_acc = e_acc = 0.0
    if e_acc > 0 and expected_groups:
        observed_groups[-1] += o_acc
        expected_groups[-1] += e_acc
    dof = len(expected_groups) - 2
    if dof < 1:
        return math.nan, math.nan, math.nan
    o = np.array(observed_groups)
    e = np.array(expected_groups)
    chi2 = float(((o - e) ** 2 / e).sum())
    return chi2, float(dof), float(stats.chi2.sf(chi2, dof))


def fit_tails(counts, edges, tail_start=None, significance=DEFAULT_SIGNIFICANCE) -> dict:
    """Both tail fits, their verdicts and their comparison for binned data (see the module
    docstring).  Per model (prefix ``exp_`` / ``pow_``): the parameter and its standard error,
    ``loglik``, ``chi2``, ``dof``, ``gof_p``, ``verdict`` (0 accepted, 1 rejected,
    2 undetermined at ``significance``) and ``error_scale`` (√(χ²/dof) for a rejected fit,
    by which its standard error has been multiplied; 1 otherwise)."""
    from scipy import stats

    counts = np.asarray(counts, dtype=np.float64)
    edges = np.asarray(edges, dtype=np.float64)
    out = dict.fromkeys(("tail_start", "tail_count", "exp_rate", "exp_rate_se", "exp_loglik",
                         "exp_gof_p", "exp_chi2", "exp_dof", "pow_exponent", "pow_exponent_se",
                         "pow_loglik", "pow_gof_p", "pow_chi2", "pow_dof", "loglik_ratio",
                         "vuong_z", "vuong_p"), math.nan)
    out.update(preferred="undecided", exp_verdict=UNDETERMINED, pow_verdict=UNDETERMINED,
               exp_error_scale=1.0, pow_error_scale=1.0)
    total = counts.sum()
    if total <= 0:
        out["tail_count"] = 0.0
        return out
    if tail_start is None:
        cumulative = np.cumsum(counts)
        first = int(np.searchsorted(cumulative, 0.5 * total))
    else:
        first = int(np.searchsorted(edges, tail_start, side="left"))
        first = min(max(first, 0), counts.size - 1)
    left, right = edges[first:-1], edges[first + 1:]
    tail = counts[first:]
    out["tail_start"] = float(edges[first])
    out["tail_count"] = float(tail.sum())
    if tail.sum() < _MIN_TAIL_COUNT or np.count_nonzero(tail) < 3:
        return out
    low, high = float(left[0]), float(right[-1])
    rate, rate_se, ll_exp, p_exp = _fit("exponential", tail, left, right, low, high)
    mu, mu_se, ll_pow, p_pow = _fit("power_law", tail, left, right, low, high)
    n = tail.sum()
    per_bin = np.log(np.maximum(p_exp, 1e-300)) - np.log(np.maximum(p_pow, 1e-300))
    ratio = float((tail * per_bin).sum())
    mean = ratio / n
    spread = math.sqrt(float((tail * (per_bin - mean) ** 2).sum() / n))
    z = ratio / (math.sqrt(n) * spread) if spread > 0 else 0.0
    p_value = float(2 * stats.norm.sf(abs(z)))
    out.update(exp_rate=rate, exp_rate_se=rate_se, exp_loglik=ll_exp, pow_exponent=mu,
               pow_exponent_se=mu_se, pow_loglik=ll_pow, loglik_ratio=ratio, vuong_z=z,
               vuong_p=p_value)
    for prefix, probabilities, parameter in (("exp", p_exp, "exp_rate_se"),
                                             ("pow", p_pow, "pow_exponent_se")):
        chi2, dof, p_fit = _gof(tail, probabilities)
        verdict = verdict_from_p(p_fit, significance)
        scale = max(1.0, math.sqrt(chi2 / dof)) if verdict == REJECTED else 1.0
        out.update({f"{prefix}_chi2": chi2, f"{prefix}_dof": dof, f"{prefix}_gof_p": p_fit,
                    f"{prefix}_verdict": verdict, f"{prefix}_error_scale": scale})
        out[parameter] *= scale
    if p_value < significance:
        out["preferred"] = "exponential" if z > 0 else "power_law"
    return out


def hopping(ds: xr.Dataset, *, tail_start: float | None = None,
            significance: float = DEFAULT_SIGNIFICANCE) -> xr.Dataset:
    """Residence-time tail fits and flight statistics of every start region."""
    significance = check_range("significance", significance, 0.0, 1.0, low_open=True,
                               high_open=True)
    if tail_start is not None:
        tail_start = check_range("tail_start", tail_start, 0.0, low_open=True)
    require(ds, ["residence_count", "residence_time_edges"], "hopping")
    tunits = time_units(ds)
    edges = ds["residence_time_edges"].values

    def one(part):
        counts = part["residence_count"].values
        fit = fit_tails(counts, edges, tail_start, significance)
        total = counts.sum()
        centres = np.sqrt(edges[:-1] * edges[1:])
        out = {
            "residence_mean": var((), float((counts * centres).sum() / total) if total else
                                  np.nan, "mean cell residence time (from bin centres)",
                                  tunits),
            "residence_survival": var(("residence_time",), (total - np.concatenate(
                [[0.0], np.cumsum(counts)[:-1]])) / total if total else np.full(counts.size,
                                                                                  np.nan),
                "fraction of residences at least as long as the bin's lower edge", "1"),
            "residence_tail_start": var((), fit["tail_start"], "start t_min of the fitted "
                                        "residence-time tail", tunits),
            "residence_tail_count": var((), fit["tail_count"], "residences in the fitted "
                                        "tail", "1"),
            "residence_exp_rate": var((), fit["exp_rate"], "rate lambda of the exponential "
                                      "tail fit, density ~ exp(-lambda t)",
                                      "1" if tunits == "1" else f"{tunits}-1"),
            "residence_exp_rate_se": var((), fit["exp_rate_se"], "standard error of "
                                         "residence_exp_rate (observed Fisher information)",
                                         "1" if tunits == "1" else f"{tunits}-1",
                                         error_scale=fit["exp_error_scale"],
                                         estimator=_scaled_text(fit["exp_error_scale"])),
            "residence_decay_time": var((), 1.0 / fit["exp_rate"] if fit["exp_rate"] > 0
                                        else np.nan, "decay time 1/lambda of the exponential "
                                        "residence-time tail", tunits),
            "residence_exp_loglik": var((), fit["exp_loglik"], "maximised log-likelihood of "
                                        "the exponential tail (binned)", "1"),
            "residence_exp_gof_p": var((), fit["exp_gof_p"], "Pearson chi-square p-value of "
                                       "the exponential tail", "1"),
            "residence_exp_reduced_chi2": var((), fit["exp_chi2"] / fit["exp_dof"],
                                              "Pearson chi-square per degree of freedom of "
                                              "the exponential tail", "1"),
            "residence_exp_verdict": var((), np.int8(fit["exp_verdict"]), "verdict of the "
                                         "goodness-of-fit test of the exponential tail", "1",
                                         **verdict_attrs(_TEST, significance)),
            "residence_pow_exponent": var((), fit["pow_exponent"], "exponent mu of the "
                                          "power-law tail fit, density ~ t^-mu", "1"),
            "residence_pow_exponent_se": var((), fit["pow_exponent_se"], "standard error of "
                                             "residence_pow_exponent (observed Fisher "
                                             "information)", "1",
                                             error_scale=fit["pow_error_scale"],
                                             estimator=_scaled_text(fit["pow_error_scale"])),
            "residence_pow_loglik": var((), fit["pow_loglik"], "maximised log-likelihood of "
                                        "the power-law tail (binned)", "1"),
            "residence_pow_gof_p": var((), fit["pow_gof_p"], "Pearson chi-square p-value of "
                                       "the power-law tail", "1"),
            "residence_pow_reduced_chi2": var((), fit["pow_chi2"] / fit["pow_dof"],
                                              "Pearson chi-square per degree of freedom of "
                                              "the power-law tail", "1"),
            "residence_pow_verdict": var((), np.int8(fit["pow_verdict"]), "verdict of the "
                                         "goodness-of-fit test of the power-law tail", "1",
                                         **verdict_attrs(_TEST, significance)),
            "residence_loglik_ratio": var((), fit["loglik_ratio"], "log-likelihood ratio "
                                          "exponential minus power law", "1"),
            "residence_vuong_z": var((), fit["vuong_z"], "Vuong normalised log-likelihood "
                                     "ratio (> 0 favours exponential)", "1"),
            "residence_vuong_p": var((), fit["vuong_p"], "two-sided p-value of the Vuong test",
                                     "1"),
            "residence_preferred": var((), np.array(fit["preferred"], dtype="<U11"),
                                       "preferred residence-time tail model (exponential, "
                                       "power_law or undecided)"),
        }
        if "flight_count" in part.variables and "flight_length_edges" in part.variables:
            flights = part["flight_count"].values
            f_edges = part["flight_length_edges"].values
            f_total = flights.sum()
            f_centres = np.sqrt(f_edges[:-1] * f_edges[1:])
            out["flight_pdf"] = var(("flight_length",), flights / f_total / np.diff(f_edges)
                                    if f_total else np.full(flights.size, np.nan),
                                    "probability density of flight lengths", "1")
            out["flight_mean"] = var((), float((flights * f_centres).sum() / f_total)
                                     if f_total else np.nan, "mean flight length between "
                                     "traps in eddy sides (from bin centres)", "1")
        return xr.Dataset(out)

    return per_start(ds, one)
