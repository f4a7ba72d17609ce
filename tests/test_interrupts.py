"""Ctrl-C and killed writers: no hang, no leftover temporary file, no lock kept.

* A temporary ``.NAME.PID-XXXX.part`` left by a writer that no longer exists (SIGKILL/SIGTERM)
  is removed by the next write of the same file; one of a live process is never touched.
* Ctrl-C while a netCDF file is written abandons the write at a safe point: the process exits
  130 within seconds, with no ``.part`` file left and the sweep-folder lock released.
"""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from eddyhop.results.io import (
    atomic_write_text,
    interrupts_deferred,
    stale_temporaries,
    write_netcdf,
)
from eddyhop.sweeps.manifest import folder_lock

from .test_output_safety import STUDY


def dead_pid() -> int:
    """The id of a process that has exited (and was reaped)."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def small_dataset() -> xr.Dataset:
    return xr.Dataset({"msd": ("time", np.arange(5.0))}, coords={"time": np.arange(5.0)})


def test_stale_temporary_of_a_dead_writer_is_removed(tmp_path):
    target = tmp_path / "out.nc"
    dead = tmp_path / f".out.nc.{dead_pid()}-abcd1234.part"
    live = tmp_path / f".out.nc.{os.getpid()}-live0001.part"
    other_file = tmp_path / f".other.nc.{dead_pid()}-abcd1234.part"
    old_style = tmp_path / ".out.nc.k2j3h4g5.part"  # no writer id: cannot tell, left alone
    for path in (dead, live, other_file, old_style):
        path.write_bytes(b"half")
    assert stale_temporaries(target) == [dead]
    write_netcdf(small_dataset(), target)
    assert target.exists() and not dead.exists()
    assert live.exists() and other_file.exists() and old_style.exists()


def test_temporary_names_carry_the_writer_id(tmp_path):
    seen = []
    original = os.replace

    def spy(source, destination):
        seen.append(Path(source).name)
        return original(source, destination)

    os.replace = spy
    try:
        atomic_write_text(tmp_path / "a.txt", "x")
    finally:
        os.replace = original
    assert seen and seen[0].startswith(f".a.txt.{os.getpid()}-") and seen[0].endswith(".part")


def test_ctrl_c_in_a_write_abandons_it_cleanly(tmp_path, monkeypatch):
    """In-process: a SIGINT during the write is held, then raised before the rename."""
    target = tmp_path / "out.nc"
    original = xr.Dataset.to_netcdf
    completed = []

    def interrupted_write(self, *args, **kwargs):
        os.kill(os.getpid(), signal.SIGINT)  # held: the write must still complete
        time.sleep(0.05)
        result = original(self, *args, **kwargs)
        completed.append(True)
        return result

    monkeypatch.setattr(xr.Dataset, "to_netcdf", interrupted_write)
    with pytest.raises(KeyboardInterrupt):
        write_netcdf(small_dataset(), target)
    assert completed
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


def test_held_interrupt_is_delivered_on_leaving():
    with pytest.raises(KeyboardInterrupt):
        with interrupts_deferred():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)
            reached = True
    assert reached


WRITER = textwrap.dedent("""
    import sys
    from pathlib import Path

    import numpy as np
    import xarray as xr

    from eddyhop.results.io import write_netcdf
    from eddyhop.sweeps.manifest import folder_lock

    folder = Path(sys.argv[1])
    ds = xr.Dataset({"x": (("a", "b"), np.random.default_rng(1).random((400, 500)))})
    try:
        with folder_lock(folder):
            print("writing", flush=True)
            while True:
                write_netcdf(ds, folder / "sweep.nc")
    except KeyboardInterrupt:
        sys.exit(130)
""")


def test_sigint_while_writing_exits_130_and_leaves_nothing(tmp_path):
    """A real process writing netCDF files in a loop is sent SIGINT at random moments: it must
    exit 130 within 5 s each time, leave no temporary file, and release the folder lock."""
    script = tmp_path / "writer.py"
    script.write_text(WRITER)
    rng = random.Random(13)
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    for trial in range(4):
        folder = tmp_path / f"trial{trial}"
        folder.mkdir()
        process = subprocess.Popen([sys.executable, str(script), str(folder)],
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
        assert process.stdout.readline().strip() == b"writing"
        time.sleep(rng.uniform(0.05, 0.6))
        process.send_signal(signal.SIGINT)
        try:
            code = process.wait(timeout=5)  # a deadlock inside the netCDF close never ends
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
            pytest.fail(f"trial {trial}: no exit within 5 s of SIGINT (deadlock)")
        assert code == 130, process.stderr.read().decode()[-2000:]
        assert [p.name for p in folder.iterdir() if p.name.endswith(".part")] == []
        with folder_lock(folder):  # raises if the lock were still held
            pass


def test_sigint_in_a_sweep_between_staging_and_rename(tmp_path):
    """Ctrl-C while a sweep point waits under its staged name: exit 130 within seconds, the
    staged temporary removed, the folder lock released, and the resumed sweep complete."""
    import queue
    import threading

    from eddyhop.sweeps import run_sweep

    from .test_sweep_run import study_text, write_study

    path = write_study(tmp_path, study_text(particles=200, t_end=2.0))
    out = tmp_path / "sw"
    env = dict(os.environ, PYTHONUNBUFFERED="1", EDDYHOP_SWEEP_TEST_PAUSE="staged pt0001")
    process = subprocess.Popen(
        [sys.executable, "-m", "eddyhop", "sweep", str(path), "--out", str(out),
         "--no-progress", "--no-merge", "--backend", "serial"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    lines: queue.Queue = queue.Queue()
    threading.Thread(target=lambda: [lines.put(x.decode()) for x in process.stderr],
                     daemon=True).start()
    seen, deadline = [], time.monotonic() + 180  # includes a first compilation
    try:
        while time.monotonic() < deadline:
            try:
                line = lines.get(timeout=0.5)
            except queue.Empty:
                if process.poll() is not None:
                    break
                continue
            seen.append(line)
            if line.strip() == "eddyhop-test-pause staged pt0001":
                process.send_signal(signal.SIGINT)
                break
        code = process.wait(timeout=5)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    assert code == 130, "".join(seen)
    assert [p.name for p in out.rglob("*.part")] == []
    with folder_lock(out):
        pass
    report = run_sweep(path, out, progress=False, backend="serial")
    assert report.complete and "pt0001" in report.computed


# the reliability suite's small study, made long enough (~1 s of work) to be interrupted
RUN_STUDY = (STUDY.replace("particles = 32", "particles = 2000")
             .replace("t_end = 2.0", "t_end = 100.0").replace("n_times = 12", "n_times = 40")
             .replace("seed = 3", "seed = 5"))


@pytest.mark.slow
def test_run_killed_at_random_moments_loses_nothing(tmp_path):
    """``eddyhop run`` is sent SIGINT or SIGKILL at random moments (fixed seed, 4 trials over
    the span of a whole run, writing included): after SIGINT it exits 130 within 3 s (the
    guarantee is 1 s; 3 s leaves room for a loaded CI machine); whatever the signal, the
    output is either absent or the complete result, bit-identical to an uninterrupted run, and
    after the next run of the same study no temporary file is left."""
    study = tmp_path / "s.toml"
    study.write_text(RUN_STUDY)
    env = dict(os.environ, PYTHONUNBUFFERED="1")

    def command(out):
        return [sys.executable, "-m", "eddyhop", "run", str(study), "--out", str(out),
                "--replace"]

    reference = tmp_path / "reference.nc"
    started = time.monotonic()
    subprocess.run(command(reference), check=True, env=env, capture_output=True, timeout=600)
    span = time.monotonic() - started  # numba cache warm from here on
    started = time.monotonic()
    subprocess.run(command(reference), check=True, env=env, capture_output=True, timeout=600)
    span = min(span, time.monotonic() - started)
    with xr.open_dataset(reference) as ds:
        expected = ds["msd"].values.copy()

    rng = random.Random(29)
    for trial, sig in enumerate([signal.SIGINT, signal.SIGKILL] * 2):
        out = tmp_path / f"trial{trial}" / "result.nc"
        out.parent.mkdir()
        process = subprocess.Popen(command(out), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                   env=env)
        time.sleep(rng.uniform(0.1, span))
        sent = time.monotonic()
        process.send_signal(sig)
        try:
            code = process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()
            pytest.fail(f"trial {trial}: no exit within 30 s of signal {sig!r}")
        waited = time.monotonic() - sent
        if sig == signal.SIGINT and code != 0:  # 0: the run had already finished
            assert code == 130, process.stderr.read().decode()[-2000:]
            assert waited < 3.0, f"trial {trial}: exit {waited:.2f} s after SIGINT"
            assert [p.name for p in out.parent.iterdir() if p.name.endswith(".part")] == []
        if out.exists():  # never half-written
            with xr.open_dataset(out) as ds:
                np.testing.assert_array_equal(ds["msd"].values, expected)
        subprocess.run(command(out), check=True, env=env, capture_output=True, timeout=600)
        assert [p.name for p in out.parent.iterdir() if p.name.endswith(".part")] == []
        with xr.open_dataset(out) as ds:
            np.testing.assert_array_equal(ds["msd"].values, expected)
