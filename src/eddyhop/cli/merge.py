"""``eddyhop merge``: combine the points of a sweep folder into one netCDF file."""

from __future__ import annotations

import click

from .common import finite_option_check, friendly_errors, refuse, replace_option


@click.command("merge")
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), required=True,
              help="netCDF file to write (atomically).")
@click.option("--no-analysis", is_flag=True,
              help="Do not add derived quantities (D_eff, crossovers, regimes) per point.")
@click.option("--fit-peclet", nargs=2, type=float, default=None, metavar="LOW HIGH",
              callback=finite_option_check(0.0, None, low_open=True),
              help="Péclet range of the scaling fits. [default: every point]")
@replace_option
@friendly_errors
def command(folder, out, no_analysis, fit_peclet, replace):
    """Merge the sweep in FOLDER into one Dataset with the swept parameters as
    dimensions (coordinates with units) and derived quantities per point.

    \b
    Every point file is checked against its manifest checksum first.  For a
    sweep over noise.peclet, a scaling summary is printed (exponent of D/kappa
    against Pe with its confidence interval and the verdict of the fit; how
    many points are undetermined; crossover times against the advective,
    boundary-layer and diffusive time scales) and stored in the file.
    Example:  eddyhop merge pan/ --out pan_sweep.nc
    """
    from ..results.io import write_netcdf
    from ..results.outputs import guard_output
    from ..sweeps import merge_sweep

    if fit_peclet is not None and not fit_peclet[0] < fit_peclet[1]:
        refuse(f"--fit-peclet {fit_peclet[0]:g} {fit_peclet[1]:g} is not allowed: give LOW < "
               "HIGH")
    guard_output(out, kind="sweep", inputs=[folder], replace=replace)
    ds = merge_sweep(folder, analyse=not no_analysis, peclet_range=fit_peclet)
    write_netcdf(ds, out)
    counts = (ds.attrs["sweep_points_done"], ds.attrs["sweep_points_failed"],
              ds.attrs["sweep_points"])
    click.echo(f"wrote {out}: {counts[0]} of {counts[2]} points ({counts[1]} failed); "
               "dimensions " + ", ".join(f"{k}={v}" for k, v in ds.sizes.items()))
    if ds.attrs.get("sweep_warnings", "none") != "none":
        for message in ds.attrs["sweep_warnings"].split(" | "):
            click.secho(f"warning: {message}", fg="yellow", err=True)
    print_scaling(ds)  # undetermined counts for every sweep; scaling fits over Pe


def print_scaling(summary):
    """The scaling fits with their verdicts and undetermined counts
    (:func:`eddyhop.presentation.text.scaling_lines`)."""
    from ..presentation.text import scaling_lines

    for line in scaling_lines(summary):
        click.echo(line)
