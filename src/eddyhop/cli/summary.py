"""Short human-readable summaries of a result Dataset (shared by run, demo and info).

The late log-log slope is the analysis's ``deff_alpha`` (one definition everywhere:
:func:`eddyhop.presentation.text.late_slopes`), never a quick look of its own."""

from __future__ import annotations

import warnings

import click
import numpy as np


def print_summary(ds, path=None):
    attrs = ds.attrs
    if path is not None:
        click.echo(f"wrote {path}")
    peclet = attrs.get("peclet")
    click.echo(f"  {attrs.get('title', '')}")
    click.echo(f"  flow {attrs.get('flow_family')}, kappa = {attrs.get('kappa'):.4g}, "
               f"Pe = {peclet if isinstance(peclet, str) else f'{peclet:.4g}'} "
               f"({attrs.get('peclet_definition')}), integrator {attrs.get('integrator')}, "
               f"dt = {attrs.get('dt'):g}")
    starts = [str(v) for v in np.atleast_1d(ds["start"].values)] if "start" in ds.coords else [""]
    multi = "start" in ds.dims
    t = ds["time"].values
    from ..presentation.text import LATE_SLOPE_NAME, late_slopes

    slopes = late_slopes(ds)
    verdicts = _step_verdicts(ds)
    for label in starts:
        part = ds.sel(start=label) if multi else ds
        final = float(part["msd"].values[-1])
        if "n_particles" in part and "msd_se" in part:
            size = f"{int(part['n_particles'].values)} particles"
            error = f" ± {float(part['msd_se'].values[-1]):.2g}"
        else:  # deterministic reference solution: no particles, no sampling error
            size, error = "noise-free reference", ""
        line = f"  start '{label}': {size}; MSD(t = {t[-1]:g}) = {final:.4g}{error}"
        slope, slope_se = slopes.get(label, slopes.get(None, (np.nan, np.nan)))
        if np.isfinite(slope):
            line += f"; {LATE_SLOPE_NAME} = {slope:.3f}"
            line += f" ± {slope_se:.2g}" if np.isfinite(slope_se) else ""
        verdict = verdicts.get(label, verdicts.get(""))
        if verdict:
            line += f"; step check {verdict if verdict == 'passed' else verdict.upper()}"
        click.echo(line)


def _step_verdicts(ds) -> dict:
    """start label ("" without starts) → the step check's verdict word, if the run has one
    (the same analysis ``eddyhop analyse`` runs; details there)."""
    from ..analysis.stepcheck import has_step_check, step_check
    from ..analysis.verdicts import flag_meaning

    if not has_step_check(ds):
        return {}
    with warnings.catch_warnings():  # the run has already warned; here only the verdict
        warnings.simplefilter("ignore")
        result = step_check(ds)
    if "start" not in result.dims:
        return {"": flag_meaning(result["step_check"])}
    return {str(label): flag_meaning(result["step_check"].sel(start=label))
            for label in result["start"].values}
