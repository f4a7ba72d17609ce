"""Resuming a sweep killed with SIGKILL at chosen moments: never a completed point twice.

The sweep runs as the real console command in a child process.  The test-only environment
variable ``EDDYHOP_SWEEP_TEST_PAUSE = "<stage> <point id>"`` makes it announce a stage of its
loop on stderr and sleep there, and the test then kills it with SIGKILL at exactly that moment:

* ``running``: the point is marked running (and is being dispatched);
* ``staged``: the point's complete file waits under a temporary name, its checksum recorded;
* ``renamed``: the file has its real name but the manifest still says "running" — the window
  in which a complete point could be taken for an interrupted one.

After each kill the sweep is resumed in this process and must (i) give a merged result
bit-identical to an uninterrupted run and (ii) compute again exactly the points that were not
complete at the kill: a complete point keeps its file (same bytes) and its attempt count.
"""

from __future__ import annotations

import hashlib
import json
import os
import queue
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil
import pytest

from eddyhop.sweeps import Manifest, merge_sweep, run_sweep

from .test_sweep_run import assert_same_numbers, study_text, write_study

PAUSE_ENV = "EDDYHOP_SWEEP_TEST_PAUSE"
ALL = {f"pt{i:04d}" for i in range(6)}


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def kill_study(tmp_path_factory):
    """The 6-point study (Pe = 1, 10, 100 × two start regions) and an uninterrupted run."""
    folder = tmp_path_factory.mktemp("kill")
    path = write_study(folder, study_text(particles=600, t_end=4.0))
    report = run_sweep(path, folder / "straight", backend="serial", progress=False)
    assert report.complete
    return {"path": path, "merged": merge_sweep(folder / "straight", analyse=False)}


def test_child_processes_use_this_source_tree():
    """The sweeps below run `python -m eddyhop` in a child: it must import this package."""
    import eddyhop

    found = subprocess.run([sys.executable, "-c", "import eddyhop; print(eddyhop.__file__)"],
                           capture_output=True, text=True, timeout=60, check=True)
    assert Path(found.stdout.strip()).resolve() == Path(eddyhop.__file__).resolve()


def kill_at(path: Path, out: Path, stage: str, point_id: str, *options: str) -> None:
    """Run `eddyhop sweep` until it pauses at ``stage`` of ``point_id``, then SIGKILL it (and
    check that no process it started outlives it)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1", **{PAUSE_ENV: f"{stage} {point_id}"})
    process = subprocess.Popen(
        [sys.executable, "-m", "eddyhop", "sweep", str(path), "--out", str(out),
         "--no-progress", "--no-merge", *options],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    lines: queue.Queue = queue.Queue()
    reader = threading.Thread(target=lambda: [lines.put(x.decode()) for x in process.stderr],
                              daemon=True)
    reader.start()
    seen, children = [], []
    deadline = time.monotonic() + 180  # includes a first compilation after a source change
    try:
        while time.monotonic() < deadline:
            try:
                line = lines.get(timeout=0.5)
            except queue.Empty:
                if process.poll() is not None:
                    break
                continue
            seen.append(line)
            if line.strip() == f"eddyhop-test-pause {stage} {point_id}":
                children = psutil.Process(process.pid).children(recursive=True)
                process.send_signal(signal.SIGKILL)
                break
    finally:
        if process.poll() is None and not children:
            process.kill()
        process.wait(timeout=60)
        reader.join(timeout=10)
    assert process.returncode == -signal.SIGKILL, "".join(seen)
    if "processes" in options:
        assert children, "the processes backend should have started worker processes"
    # the sweep's worker processes end with it (bounded wait; stragglers fail the test)
    _, alive = psutil.wait_procs(children, timeout=30)
    alive = [p for p in alive if _status(p) not in (psutil.STATUS_ZOMBIE, None)]
    for straggler in alive:
        straggler.kill()
    assert not alive, f"worker processes outlived the killed sweep: {alive}"


def _status(process):
    """A process's status, ``None`` once it is gone (a zombie has ended and only awaits its
    parent's wait())."""
    try:
        return process.status()
    except psutil.NoSuchProcess:
        return None


def folder_state(out: Path) -> dict:
    """Per point: manifest status and attempts, and whether it is complete on disk (its file
    exists with the checksum recorded either for a done point or, before the rename was
    recorded, in ``staged``)."""
    state = {}
    for e in Manifest.read(out).points:
        file = out / "points" / f"{e['id']}.nc"
        digest = sha256(file) if file.exists() else None
        recorded = e["sha256"] if e["status"] == "done" else (e.get("staged") or {}).get("sha256")
        state[e["id"]] = {"status": e["status"], "attempts": e["attempts"],
                          "complete": digest is not None and digest == recorded,
                          "sha256": digest,
                          "mtime": file.stat().st_mtime_ns if file.exists() else None}
    return state


def check_resume(kill_study, out: Path, before: dict, **options):
    """Resume and check: bit-identical result, complete points untouched, the others computed
    exactly once more, no temporary file left."""
    report = run_sweep(kill_study["path"], out, progress=False, **options)
    assert report.complete
    complete = {i for i, s in before.items() if s["complete"]}
    assert set(report.computed) == ALL - complete
    assert set(report.skipped) == complete
    after = folder_state(out)
    for point_id, old in before.items():
        new = after[point_id]
        assert new["status"] == "done" and new["complete"], point_id
        if point_id in complete:  # not computed again: same bytes, same attempt count
            assert (new["sha256"], new["mtime"]) == (old["sha256"], old["mtime"]), point_id
            assert new["attempts"] == old["attempts"], point_id
        else:
            assert new["attempts"] == old["attempts"] + 1, point_id
    assert not [p.name for p in out.rglob("*.part")]
    assert_same_numbers(merge_sweep(out, analyse=False), kill_study["merged"])
    return report


def test_kill_while_a_point_runs_then_stale_temporaries(kill_study, tmp_path):
    """Killed while pt0003 is dispatched; stale temporary files planted before the resume
    (a half-written point, a staged file of the interrupted point, a manifest temporary) are
    removed, never adopted."""
    out = tmp_path / "out"
    kill_at(kill_study["path"], out, "running", "pt0003", "--backend", "serial")
    before = folder_state(out)
    assert [i for i, s in before.items() if s["complete"]] == ["pt0000", "pt0001", "pt0002"]
    assert before["pt0003"]["status"] == "running" and before["pt0003"]["attempts"] == 1
    (out / "points" / ".pt0004.nc.k3j2h1x0.part").write_bytes(b"CDF\x01 half a file")
    shutil.copyfile(out / "points" / "pt0002.nc", out / "points" / ".pt0003.nc.staged.part")
    (out / ".sweep-manifest.json.q8w7e6r5.part").write_text('{"format": "trunc')
    report = check_resume(kill_study, out, before, backend="serial")
    assert report.recovered == [] and report.redo_reasons == {"pt0003": "it was interrupted"}


def test_kill_after_checksum_before_rename(kill_study, tmp_path):
    """The complete file of pt0002 waits under its temporary name: not yet a result (the
    point is computed again), and the temporary file is cleaned up."""
    out = tmp_path / "out"
    kill_at(kill_study["path"], out, "staged", "pt0002", "--backend", "serial")
    assert (out / "points" / ".pt0002.nc.staged.part").is_file()
    assert not (out / "points" / "pt0002.nc").exists()
    before = folder_state(out)
    assert before["pt0002"]["status"] == "running" and not before["pt0002"]["complete"]
    report = check_resume(kill_study, out, before, backend="serial")
    assert report.recovered == []


def test_kill_between_rename_and_manifest_update(kill_study, tmp_path):
    """The window: pt0002's file is complete under its real name, the manifest still says
    "running".  The resume adopts it by checksum instead of computing it again."""
    out = tmp_path / "out"
    kill_at(kill_study["path"], out, "renamed", "pt0002", "--backend", "serial")
    before = folder_state(out)
    assert before["pt0002"]["status"] == "running" and before["pt0002"]["complete"]
    assert before["pt0002"]["attempts"] == 1
    report = check_resume(kill_study, out, before, backend="serial")
    assert report.recovered == ["pt0002"] and "pt0002" not in report.redo_reasons
    assert Manifest.read(out).entry("pt0002")["attempts"] == 1


@pytest.mark.parametrize("damage", ["torn", "foreign"])
def test_torn_or_foreign_file_in_the_window_is_not_adopted(kill_study, tmp_path, damage):
    """Same window, but the file under pt0002's name is then cut short (torn) or replaced by
    another point's complete, readable file (foreign): neither matches the recorded checksum,
    so pt0002 is computed again."""
    out = tmp_path / "out"
    kill_at(kill_study["path"], out, "renamed", "pt0002", "--backend", "serial")
    victim = out / "points" / "pt0002.nc"
    if damage == "torn":
        data = victim.read_bytes()
        victim.write_bytes(data[: len(data) // 2])
    else:
        shutil.copyfile(out / "points" / "pt0001.nc", victim)
    before = folder_state(out)
    assert before["pt0002"]["status"] == "running" and not before["pt0002"]["complete"]
    report = check_resume(kill_study, out, before, backend="serial")
    assert report.recovered == [] and "pt0002" in report.computed


def test_kill_processes_backend_in_the_window(kill_study, tmp_path):
    """Two worker processes: killed in the window of pt0003 while the workers compute other
    points.  The workers end with the sweep; the resume (again with two processes) adopts
    pt0003 and computes only what was not complete."""
    # Which points are complete at the kill depends on the workers' timing: the two workers
    # may finish pt0004 and pt0005 before pt0003 (all then complete, and the resume would have
    # nothing to compute).  The scenario needs one incomplete point: up to three tries.
    for attempt in range(3):
        out = tmp_path / f"out{attempt}"
        kill_at(kill_study["path"], out, "renamed", "pt0003", "--backend", "processes",
                "-j", "2")
        before = folder_state(out)
        assert before["pt0003"]["status"] == "running" and before["pt0003"]["complete"]
        if any(not s["complete"] for s in before.values()):
            break
    assert any(not s["complete"] for s in before.values()), "every try completed all points"
    report = check_resume(kill_study, out, before, backend="processes", jobs=2)
    assert report.backend == "processes" and "pt0003" in report.recovered
    entries = json.loads((out / "sweep-manifest.json").read_text())["points"]
    assert sum(e["attempts"] for e in entries) == 6 + sum(
        1 for s in before.values() if s["status"] == "running" and not s["complete"])


@pytest.mark.parametrize("stage", ["running", "renamed"])
def test_kill_threads_backend(kill_study, tmp_path, stage):
    """The threads backend (the default for local parallel sweeps) keeps the chunks of the
    next points queued on its pool while it writes one: killed while pt0003 is started, or
    in pt0002's window, the resume computes exactly the points not complete, bit-identical
    to an uninterrupted run."""
    out = tmp_path / "out"
    point = "pt0003" if stage == "running" else "pt0002"
    kill_at(kill_study["path"], out, stage, point, "--backend", "threads", "-j", "2")
    before = folder_state(out)
    assert before[point]["status"] == "running"
    assert before[point]["complete"] == (stage == "renamed")
    report = check_resume(kill_study, out, before, backend="threads", jobs=2)
    assert report.backend == "threads"
    assert (point in report.recovered) == (stage == "renamed")
