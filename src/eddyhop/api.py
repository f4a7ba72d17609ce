"""The Python API the CLI and notebooks share: one call per job.

Stage 8 (between the reference solvers and sweeps): study → engine → results, with the cost
check before and the step-bias warning after.  May import core, study, engine, results and
analysis; sweeps, presentation and the CLI build on it.
"""

from __future__ import annotations

from .study.spec import Study, load_study


def simulate(study: Study, *, workers: int | None = None, chunk: int | None = None,
             progress: bool | None = None, allow_long: bool = False):
    """Run the Monte Carlo ensemble of ``study`` and return its labelled Dataset.

    ``workers`` and ``chunk`` change only how the work is split, never the numbers.  Before
    any allocation the study's cost is estimated (``cost.py``): a study whose peak memory
    would exceed the machine's available memory is refused, and one whose estimated CPU time
    exceeds 24 h unless ``allow_long``.
    """
    from .engine.runner import run_ensemble
    from .results.dataset import build_dataset
    from .study.cost import study_cost_checked

    study_cost_checked(study, allow_long=allow_long, workers=workers)

    result = run_ensemble(study, workers=workers, chunk=chunk, progress=progress)
    ds = build_dataset(study, result)
    _warn_step_bias(ds)
    return ds


def simulate_each(studies, *, pool, allow_long: bool = False):
    """Datasets of several studies, in order, their kernel chunks sharing one thread pool.

    ``studies``: iterable of ``(key, make_study)`` (``make_study()`` returns a ``Study`` or
    raises); ``pool``: an ``engine.runner.ChunkPool``.  Yields ``(key, Dataset)`` — exactly
    what ``simulate(study)`` returns, with the same warnings — or ``(key, exception)`` for a
    study that fails (invalid, too costly, blown up), without stopping the others.  The chunks
    of the following studies run while the caller handles a yielded Dataset (writes or
    analyses it); the caller's thread is the only one running Python code of the package.
    """
    from .engine.runner import EnsemblePlan, run_plans
    from .study.cost import study_cost_checked

    keys, made = {}, {}  # by position in ``studies`` (keys need not be hashable)

    def planned():
        for number, (key, make_study) in enumerate(studies):
            keys[number] = key

            def make(number=number, make_study=make_study):
                study = make_study()
                study_cost_checked(study, allow_long=allow_long, workers=pool.workers)
                made[number] = study
                return EnsemblePlan(study, workers=pool.workers, progress=False)
            yield number, make

    for number, result in run_plans(planned(), pool):
        key, study = keys.pop(number), made.pop(number, None)
        if isinstance(result, Exception):
            yield key, result
            continue
        try:
            # imported here: the first chunks already run while xarray is imported
            from .results.dataset import build_dataset

            ds = build_dataset(study, result)
            _warn_step_bias(ds)
        except Exception as exc:
            yield key, exc
            continue
        yield key, ds


def _warn_step_bias(ds) -> None:
    """A :class:`StepBiasWarning` when the measured step-size bias is not shown below the
    statistical error of D_eff (verdict ``biased`` or ``inconclusive``)."""
    from .analysis.stepcheck import has_step_check, step_bias_messages, step_check
    from .engine.runner import StepBiasWarning

    if not has_step_check(ds):
        return
    import warnings

    for line in step_bias_messages(step_check(ds)):
        warnings.warn(line, StepBiasWarning, stacklevel=3)


def run_study(path_or_study, out=None, **options):
    """Load (if a path), simulate and write the result atomically; returns the Dataset."""
    from .results.io import check_output_path, write_netcdf

    study = path_or_study if isinstance(path_or_study, Study) else load_study(path_or_study)
    target = out or study.output.path
    check_output_path(target)
    ds = simulate(study, **options)
    write_netcdf(ds, target)
    return ds
