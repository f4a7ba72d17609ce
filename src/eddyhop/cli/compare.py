"""``eddyhop compare``: two or more results (runs, references) on the same axes, with the
differences in standard errors."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors, replace_option


@click.command("compare")
@click.argument("results", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--label", "-l", "labels", multiple=True,
              help="Name of each result in the legend and table, in order (repeat once per "
                   "result). [default: file names]")
@click.option("--start", "-s", "starts", multiple=True,
              help="Compare only these start regions (repeatable). [default: all]")
@click.option("--out", "-o", "stem", type=click.Path(dir_okay=False), default=None,
              help="File stem of the outputs: STEM.png/.pdf (figure), STEM.csv (table), "
                   "STEM_data.nc (the curves behind the figure). [default: "
                   "<first result>_compare next to it]")
@click.option("--format", "formats", default="png,pdf", show_default=True,
              help="Comma-separated figure formats: png, pdf, svg.")
@replace_option
@friendly_errors
def command(results, labels, starts, stem, formats, replace):
    """Overlay RESULTS (two or more run or `eddyhop reference` files; the first
    is the baseline) and print each quantity side by side with its difference
    from the baseline in standard errors.

    \b
    Curves on different time grids are interpolated onto the common range.
    Example:  eddyhop run lattice.toml --out run.nc
              eddyhop reference lattice.toml --out ref.nc
              eddyhop compare run.nc ref.nc --out run_vs_ref
    """
    from ..errors import EddyhopError
    from ..presentation.comparison import compare, table_csv, table_lines
    from ..presentation.plots._style import save_figure
    from ..presentation.plots.comparison import comparison_figure
    from ..results.io import atomic_write_text, write_netcdf
    from ..results.outputs import guard_output
    from .plot import _formats

    if len(results) < 2:
        raise EddyhopError(f"compare needs two or more results; got {len(results)}")
    if labels and len(labels) != len(results):
        raise EddyhopError(f"--label given {len(labels)} times for {len(results)} results; "
                           "give one per result, in order")
    fmts = _formats(formats)
    base = Path(stem) if stem else Path(results[0]).with_name(
        f"{Path(results[0]).stem}_compare")
    figure_files = [base.with_name(f"{base.name}.{fmt}") for fmt in fmts]
    table_file = base.with_name(f"{base.name}.csv")
    data_file = base.with_name(f"{base.name}_data.nc")
    for file in figure_files:  # every name checked before any computation
        guard_output(file, kind="figure", inputs=results, replace=replace,
                     default=stem is None)
    guard_output(table_file, kind="table", inputs=results, replace=replace,
                 default=stem is None)
    guard_output(data_file, kind="comparison", inputs=results, replace=replace,
                 default=stem is None)
    comparison = compare(results, labels=list(labels) or None, starts=list(starts) or None)
    for line in table_lines(comparison):
        click.echo(line)
    figure = comparison_figure(comparison)
    for path in save_figure(figure, base, formats=fmts):
        click.echo(f"wrote {path}")
    atomic_write_text(table_file, table_csv(comparison))
    click.echo(f"wrote {table_file}")
    stored = comparison.copy()
    for name in ("deff_converged", "kind", "source", "integrator"):
        stored[name] = stored[name].astype(str)
    write_netcdf(stored, data_file)
    click.echo(f"wrote {data_file}")
