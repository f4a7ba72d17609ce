"""``eddyhop analyse``: result netCDF → the same file's data plus every derived analysis."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors


def _default_out(result: str) -> str:
    path = Path(result)
    return str(path.with_name(f"{path.stem}.analysed{path.suffix or '.nc'}"))


@click.command("analyse")
@click.argument("result", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write (atomically). [default: RESULT.analysed.nc]")
@click.option("--window", type=float, default=None,
              help="Width in decades of the local fit for alpha(t). [default: 0.4]")
@click.option("--ballistic-tolerance", type=float, default=None,
              help="Half-width of the band around alpha = 2 a regime's interval must meet "
              "to be ballistic. [default: 0.2]")
@click.option("--diffusive-tolerance", type=float, default=None,
              help="Half-width of the band around alpha = 1 (diffusive). [default: 0.2]")
@click.option("--bounded-tolerance", type=float, default=None,
              help="Top of the band alpha <= value for a bounded moment. [default: 0.2]")
@click.option("--min-span", type=float, default=None,
              help="Shortest regime, in decades of time. [default: 0.5]")
@click.option("--min-points", type=int, default=None,
              help="Fewest output times in a regime. [default: 3]")
@click.option("--misfit-floor", type=float, default=None,
              help="Model-misfit floor of the regime fit, in ln MSD. [default: 0.05]")
@click.option("--fit-decades", type=float, default=None,
              help="Late-time window for D_eff and nu(q), in decades. [default: 0.5]")
@click.option("--fit-start", type=float, default=None,
              help="Start the D_eff window at this time instead.")
@click.option("--confidence", type=float, default=None,
              help="Confidence level of the D_eff and regime-exponent intervals. "
              "[default: 0.95]")
@click.option("--aging-time", "aging_times", type=float, multiple=True,
              help="Analyse only these recorded aging times (repeatable).")
@click.option("--pdf-time", "pdf_times", type=float, multiple=True,
              help="Times of the displacement PDFs (repeatable). [default: T/100, T/10, T]")
@click.option("--tail-start", type=float, default=None,
              help="Start of the fitted residence-time tail. [default: median residence]")
@click.option("--quiet", "-q", is_flag=True, help="Do not print the summary.")
@friendly_errors
def command(result, out, quiet, **chosen):
    """Analyse RESULT (a netCDF file from `eddyhop run`, a sweep point or the
    reference solver): local exponent alpha(t), regimes, crossover times,
    effective diffusivity with confidence interval, aging, moment spectrum,
    displacement PDFs and cell hopping, as far as RESULT holds the inputs.

    \b
    Example:  eddyhop analyse lattice.nc --out lattice.analysed.nc
    """
    from ..analysis import analyse
    from ..io import check_output_path, open_result, write_netcdf

    target = out or _default_out(result)
    check_output_path(target)
    options = {k: v for k, v in chosen.items() if v is not None and v != ()}
    ds = analyse(open_result(result), **options)
    write_netcdf(ds, target)
    click.echo(f"wrote {target}")
    if not quiet:
        print_analysis(ds)


def print_analysis(ds) -> None:
    """Regimes, crossovers and D_eff of every start region, one block each."""
    import numpy as np

    tunits = ds["time"].attrs.get("units", "1")
    shown_units = "" if tunits == "1" else f" {tunits}"
    multi = "start" in ds.dims
    labels = [str(v) for v in np.atleast_1d(ds["start"].values)] if "start" in ds.coords \
        else [""]
    for label in labels:
        part = ds.sel(start=label) if multi else ds
        click.echo(f"start '{label}':")
        count = int(part["regime_count"].values) if "regime_count" in part else 0
        for i in range(count):
            click.echo(f"  {part['regime_label'].values[i]!s:<16} "
                       f"t = {float(part['regime_start'][i]):<10.4g}… "
                       f"{float(part['regime_end'][i]):<10.4g} alpha = "
                       f"{float(part['regime_alpha'][i]):.3f} ± "
                       f"{float(part['regime_alpha_se'][i]):.2g}")
        for i in range(max(count - 1, 0)):
            click.echo(f"  crossover {part['crossover_from'].values[i]!s} → "
                       f"{part['crossover_to'].values[i]!s}: t = "
                       f"{float(part['crossover_time'][i]):.4g} ± "
                       f"{float(part['crossover_time_se'][i]):.2g}{shown_units} = "
                       f"{float(part['crossover_time_advective'][i]):.3g}/(Uk)")
        if "D_eff" in part:
            flag = {0: "  (run too short: not yet diffusive)",
                    2: "  (undetermined: too noisy to show the diffusive regime)"}.get(
                int(part["deff_converged"].values), "")
            click.echo(f"  D_xx = {float(part['D_xx']):.4g} [{float(part['D_xx_lower']):.4g}, "
                       f"{float(part['D_xx_upper']):.4g}], D_yy = {float(part['D_yy']):.4g} "
                       f"[{float(part['D_yy_lower']):.4g}, {float(part['D_yy_upper']):.4g}], "
                       f"D_xy = {float(part['D_xy']):.3g}{flag}")
