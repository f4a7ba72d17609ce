"""The summary that opens every HTML report, and the summary/sweep tables for papers.

The summary is the same text `eddyhop analyse` prints (:mod:`eddyhop.presentation`, so the
numbers are formatted once): per start region the regime sequence with α ± its standard error,
crossover times ± SE in model time and in the natural units t·Uk, t·κk², t·κk²Pe^½, the D_eff
tensor with confidence intervals, D/κ and D/(κ Pe^½), the cell-problem reference and the
distance from it in standard errors, the step check, hopping numbers and the aging and tail
fit verdicts.  Words the presentation writes in capitals (UNDETERMINED, REJECTED, BIASED,
RUN TOO SHORT, BOUNDED) are shown as alerts.  A sweep adds its scaling laws
(:func:`eddyhop.presentation.scaling_lines`) and per-point tables of regimes and crossovers.

:func:`summary_rows` gives the quantities as rows for papers; :func:`rows_csv` and
:func:`rows_latex` write them as CSV and as a booktabs LaTeX table, each value rounded to its
uncertainty (two significant digits of the error).
"""

from __future__ import annotations

import html
import math
import re

import numpy as np

LOUD = re.compile(r"\b(UNDETERMINED|REJECTED|BIASED|RUN TOO SHORT|BOUNDED|INCONCLUSIVE|"
                  r"DIFFER)\b")


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def lines_html(lines) -> str:
    """Indented presentation lines → nested HTML lists; a line without indent is a heading."""
    out = []
    depth = 0
    for line in lines:
        indent = (len(line) - len(line.lstrip(" "))) // 2
        text = LOUD.sub(r"<strong class='alert'>\1</strong>", _e(line.strip()))
        if indent == 0:
            out.append("</li></ul>" * depth)
            depth = 0
            out.append(f"<p class='summary-head'><b>{text}</b></p>")
            continue
        if indent > depth:
            out.append("<ul>" * (indent - depth))
        elif indent < depth:
            out.append("</li></ul>" * (depth - indent) + "</li>")
        elif out and out[-1] != "<ul>":
            out.append("</li>")
        depth = indent
        out.append(f"<li>{text}")
    out.append("</li></ul>" * depth)
    return "".join(out)


def _is_sweep(ds) -> bool:
    from .plots.sweep import sweep_dimension

    return sweep_dimension(ds) is not None


def summary_lines(ds, *, reference: bool = True) -> list[str]:
    """The text of the summary (what `eddyhop analyse` prints for a run; the scaling lines
    for a sweep)."""
    from .text import analysis_lines, scaling_lines

    if _is_sweep(ds):
        return ["sweep:", *scaling_lines(ds)]
    lines = analysis_lines(ds, reference=reference)
    if "homogenized_dxx" in ds.variables:  # a reference file carries its long-time answer
        values = [float(ds[f"homogenized_{c}"]) for c in ("dxx", "dyy", "dxy")]
        error = float(ds["homogenized_relative_error"]) \
            if "homogenized_relative_error" in ds.variables else math.nan
        kappa = float(ds.attrs.get("kappa", math.nan))
        text = (f"  homogenized diffusivity (cell problem, long-time limit): D_xx = "
                f"{values[0]:.6g}, D_yy = {values[1]:.6g}, D_xy = {values[2]:.3g}")
        if kappa > 0:
            text += f"; D_eff/κ = {0.5 * (values[0] + values[1]) / kappa:.6g}"
        if math.isfinite(error):
            text += f" (estimated relative error {error:.1e})"
        lines.append(text)
    return lines


def summary_html(ds, *, reference: bool = True) -> str:
    """The summary section (id ``summary``) of the report of ``ds``."""
    lines = summary_lines(ds, reference=reference)
    body = lines_html(lines) if lines else "<p>Nothing was analysed.</p>"
    extra = sweep_tables_html(ds) if _is_sweep(ds) else ""
    return ("<h2 id='summary'>Summary</h2><div class='summary' data-summary='1'>" + body
            + "<p class='meta'>The same text as <code>eddyhop analyse</code> prints. Words in "
              "capitals flag a number that is not a confirmed answer.</p></div>" + extra)


# ---- per-point tables of a sweep ------------------------------------------------------------
def _wrap(table: str) -> str:
    return f"<div class='table-scroll'>{table}</div>"


def _table(header, rows) -> str:
    head = "".join(f"<th>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>" for row in rows)
    return _wrap(f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")


def _points(ds):
    from .plots.sweep import sweep_dimension

    dim = sweep_dimension(ds)
    starts = [str(v) for v in ds["start"].values] if "start" in ds.dims else [None]
    for value in np.atleast_1d(ds[dim].values):
        for start in starts:
            part = ds.sel({dim: value})
            if start is not None:
                part = part.sel(start=start)
            yield dim, value, start, part


def sweep_tables_html(ds) -> str:
    """Regimes and crossovers at every swept point (one row per point and start)."""
    blocks = []
    if "regime_label" in ds.variables:
        rows = []
        for dim, value, start, part in _points(ds):
            labels = [str(v) for v in np.atleast_1d(part["regime_label"].values)]
            alphas = np.atleast_1d(part["regime_alpha"].values).astype(float)
            errors = np.atleast_1d(part["regime_alpha_se"].values).astype(float) \
                if "regime_alpha_se" in part.variables else np.full(alphas.size, np.nan)
            sequence = " → ".join(
                f"{_e(lab)} (α = {a:.2f}" + (f" ± {se:.2g}" if np.isfinite(se) else "") + ")"
                for lab, a, se in zip(labels, alphas, errors) if lab)
            rows.append((f"{_e(dim)} = {float(value):.4g}", _e(start or ""),
                         sequence or "<strong class='alert'>no regime identified</strong>"))
        blocks.append("<h3>Regimes at each swept point</h3>"
                      + _table(("point", "start", "regime sequence (α ± SE)"), rows))
    if "crossover_time" in ds.variables:
        rows = []
        for dim, value, start, part in _points(ds):
            times = np.atleast_1d(part["crossover_time"].values).astype(float)
            errors = np.atleast_1d(part["crossover_time_se"].values).astype(float) \
                if "crossover_time_se" in part.variables else np.full(times.size, np.nan)
            natural = np.atleast_1d(part["crossover_time_boundary_layer"].values) \
                .astype(float) if "crossover_time_boundary_layer" in part.variables \
                else np.full(times.size, np.nan)
            before = np.atleast_1d(part["crossover_from"].values) \
                if "crossover_from" in part.variables else [""] * times.size
            after = np.atleast_1d(part["crossover_to"].values) \
                if "crossover_to" in part.variables else [""] * times.size
            for i in range(times.size):
                if not np.isfinite(times[i]):
                    continue
                rows.append((f"{_e(dim)} = {float(value):.4g}", _e(start or ""),
                             _e(f"{before[i]} → {after[i]}"),
                             _e(round_to_error(times[i], errors[i])),
                             _e(f"{natural[i]:.3g}" if np.isfinite(natural[i]) else "n/a")))
        if rows:
            blocks.append("<h3>Crossover times at each swept point</h3>"
                          + _table(("point", "start", "crossover", "t_c (± SE)",
                                    "t_c·κk²Pe^½"), rows))
    return "".join(blocks)


# ---- tables for papers -----------------------------------------------------------------------
def round_to_error(value, error) -> str:
    """``value ± error`` with the error to two significant digits and the value to the same
    decimal place; the bare value (4 significant digits) when there is no error."""
    if value is None or not math.isfinite(float(value)):
        return "n/a"
    value = float(value)
    if error is None or not math.isfinite(float(error)) or float(error) <= 0:
        return f"{value:.4g}"
    error = float(error)
    place = 1 - math.floor(math.log10(error))
    if place > 0:
        return f"{round(value, place):.{place}f} ± {round(error, place):.{place}f}"
    scale = 10 ** (-place)
    return f"{round(value / scale) * scale:.0f} ± {round(error / scale) * scale:.0f}"


ROW_FIELDS = ("start", "quantity", "value", "error", "status")


def summary_rows(ds) -> list[dict]:
    """Rows ``{start, quantity, value, error, status}`` of the headline numbers per start
    region (per swept point and start for a sweep): D_xx, D_yy, D_xy, D_eff, D/κ,
    D/(κ Pe^½) with their standard errors, the convergence word as status; and for a sweep
    its fitted exponents with the half-width of their interval as error."""
    from ..analysis.verdicts import flag_meaning

    rows = []
    if _is_sweep(ds):
        points = [(f"{dim} = {float(value):.4g}" + (f", {start}" if start else ""), part)
                  for dim, value, start, part in _points(ds)]
    else:
        starts = [str(v) for v in ds["start"].values] if "start" in ds.dims else [None]
        points = [(start or str(ds["start"].values) if "start" in ds.coords else "ensemble",
                   ds.sel(start=start) if start is not None else ds) for start in starts]
    for where, part in points:
        status = flag_meaning(part["deff_converged"]) if "deff_converged" in part.variables \
            else ""
        for name, se in (("D_xx", "D_xx_se"), ("D_yy", "D_yy_se"), ("D_xy", "D_xy_se"),
                         ("D_eff", "D_eff_se"), ("D_eff_over_kappa", "D_eff_over_kappa_se"),
                         ("D_eff_over_kappa_sqrt_peclet",
                          "D_eff_over_kappa_sqrt_peclet_se")):
            if name not in part.variables:
                continue
            value = float(np.asarray(part[name].values).ravel()[0])
            error = float(np.asarray(part[se].values).ravel()[0]) if se in part.variables \
                else math.nan
            if status in ("too_short", "bounded"):
                value, error = math.nan, math.nan  # nothing is claimed
            rows.append({"start": where, "quantity": name, "value": value, "error": error,
                         "status": status})
    if _is_sweep(ds):
        for name in str(ds.attrs.get("scaling_fits", "")).split():
            key = f"{name}_exponent"
            if key not in ds.variables:
                continue
            exponent = ds[key]
            for index in np.ndindex(exponent.shape):
                value = float(np.asarray(exponent.values)[index])
                if not math.isfinite(value):
                    continue
                low = float(np.asarray(ds[f"{key}_lower"].values)[index])
                high = float(np.asarray(ds[f"{key}_upper"].values)[index])
                where = ", ".join(str(exponent[d].values[i]) for d, i in
                                  zip(exponent.dims, index)) or "all"
                verdict = flag_meaning(ds[f"{name}_fit_verdict"],
                                       np.asarray(ds[f"{name}_fit_verdict"].values)[index]) \
                    if f"{name}_fit_verdict" in ds.variables else ""
                rows.append({"start": where,
                             "quantity": f"{name} exponent in Pe (± half the "
                                         f"{float(exponent.attrs.get('confidence', 0.95)):.0%}"
                                         " interval)",
                             "value": value, "error": 0.5 * (high - low),
                             "status": f"fit {verdict}" if verdict else ""})
    return rows


def rows_csv(rows) -> str:
    """CSV of :func:`summary_rows` (value and error to full precision, plus a rounded
    ``shown`` column), after one comment line naming eddyhop."""
    import csv
    import io

    buffer = io.StringIO()
    buffer.write("# eddyhop summary table\n")
    writer = csv.writer(buffer)
    writer.writerow([*ROW_FIELDS, "shown"])
    for row in rows:
        writer.writerow([row["start"], row["quantity"], f"{row['value']:.8g}",
                         f"{row['error']:.8g}", row["status"],
                         round_to_error(row["value"], row["error"])])
    return buffer.getvalue()


_LATEX_NAMES = {"D_xx": r"$D_{xx}$", "D_yy": r"$D_{yy}$", "D_xy": r"$D_{xy}$",
                "D_eff": r"$D_\mathrm{eff}$", "D_eff_over_kappa": r"$D_\mathrm{eff}/\kappa$",
                "D_eff_over_kappa_sqrt_peclet": r"$D_\mathrm{eff}/(\kappa\,\mathrm{Pe}^{1/2})$"}


def _latex_escape(text: str) -> str:
    for char, escaped in (("\\", r"\textbackslash{}"), ("&", r"\&"), ("%", r"\%"),
                          ("_", r"\_"), ("#", r"\#"), ("$", r"\$"), ("{", r"\{"),
                          ("}", r"\}")):
        text = text.replace(char, escaped)
    return text


def rows_latex(rows, caption: str = "eddyhop summary") -> str:
    """A booktabs LaTeX table of :func:`summary_rows`, values rounded to their errors;
    undetermined entries say so in the status column."""
    lines = ["% eddyhop summary table (needs \\usepackage{booktabs})", r"\begin{table}",
             r"\centering", r"\begin{tabular}{llll}", r"\toprule",
             r"start & quantity & value & status \\", r"\midrule"]
    for row in rows:
        name = _LATEX_NAMES.get(row["quantity"], _latex_escape(row["quantity"]))
        shown = round_to_error(row["value"], row["error"]).replace("±", r"\pm")
        shown = f"${shown}$" if shown != "n/a" else "n/a"
        lines.append(f"{_latex_escape(row['start'])} & {name} & {shown} & "
                     f"{_latex_escape(row['status'].replace('_', ' '))} \\\\")
    lines += [r"\bottomrule", r"\end{tabular}", f"\\caption{{{_latex_escape(caption)}}}",
              r"\end{table}", ""]
    return "\n".join(lines)
