"""Plain-text answers: what `eddyhop analyse`, `merge` and `sweep` print, as lists of lines.

The command line prints these lines and notebooks can too (``print("\\n".join(...))``):

* :func:`analysis_lines` — per start region of an analysed result: the regime sequence, each
  regime's exponent, crossover times in model time and in the flow's natural units, the
  effective diffusivity with its convergence verdict in words, the cell-problem reference
  and the distance from it in standard errors, the step check, the mean velocity, and the
  verdicts of the aging and residence-tail fits.
* :func:`scaling_lines` — the Péclet-scaling fits of a merged sweep with their verdicts and
  how many of their points are undetermined.

Labels and flags are read from the Dataset (regime labels as the analysis wrote them, flag
words from each variable's ``flag_meanings``), never re-spelled here.  Numbers whose status is
undetermined are printed with that word beside them and never as a bare tight value.
"""

from __future__ import annotations

import contextvars
import math
import time
import warnings

import numpy as np

from ..analysis.verdicts import flag_meaning

ARROW = " → "
# Fourier modes per direction the summary's cell-problem solve may use: at rtol 1e-4 this
# covers the cellular flow up to Pe ≈ 3000 in a few seconds (docs/reference.md, "Cost");
# beyond, the summary says so and `eddyhop reference` does the long solve.
REFERENCE_MAX_MODES = 256


# ---- number formatting -------------------------------------------------------------------------
def _finite(value) -> bool:
    try:
        return math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _g(value, digits: int = 4) -> str:
    return f"{float(value):.{digits}g}" if _finite(value) else "n/a"


# True while printing a noise-free (reference) result: no value has a sampling error, and the
# header says so once instead of "(no error estimate)" beside every number.
_NOISE_FREE = contextvars.ContextVar("noise_free", default=False)


def _pm(value, se, digits: int = 4) -> str:
    """"v ± se" (se to 2 significant digits), or "v (no error estimate)"."""
    if not _finite(value):
        return "n/a"
    if _finite(se):
        return f"{_g(value, digits)} ± {_g(se, 2)}"
    if _NOISE_FREE.get():
        return _g(value, digits)
    return f"{_g(value, digits)} (no error estimate)"


def _alpha(value) -> str:
    return f"{float(value):.3f}" if _finite(value) else "n/a"


def _scalar(part, name):
    if name not in part.variables:
        return None
    values = np.asarray(part[name].values).ravel()
    return values[0].item() if values.size else None


def _p_text(p) -> str:
    if not _finite(p):
        return "p n/a"
    return "p < 1e-6" if p < 1e-6 else f"p = {p:.2g}"


# ---- the analysis summary ------------------------------------------------------------------------
def analysis_lines(ds, *, reference: bool = True) -> list[str]:
    """Lines summarising an analysed Dataset (see the module docstring).

    ``reference``: solve the homogenization cell problem for the run's flow and κ
    (:func:`eddyhop.reference.effective_diffusivity`, at relative tolerance 1e-4, far below
    any Monte Carlo error) and print the distance of the Monte Carlo D_eff from it in
    standard errors.  Flows the solver does not support are named with the reason; the time
    the solve took is printed.
    """
    lines = []
    starts = [str(v) for v in np.atleast_1d(ds["start"].values)] if "start" in ds.coords \
        else [None]
    multi = "start" in ds.dims
    cell = _cell_problem(ds) if reference and "D_eff" in ds.variables else None
    for label in starts:
        part = ds.sel(start=label) if multi and label is not None else ds
        token = _NOISE_FREE.set("msd_se" not in part.variables
                                and "batch_count" not in part.variables)
        try:
            lines += _start_lines(ds, part, label, cell)
        finally:
            _NOISE_FREE.reset(token)
    if cell is not None and cell.get("note"):
        lines.append(cell["note"])
    return lines


def _start_lines(ds, part, label, cell):
    size = _scalar(part, "n_particles")
    head = f"start '{label}'" if label is not None else "ensemble"
    if size is not None and _finite(size):
        head += f" ({int(size)} particles)"
    elif "msd_se" not in part.variables:
        head += " (noise-free reference: no sampling errors)"
    out = [head + ":"]
    out += _regime_lines(part)
    out += _crossover_lines(ds, part)
    out += _diffusivity_lines(ds, part, cell)
    out += _step_check_lines(part)
    out += _green_kubo_lines(part)
    out += _drift_lines(part)
    out += _hopping_lines(ds, part)
    out += _fit_verdict_lines(part)
    return out


def _hopping_lines(ds, part):
    """Cell hopping and trapping: hop rate, mean residence time, mean flight length."""
    cells = []
    for name, what in (("hop_rate", "cell changes per tracer per unit time"),
                       ("residence_mean", "mean residence time in a cell"),
                       ("flight_mean", "mean flight between traps")):
        value = _scalar(part, name)
        if value is None or not _finite(value):
            continue
        units = str(ds[name].attrs.get("units", "1")) if name in ds.variables else "1"
        shown = " eddy sides" if name == "flight_mean" else \
            "" if units in ("", "1") else f" {units}"
        cells.append(f"{what} {_g(value, 3)}{shown}")
    if cells and not _NOISE_FREE.get():
        cells[-1] += " (counted from the tracked cells; no error estimate)"
    return ["  hopping: " + "; ".join(cells)] if cells else []


def _regimes(part):
    if "regime_label" not in part.variables:
        return []
    labels = [str(v) for v in np.atleast_1d(part["regime_label"].values)]
    count = _scalar(part, "regime_count")
    if count is not None and _finite(count):
        labels = labels[:int(count)]
    return [(i, lab) for i, lab in enumerate(labels) if lab]


# Classes named after one exponent (analysis.regimes: a segment gets such a label when its
# interval meets only that exponent's band, not when it contains the exponent).
_BAND_CENTRES = {"diffusive": 1, "ballistic": 2}


def misses_centre(label: str, lower, upper) -> bool:
    """Whether a ``diffusive`` (``ballistic``) regime's interval excludes 1 (2) — a slow
    approach to the limit or a delayed linear growth gives α̂ = 1.2 with a narrow interval."""
    centre = _BAND_CENTRES.get(str(label))
    if centre is None or not (_finite(lower) and _finite(upper)):
        return False
    return not float(lower) <= centre <= float(upper)


def band_footnote(tolerances: str) -> str:
    """The note for regimes marked by :func:`misses_centre` (``tolerances``: the
    ``regime_label`` attribute of that name, quoted when present)."""
    rule = tolerances.split(";")[0].strip().removeprefix("bands:").strip()
    return ("* the label interval excludes 1 (diffusive) or 2 (ballistic): a class is given by the "
            "band its interval meets" + (f" ({rule})" if rule else "")
            + ", not by containing the exponent")


# a regime found again (same label, over its middle) in fewer batch resamples than this is
# flagged beside its exponent
SUPPORT_SHOWN_BELOW = 0.95


def regime_item(part, name, i) -> float:
    """Element ``i`` of a per-regime variable, or NaN when the file lacks it."""
    if name not in part.variables:
        return np.nan
    values = np.atleast_1d(part[name].values)
    return float(values[i]) if i < values.size else np.nan


def _regime_lines(part):
    regimes = _regimes(part)
    if not regimes:
        return ["  regimes: none identified"]
    final = np.atleast_1d(part["regime_final"].values) if "regime_final" in part.variables \
        else None
    names = []
    for i, label in regimes:
        if final is not None and i < final.size and _finite(final[i]) and bool(final[i]):
            label += " (final)"
        names.append(label)
    out = ["  regimes: " + ARROW.join(names)]
    tunits = str(part["regime_start"].attrs.get("units", "1")) if "regime_start" in part \
        else "1"
    shown = "" if tunits in ("", "1") else f" {tunits}"
    width = max(len(label) for _, label in regimes)
    marked = False
    for i, label in regimes:
        first = float(np.atleast_1d(part["regime_start"].values)[i])
        last = float(np.atleast_1d(part["regime_end"].values)[i])
        alpha = np.atleast_1d(part["regime_alpha"].values)[i]
        text = f"    {label:<{width}}  t = {_g(first)} … {_g(last)}{shown}  alpha = "
        text += _alpha(alpha)
        se = regime_item(part, "regime_alpha_se", i)
        if _finite(se):
            text += f" ± {_g(se, 2)}"
        low = regime_item(part, "regime_alpha_lower", i)
        high = regime_item(part, "regime_alpha_upper", i)
        marked_here = misses_centre(label, low, high)
        if _finite(low) and _finite(high) and (marked_here or not _finite(se)):
            # the interval that decided the label: shown where it matters (the mark) or
            # where no sampling error exists (a noise-free result)
            text += f" (label interval [{_alpha(low)}, {_alpha(high)}])"
        if marked_here:
            text += " *"
            marked = True
        support = regime_item(part, "regime_support", i)
        if _finite(support) and support < SUPPORT_SHOWN_BELOW:
            text += f"; found in {support:.0%} of batch resamples"
        out.append(text)
    if marked:
        out.append("    " + band_footnote(str(part["regime_label"].attrs.get("tolerances", ""))))
    return out


# t in units of 1/(Uk), 1/(κk²) and the boundary-layer time 1/(κk²Pe^½), written as products
_NATURAL = (("crossover_time_advective", "t·Uk"),
            ("crossover_time_diffusive", "t·κk²"),
            ("crossover_time_boundary_layer", "t·κk²Pe^½"))


def _crossover_lines(ds, part):
    if "crossover_time" not in part.variables:
        return []
    times = np.atleast_1d(part["crossover_time"].values).astype(float)
    count = len(_regimes(part)) - 1
    tunits = str(ds["crossover_time"].attrs.get("units", "1"))
    natural = [(name, unit) for name, unit in _NATURAL if name in part.variables
               and np.isfinite(np.asarray(part[name].values, dtype=float)).any()]
    rows = []
    for i in range(max(min(count, times.size), 0)):
        if not _finite(times[i]):
            continue
        before = str(np.atleast_1d(part["crossover_from"].values)[i]) \
            if "crossover_from" in part.variables else "?"
        after = str(np.atleast_1d(part["crossover_to"].values)[i]) \
            if "crossover_to" in part.variables else "?"
        se = np.atleast_1d(part["crossover_time_se"].values)[i] \
            if "crossover_time_se" in part.variables else np.nan
        cells = [_pm(times[i], se)]
        for name, _ in natural:
            value = np.atleast_1d(part[name].values)[i]
            error = np.atleast_1d(part[f"{name}_se"].values)[i] \
                if f"{name}_se" in part.variables else np.nan
            cells.append(_pm(value, error, 3))
        rows.append((f"{before}{ARROW}{after}", cells))
    if not rows:
        return []
    model = "t" if tunits in ("", "1") else f"t [{tunits}]"
    header = " | ".join([model] + [unit for _, unit in natural])
    width = max(len(name) for name, _ in rows)
    return [f"  crossovers ({header}):"] + [
        f"    {name:<{width}}  " + " | ".join(cells) for name, cells in rows]


def _convergence(part):
    """(meaning, words) of ``deff_converged`` for one start."""
    if "deff_converged" not in part.variables:
        return "", ""
    meaning = flag_meaning(part["deff_converged"])
    words = {
        "diffusive": "diffusive regime reached (linear growth of the spread confirmed)",
        "undetermined": "UNDETERMINED: too noisy to show the diffusive regime — D_eff is not "
                        "a confirmed long-time limit (use more particles or a longer run)",
        "too_short": "RUN TOO SHORT: the spread does not yet grow linearly — no diffusivity "
                     "is claimed (increase run.t_end)",
        "bounded": "BOUNDED: the spread stops growing (alpha ≈ 0) — no diffusivity is "
                   "claimed",
    }.get(meaning, f"deff_converged = {meaning or 'unknown'}")
    return meaning, words


def _diffusivity_lines(ds, part, cell):
    if "D_eff" not in part.variables:
        return []
    meaning, words = _convergence(part)
    out = [f"  D_eff: {words}" if words else "  D_eff:"]
    units = str(ds["D_eff"].attrs.get("units", "1"))
    shown = "" if units in ("", "1") else f" {units}"
    if meaning in ("too_short", "bounded"):
        return out  # no number: nothing is claimed
    tag = "  [undetermined]" if meaning == "undetermined" else ""
    components = []
    intervals = False
    for name in ("D_xx", "D_yy", "D_xy"):
        value = _scalar(part, name)
        if value is None:
            continue
        low, high = _scalar(part, f"{name}_lower"), _scalar(part, f"{name}_upper")
        text = f"{name} = {_g(value)}"
        if _finite(low) and _finite(high):
            text += f" [{_g(low)}, {_g(high)}]"
            intervals = True
        elif not _NOISE_FREE.get():
            text += " (no error estimate)"
        components.append(text)
    confidence = ""
    if "D_xx_lower" in ds.variables and intervals:
        long_name = str(ds["D_xx_lower"].attrs.get("long_name", ""))
        if "%" in long_name:
            confidence = " (" + long_name.split("the ", 1)[-1].split(" confidence")[0] + \
                " confidence intervals)"
    out.append("    " + ", ".join(components) + shown + confidence + tag)
    d_eff, d_se = _scalar(part, "D_eff"), _scalar(part, "D_eff_se")
    ratio, ratio_se = _over_kappa(ds, part)
    sqrt_pe, sqrt_pe_se = _over_sqrt_peclet(ds, part, ratio, ratio_se)
    text = f"    D_eff = {_pm(d_eff, d_se)}{shown}"
    if _finite(ratio):
        text += f"; D_eff/κ = {_pm(ratio, ratio_se)}"
    if _finite(sqrt_pe):
        text += f"; D_eff/(κ Pe^½) = {_pm(sqrt_pe, sqrt_pe_se)}"
    out.append(text + tag)
    slope = _scalar(part, "deff_alpha")
    if slope is not None and _finite(slope):
        slope_se = _scalar(part, "deff_alpha_se")
        out.append(f"    {LATE_SLOPE_NAME} = {_alpha(slope)}"
                   + (f" ± {_g(slope_se, 2)}" if slope_se is not None and _finite(slope_se)
                      else "") + " (1 when diffusive)")
    if cell is not None:
        out += _reference_lines(part, cell, d_eff, d_se, meaning)
    return out


def _over_kappa(ds, part):
    kappa = _kappa(ds)
    ratio = _scalar(part, "D_eff_over_kappa")
    if ratio is None:
        d_eff = _scalar(part, "D_eff")
        ratio = d_eff / kappa if d_eff is not None and _finite(kappa) and kappa > 0 else np.nan
    se = _scalar(part, "D_eff_over_kappa_se")
    if se is None:
        d_se = _scalar(part, "D_eff_se")
        se = d_se / kappa if d_se is not None and _finite(kappa) and kappa > 0 else np.nan
    return ratio, se


def _over_sqrt_peclet(ds, part, ratio, ratio_se):
    value = _scalar(part, "D_eff_over_kappa_sqrt_peclet")
    if value is not None:
        return value, _scalar(part, "D_eff_over_kappa_sqrt_peclet_se")
    from ..analysis._common import flow_scales

    peclet = flow_scales(ds)["peclet"]  # U/(κk), whatever the run's own convention
    if not (_finite(peclet) and peclet > 0 and _finite(ratio)):
        return np.nan, np.nan
    root = math.sqrt(peclet)
    return ratio / root, ratio_se / root if _finite(ratio_se) else np.nan


def _kappa(ds):
    try:
        return float(ds.attrs.get("kappa"))
    except (TypeError, ValueError):
        return math.nan


def _reference_lines(part, cell, d_eff, d_se, meaning):
    if cell.get("tensor") is None:
        return []
    tensor = cell["tensor"]
    reference = 0.5 * (tensor[0, 0] + tensor[1, 1])
    kappa = cell["kappa"]
    text = (f"    cell problem (homogenization, noise-free): D_eff = {_g(reference, 6)}"
            f" (D/κ = {_g(reference / kappa, 6)}; solved in {cell['seconds']:.2g} s)")
    out = [text]
    if _finite(d_eff) and _finite(d_se) and d_se > 0:
        z = (d_eff - reference) / d_se
        relative = (d_eff - reference) / reference
        note = " (D_eff undetermined: compare with care)" if meaning == "undetermined" else ""
        out.append(f"    Monte Carlo − cell problem = {relative:+.2%} = {z:+.2f} standard "
                   f"errors{note}")
    return out


def _cell_problem(ds):
    """The homogenized tensor for the run's flow and κ, or a note saying why there is none."""
    from ..errors import EddyhopError

    kappa = _kappa(ds)
    if str(ds.attrs.get("eddyhop_kind", "")) == "reference":
        return None  # a reference result is itself the noise-free answer
    if not (_finite(kappa) and kappa > 0):
        return {"note": "  (no cell-problem reference: it needs kappa > 0)"}
    try:
        import json

        from ..reference import effective_diffusivity
        from .plots._flow import flow_of

        family, params = flow_of(ds)
        resolved = json.loads(ds.attrs.get("study_resolved", "{}"))
        noise = resolved.get("noise", {}) if isinstance(resolved, dict) else {}
        model = str(ds.attrs.get("noise_model", noise.get("model", "constant")))
        modulation = float(noise.get("modulation", 0.0) or 0.0)
        started = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # a resolution note is not this summary's business
            result = effective_diffusivity(family, params, kappa=kappa, noise_model=model,
                                           modulation=modulation, rtol=1e-4,
                                           max_modes=REFERENCE_MAX_MODES)
        seconds = time.perf_counter() - started
    except EddyhopError as exc:
        return {"note": f"  (no cell-problem reference: {exc}; `eddyhop reference` solves it "
                        "with other settings)"}
    except (TypeError, ValueError, KeyError, OSError) as exc:
        return {"note": f"  (no cell-problem reference: the file's provenance does not give "
                        f"its flow and noise: {exc})"}
    return {"tensor": np.asarray(result.tensor, dtype=float), "kappa": kappa,
            "seconds": seconds}


def _green_kubo_lines(part):
    """The Green–Kubo diffusivity (analysis.velocity) beside the MSD's D_eff."""
    if "green_kubo_D_eff" not in part.variables:
        return []
    value, se = _scalar(part, "green_kubo_D_eff"), _scalar(part, "green_kubo_D_eff_se")
    lag = float(part["correlation_lag"].values[-1]) if "correlation_lag" in part.coords else None
    window = f" (lags up to {_g(lag, 4)})" if lag is not None else ""
    if value is None or not _finite(value):
        reason = part["green_kubo_D_eff"].attrs.get("comment", "not computed")
        return [f"  Green-Kubo D{window}: {reason}"]
    meaning = flag_meaning(part["green_kubo_converged"])
    verdict = {"converged": "converged",
               "not_converged": "NOT CONVERGED: the integral still changes over the last "
                                "quarter of the lag window (raise velocity_correlation.lag_max)",
               "undetermined": "UNDETERMINED: too noisy to tell whether the integral has "
                               "converged"}.get(meaning, "unknown flag value")
    if meaning == "not_converged":  # no diffusivity is claimed from an unfinished integral
        return [f"  Green-Kubo D{window}: {verdict}; the integral at the end of the window "
                f"(D_eff = {_pm(value, se)}) is not a long-time diffusivity"]
    tensor = ", ".join(
        f"D_{p} = " + _pm(_scalar(part, f"green_kubo_D_{p}"), _scalar(part, f"green_kubo_D_{p}_se"))
        for p in ("xx", "yy", "xy"))
    out = [f"  Green-Kubo D{window}: {tensor}; D_eff = {_pm(value, se)} — {verdict}"]
    comment = part["green_kubo_D_eff"].attrs.get("comment")
    if comment:
        out.append(f"    note: {comment}")
    msd, msd_se = _scalar(part, "D_eff"), _scalar(part, "D_eff_se")
    if msd is not None and _finite(msd) and se is not None and _finite(se):
        combined = math.hypot(se, msd_se if msd_se is not None and _finite(msd_se) else 0.0)
        if combined > 0:
            out.append(f"    MSD D_eff − Green-Kubo D_eff = {_g(msd - value, 4)} = "
                       f"{_g((msd - value) / combined, 3)} standard errors (errors combined as "
                       "if independent)")
    return out


def _step_check_lines(part):
    if "step_check" not in part.variables:
        return []
    meaning = flag_meaning(part["step_check"])
    if meaning == "passed":
        text = "passed: the measured step-size bias is within the statistical error"
    elif meaning == "biased":
        text = "BIASED: the step-size bias exceeds the statistical error"
        bias, bias_se = _scalar(part, "D_eff_step_bias"), _scalar(part, "D_eff_step_bias_se")
        if bias is not None and _finite(bias):
            text += f" (D_eff bias {_pm(bias, bias_se)})"
        suggested = _scalar(part, "step_check_suggested_dt")
        if suggested is not None and _finite(suggested):
            text += f"; rerun with dt ≤ {_g(suggested, 3)}"
    elif meaning:
        text = meaning.upper() if meaning == "inconclusive" else meaning
        if meaning == "inconclusive":
            text += (": the measured bias is too uncertain to say whether it exceeds the "
                     "statistical error")
    else:
        text = "unknown flag value"
    out = [f"  step check: {text}"]
    meaning, _ = _convergence(part)
    if meaning in ("too_short", "bounded"):
        return out  # no diffusivity is claimed, extrapolated or not
    tag = "  [undetermined]" if meaning == "undetermined" else ""
    extrapolated = _scalar(part, "D_eff_extrapolated")
    if extrapolated is not None and _finite(extrapolated):
        out.append(f"    Richardson-extrapolated D_eff = "
                   f"{_pm(extrapolated, _scalar(part, 'D_eff_extrapolated_se'))}{tag}")
    return out


def _drift_lines(part):
    if "mean_velocity_x" not in part.variables:
        return []
    moment = _scalar(part, "transport_moment")
    if moment is None:  # stored as an attribute rather than a variable
        moment = part.attrs.get("transport_moment", part["mean_velocity_x"].attrs.get(
            "transport_moment"))
    u = _pm(_scalar(part, "mean_velocity_x"), _scalar(part, "mean_velocity_x_se"))
    v = _pm(_scalar(part, "mean_velocity_y"), _scalar(part, "mean_velocity_y_se"))
    text = f"  mean velocity: u = {u}, v = {v}"
    if moment is not None:
        text += ("; exponents and D_eff from the variance (drift removed)"
                 if str(moment) == "variance" else "; exponents and D_eff from the raw MSD")
    return [text]


def _fit_verdict_lines(part):
    out = []
    if "aging_fit_verdict" in part.variables:
        verdict = flag_meaning(part["aging_fit_verdict"])
        beta, se = _scalar(part, "aging_exponent"), _scalar(part, "aging_exponent_se")
        text = f"  aging form: beta = {_pm(beta, se, 3)}"
        ratio = _scalar(part, "aging_fit_reduced_chi2")
        p_value = _scalar(part, "aging_fit_p_value")
        if verdict == "rejected":
            text += (f" — fit REJECTED (T/E[T] = {_g(ratio, 3)}, {_p_text(p_value)}); error "
                     "widened by its square root")
        elif verdict == "accepted":
            text += f" — fit accepted (T/E[T] = {_g(ratio, 3)}, {_p_text(p_value)})"
        else:
            text += " — fit UNDETERMINED (no goodness-of-fit test possible)"
        out.append(text)
    for model, name, parameter in (("exp", "exponential", "residence_exp_rate"),
                                   ("pow", "power law", "residence_pow_exponent")):
        key = f"residence_{model}_verdict"
        if key not in part.variables:
            continue
        verdict = flag_meaning(part[key])
        symbol = "rate" if model == "exp" else "mu"
        value = _pm(_scalar(part, parameter), _scalar(part, f"{parameter}_se"), 3)
        p_value = _scalar(part, f"residence_{model}_gof_p")
        shown = {"rejected": "REJECTED", "undetermined": "UNDETERMINED"}.get(verdict, verdict)
        out.append(f"  residence tail, {name}: {symbol} = {value} — {shown} "
                   f"({_p_text(p_value)})")
    if "residence_preferred" in part.variables and out:
        out.append(f"  residence tail preferred by Vuong's test: "
                   f"{part['residence_preferred'].values!s}")
    return out


# ---- the scaling summary of a sweep ----------------------------------------------------------
def scaling_lines(ds) -> list[str]:
    """The Péclet-scaling fits of a merged sweep: exponent [interval], points, verdict, and
    how many points are undetermined — one line per fit (see the module docstring)."""
    from ..sweeps.scaling import convergence_counts, convergence_text, nearest_scale

    out = []
    counts = convergence_counts(ds)
    if counts:
        out.append("  D_eff convergence across the sweep: " + convergence_text(counts))
    fitted = str(ds.attrs.get("scaling_fits", "")).split()
    if not fitted:
        if "peclet" in ds.dims:
            out.append("  scaling: " + str(ds.attrs.get("scaling_note",
                                                        "no fitted exponents")))
        return out
    confidence = float(ds.attrs.get("confidence", 0.95)) if "confidence" in ds.attrs else None
    for name in fitted:
        if f"{name}_exponent" in ds.variables:
            confidence = ds[f"{name}_exponent"].attrs.get("confidence", confidence)
            break
    level = f"{float(confidence):.0%} " if confidence is not None else ""
    out.append(f"  scaling across Pe ({level}confidence intervals):")
    for name in fitted:
        out += _fit_lines(ds, name, nearest_scale)
    return out


def _fit_lines(ds, name, nearest_scale):
    exponent = ds[f"{name}_exponent"]
    what = f"{name}/kappa" if name.startswith("D") else name

    def get(suffix, index, default=np.nan):
        key = f"{name}_{suffix}"
        return np.asarray(ds[key].values)[index] if key in ds.variables else default

    out = []
    for index in np.ndindex(exponent.shape):
        value = float(exponent.values[index])
        points = int(get("fit_points", index, 0))
        where = []
        for d, i in zip(exponent.dims, index):
            if d == "transition":
                where.append(transition_words(exponent[d].values[i]))
            elif d in exponent.coords:
                where.append(f"{d}={exponent[d].values[i]}")
            else:
                where.append(f"{d}[{i}]")
        context = ", ".join([*where, f"{points} points"])
        excluded = int(get("excluded_points", index, 0))
        if not np.isfinite(value) and points == 0 and not excluded and name == "crossover_time":
            continue  # a transition this slice never shows: nothing to say
        if not np.isfinite(value):
            left_out = f"; {excluded} point(s) left out: too short or bounded" if excluded \
                else ""
            out.append(f"    {what}: no fit, fewer than 3 usable points ({context}{left_out})")
            continue
        lower, upper = float(get("exponent_lower", index)), float(get("exponent_upper", index))
        line = f"    {what} ~ Pe^{value:.3f} [{lower:.3f}, {upper:.3f}]  ({context})"
        verdict = flag_meaning(ds[f"{name}_fit_verdict"], get("fit_verdict", index)) \
            if f"{name}_fit_verdict" in ds.variables else ""
        chi2, p_value = get("fit_reduced_chi2", index), get("fit_p_value", index)
        undetermined = int(get("undetermined_points", index, 0))
        if undetermined:
            line += (f" — {undetermined} of {points} points UNDETERMINED (no confirmed "
                     "diffusive regime)")
            if verdict == "undetermined":
                line += ": not a confirmed long-time scaling"
        if verdict == "rejected":
            line += (f" — fit REJECTED (chi2/dof = {_g(chi2, 3)}, {_p_text(p_value)}); "
                     "interval widened by sqrt(chi2/dof)")
        elif verdict == "accepted":
            line += f" — fit accepted (chi2/dof = {_g(chi2, 3)}, {_p_text(p_value)})"
        elif verdict == "undetermined" and not undetermined:
            line += " — fit UNDETERMINED (no test possible)"
        if excluded:
            line += f"; {excluded} point(s) left out (too short or bounded)"
        if name.startswith("crossover"):
            line += "; " + nearest_scale(value, lower, upper)
        out.append(line)
    return out


def transition_words(value) -> str:
    """A crossover-scaling transition label in words: "a->b" → "a → b"; the last crossover
    into the diffusive regime ("settled->diffusive") named as such."""
    text = str(value)
    if text == "settled->diffusive":
        return "last crossover into the diffusive regime"
    return text.replace("->", ARROW).replace("_", "-")


# ---- the one late log-log slope ------------------------------------------------------------------
LATE_SLOPE_NAME = "late log-log slope deff_alpha"
LATE_SLOPE_TEXT = ("late log-log slope deff_alpha: d ln(var_x + var_y)/d ln t over the D_eff "
                   "fit window, as `eddyhop analyse` computes it")


def late_slopes(ds) -> dict:
    """``{start label or None: (deff_alpha, its standard error)}`` — the one definition of the
    late log-log slope used by every command, the report and the figures: the analysis's
    ``deff_alpha`` (read from an analysed Dataset, otherwise computed by
    :func:`eddyhop.analysis.effective_diffusivity` with its default window).  Empty when the
    Dataset lacks the displacement moments it needs."""
    import warnings

    if "deff_alpha" in ds.variables:
        derived = ds
    elif "msd_x" in ds.variables and "msd_y" in ds.variables and "time" in ds.variables:
        from ..analysis import effective_diffusivity
        from ..errors import EddyhopError

        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # the convergence verdict is not asked for here
                derived = effective_diffusivity(ds)
        except EddyhopError:
            return {}
    else:
        return {}
    alpha = derived["deff_alpha"]
    se = derived["deff_alpha_se"] if "deff_alpha_se" in derived.variables else None
    if "start" in alpha.dims:
        return {str(label): (float(alpha.sel(start=label)),
                             float(se.sel(start=label)) if se is not None else math.nan)
                for label in alpha["start"].values}
    label = str(ds["start"].values) if "start" in ds.coords else None
    return {label: (float(alpha), float(se) if se is not None else math.nan)}
