"""``eddyhop report``: one self-contained HTML report of a result or sweep file."""

from __future__ import annotations

import click

from .common import friendly_errors, replace_option


@click.command("report")
@click.argument("result", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="HTML file to write (atomically). [default: report.html, never silently "
                   "replaced]")
@click.option("--figure", "-f", "names", multiple=True,
              help="Restrict the report to these figures (repeatable). [default: all]")
@click.option("--no-analyse", is_flag=True,
              help="Do not analyse an unanalysed file in memory (faster; omits regimes, "
                   "crossovers and D_eff).")
@click.option("--no-reference", is_flag=True,
              help="Skip the cell-problem solve that gives the summary its reference D_eff "
                   "(a few seconds).")
@click.option("--tables", "tables_stem", type=click.Path(dir_okay=False), default=None,
              help="Also write the summary table for papers as STEM.csv and STEM.tex "
                   "(booktabs; values rounded to their uncertainty).")
@replace_option
@friendly_errors
def command(result, out, names, no_analyse, no_reference, tables_stem, replace):
    """Write one HTML file about RESULT (a run, analysed run or merged sweep).

    \b
    Figures are embedded in the page, so the file can be mailed or archived
    alone.  It holds the study parameters, regimes and crossover times, D_eff
    with confidence intervals, warnings (large dt, too-short run) and
    provenance.  Example:  eddyhop report lattice.nc --out lattice.html
    """
    from ..presentation.report import write_report
    from ..results.outputs import guard_output

    target = out or "report.html"
    guard_output(target, kind="report", inputs=[result], replace=replace, default=out is None)
    tables = []
    if tables_stem:
        from pathlib import Path

        stem = Path(tables_stem)
        tables = [stem.with_name(f"{stem.name}.{suffix}") for suffix in ("csv", "tex")]
        for table in tables:
            guard_output(table, kind="table", inputs=[result], replace=replace)
    path = write_report(result, target, figures=list(names) or None, analyse=not no_analyse,
                        reference=not no_reference)
    click.echo(f"wrote {path}")
    if tables:
        from ..presentation.report import write_tables

        for written in write_tables(result, tables[0], tables[1], analyse=not no_analyse):
            click.echo(f"wrote {written}")
