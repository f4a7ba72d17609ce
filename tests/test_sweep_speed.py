"""Sweeps that answer sooner: points on threads of the sweep process, and a resumed complete
sweep that keeps its merged file — neither changes a number (the numbers of every backend are
compared bit for bit with a serial sweep)."""

from __future__ import annotations

import json
import warnings

import pytest

from eddyhop.engine.runner import StepSizeWarning
from eddyhop.sweeps import merge_sweep, run_sweep
from eddyhop.sweeps.backends import make_pool
from eddyhop.sweeps.merge_record import merge_key

from .test_sweep_run import FAILING, assert_same_numbers, study_text, write_study


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    folder = tmp_path_factory.mktemp("serial")
    path = write_study(folder, study_text(particles=200, t_end=1.0))
    report = run_sweep(path, folder / "out", backend="serial", progress=False)
    assert report.complete and len(report.computed) == 6
    return {"path": path, "merged": merge_sweep(folder / "out", analyse=False),
            "folder": folder / "out"}


@pytest.mark.parametrize("jobs", [2, 3])
def test_threads_backend_equals_serial_and_restores_warning_filters(serial, tmp_path, jobs):
    filters = list(warnings.filters)
    report = run_sweep(serial["path"], tmp_path / "threads", backend="threads", jobs=jobs,
                       progress=False)
    assert report.backend == "threads" and report.slots == jobs and report.complete
    assert report.warm_seconds == 0.0  # no worker processes: no separate warm-up
    assert_same_numbers(merge_sweep(tmp_path / "threads", analyse=False), serial["merged"])
    # the caller's filters are back (libraries such as xarray add their own while reading
    # files, in any order), and the pool's own filter is gone
    assert all(f in warnings.filters for f in filters)
    assert not any(f[2] is StepSizeWarning for f in warnings.filters if f not in filters)
    # the merged file, from points analysed as they were written: the same analysis, the
    # same warnings gathered per point, as the serial sweep's merge
    from eddyhop.results.io import open_result

    ours, theirs = (open_result(folder / "sweep.nc")
                    for folder in (tmp_path / "threads", serial["folder"]))
    assert_same_numbers(ours, theirs)
    assert ours.attrs["sweep_warnings"] == theirs.attrs["sweep_warnings"]


def _studies():
    """Three small studies: two start regions, the step check on, particles not a whole
    number of blocks; the middle one blows up (a drift that runs away, see FAILING)."""
    from eddyhop.study.spec import parse_study

    def study(drift, seed):
        return parse_study({
            "title": "plans", "flow": {"family": "drifting_cellular", "drift_x": drift},
            "noise": {"kappa": 0.1},
            "start": [{"kind": "uniform", "label": "a"}, {"kind": "centre", "label": "b"}],
            "run": {"particles": 203, "dt": 0.05 if drift < 1e6 else 0.01,
                    "t_end": 2.0 if drift < 1e6 else 50.0, "n_times": 5, "seed": seed,
                    "step_check": True, "step_check_particles": 150, "progress": False}})

    return [study(0.5, 1), study(1e8, 2), study(0.0, 3)]


def _same_ensemble(a, b) -> None:
    import numpy as np

    for x, y in zip(a.starts, b.starts, strict=True):
        for name in ("batch_counts", "moments", "aged", "tracks", "residence_counts",
                     "flight_counts", "check_counts", "check_fine", "check_coarse"):
            assert np.array_equal(getattr(x, name), getattr(y, name), equal_nan=True), name
        assert x.hops == y.hops


@pytest.mark.parametrize("workers, window", [(2, 3), (3, None)])
def test_chunks_of_several_ensembles_on_one_pool_equal_each_alone(workers, window):
    """run_plans interleaves the chunks of consecutive ensembles on one ChunkPool (a window
    of 3 tasks forces a point's fold to wait behind the next point's chunks): every result
    is bit-identical to that ensemble run alone on one thread, and the ensemble that blows up
    gives its error without stopping the others."""
    from eddyhop.engine.runner import (
        ChunkPool,
        EnsemblePlan,
        StepBiasWarning,
        run_ensemble,
        run_plans,
    )
    from eddyhop.errors import BlowUpError

    studies = _studies()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", StepSizeWarning)
        warnings.simplefilter("ignore", StepBiasWarning)
        alone = [run_ensemble(studies[0], workers=1), None, run_ensemble(studies[2], workers=1)]
        with pytest.raises(BlowUpError) as failure:  # its message names the chunk's particles
            run_ensemble(studies[1], workers=workers)
        with ChunkPool(workers) as pool:
            made = [(i, (lambda s=s: EnsemblePlan(s, workers=workers)))
                    for i, s in enumerate(studies)]
            outcomes = list(run_plans(made, pool, window=window))
    assert [key for key, _ in outcomes] == [0, 1, 2]
    _same_ensemble(outcomes[0][1], alone[0])
    _same_ensemble(outcomes[2][1], alone[2])
    assert isinstance(outcomes[1][1], BlowUpError)
    assert str(outcomes[1][1]) == str(failure.value)  # the same first failing chunk


def test_auto_runs_local_points_on_threads():
    assert make_pool("auto", jobs=2, scheduler=None, n_todo=4).name == "threads"
    assert make_pool("auto", jobs=2, scheduler=None, n_todo=1).name == "serial"
    assert make_pool("threads", jobs=8, scheduler=None, n_todo=3).slots == 8  # chunks


def test_a_point_that_fails_on_a_thread_fails_alone(tmp_path):
    report = run_sweep(write_study(tmp_path, FAILING), tmp_path / "out", backend="threads",
                       jobs=2, progress=False, merge_to=None)
    assert report.backend == "threads"
    assert sorted(report.computed) == ["pt0000", "pt0002"]
    assert list(report.failed) == ["pt0001"] and report.failed["pt0001"].startswith("BlowUp")


def test_resumed_complete_sweep_keeps_its_merged_file(serial, tmp_path):
    out = serial["folder"]
    merged = out / "sweep.nc"
    report = run_sweep(serial["path"], out, backend="serial", progress=False,
                       summarize=lambda ds: ["a line"])
    assert report.merged == merged and not report.merge_reused  # no summary recorded yet
    before = (merged.read_bytes(), merged.stat().st_mtime_ns)
    again = run_sweep(serial["path"], out, backend="serial", progress=False,
                      summarize=lambda ds: ["another line"])
    assert again.merge_reused and again.summary == ["a line"] and not again.computed
    assert (merged.read_bytes(), merged.stat().st_mtime_ns) == before
    record = json.loads((out / "sweep-manifest.json").read_text())["merged"]
    assert record["summary"] == ["a line"]


def test_an_edited_merged_file_or_point_gives_a_fresh_merge(serial, tmp_path):
    path, out = serial["path"], tmp_path / "out"
    run_sweep(path, out, backend="serial", progress=False)
    merged = out / "sweep.nc"
    merged.write_bytes(merged.read_bytes() + b"x")  # edited after the merge
    report = run_sweep(path, out, backend="serial", progress=False)
    assert not report.merge_reused
    assert_same_numbers(merge_sweep(out, analyse=False), serial["merged"])
    assert run_sweep(path, out, backend="serial", progress=False).merge_reused
    # a recomputed point changes the merge key, so the merge is redone
    from eddyhop.sweeps.manifest import Manifest

    manifest = Manifest.read(out)
    key = merge_key(manifest)
    (out / "points" / "pt0001.nc").unlink()
    report = run_sweep(path, out, backend="serial", progress=False)
    assert report.computed == ["pt0001"] and not report.merge_reused
    # the recomputed file has its own checksum (its provenance records when it was written)
    assert merge_key(Manifest.read(out)) != key
    assert_same_numbers(merge_sweep(out, analyse=False), serial["merged"])


def test_points_compute_with_blas_on_one_thread_and_the_setting_comes_back():
    """While points compute, each written point is analysed beside the kernels' threads:
    every BLAS library loaded (NumPy's and SciPy's) runs on one thread in that phase, and
    its thread count is restored afterwards (eddyhop._blas.one_blas_thread, which
    sweeps.execute sets for that phase)."""
    from threadpoolctl import threadpool_info

    from eddyhop._blas import one_blas_thread

    before = {i["filepath"]: i["num_threads"] for i in threadpool_info()
              if i["user_api"] == "blas"}
    with one_blas_thread():
        inside = [i for i in threadpool_info() if i["user_api"] == "blas"]
        assert inside and all(i["num_threads"] == 1 for i in inside)
    after = {i["filepath"]: i["num_threads"] for i in threadpool_info()
             if i["user_api"] == "blas"}
    assert all(after[path] == count for path, count in before.items())
