"""Short human-readable summaries of a result Dataset (shared by run, demo and info)."""

from __future__ import annotations

import click
import numpy as np


def _slope(ds, name):
    """Log-log slope of the last decade-ish of ``name`` (quick look, not the analysis)."""
    t = ds["time"].values
    y = ds[name].values
    good = (t > 0) & (y > 0)
    if good.sum() < 3:
        return float("nan")
    t, y = t[good], y[good]
    tail = t >= t[-1] / 10
    if tail.sum() < 2:
        tail = np.arange(t.size) >= t.size - 3
    return float(np.polyfit(np.log(t[tail]), np.log(y[tail]), 1)[0])


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
    for label in starts:
        part = ds.sel(start=label) if multi else ds
        final = float(part["msd"].values[-1])
        if "n_particles" in part and "msd_se" in part:
            size = f"{int(part['n_particles'].values)} particles"
            error = f" ± {float(part['msd_se'].values[-1]):.2g}"
        else:  # deterministic reference solution: no particles, no sampling error
            size, error = "noise-free reference", ""
        click.echo(f"  start '{label}': {size}; MSD(t = {t[-1]:g}) = {final:.4g}{error}; "
                   f"late log-log slope {_slope(part, 'msd'):.3f}")
