"""``eddyhop sweep``: run every point of a study's [sweep] table into a folder (resumable)."""

from __future__ import annotations

import click

from .common import (
    allow_long_option,
    check_workers,
    friendly_errors,
    progress_option,
    replace_option,
)


@click.command("sweep")
@click.argument("study", type=click.Path(dir_okay=False))
@click.option("--out", "-o", "out", type=click.Path(file_okay=False), required=True,
              help="Sweep folder: one netCDF per point, the manifest and the merged file.")
@click.option("--backend", type=click.Choice(["auto", "serial", "threads", "processes",
                                              "dask"]),
              default="auto", show_default=True,
              help="Where points run. auto: dask if a scheduler address is known, else "
                   "threads of this process when there are several points and cores, else "
                   "serial.")
@click.option("--jobs", "-j", type=int, default=None,
              help="Points at once on this machine (threads or worker processes); -1 or "
                   "unset: one per core. 0 is refused.")
@click.option("--scheduler", default=None, metavar="tcp://HOST:PORT",
              help="Dask scheduler to send points to. [default: $DASK_SCHEDULER_ADDRESS]")
@click.option("--workers", "-w", type=int, default=None, callback=check_workers,
              help="Threads per point (the threads backend spreads every point over its "
                   "--jobs threads instead); -1: every core. [default: run.workers when "
                   "serial, else 1]")
@click.option("--merged", type=click.Path(dir_okay=False), default=None,
              help="Where to write the merged Dataset. [default: OUT/sweep.nc]")
@click.option("--no-merge", is_flag=True, help="Do not merge at the end.")
@click.option("--retry-failed/--keep-failed", default=True, show_default=True,
              help="Recompute points that failed in an earlier run.")
@click.option("--timeout", type=float, default=10.0, show_default=True,
              help="Seconds to wait for a Dask scheduler and its workers.")
@click.option("--dry-run", is_flag=True, help="List the points and exit.")
@progress_option
@replace_option
@allow_long_option
@friendly_errors
def command(study, out, backend, jobs, scheduler, workers, merged, no_merge, retry_failed,
            timeout, dry_run, progress, replace, allow_long):
    """Run the parameter sweep of STUDY (a study file with a [sweep] table).

    \b
    Every point is a plain study run with the same seed, written to
    OUT/points/<id>.nc; OUT/sweep-manifest.json records each point's
    parameters, status, file and sha256.  Re-running the same command
    skips completed points and recomputes interrupted, failed or damaged
    ones, so a killed sweep resumes with identical results and no completed
    point is computed twice.  A folder
    holding another study's sweep is refused.
    Example:  eddyhop sweep studies/sweep_pan_rolls.toml --out pan/ -j 2
    """
    from ..errors import EddyhopError
    from ..study.cost import study_cost_checked
    from ..study.spec import load_study
    from ..sweeps.backends import scheduler_address
    from ..sweeps.execute import run_sweep

    if not (timeout > 0 and timeout < float("inf")):
        raise EddyhopError(f"--timeout {timeout!r} is not allowed: give a finite number of "
                           "seconds > 0")
    scheduler_address(scheduler)  # a malformed address is refused before any work
    spec = load_study(study)
    _check_outputs(study, out, merged, no_merge, replace)
    if spec.sweep is not None:
        # the base study stands for every point (the batch layout cannot be swept)
        cost = study_cost_checked(spec, points=spec.sweep.n_points, allow_long=allow_long,
                                  workers=workers if workers is not None else 1)
        click.echo(cost.work_line())
        click.echo(cost.estimate_line())
    if dry_run:
        _print_plan(spec)
        return
    try:
        report = run_sweep(spec, out, backend=backend, jobs=jobs, scheduler=scheduler,
                           workers=workers, progress=progress, retry_failed=retry_failed,
                           merge_to=None if no_merge else (merged or "default"),
                           timeout=timeout, summarize=_scaling_lines)
    except KeyboardInterrupt:
        click.secho(f"interrupted: completed points are kept in {out}; run the same command "
                    "again to resume", fg="red", err=True)
        raise SystemExit(130) from None
    click.echo(f"sweep {report.directory}: {report.n_points} points; computed "
               f"{len(report.computed)}, already complete {len(report.skipped)}, failed "
               f"{len(report.failed)} ({report.backend}, {report.slots} at a time, "
               f"{report.seconds:.1f} s)")
    for point_id in report.recovered:
        click.echo(f"  recovered {point_id}: its file was complete but not yet recorded when "
                   "the previous run stopped; adopted (checksum matches), not recomputed")
    for point_id, reason in report.redo_reasons.items():
        click.echo(f"  redone {point_id}: {reason}")
    for point_id, error in report.failed.items():
        click.secho(f"  failed {point_id}: {error}", fg="red", err=True)
    if report.merged is not None:
        click.echo(f"kept {report.merged}: already the merge of these points" if
                   report.merge_reused else f"wrote {report.merged}")
        for line in report.summary:  # presentation.scaling_lines of the merged Dataset
            click.echo(line)
    if report.failed:
        raise SystemExit(1)


def _scaling_lines(merged):
    # imported here: a resumed sweep whose merged file is current never loads xarray
    from ..presentation import scaling_lines

    return scaling_lines(merged)


def _print_plan(study):
    sweep = study.sweep
    if sweep is None:
        raise click.ClickException(f"{study.source_path} has no [sweep] table")
    click.echo(f"{study.source_path}: {sweep.n_points} points ({sweep.combine} of "
               + ", ".join(f"{a.address} ×{len(a.values)}" for a in sweep.axes) + ")")
    for point in sweep.points():
        click.echo(f"  {point.id}  {point.describe(sweep.axes)}")


def _check_outputs(study, out, merged, no_merge, replace) -> None:
    """The output rule (:mod:`eddyhop.results.outputs`) for the folder and the merged file,
    before any point runs.  The folder's own merged file (OUT/sweep.nc) is replaced by a new
    merge."""
    from ..results.outputs import check_name, check_not_in_sweep, guard_output
    from ..sweeps.execute import MERGED_NAME

    folder = check_name(out, option="--out", want_dir=True)
    check_not_in_sweep(folder / MERGED_NAME)  # not a folder inside another sweep's files
    if no_merge:
        return
    if merged:
        guard_output(merged, kind="sweep", inputs=[study], replace=replace, option="--merged")
    elif folder.is_dir():
        guard_output(folder / MERGED_NAME, kind="sweep", inputs=[study], replace=replace,
                     option="--merged (default)")
