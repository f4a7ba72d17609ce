"""``eddyhop run``: study file → netCDF result."""

from __future__ import annotations

import click

from .common import (
    allow_long_option,
    friendly_errors,
    progress_option,
    replace_option,
    workers_option,
)


@click.command("run")
@click.argument("study", type=click.Path(dir_okay=False))
@click.option("--out", "-o", type=click.Path(dir_okay=False), default=None,
              help="netCDF file to write (atomically). [default: the study's output.path]")
@click.option("--trajectories-out", type=click.Path(dir_okay=False), default=None,
              help="Also write the tracked particles ([run] tracked > 0) as a CF trajectory "
                   "netCDF file (contiguous ragged arrays, featureType = trajectory).")
@workers_option
@progress_option
@replace_option
@allow_long_option
@friendly_errors
def command(study, out, workers, progress, replace, allow_long, trajectories_out):
    """Run the Monte Carlo ensemble of STUDY and write its statistics to netCDF.

    \b
    The file holds msd, msd_x, msd_y, mean_dx, mean_dy (and more) on the
    `time` coordinate, with units and the full study as provenance.
    Example:  eddyhop run studies/lattice_mixer.toml --out lattice.nc

    \b
    An existing file is replaced only if it is an eddyhop result named with
    --out; the default name (output.path) is never silently replaced: give
    --out or --replace.
    """
    from ..api import run_study
    from ..results.outputs import guard_output
    from ..study.cost import study_cost_checked
    from ..study.spec import load_study
    from .summary import print_summary

    spec = load_study(study)
    target = out or spec.output.path
    guard_output(target, kind="result", inputs=study_inputs(spec, study), replace=replace,
                 default=out is None)
    if trajectories_out is not None:
        check_trajectories_out(spec, trajectories_out, target, study, replace)
    cost = study_cost_checked(spec, allow_long=allow_long, workers=workers)
    click.echo(cost.work_line())
    click.echo(cost.estimate_line())
    ds = run_study(spec, out=target, workers=workers, progress=progress, allow_long=allow_long)
    if trajectories_out is not None:
        from ..tracks import write_trajectories

        write_trajectories(ds, trajectories_out)
        click.echo(f"wrote {trajectories_out} (CF trajectories of the tracked particles)")
    print_summary(ds, target)


def check_trajectories_out(spec, path, target, study, replace) -> None:
    """Refuse, before any work, --trajectories-out without tracked particles or naming a file
    that must not be replaced."""
    from ..errors import StudyError
    from ..results.outputs import guard_output

    guard_output(path, kind="trajectories", inputs=[*study_inputs(spec, study), target],
                 replace=replace, option="--trajectories-out")
    if spec.run.tracked <= 0:
        raise StudyError("--trajectories-out needs tracked particles: set [run] tracked = N "
                         "(N > 0) in the study")
    import numpy as np

    from ..engine.schedule import build_schedule

    steps = build_schedule(spec.run, spec.aging, spec.run.track_samples).track_steps
    spacing = np.unique(np.diff(steps))
    if spacing.size > 1:  # a trajectory file (and eddyhop tracks) needs one interval
        raise StudyError(f"--trajectories-out: run.track_samples = {spec.run.track_samples} "
                         f"does not divide the run's {int(steps[-1])} steps, so the tracked "
                         f"samples fall every {spacing[0]} or {spacing[-1]} steps; choose a "
                         f"track_samples that divides {int(steps[-1])}")


def study_inputs(spec, path) -> list:
    """Files a study reads: the study file itself and a gridded flow's field file."""
    inputs = [path]
    data_file = spec.flow.params.get("file") if isinstance(spec.flow.params, dict) else None
    if isinstance(data_file, str):
        inputs.append(data_file)
    return inputs
