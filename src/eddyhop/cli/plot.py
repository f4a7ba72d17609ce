"""``eddyhop plot``: figures of a result or sweep file, written as PNG/PDF."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors, replace_option

DPI_RANGE = (10, 2400)
FIGURE_FORMATS = ("png", "pdf", "svg")


def _formats(text: str) -> tuple:
    """``"png,pdf"`` → ("png", "pdf"); refuses an empty list or an unknown format."""
    from ..errors import EddyhopError

    fmts = tuple(dict.fromkeys(f.strip().lower() for f in text.split(",") if f.strip()))
    if not fmts:
        raise EddyhopError(f"--format {text!r} names no format; give one or more of "
                           + ", ".join(FIGURE_FORMATS) + " separated by commas")
    for fmt in fmts:
        if fmt not in FIGURE_FORMATS:
            raise EddyhopError(f"--format {fmt!r} is not supported; choose from "
                               + ", ".join(FIGURE_FORMATS))
    return fmts


@click.command("plot")
@click.argument("result", type=click.Path(dir_okay=False))
@click.option("--out", "-o", "out_dir", type=click.Path(file_okay=False), default=None,
              help="Folder for the figures (created if missing). [default: next to RESULT]")
@click.option("--figure", "-f", "names", multiple=True,
              help="Figure to draw (repeatable): msd, starts, exponent, aging, trajectories, "
                   "residence, displacement_pdf, kurtosis, moment_spectrum, deff_peclet, "
                   "exponent_map, collapse. [default: every figure the file supports]")
@click.option("--format", "formats", default="png,pdf", show_default=True,
              help="Comma-separated file formats: png, pdf, svg.")
@click.option("--dpi", type=int, default=150, show_default=True,
              help=f"Resolution of PNGs, {DPI_RANGE[0]} to {DPI_RANGE[1]}.")
@click.option("--list", "list_only", is_flag=True,
              help="List the figures RESULT supports and exit.")
@click.option("--size", type=click.Choice(["single", "double"]), default=None,
              help="Journal column width: single (3.4 in) or double (7.0 in). [default: the "
                   "figure's own size]")
@click.option("--style", type=click.Choice(["screen", "print"]), default="screen",
              show_default=True, help="print: smaller serif type and thinner lines for papers.")
@click.option("--units", "axis_units", type=click.Choice(["model", "natural"]),
              default="model", show_default=True,
              help="natural: time as t·Uk and lengths in units of 1/k (MSD·k²).")
@click.option("--data", "with_data", is_flag=True,
              help="Also write the numbers behind each figure as <stem>_<figure>_data.nc.")
@replace_option
@friendly_errors
def command(result, out_dir, names, formats, dpi, list_only, size, style, axis_units,
            with_data, replace):
    """Draw figures of RESULT (a run, analysed run or merged sweep netCDF file).

    \b
    Files are named <stem>_<figure>.<format>, e.g. lattice_msd.png.  A figure
    whose variables are missing is refused with the command that makes them.
    Example:  eddyhop plot lattice.nc --figure msd --figure aging --format png
    """
    from ..errors import EddyhopError
    from ..presentation.plots import available_figures, figures_for, save_figure
    from ..presentation.plots.catalogue import FIGURES
    from ..results.io import open_result, require_kind
    from ..results.outputs import check_name, check_not_in_sweep, guard_output

    fmts = _formats(formats)
    if not DPI_RANGE[0] <= dpi <= DPI_RANGE[1]:
        raise EddyhopError(f"--dpi {dpi} is outside the allowed range "
                           f"[{DPI_RANGE[0]}, {DPI_RANGE[1]}]")
    if out_dir:
        check_name(out_dir, option="--out", want_dir=True)
    ds = require_kind(open_result(result), result,
                      ("monte_carlo", "reference", "sweep", "measured"), "plot", foreign_ok=True)
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
    from ..presentation.plots.catalogue import FIGURES as KNOWN

    unknown = [name for name in chosen if name not in KNOWN]
    if unknown:
        raise EddyhopError(f"unknown figure {unknown[0]!r}; choose from: " + ", ".join(KNOWN))
    target = Path(out_dir) if out_dir else Path(result).resolve().parent
    stem = Path(result).stem
    for name in chosen:  # check every file name before drawing anything
        for fmt in fmts:
            file = target / f"{stem}_{name}.{fmt}"
            if target.is_dir():
                guard_output(file, kind="figure", inputs=[result], replace=replace,
                             default=out_dir is None)
            else:  # a new folder: nothing to replace, but not inside a sweep's own files
                check_not_in_sweep(file)
        if with_data:
            file = target / f"{stem}_{name}_data.nc"
            if target.is_dir():
                guard_output(file, kind="figure_data", inputs=[result], replace=replace,
                             default=out_dir is None)
            else:
                check_not_in_sweep(file)
    from ..presentation.plots.paper import figure_data, figure_style, natural_units, resize
    from ..results.io import write_netcdf

    if axis_units == "natural":
        ds = natural_units(ds)
    from ..errors import InputDataError

    with figure_style(style):
        try:  # every figure is drawn before any is written: no half-written set
            drawn = list(figures_for(ds, chosen))
        except InputDataError as exc:
            raise InputDataError(f"{Path(result).name}: {exc}") from None
        target.mkdir(exist_ok=True)
        for name, figure in drawn:
            if size:
                resize(figure, size)
            for path in save_figure(figure, target / f"{stem}_{name}", formats=fmts, dpi=dpi):
                click.echo(f"wrote {path}")
            if with_data:
                path = write_netcdf(figure_data(figure), target / f"{stem}_{name}_data.nc")
                click.echo(f"wrote {path}")
