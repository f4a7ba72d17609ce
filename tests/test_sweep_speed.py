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


def test_threads_backend_equals_serial_and_restores_warning_filters(serial, tmp_path):
    filters = list(warnings.filters)
    report = run_sweep(serial["path"], tmp_path / "threads", backend="threads", jobs=2,
                       progress=False)
    assert report.backend == "threads" and report.slots == 2 and report.complete
    assert report.warm_seconds == 0.0  # no worker processes: no separate warm-up
    assert_same_numbers(merge_sweep(tmp_path / "threads", analyse=False), serial["merged"])
    assert warnings.filters == filters
    assert not any(f[2] is StepSizeWarning for f in warnings.filters)


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
