"""``eddyhop analyse``: result netCDF → the same file's data plus every derived analysis."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors, replace_option


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
@click.option("--regime-resamples", type=int, default=None,
              help="Bootstrap resamples of the particle batches behind each regime "
              "exponent's standard error and its 'found again' share (the regimes are "
              "re-chosen on every resample); 0 skips them. [default: 50]")
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
@click.option("--significance", type=float, default=None,
              help="Level of the goodness-of-fit tests of the aging and tail fits. "
                   "[default: 0.05]")
@click.option("--spectrum-window", type=click.Choice(["parzen", "bartlett", "hann"]),
              default=None, help="Lag window of the velocity spectrum (Blackman-Tukey "
              "estimate). [default: parzen]")
@click.option("--green-kubo-tolerance", type=float, default=None,
              help="Relative size of the last-quarter change of the Green-Kubo integral "
                   "accepted as converged. [default: 0.05]")
@click.option("--no-reference", is_flag=True,
              help="Do not solve the cell problem for the summary's reference D_eff.")
@click.option("--quiet", "-q", is_flag=True, help="Do not print the summary.")
@replace_option
@friendly_errors
def command(result, out, quiet, no_reference, replace, **chosen):
    """Analyse RESULT (a netCDF file from `eddyhop run`, a sweep point or the
    reference solver): local exponent alpha(t), regimes, crossover times,
    effective diffusivity with confidence interval, aging, moment spectrum,
    displacement PDFs and cell hopping, as far as RESULT holds the inputs.

    \b
    The summary gives, per start region, the regime sequence, each regime's
    exponent, crossover times (model time, 1/(Uk), 1/(kappa k^2) and
    boundary-layer times), D_eff with its confidence interval and convergence
    verdict, D/kappa and D/(kappa Pe^1/2), the cell-problem D_eff and the
    distance from it in standard errors (skip with --no-reference), and the
    verdicts of the step check and of the fits.

    \b
    Example:  eddyhop analyse lattice.nc --out lattice.analysed.nc
    """
    from ..analysis import analyse
    from ..results.io import open_result, require_kind, write_netcdf
    from ..results.outputs import guard_output
    from ..results.provenance import derive

    target = out or _default_out(result)
    guard_output(target, kind="result", inputs=[result], replace=replace, default=out is None)
    options = {k: v for k, v in chosen.items() if v is not None and v != ()}
    source = require_kind(open_result(result), result, ("monte_carlo", "reference", "measured"),
                          "analyse",
                          foreign_ok=True)
    ds = derive(analyse(source, **options), "analyse", inputs=[result])  # history + 1 line
    write_netcdf(ds, target)
    click.echo(f"wrote {target}")
    if not quiet:
        print_analysis(ds, reference=not no_reference)


def print_analysis(ds, reference: bool = True) -> None:
    """Per start region: regimes, crossovers, D_eff and its verdicts
    (:func:`eddyhop.presentation.text.analysis_lines`)."""
    from ..presentation.text import analysis_lines

    for line in analysis_lines(ds, reference=reference):
        click.echo(line)
