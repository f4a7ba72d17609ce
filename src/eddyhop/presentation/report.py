"""One self-contained HTML report of a result or a merged sweep.

``write_report(source, out)`` renders every figure the Dataset supports as an embedded base64
PNG (no external file, script, font or style sheet is referenced), with the study parameters,
the regimes and crossover times, D_eff with confidence intervals, warnings (step size, run
length), provenance and the research-estimate caution.  The report only reads a Dataset; when
the Dataset has not been analysed and the analysis package is available, it analyses a copy in
memory and says so.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import json
import os
import warnings
from pathlib import Path

import numpy as np

from .. import __version__
from ..analysis.verdicts import flag_meaning
from ..errors import EddyhopError
from ..results.io import atomic_write_text
from .text import band_footnote, misses_centre, regime_item, transition_words

CAUTION = ("Research estimate from an idealised model flow. These numbers are not a validated "
           "engineering correlation and are not for the design of real equipment: for heat or "
           "mass transfer in real plant, use validated methods and the applicable local codes "
           "and standards.")

STYLE = """
.provenance td{white-space:pre-line;overflow-wrap:anywhere}
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0 auto;max-width:1100px;
padding:1.2em 1.6em;color:#1b1b1b;line-height:1.45}
h1{font-size:1.45em;margin-bottom:.2em}h2{font-size:1.15em;border-bottom:1px solid #ccc;
padding-bottom:.2em;margin-top:1.8em}
.meta{color:#555;font-size:.9em}
.caution{border-left:5px solid #D55E00;background:#fff4ec;padding:.6em 1em;margin:1em 0}
.warnings{border-left:5px solid #E69F00;background:#fffaea;padding:.6em 1em}
.ok{border-left:5px solid #009E73;background:#effaf6;padding:.6em 1em}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}
th,td{border:1px solid #d0d0d0;padding:.25em .6em;text-align:left;vertical-align:top}
th{background:#f2f4f7}td.num{text-align:right;font-variant-numeric:tabular-nums}
figure{margin:1.2em 0;border:1px solid #e3e3e3;padding:.6em;background:#fff}
figure img{max-width:100%;height:auto;display:block;margin:0 auto}
figcaption{color:#444;font-size:.9em;margin-top:.4em}
pre{background:#f6f8fa;padding:.7em;overflow-x:auto;font-size:.85em}
nav a{margin-right:1em;display:inline-block}
.table-scroll{overflow-x:auto;max-width:100%;-webkit-overflow-scrolling:touch}
.table-scroll table{margin:.3em 0}
.summary{border-left:5px solid #0072B2;background:#f3f8fc;padding:.4em 1em;overflow-wrap:anywhere}
.summary ul{margin:.2em 0;padding-left:1.3em}.summary-head{margin:.6em 0 .2em}
strong.alert{color:#fff;background:#B04A00;padding:0 .25em;border-radius:2px}
figure img{cursor:zoom-in}
figure.zoom{position:fixed;inset:0;margin:0;z-index:10;overflow:auto;background:#fff;
border:0;cursor:zoom-out}
figure.zoom img{max-width:none;width:auto;cursor:zoom-out}
@media (max-width:600px){body{padding:.6em .7em}table{font-size:.82em}}
"""


# ---- small helpers ---------------------------------------------------------------------------
def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _number(value, digits: int = 4) -> str:
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return str(int(value))  # counts and seeds are shown whole, never rounded
    try:
        number = float(value)
    except (TypeError, ValueError):
        return _e(value)
    if not np.isfinite(number):
        return "n/a"
    return f"{number:.{digits}g}"


def _table(header, rows, numeric_from: int = 1) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = []
    for row in rows:
        cells = []
        for i, cell in enumerate(row):
            css = ' class="num"' if i >= numeric_from else ""
            cells.append(f"<td{css}>{cell}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f"<div class='table-scroll'><table><thead><tr>{head}</tr></thead>"
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _png(figure, dpi: int = 110) -> str:
    from .plots._style import make_text_safe

    make_text_safe(figure)  # user labels with stray $…$ are shown as typed
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": f"eddyhop {__version__}"})
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def _study(ds) -> dict:
    """The resolved study of a run, or for a merged sweep its base study document (the
    ``[[start]]`` tables normalised to a ``starts`` list)."""
    for key in ("study_resolved", "sweep_base_study"):
        text = ds.attrs.get(key)
        if not text:
            continue
        try:
            study = json.loads(text)
        except (TypeError, ValueError, RecursionError):
            continue
        if not isinstance(study, dict):  # a shared file is untrusted: expect nothing of it
            continue
        for name in ("flow", "run", "aging", "hopping"):
            if not isinstance(study.get(name, {}), dict):
                study[name] = {}
        if "starts" not in study and "start" in study:
            starts = study.pop("start")
            study["starts"] = starts if isinstance(starts, list) else [starts]
        study["starts"] = [r for r in study.get("starts", []) if isinstance(r, dict)] \
            if isinstance(study.get("starts", []), list) else []
        return study
    return {}


def _starts(ds) -> list:
    if "start" in ds.dims:
        return [str(v) for v in ds["start"].values]
    return [None]


def _part(ds, start):
    return ds if start is None else ds.sel(start=start)


def _start_name(ds, start) -> str:
    if start is not None:
        return start
    return str(ds["start"].values) if "start" in ds.coords else "ensemble"


# ---- warnings --------------------------------------------------------------------------------
def run_warnings(ds) -> list[str]:
    """Plain-language warnings: step size (recorded at run time), run length, sweep notes.

    Run length: from the analysis's ``deff_converged`` flag when present (Var Δx + Var Δy must
    grow linearly over the D_eff window; flag words from its own flag_meanings), otherwise
    from the late log-log slope ``deff_alpha`` (:func:`eddyhop.presentation.text.late_slopes`, the
    one definition every command uses; a stricter test: an offset left by the early
    transient also fails it).
    """
    messages = []
    for key, prefix in (("step_size_warnings", "Large time step: "), ("sweep_warnings", "")):
        text = str(ds.attrs.get(key, "none") or "none")
        if text != "none":
            notes = [m.strip() for m in text.split(" | ") if m.strip()]
            if "deff_converged" in ds.variables:  # said once below, from the flags
                notes = [m for m in notes if "ShortRunWarning" not in m]
            messages += [f"{prefix}{plain_words(m)}" for m in notes]
    if "deff_converged" in ds.variables:
        flags = ds["deff_converged"]
        ratios = ds["deff_slope_ratio"] if "deff_slope_ratio" in ds.variables else None
        values = np.asarray(flags.values)
        meanings = np.vectorize(lambda v: flag_meaning(flags, v), otypes=[object])(values) \
            if values.size else values

        def places(meaning):
            if values.ndim == 0:
                return [()] if meanings == meaning else []
            return [tuple(i) for i in np.argwhere(meanings == meaning)]

        def where(index):
            return ", ".join(f"{dim} = {_short(ds[dim].values[i]) if dim in ds.coords else i}"
                             for dim, i in zip(flags.dims, index)) or "this run"

        def at(indices):  # one warning names every point it concerns
            return "; ".join(where(index) for index in indices)

        short = places("too_short")
        if short:
            finite = ratios is not None and all(
                np.isfinite(float(ratios.values[index])) for index in short)
            ratio = "" if not finite else (
                " (growth rate of the spread var_x + var_y in the late half of the window "
                "over the early half: " + ", ".join(
                    f"{float(ratios.values[index]):.2f}" for index in short) + "; 1 when "
                "diffusive)")
            messages.append(f"Run too short at {at(short)}: the spread has not reached "
                            f"linear growth over the D_eff fit window{ratio}, so D_eff is not "
                            "yet a long-time limit; increase the run's end time (run.t_end).")
        noisy = places("undetermined")
        if noisy:
            messages.append(f"Diffusive regime undetermined at {at(noisy)}: the growth rate "
                            "of the spread is too noisy (3 standard errors exceed the "
                            "tolerance) to show linear growth over the D_eff fit window; use "
                            "more tracers or a longer run before treating D_eff as a "
                            "long-time limit.")
        bounded = places("bounded")
        if bounded:
            messages.append(f"Bounded spread at {at(bounded)}: the variance about the mean "
                            "displacement does not grow at late times, so no effective "
                            "diffusivity is claimed (D values are NaN). With molecular "
                            "diffusion (kappa > 0) this is a plateau longer than the run; "
                            "increase the run's end time (run.t_end).")
    elif "msd" in ds and "time" in ds.coords and set(ds["msd"].dims) <= {"time", "start"}:
        from .text import late_slopes

        for start, (slope, _se) in late_slopes(ds).items():
            if np.isfinite(slope) and abs(slope - 1.0) > 0.1:
                name = start if start is not None else _start_name(ds, None)
                messages.append(
                    f"Run may be too short for start '{name}': the late log-log slope "
                    f"deff_alpha of the spread (var_x + var_y) is {slope:.2f}, not 1, over the "
                    f"D_eff fit window, so the long-time effective-diffusion regime is not "
                    f"reached; increase run.t_end.")
    return messages


WARNING_WORDS = {"ShortRunWarning": "run too short", "StepBiasWarning": "step-size bias",
                 "StepSizeWarning": "large time step", "ResolutionWarning": "resolution"}


def plain_words(text: str) -> str:
    """``text`` with warning class names ("(ShortRunWarning)") said in words."""
    import re

    def words(match):
        name = match.group(1)
        return WARNING_WORDS.get(name) or re.sub(r"(?<!^)(?=[A-Z])", " ", name[:-7]).lower()

    text = re.sub(r"\b([A-Z][A-Za-z]*Warning)\b", words, text)
    # a numeric flag code beside its word: keep the word only
    return re.sub(r"\b\w+ = -?\d+ \((\w+)\)", lambda m: m.group(1).replace("_", " "),
                  text)


def _short(value) -> str:
    try:
        return f"{float(value):.4g}"
    except (TypeError, ValueError):
        return str(value)


# ---- sections --------------------------------------------------------------------------------
RUN_WORDS = {"particles": "tracers in the ensemble", "t_end": "end time of the run",
             "n_times": "number of output times", "spacing": "spacing of the output times",
             "seed": "random seed", "batches": "batches for the error estimates",
             "tracked": "tracers whose paths are kept"}
def _parameters_section(ds) -> str:
    study = _study(ds)
    attrs = ds.attrs
    rows = [
        ("title", _e(attrs.get("title", ""))),
        ("flow family", _e(attrs.get("flow_family", "?"))),
    ]
    from .plots.sweep import flow_parameters

    flow = study.get("flow", {}).get("params") or flow_parameters(ds)[1]
    flow = flow if isinstance(flow, dict) else {}
    for name, value in flow.items():
        rows.append((f"flow parameter {name}", _e(value) if isinstance(value, list)
                     else _number(value)))
    for name, value in attrs.items():  # data-driven flows: the family's field report
        if name.startswith("field_"):
            rows.append((f"{attrs.get('flow_family', 'flow')} {name.replace('_', ' ', 1)}",
                         _e(value) if isinstance(value, str) else _number(value)))
    if attrs.get("kappa") is not None:
        rows.append(("molecular diffusivity κ", _number(attrs.get("kappa"))))
    peclet = attrs.get("peclet")
    rows += [
        ("Péclet number", f"{_number(peclet) if peclet is not None else 'swept'} "
                          f"({_e(attrs.get('peclet_definition', ''))}, "
                          f"{_e(attrs.get('peclet_convention', ''))} convention)"),
        ("noise model", _e(attrs.get("noise_model", ""))),
        ("SDE convention", _e(attrs.get("ito_convention", ""))),
        ("integrator", _e(attrs.get("integrator", ""))),
        ("time step dt", _number(attrs.get("dt"))),
    ]
    run = study.get("run", {})
    for key, words in RUN_WORDS.items():
        if key in run:
            rows.append((words, _number(run[key]) if not isinstance(run[key], str)
                         else _e(run[key])))
    for region in study.get("starts", []):
        extra = ", ".join(f"{_e(k)} = {_number(v)}" for k, v in region.items()
                          if k not in ("kind", "label"))
        # the row name is escaped where the table is built (below), the value here
        rows.append((f"start '{region.get('label', region.get('kind', 'uniform'))}'",
                     _e(region.get("kind", "")) + (f": {extra}" if extra else "")))
    aging = study.get("aging", {})
    if isinstance(aging.get("times"), list) and aging["times"]:
        rows.append(("aging times t_a", ", ".join(_number(t) for t in aging["times"])))
    if study.get("hopping", {}).get("enabled"):
        rows.append(("cell hopping", f"counted, margin {_number(study['hopping'].get('margin'))} "
                                     "of the eddy side"))
    from .plots.sweep import sweep_dimension

    dim = sweep_dimension(ds)
    if dim is not None:
        values = ", ".join(_number(v) for v in np.atleast_1d(ds[dim].values))
        rows.append((f"swept: {dim}", values))
    body = "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return (f"<h2 id='parameters'>Study parameters</h2><div class='table-scroll'><table>"
            f"<tbody>{body}</tbody></table></div>")


def _results_section(ds) -> str:
    """Per start region: particles, final MSD, late slope; then regimes, crossovers, D_eff."""
    parts = ["<h2 id='results'>Results</h2>"]
    if "msd" in ds and "time" in ds.coords and set(ds["msd"].dims) <= {"time", "start"}:
        from .text import LATE_SLOPE_NAME, LATE_SLOPE_TEXT, late_slopes

        t_end = float(ds["time"].values[-1])
        slopes = late_slopes(ds)
        rows = []
        for start in _starts(ds):
            part = _part(ds, start)
            msd = part["msd"].values
            se = part["msd_se"].values[-1] if "msd_se" in part else np.nan
            slope, slope_se = slopes.get(start, slopes.get(None, (np.nan, np.nan)))
            rows.append((_e(_start_name(ds, start)),
                         _number(part["n_particles"].values) if "n_particles" in part else "",
                         f"{_number(msd[-1])} ± {_number(se, 2)}",
                         (f"{slope:.3f}" + (f" ± {_number(slope_se, 2)}"
                                            if np.isfinite(slope_se) else ""))
                         if np.isfinite(slope) else "n/a"))  # as printed by every command
        parts.append(_table(("start region", "particles", f"MSD at t = {t_end:g} (± 1 SE)",
                             f"{LATE_SLOPE_NAME} (± SE)"), rows)
                     + f"<p class='meta'>{_e(LATE_SLOPE_TEXT)}. It tends to 1 in the diffusive "
                       "regime, but only as fast as the offset left by the early transient "
                       "becomes negligible; the D_eff table's last column tests linear growth "
                       "directly.</p>")
    parts.append(regimes_html(ds))
    parts.append(crossovers_html(ds))
    parts.append(deff_html(ds))
    parts.append(scaling_html(ds))
    return "".join(p for p in parts if p)


# ---- analysis tables -------------------------------------------------------------------------
ANALYSED_MARKERS = ("alpha", "regime_label", "D_xx")


def is_analysed(ds) -> bool:
    """True when the Dataset already holds the analysis outputs the report shows."""
    return any(name in ds.variables for name in ANALYSED_MARKERS)


def _units(ds, name) -> str:
    units = ds[name].attrs.get("units", "") if name in ds.variables else ""
    return "" if units in ("", "1") else f" [{units}]"


def _with_error(value, se) -> str:
    text = _number(value)
    if se is not None and np.isfinite(float(se)):
        text += f" ± {_number(se, 2)}"
    return text


def regimes_html(ds) -> str:
    """Table of the analysed regimes of each start region (empty for a sweep)."""
    if "regime_label" not in ds.variables or _is_sweep(ds):
        return ""
    rows = []
    footnote = False
    supported = "regime_support" in ds.variables
    for start in _starts(ds):
        part = _part(ds, start)
        labels = np.atleast_1d(part["regime_label"].values)
        for i, label in enumerate(labels):
            if not str(label):
                continue
            se = part["regime_alpha_se"].values[i] if "regime_alpha_se" in part else None
            low = regime_item(part, "regime_alpha_lower", i)
            high = regime_item(part, "regime_alpha_upper", i)
            marked = misses_centre(str(label), low, high)
            footnote = footnote or marked
            alpha = _with_error(part["regime_alpha"].values[i], se)
            if marked:  # the interval the mark is about, as the printed summary shows it
                alpha += f" (label interval [{_number(low)}, {_number(high)}])"
            row = (_e(_start_name(ds, start)), _e(label) + (" *" if marked else ""),
                   _number(part["regime_start"].values[i]),
                   _number(part["regime_end"].values[i]), alpha)
            if supported:
                share = regime_item(part, "regime_support", i)
                row += (f"{share:.0%}" if np.isfinite(share) else "n/a",)
            rows.append(row)
    if not rows:
        return "<h3>Regimes</h3><p>No regime was identified.</p>"
    units = _units(ds, "regime_start")
    note = str(ds["regime_label"].attrs.get("tolerances", ""))
    header = ("start region", "regime", f"from t{units}", f"to t{units}", "mean α (± SE)")
    if supported:
        header += ("found again in batch resamples",)
    return ("<h3>Regimes</h3>" + _table(header, rows, 2)
            + (f"<p class='meta'>Classes by the local exponent α: {_e(note)}.</p>"
               if note else "")
            + (f"<p class='meta'>{_e(band_footnote(''))}.</p>" if footnote else ""))


def crossovers_html(ds) -> str:
    """Table of crossover times, in model time and in the flow's natural time units."""
    if "crossover_time" not in ds.variables or _is_sweep(ds):
        return ""
    natural = [(n, text) for n, text in (
        ("crossover_time_advective", "t·U·k"),
        ("crossover_time_diffusive", "t·κk²"),
        ("crossover_time_boundary_layer", "t·κk²Pe^½")) if n in ds.variables]
    rows = []
    for start in _starts(ds):
        part = _part(ds, start)
        values = np.atleast_1d(part["crossover_time"].values)
        for i, value in enumerate(values):
            if not np.isfinite(float(value)):
                continue
            se = part["crossover_time_se"].values[i] if "crossover_time_se" in part else None
            row = [_e(_start_name(ds, start)),
                   _e(f"{part['crossover_from'].values[i]} → {part['crossover_to'].values[i]}")
                   if "crossover_from" in part else str(i),
                   _with_error(value, se)]
            row += [_number(part[n].values[i]) for n, _ in natural]
            rows.append(row)
    if not rows:
        return "<h3>Crossover times</h3><p>No crossover (a single regime).</p>"
    header = ["start region", "crossover", f"t_c{_units(ds, 'crossover_time')} (± SE)"]
    header += [text for _, text in natural]
    return "<h3>Crossover times</h3>" + _table(header, rows, 2)


def _scalar(part, name):
    if name not in part.variables:
        return None
    return float(np.asarray(part[name].values).ravel()[0])


def deff_html(ds) -> str:
    """D_xx, D_yy, D_xy, D_eff with confidence intervals, per start (or per swept value)."""
    if "D_xx" not in ds.variables:
        return ""
    from .plots.sweep import sweep_dimension

    dim = sweep_dimension(ds)
    confidence = ""
    lower_attrs = ds["D_xx_lower"].attrs if "D_xx_lower" in ds.variables else {}
    long_name = str(lower_attrs.get("long_name", ""))
    if "%" in long_name:
        confidence = long_name.split("the ", 1)[-1].split(" confidence")[0] + " "
    rows = []
    keys = []
    if dim is None:
        keys = [(start, _part(ds, start), _e(_start_name(ds, start))) for start in _starts(ds)]
    else:
        for value in np.atleast_1d(ds[dim].values):
            selected = ds.sel({dim: value})
            for start in _starts(selected):
                name = f"{dim} = {_number(value)}"
                if start is not None:
                    name += f", start {start}"
                keys.append((start, _part(selected, start), _e(name)))
    for _start, part, name in keys:
        kappa = _scalar(part, "kappa")
        if kappa is None:
            try:
                kappa = float(ds.attrs.get("kappa"))
            except (TypeError, ValueError):
                kappa = float("nan")
        row = [name]
        for component in ("D_xx", "D_yy", "D_xy", "D_eff"):
            value = _scalar(part, component)
            low = _scalar(part, f"{component}_lower")
            high = _scalar(part, f"{component}_upper")
            if value is None:
                row.append("")
                continue
            text = _number(value)
            if low is not None and high is not None and np.isfinite(low) and np.isfinite(high):
                text += f" [{_number(low)}, {_number(high)}]"
            row.append(text)
        d_eff = _scalar(part, "D_eff")
        row.append(_number(d_eff / kappa) if d_eff is not None and kappa and kappa > 0 else "")
        meaning = flag_meaning(part["deff_converged"]) if "deff_converged" in part.variables \
            else None
        row.append("" if meaning is None else {
            "diffusive": "yes (diffusive)",
            "undetermined": "<b>undetermined — too noisy to tell</b>",
            "too_short": "<b>no — too_short: run too short, no diffusivity claimed</b>",
            "bounded": "<b>no — bounded spread, no diffusivity claimed</b>"}.get(
                meaning, f"<b>{_e(meaning or 'unknown')}</b>"))
        rows.append(row)
    units = _units(ds, "D_xx")
    header = ["", f"D_xx{units}", f"D_yy{units}", f"D_xy{units}", f"D_eff{units}", "D_eff/κ",
              "diffusive regime reached"]
    return (f"<h3>Effective diffusivity (estimate [{_e(confidence)}confidence interval])</h3>"
            + _table(header, rows)
            + "<p class='meta'>Long-time slopes of the displacement covariance over the late "
              "window; D_eff = (D_xx + D_yy)/2.</p>")


def scaling_html(ds) -> str:
    """Power-law fits against Pe of a merged sweep (``*_exponent`` with bounds), one row per
    fit and slice (e.g. per start region), with each fit's verdict and how many of its points
    are undetermined (the same words as :func:`eddyhop.presentation.text.scaling_lines`)."""
    rows = []
    for name in ("D_xx", "D_yy", "D_eff", "crossover_time"):
        key = f"{name}_exponent"
        if key not in ds.variables:
            continue
        exponent = ds[key]

        def at(suffix, index, default=np.nan, name=name):
            variable = f"{name}_{suffix}"
            return np.asarray(ds[variable].values)[index] if variable in ds.variables \
                else default

        for index in np.ndindex(exponent.shape):
            value = float(np.asarray(exponent.values)[index])
            points = int(at("fit_points", index, 0))
            if not np.isfinite(value) and points == 0:
                continue
            where = ", ".join(
                transition_words(exponent[d].values[i]) if d == "transition" else
                f"{d} = {_short(exponent[d].values[i])}" if d in exponent.coords else
                f"{d}[{i}]" for d, i in zip(exponent.dims, index))
            verdict = flag_meaning(ds[f"{name}_fit_verdict"], at("fit_verdict", index)) \
                if f"{name}_fit_verdict" in ds.variables else ""
            judged = "<b>rejected</b> (interval widened by sqrt(χ²/dof))" \
                if verdict == "rejected" else _e(verdict)
            chi2 = at("fit_reduced_chi2", index)
            if np.isfinite(chi2):
                judged += (f" (χ²/dof = {_number(chi2, 3)}, p = "
                           f"{_number(at('fit_p_value', index), 2)})")
            undetermined = int(at("undetermined_points", index, 0))
            counted = str(points)
            if undetermined:
                counted += (f"; <b>{undetermined} undetermined</b> (no confirmed diffusive "
                            "regime" + (": not a confirmed long-time scaling"
                                        if verdict == "undetermined" else "") + ")")
            excluded = int(at("excluded_points", index, 0))
            if excluded:
                counted += f"; {excluded} left out (too short or bounded)"
            low, high = at("exponent_lower", index), at("exponent_upper", index)
            rows.append((_e(exponent.attrs.get("long_name", key)) + (f" ({_e(where)})"
                                                                     if where else ""),
                         f"{_number(value, 3)} [{_number(low, 3)}, {_number(high, 3)}]",
                         counted, judged, _e(exponent.attrs.get("reference", ""))))
    status = ds.attrs.get("sweep_deff_status")
    if not rows:
        if not any(f"{name}_exponent" in ds.variables
                   for name in ("D_xx", "D_yy", "D_eff", "crossover_time")):
            return ""
        return ("<h3>Scaling with the Péclet number</h3><p><b>No scaling fit</b>: too few "
                "swept points with a confirmed diffusive regime"
                + (f" ({_e(status)})" if status else "") + ".</p>")
    return ("<h3>Scaling with the Péclet number</h3>"
            + (f"<p>D_eff convergence across the sweep: {_e(status)}.</p>" if status else "")
            + _table(("fit", "exponent [confidence interval]", "points", "verdict",
                      "reference"), rows, 1))


def _figures_section(ds, names=None) -> tuple[str, list[str]]:
    from .plots.catalogue import FIGURES, figures_for

    blocks = []
    included = []
    for name, figure in figures_for(ds, names):
        data = _png(figure)
        description = FIGURES[name][2]
        blocks.append(
            f"<figure id='fig-{_e(name)}' data-figure='{_e(name)}' "
            "onclick=\"this.classList.toggle('zoom')\" title='click to enlarge'>"
            f"<img alt='{_e(description)}' src='data:image/png;base64,{data}'>"
            f"<figcaption><b>{_e(name)}</b>: {_e(description)}</figcaption></figure>")
        included.append(name)
        figure.clear()
    if not blocks:
        return "<h2 id='figures'>Figures</h2><p>No figure applies to this Dataset.</p>", []
    return "<h2 id='figures'>Figures</h2>" + "".join(blocks), included


def _provenance_section(ds, source_name) -> str:
    attrs = ds.attrs
    rows = [(k, _e(attrs[k])) for k in ("eddyhop_version", "eddyhop_kind", "history",
                                         "command_line", "input_files", "seed", "integrator",
                                         "study_file", "creator_name", "license", "Conventions")
            if k in attrs]
    if source_name:
        rows.insert(0, ("input file", _e(source_name)))
    body = "".join(f"<tr><th>{_e(k)}</th><td>{v}</td></tr>" for k, v in rows)
    toml = attrs.get("study_toml", "")
    every = "".join(f"<tr><th>{_e(k)}</th><td>{_e(str(v)[:2000])}</td></tr>"
                    for k, v in attrs.items() if k not in ("study_toml", "study_resolved"))
    resolved = attrs.get("study_resolved", "")
    if resolved:
        try:
            resolved = json.dumps(json.loads(resolved), indent=2, sort_keys=True)
        except ValueError:
            pass
    return ("<h2 id='provenance'>Provenance</h2><div class='table-scroll'>"
            f"<table class='provenance'><tbody>{body}</tbody></table></div>"
            + (f"<details><summary>Study file as run</summary><pre>{_e(toml)}</pre></details>"
               if toml and toml != "none" else "")
            + (f"<details><summary>Resolved study (every default filled in)</summary>"
               f"<pre>{_e(resolved)}</pre></details>" if resolved else "")
            + f"<details><summary>All global attributes</summary><div class='table-scroll'>"
              f"<table><tbody>{every}</tbody></table></div></details>")


# ---- assembly --------------------------------------------------------------------------------
def maybe_analyse(ds):
    """(Dataset, note): analyse a copy in memory when ``ds`` has no analysis outputs yet."""
    if is_analysed(ds):
        return ds, ""
    try:
        from ..analysis import analyse
    except ImportError:
        return ds, ("This file has not been analysed and the analysis package is not "
                    "available; regimes, crossovers and D_eff are omitted.")
    try:
        with warnings.catch_warnings():
            # what the analysis warns about (a too-short run) is reported from its flags
            warnings.simplefilter("ignore")
            analysed = analyse(ds)
        return analysed, ("This file had not been analysed; the report analysed it in "
                          "memory with default settings (`eddyhop analyse` writes the "
                          "analysed file).")
    except EddyhopError as exc:
        return ds, f"The analysis could not run on this file: {exc}"


def build_report(ds, *, source_name: str | None = None, figures=None,
                 analyse: bool = True, reference: bool = True) -> str:
    """The HTML text of the report of ``ds`` (a result or a merged sweep Dataset).

    ``reference``: solve the homogenization cell problem for the summary's reference value
    (a few seconds; see :func:`eddyhop.presentation.analysis_lines`)."""
    from .report_summary import summary_html

    note = ""
    if analyse:
        ds, note = maybe_analyse(ds)
    warnings_list = run_warnings(ds)
    if warnings_list:
        warn_html = ("<div class='warnings'><b>Warnings</b><ul>"
                     + "".join(f"<li>{_e(m)}</li>" for m in warnings_list) + "</ul></div>")
    else:
        warn_html = ("<div class='ok'><b>Warnings</b>: none — the time step is small against "
                     "the flow's time scales and the spread grows linearly at the end of the "
                     "run.</div>")
    figures_html, included = _figures_section(ds, figures)
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    title = ds.attrs.get("title", "eddyhop result")
    kind = "sweep" if _is_sweep(ds) else "result"
    body = [
        f"<h1>{_e(title)}</h1>",
        f"<p class='meta'>eddyhop {__version__} {kind} report · generated {now}"
        + (f" · from {_e(source_name)}" if source_name else "") + "</p>",
        "<nav><a href='#summary'>Summary</a><a href='#parameters'>Parameters</a>"
        "<a href='#results'>Results</a>"
        "<a href='#figures'>Figures</a><a href='#provenance'>Provenance</a></nav>",
        f"<div class='caution' id='caution'><b>Caution.</b> {_e(CAUTION)}</div>",
        f"<p class='meta'>{_e(note)}</p>" if note else "",
        summary_html(ds, reference=reference),
        f"<h2 id='warnings'>Warnings</h2>{warn_html}",
        _parameters_section(ds),
        _results_section(ds),
        figures_html,
        _provenance_section(ds, source_name),
    ]
    figure_list = ",".join(included)
    return ("<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
            "<meta name='viewport' content='width=device-width, initial-scale=1'>"
            f"<meta name='generator' content='eddyhop {__version__}'>"
            f"<meta name='eddyhop-figures' content='{_e(figure_list)}'>"
            f"<title>{_e(title)} — eddyhop report</title><style>{STYLE}</style></head>"
            f"<body>{''.join(body)}</body></html>\n")


def _is_sweep(ds) -> bool:
    from .plots.sweep import sweep_dimension

    return sweep_dimension(ds) is not None


def write_report(source, out, *, figures=None, analyse: bool = True,
                 reference: bool = True) -> Path:
    """Write the report of ``source`` (a Dataset or a netCDF path) to ``out`` atomically."""
    from ..results.io import check_output_path, open_result, require_kind

    out = check_output_path(out)
    source_name = None
    if isinstance(source, (str, os.PathLike)):
        source_name = Path(source).name
        ds = require_kind(open_result(source), source, ("monte_carlo", "reference", "sweep",
                                                           "measured"),
                          "report")
    else:
        ds = source
    text = build_report(ds, source_name=source_name, figures=figures, analyse=analyse,
                        reference=reference)
    from ..results.provenance import html_meta  # software, command, input checksum in <head>

    text = text.replace("<head>", "<head>" + html_meta(
        source if isinstance(source, (str, os.PathLike)) else None), 1)
    return atomic_write_text(out, text)


def write_tables(source, csv_path, latex_path, *, analyse: bool = True):
    """Write the summary table of ``source`` (a path or Dataset) as CSV and LaTeX
    (atomically); analyses a copy in memory when needed.  Returns the written paths."""
    import os

    from ..results.io import open_result
    from .report_summary import rows_csv, rows_latex, summary_rows

    ds = open_result(source) if isinstance(source, (str, os.PathLike)) else source
    if analyse:
        ds, _ = maybe_analyse(ds)
    rows = summary_rows(ds)
    title = str(ds.attrs.get("title", "eddyhop result"))
    return [atomic_write_text(csv_path, rows_csv(rows)),
            atomic_write_text(latex_path, rows_latex(rows, caption=f"{title}: effective "
                                                                   "diffusivity"))]
