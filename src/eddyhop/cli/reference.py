"""``eddyhop reference``: noise-free MSD curves and the homogenized diffusivity of a study."""

from __future__ import annotations

from pathlib import Path

import click

from .common import (
    allow_long_option,
    finite_option_check,
    friendly_errors,
    progress_option,
    refuse,
    replace_option,
)


def default_output(study_output: str) -> str:
    """``result.nc`` → ``result_reference.nc`` (next to the Monte Carlo file)."""
    path = Path(study_output)
    return str(path.with_name(f"{path.stem}_reference{path.suffix or '.nc'}"))


MAX_MODES = 512  # = reference.cell_problem.DEFAULT_MAX_MODES (not imported: --help stays fast)


def _check_modes(value):
    if value is not None and not 2 <= value <= MAX_MODES:
        refuse(f"--modes = {value} is not allowed: give 2 to {MAX_MODES} Fourier modes per "
               "direction (or omit it to choose from --rtol)")
    return value


@click.command("reference")
@click.argument("study", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write (atomically). [default: the study's output.path "
                   "with _reference before the suffix]")
@click.option("--modes", type=int, default=None, callback=lambda c, p, v: _check_modes(v),
              help="Fourier modes per direction (each way from 0). [default: chosen from the "
                   "Peclet number for --rtol]")
@click.option("--rtol", type=float, callback=finite_option_check(0.0, 1.0, True, True),
              default=1e-6, show_default=True,
              help="Target relative accuracy (sets the automatic resolution and the "
                   "convergence test of the homogenized tensor).")
@click.option("--no-check", "no_check", is_flag=True,
              help="Skip the second, coarser solve that estimates the resolution error.")
@click.option("--diffusivity-only", is_flag=True,
              help="Only solve the cell problem and print the homogenized tensor (no file).")
@progress_option
@replace_option
@allow_long_option
@friendly_errors
def command(study, out, modes, rtol, no_check, diffusivity_only, progress, replace, allow_long):
    """Deterministic reference for STUDY: exact mean and MSD versus time for
    every start region (no particles, no sampling noise), plus the long-time
    homogenized diffusivity tensor.

    \b
    The file has the layout of `eddyhop run` (msd, msd_x, ... on the same
    `time` coordinate), so analysis and plots accept it and the two can be
    overlaid.  Needs a steady flow without walls and kappa > 0.
    Example:  eddyhop reference studies/lattice_mixer.toml --out ref.nc
    """
    from ..reference.api import effective_diffusivity, moment_evolution
    from ..results.io import write_netcdf
    from ..results.outputs import guard_output
    from ..study.spec import load_study

    spec = load_study(study)
    if diffusivity_only:
        _announce_cost(spec, 0, modes, rtol, allow_long)
        result = effective_diffusivity(spec, rtol=rtol, modes=modes)
        click.echo(f"{spec.title}: homogenized diffusivity (cell problem)")
        click.echo(f"  {result.summary()}")
        click.echo(f"  solved in {result.seconds:.2f} s")
        return
    target = out or default_output(spec.output.path)
    from .run import study_inputs

    guard_output(target, kind="result", inputs=study_inputs(spec, study), replace=replace,
                 default=out is None)
    _announce_cost(spec, len(spec.starts), modes, rtol, allow_long)
    ds = moment_evolution(spec, modes=modes, rtol=rtol, check=not no_check,
                          progress=spec.run.progress if progress is None else progress)
    write_netcdf(ds, target)
    _summary(ds, target)


def _announce_cost(spec, starts, modes, rtol, allow_long):
    """Print the solve's work and estimate; refuse it over the memory or time limit."""
    from ..reference.budget import reference_cost
    from ..reference.fields import study_fields
    from ..study.cost import check_resources

    cost = reference_cost(study_fields(spec), starts, modes=modes, rtol=rtol)
    check_resources(cost.memory_bytes, cost.cpu_seconds, what=cost.work_line(),
                    work=f"{cost.modes} Fourier modes per direction",
                    remedy_memory="give fewer --modes or a looser --rtol",
                    remedy_time="give fewer --modes, a looser --rtol or --diffusivity-only",
                    allow_long=allow_long)
    click.echo(cost.work_line())
    click.echo(cost.estimate_line())


def _summary(ds, path):
    import numpy as np

    click.echo(f"wrote {path}")
    click.echo(f"  {ds.attrs.get('title', '')}")
    click.echo(f"  flow {ds.attrs.get('flow_family')}, kappa = {ds.attrs.get('kappa'):.4g}; "
               f"{ds.attrs.get('reference_modes')} Fourier modes per direction; "
               f"{ds.attrs.get('reference_seconds')} s")
    time = ds["time"].values
    labels = [str(v) for v in np.atleast_1d(ds["start"].values)]
    for label in labels:
        part = ds.sel(start=label) if "start" in ds.dims else ds
        error = float(part["msd_resolution_error"].values)
        note = "not estimated" if np.isnan(error) else f"{error:.1e}"
        click.echo(f"  start '{label}': MSD(t = {time[-1]:g}) = {float(part['msd'].values[-1]):.8g}"
                   f"; resolution error estimate {note}")
    if "homogenized_dxx" in ds:
        click.echo(f"  homogenized D_xx = {float(ds['homogenized_dxx']):.8g}, D_yy = "
                   f"{float(ds['homogenized_dyy']):.8g}, D_xy = "
                   f"{float(ds['homogenized_dxy']):.3g} (estimated relative error "
                   f"{float(ds['homogenized_relative_error']):.1e})")
