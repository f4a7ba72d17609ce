"""``eddyhop info``: summary of a result file."""

from __future__ import annotations

import click

from .common import friendly_errors


@click.command("info")
@click.argument("result", type=click.Path(dir_okay=False))
@click.option("--attrs", "show_attrs", is_flag=True, help="Also list every global attribute.")
@friendly_errors
def command(result, show_attrs):
    """Summarise a RESULT netCDF file: dimensions, variables with units, provenance."""
    from ..results.io import open_result
    from .summary import print_summary

    ds = open_result(result)
    click.echo(f"{result}: eddyhop {ds.attrs.get('eddyhop_version', '?')} "
               f"({ds.attrs.get('eddyhop_kind', '?')})")
    click.echo("  dimensions: " + ", ".join(f"{k}={v}" for k, v in ds.sizes.items()))
    if ds.attrs.get("eddyhop_kind") == "sweep":
        swept = [d for d in ds.dims if d in ds.coords and d not in ("time", "batch", "order",
                                                                    "lag", "aging_time",
                                                                    "check_batch")]
        click.echo("  sweep over: " + ", ".join(f"{d} ({ds.sizes[d]})" for d in swept))
        from ..presentation.text import scaling_lines

        for line in scaling_lines(ds):  # the same counts and verdicts merge and sweep print
            click.echo(line)
    elif "time" in ds.coords and "msd" in ds and isinstance(ds.attrs.get("kappa"),
                                                            (int, float)):
        print_summary(ds)
    click.echo("  variables:")
    for name, var in ds.data_vars.items():
        units = var.attrs.get("units", "")
        click.echo(f"    {name:<24} {var.dims!s:<28} [{units}] "
                   f"{var.attrs.get('long_name', '')}")
    if show_attrs:
        click.echo("  attributes:")
        for key, value in ds.attrs.items():
            text = str(value).replace("\n", " ")
            click.echo(f"    {key} = {text[:160]}{'…' if len(text) > 160 else ''}")
