"""``eddyhop validate``: check study files without running them."""

from __future__ import annotations

import sys

import click


@click.command("validate")
@click.argument("studies", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option("--allow-long", is_flag=True,
              help="Accept a study whose estimated CPU time exceeds 24 h (as run/sweep "
                   "--allow-long would); the memory limit is never lifted.")
def command(studies, allow_long):
    """Check one or more STUDIES files: every field, range and choice.

    Prints the resolved parameters (κ and Pe both, start regions, time grid)
    for each valid file, and for a gridded flow the field report (divergence of
    the data, interpolation error on the input grid); exits with status 2 if any
    file is invalid.  Also prints the work (particle-steps, output times,
    tracked samples, aged pairs, sweep points) and the estimated peak memory
    and CPU time, and refuses a study over the machine's available memory or
    over 24 h of CPU time (unless --allow-long).
    """
    from ..engine.schedule import build_schedule
    from ..engine.step_advice import step_size_warnings
    from ..errors import EddyhopError
    from ..study.cost import study_cost_checked
    from ..study.spec import load_study

    failed = False
    for path in studies:
        try:
            study = load_study(path)
            points = study.sweep.n_points if study.sweep is not None else 1
            # before the schedule is built: building it is itself work of the study's size
            cost = study_cost_checked(study, points=points, allow_long=allow_long)
            schedule = build_schedule(study.run, study.aging, study.run.track_samples,
                                      study.velocity_correlation)
        except EddyhopError as exc:
            shown = path if len(path) <= 80 else path[:60] + "…" + path[-15:]
            click.secho(f"{shown}: invalid: {exc}", fg="red", err=True)
            failed = True
            continue
        peclet = study.noise.peclet
        click.echo(f"{path}: valid")
        click.echo(f"  flow {study.flow.family} {study.flow.params}")
        click.echo(f"  kappa = {study.noise.kappa:.6g}, Pe = "
                   f"{'inf' if peclet is None else f'{peclet:.6g}'} "
                   f"({study.noise.peclet_convention} convention)")
        click.echo(f"  starts: {', '.join(s.label + ' (' + s.kind + ')' for s in study.starts)}")
        click.echo(f"  {study.run.particles} particles, {study.run.integrator}, dt = "
                   f"{study.run.dt:g}, {schedule.total_steps} steps, {schedule.out_steps.size} "
                   f"output times from {schedule.times[0]:g} to {schedule.times[-1]:g}")
        if schedule.vc_ref_steps.size:  # the resolved lag grid (lag_step rounded to steps)
            vc = study.velocity_correlation
            click.echo(f"  velocity correlation: reference times "
                       f"{', '.join(f'{t:g}' for t in vc.reference_times)}; "
                       f"{schedule.vc_lag_steps.size} lags 0 … {vc.lag_max:g} every "
                       f"{vc.lag_step:g}")
        click.echo(f"  {cost.work_line()}")
        click.echo(f"  {cost.estimate_line()}")
        report = study.flow.model.field_attributes(study.flow.params)  # data-driven families
        if report:
            click.echo(f"  {study.flow.model.field_report_heading}:")
            for name, value in report.items():
                shown = value if isinstance(value, str) else f"{value:.6g}"
                click.echo(f"    {name} = {shown}")
        for message in step_size_warnings(study):
            click.secho(f"  warning: {message}", fg="yellow")
    sys.exit(2 if failed else 0)
