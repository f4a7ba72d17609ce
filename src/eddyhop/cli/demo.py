"""``eddyhop demo``: run the built-in demo study (no files needed)."""

from __future__ import annotations

from importlib import resources

import click

from .common import friendly_errors, progress_option, replace_option, workers_option


def demo_text() -> str:
    return resources.files("eddyhop.demo").joinpath("demo.toml").read_text(encoding="utf-8")


@click.command("demo")
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write. [default: demo.nc, never silently replaced]")
@click.option("--show-study", is_flag=True, help="Print the demo study file and exit.")
@workers_option
@progress_option
@replace_option
@friendly_errors
def command(out, show_study, workers, progress, replace):
    """Run the built-in demo: tracers released at eddy centres and on the
    separatrices of a cellular flow at Pe = 100, compared side by side.

    Takes well under a minute on two cores.  Use --show-study to see the study
    file, save it, and edit it as a starting point for your own.
    """
    from ..api import run_study
    from ..study.spec import parse_study_text
    from .summary import print_summary

    text = demo_text()
    if show_study:
        click.echo(text)
        return
    from ..results.outputs import guard_output

    target = out or "demo.nc"
    guard_output(target, kind="result", replace=replace, default=out is None)
    study = parse_study_text(text, "eddyhop/demo/demo.toml")
    ds = run_study(study, out=target, workers=workers, progress=progress)
    print_summary(ds, target)
