"""``eddyhop plot``: figures of a result or sweep file, written as PNG/PDF."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors


@click.command("plot")
@click.argument("result", type=click.Path(dir_okay=False))
@click.option("--out", "-o", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Folder for the figures (created if missing). [default: next to RESULT]")
@click.option("--figure", "-f", "names", multiple=True,
              help="Figure to draw (repeatable): msd, starts, exponent, aging, trajectories, "
                   "residence, deff_peclet, exponent_map. [default: every figure the file "
                   "supports]")
@click.option("--format", "formats", default="png,pdf", show_default=True,
              help="Comma-separated file formats: png, pdf, svg.")
@click.option("--dpi", type=int, default=150, show_default=True, help="Resolution of PNGs.")
@click.option("--list", "list_only", is_flag=True,
              help="List the figures RESULT supports and exit.")
@friendly_errors
def command(result, out_dir, names, formats, dpi, list_only):
    """Draw figures of RESULT (a run, analysed run or merged sweep netCDF file).

    \b
    Files are named <stem>_<figure>.<format>, e.g. lattice_msd.png.  A figure
    whose variables are missing is refused with the command that makes them.
    Example:  eddyhop plot lattice.nc --figure msd --figure aging --format png
    """
    from ..io import open_result
    from ..plots import available_figures, figures_for, save_figure
    from ..plots.catalogue import FIGURES

    ds = open_result(result)
    available = available_figures(ds)
    if list_only:
        for name, (_function, _needs, text) in FIGURES.items():
            mark = "yes" if name in available else "no "
            click.echo(f"  [{mark}] {name:<13} {text}")
        return
    chosen = list(names) or available
    if not chosen:
        click.echo("no figure applies to this file (see --list)")
        return
    fmts = tuple(f.strip().lower() for f in formats.split(",") if f.strip())
    target = Path(out_dir) if out_dir else Path(result).resolve().parent
    target.mkdir(parents=True, exist_ok=True)
    stem = Path(result).stem
    for name, figure in figures_for(ds, chosen):
        for path in save_figure(figure, target / f"{stem}_{name}", formats=fmts, dpi=dpi):
            click.echo(f"wrote {path}")
