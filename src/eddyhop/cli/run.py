"""``eddyhop run``: study file → netCDF result."""

from __future__ import annotations

import click

from .common import friendly_errors, progress_option, workers_option


@click.command("run")
@click.argument("study", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write (atomically). [default: the study's output.path]")
@workers_option
@progress_option
@friendly_errors
def command(study, out, workers, progress):
    """Run the Monte Carlo ensemble of STUDY and write its statistics to netCDF.

    \b
    The file holds msd, msd_x, msd_y, mean_dx, mean_dy (and more) on the
    `time` coordinate, with units and the full study as provenance.
    Example:  eddyhop run studies/lattice_mixer.toml --out lattice.nc
    """
    from ..api import run_study
    from ..spec import load_study
    from .summary import print_summary

    spec = load_study(study)
    target = out or spec.output.path
    ds = run_study(spec, out=target, workers=workers, progress=progress)
    print_summary(ds, target)
