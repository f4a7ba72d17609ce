"""The Python API the CLI and notebooks share: one call per job."""

from __future__ import annotations

from .spec import Study, load_study


def simulate(study: Study, *, workers: int | None = None, chunk: int | None = None,
             progress: bool | None = None):
    """Run the Monte Carlo ensemble of ``study`` and return its labelled Dataset.

    ``workers`` and ``chunk`` change only how the work is split, never the numbers.
    """
    from .dataset import build_dataset
    from .runner import run_ensemble

    result = run_ensemble(study, workers=workers, chunk=chunk, progress=progress)
    return build_dataset(study, result)


def run_study(path_or_study, out=None, **options):
    """Load (if a path), simulate and write the result atomically; returns the Dataset."""
    from .io import check_output_path, write_netcdf

    study = path_or_study if isinstance(path_or_study, Study) else load_study(path_or_study)
    target = out or study.output.path
    check_output_path(target)
    ds = simulate(study, **options)
    write_netcdf(ds, target)
    return ds
