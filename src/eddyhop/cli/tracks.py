"""``eddyhop tracks``: measured trajectories (CSV or CF trajectory netCDF) → analysed netCDF."""

from __future__ import annotations

from pathlib import Path

import click

from .common import friendly_errors, replace_option


def _default_out(source: str) -> str:
    path = Path(source)
    return str(path.with_name(f"{path.stem}.tracks.nc"))


@click.command("tracks")
@click.argument("track_file", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write (atomically). [default: TRACK_FILE.tracks.nc]")
@click.option("--format", "file_format", type=click.Choice(["csv", "netcdf"]), default=None,
              help="Input format. [default: from the file's first bytes]")
@click.option("--length-unit", default=None,
              help="Unit of x, y when the file states none (e.g. um, mm, m). [default: 1]")
@click.option("--time-unit", default=None,
              help="Unit of t when the file states none (e.g. s). [default: 1]")
@click.option("--period", type=float, multiple=True,
              help="Domain period in length units: once (square) or twice (Lx, Ly); the "
                   "folded positions are unwrapped.")
@click.option("--interval", type=float, default=None,
              help="Sampling interval. [default: the smallest time step of any track]")
@click.option("--time-origin", type=click.Choice(["track_start", "clock"]),
              default="track_start", show_default=True,
              help="Displacements from each track's first sample, or from a common clock "
                   "time (--clock-origin).")
@click.option("--clock-origin", type=float, default=None,
              help="Clock time of the common origin. [default: the earliest sample]")
@click.option("--lags", type=int, default=None,
              help="Number of log-spaced output times. [default: 100]")
@click.option("--max-lag", type=float, default=None,
              help="Longest lag (time units). [default: the longest reached by at least "
                   "max(2 x batches, 10 %) of the tracks]")
@click.option("--batches", type=int, default=None,
              help="Error groups of whole tracks for the jackknife. [default: 20]")
@click.option("--order", "orders", type=float, multiple=True,
              help="Order q of the absolute moments (repeatable). [default: 1 2 3 4]")
@click.option("--aging-time", "aging_times", type=float, multiple=True,
              help="Clock time since the origin of an aged MSD (repeatable). [default: 0 "
                   "and three log-spaced times up to a third of the record]")
@click.option("--pdf-time", "pdf_times", type=float, multiple=True,
              help="Lag of a displacement PDF (repeatable). [default: T/100, T/10, T]")
@click.option("--velocity-lags", type=int, default=None,
              help="Lags (samples) of the velocity autocorrelation; 0 skips it. [default: 32]")
@click.option("--label", default=None, help="Name of the track set. [default: file stem]")
@click.option("--window", type=float, default=None,
              help="Width in decades of the local fit for alpha(t). [default: 0.4]")
@click.option("--fit-decades", type=float, default=None,
              help="Late-time window for D_eff, in decades. [default: 0.5]")
@click.option("--fit-start", type=float, default=None,
              help="Start the D_eff window at this time instead.")
@click.option("--confidence", type=float, default=None,
              help="Confidence level of the intervals. [default: 0.95]")
@click.option("--quiet", "-q", is_flag=True, help="Do not print the summary.")
@replace_option
@friendly_errors
def command(track_file, out, file_format, period, orders, aging_times, pdf_times, quiet,
            replace, window, fit_decades, fit_start, confidence, **chosen):
    """Analyse measured trajectories in TRACK_FILE: a CSV table with the header
    id,t,x,y (u,v optional) or a CF trajectory netCDF file (contiguous or
    indexed ragged, or multidimensional arrays).  Writes a result with the
    layout of `eddyhop run` plus every analysis of `eddyhop analyse`, so
    `plot` and `report` read it.

    \b
    Errors come from a delete-one-group jackknife over groups of whole tracks.
    Example:  eddyhop tracks studies/tracks/vortex_tank_tracks.csv \\
                  --length-unit mm --time-unit s --out tank.nc
    """
    from ..analysis import analyse
    from ..results.io import write_netcdf
    from ..results.outputs import guard_output
    from ..tracks import open_tracks, track_statistics

    target = out or _default_out(track_file)
    guard_output(target, kind="result", inputs=[track_file], replace=replace,
                 default=out is None)
    options = {k: v for k, v in chosen.items() if v is not None}
    if period:
        options["period"] = list(period)
    if orders:
        options["orders"] = list(orders)
    if aging_times:
        options["aging_times"] = list(aging_times)
    if pdf_times:
        options["pdf_times"] = list(pdf_times)
    analysis = {k: v for k, v in (("window", window), ("fit_decades", fit_decades),
                                  ("fit_start", fit_start), ("confidence", confidence))
                if v is not None}
    source = open_tracks(track_file, file_format=file_format)
    ds = analyse(track_statistics(source, **options), **analysis)
    write_netcdf(ds, target)
    click.echo(f"wrote {target}: {ds.attrs['tracks_analysed']} of {ds.attrs['tracks_in_file']} "
               f"tracks ({source.layout}); errors: {ds.attrs['error_method']}")
    if ds.attrs.get("track_notes"):
        for note in str(ds.attrs["track_notes"]).split(" | "):
            click.echo(f"note: {note}")
    if not quiet:
        from .analyse import print_analysis

        print_analysis(ds, reference=False)
        for line in track_lines(ds):
            click.echo(line)


def track_lines(ds) -> list[str]:
    """Time averages and velocity autocorrelation of a measured-track result, in words."""
    import numpy as np

    def pm(value, se):
        return f"{value:.3g} ± {se:.2g}" if np.isfinite(se) else f"{value:.3g}"

    unit = str(ds["time"].attrs.get("units", "1"))
    unit = "" if unit == "1" else f" {unit}"
    lines = []
    if "ergodicity_breaking" in ds:
        lags = ds["tamsd_lag"].values
        total = float(ds["tamsd_duration"])
        picks = sorted({0, int(np.argmin(np.abs(lags - total / 10)))})
        eb, se = ds["ergodicity_breaking"].values, ds["ergodicity_breaking_se"].values
        text = ", ".join(f"EB({lags[i]:.4g}{unit}) = {pm(eb[i], se[i])}" for i in picks)
        lines.append(f"  time averages (T = {total:.4g}{unit}): {text} "
                     "(EB -> 0 as lag/T -> 0 when ergodic)")
    if "track_velocity_autocorrelation_normalised" in ds:
        c = ds["track_velocity_autocorrelation_normalised"].values
        lag = ds["velocity_lag"].values
        crossing = np.flatnonzero(c <= 0)
        where = (f"first crosses 0 at lag {lag[crossing[0]]:.4g}{unit}" if crossing.size
                 else f"stays positive up to lag {lag[-1]:.4g}{unit}")
        how = ds["track_velocity_autocorrelation"].attrs.get("velocity_source", "")
        lines.append(f"  velocity autocorrelation ({how}): {where}")
    return lines
