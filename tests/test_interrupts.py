"""Ctrl-C and killed writers: no hang, no leftover temporary file, no lock kept.

* A temporary ``.NAME.PID-XXXX.part`` left by a writer that no longer exists (SIGKILL/SIGTERM)
  is removed by the next write of the same file; one of a live process is never touched.
* Ctrl-C while a netCDF file is written abandons the write at a safe point: the process exits
  130 within seconds, with no ``.part`` file left and the sweep-folder lock released.
"""

from __future__ import annotations

import os
import random
import shutil
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

# Statuses of a command ended by Ctrl-C.  The console script exits 130; under ``python -m``
# CPython itself ends the process by SIGINT (status -2 here) once the interrupt has passed
# through code compiled from a string (``exec``: namedtuple, numba templates), after the exit
# handlers have run.  Shells report both as 130 (eddyhop/__main__.py explains).
CTRL_C_STATUSES = (130, -signal.SIGINT)


def console_command() -> list[str]:
    """The installed ``eddyhop`` console script beside this interpreter, else ``python -m``."""
    script = shutil.which("eddyhop", path=str(Path(sys.executable).parent))
    return [script] if script else [sys.executable, "-m", "eddyhop"]


def signal_after(command, delay: float, sig=signal.SIGINT, env=None):
    """Start ``command``, send it ``sig`` after ``delay`` seconds; return its status, the
    seconds from the signal to its exit, and its stderr.  No exit within 30 s fails the
    test (a deadlock)."""
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    time.sleep(delay)
    sent = time.monotonic()
    process.send_signal(sig)
    try:
        code = process.wait(timeout=30)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()
        pytest.fail(f"{command}: no exit within 30 s of signal {sig!r} (deadlock)")
    return code, time.monotonic() - sent, process.stderr.read().decode()


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
    assert code in CTRL_C_STATUSES, "".join(seen)
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
    """``eddyhop run`` (the console script users run) is sent SIGINT or SIGKILL at random
    moments (fixed seed, 4 trials over the span of a whole run, writing included): after
    SIGINT it exits 130 within 3 s (the guarantee is 1 s; 3 s leaves room for a loaded CI
    machine) with the line "interrupted" and no traceback; whatever the signal, the output is
    either absent or the complete result, bit-identical to an uninterrupted run, and after the
    next run of the same study no temporary file is left."""
    study = tmp_path / "s.toml"
    study.write_text(RUN_STUDY)
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    door = console_command()
    statuses = (130,) if len(door) == 1 else CTRL_C_STATUSES

    def command(out):
        return [*door, "run", str(study), "--out", str(out), "--replace"]

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
        code, waited, stderr = signal_after(command(out), rng.uniform(0.1, span), sig, env)
        if sig == signal.SIGINT and code != 0:  # 0: the run had already finished
            assert code in statuses, stderr[-2000:]
            assert "interrupted" in stderr and "Traceback" not in stderr, stderr[-2000:]
            assert waited < 3.0, f"trial {trial}: exit {waited:.2f} s after SIGINT"
            assert [p.name for p in out.parent.iterdir() if p.name.endswith(".part")] == []
        if out.exists():  # never half-written
            with xr.open_dataset(out) as ds:
                np.testing.assert_array_equal(ds["msd"].values, expected)
        subprocess.run(command(out), check=True, env=env, capture_output=True, timeout=600)
        assert [p.name for p in out.parent.iterdir() if p.name.endswith(".part")] == []
        with xr.open_dataset(out) as ds:
            np.testing.assert_array_equal(ds["msd"].values, expected)


@pytest.fixture
def command_line_ctrl_c(monkeypatch):
    """The command line's remembering SIGINT handler, installed for one test and removed."""
    from eddyhop.atomic import _RememberedCtrlC, remember_ctrl_c

    handler = signal.getsignal(signal.SIGINT)
    monkeypatch.setattr(sys, "unraisablehook", sys.unraisablehook)
    remember_ctrl_c()
    try:
        yield signal.getsignal(signal.SIGINT)
    finally:
        signal.signal(signal.SIGINT, handler)
        _RememberedCtrlC.seen = False


def drop_a_ctrl_c(handler) -> None:
    """Deliver a Ctrl-C where Python drops the KeyboardInterrupt: inside a ``__del__``."""

    class Finalised:
        def __del__(self):
            handler(signal.SIGINT, None)

    Finalised()  # freed at once (reference count): __del__ raises, Python drops it


def test_a_dropped_ctrl_c_is_remembered_and_raised_once_where_work_goes_on(
        command_line_ctrl_c, capsys):
    """A KeyboardInterrupt raised in a ``__del__`` (as in llvmlite's finalisers while kernels
    load) is dropped by Python; the command line's handler remembers it, Python's "Exception
    ignored" traceback is not printed, and ``raise_lost_ctrl_c`` raises it once — but not in
    clean-up code that handles an exception."""
    from eddyhop.atomic import ctrl_c_remembered, raise_lost_ctrl_c

    drop_a_ctrl_c(command_line_ctrl_c)
    assert ctrl_c_remembered()
    assert capsys.readouterr().err == ""
    try:
        raise ValueError("clean-up after an error")
    except ValueError:
        raise_lost_ctrl_c()  # not here
    with pytest.raises(KeyboardInterrupt):
        raise_lost_ctrl_c()
    assert not ctrl_c_remembered()
    raise_lost_ctrl_c()  # once only


def test_a_dropped_ctrl_c_stops_the_run_and_the_write(command_line_ctrl_c, tmp_path,
                                                      study_factory):
    """The run stops at its next chunk, and a write about to be renamed into place is
    abandoned: no file, no temporary."""
    import eddyhop

    study = study_factory(run={"particles": 64, "t_end": 1.0, "n_times": 4, "dt": 0.05,
                               "workers": 1})
    drop_a_ctrl_c(command_line_ctrl_c)
    with pytest.raises(KeyboardInterrupt):
        eddyhop.simulate(study, progress=False)
    drop_a_ctrl_c(command_line_ctrl_c)
    with pytest.raises(KeyboardInterrupt):
        atomic_write_text(tmp_path / "a.txt", "x")
    assert list(tmp_path.iterdir()) == []


def test_an_error_after_a_dropped_ctrl_c_is_reported_as_the_interruption(
        command_line_ctrl_c, capsys):
    """A KeyboardInterrupt inside an import made by C code arrives as an ImportError: after a
    remembered Ctrl-C the command says "interrupted" with status 130, not "internal error"."""
    from eddyhop.cli.common import friendly_errors

    @friendly_errors
    def command():
        drop_a_ctrl_c(command_line_ctrl_c)
        raise ImportError('PyCapsule_Import could not import module "pandas"')

    with pytest.raises(SystemExit) as stop:
        command()
    assert stop.value.code == 130
    assert "interrupted" in capsys.readouterr().err


def test_ctrl_c_is_held_while_llvm_emits_machine_code(monkeypatch):
    """While LLVM emits (or loads) a kernel's machine code, SIGINT is held and delivered when
    it returns: LLVM's callbacks into Python would otherwise be where the KeyboardInterrupt
    is raised, and ctypes drops it there.  Checked from inside the emitting call of a fresh
    compile."""
    from numba.core import codegen

    from eddyhop._jit import jit

    handlers = []
    emit = codegen.JitEngine.finalize_object

    def spy(self, *args, **kwargs):
        handlers.append(signal.getsignal(signal.SIGINT))
        if len(handlers) == 1:
            os.kill(os.getpid(), signal.SIGINT)  # during the first emission
        return emit(self, *args, **kwargs)

    monkeypatch.setattr(codegen.JitEngine, "finalize_object", spy)

    @jit(cache=False)
    def add_one(x):
        return x + 1.0

    with pytest.raises(KeyboardInterrupt):
        add_one(1.0)
    assert handlers and signal.default_int_handler not in handlers
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


def test_ctrl_c_is_held_while_a_result_is_read(tmp_path, monkeypatch):
    """A Ctrl-C inside xarray's read could leave its netCDF lock taken, and the close then
    waited for it for ever (a sweep interrupted while it read back a finished point hung).
    The read holds Ctrl-C and delivers it once the file is closed; the file reads again."""
    from eddyhop.results.io import open_result

    path = tmp_path / "r.nc"
    write_netcdf(small_dataset(), path)
    original = xr.Dataset.load
    handlers = []

    def interrupted_load(self, *args, **kwargs):
        handlers.append(signal.getsignal(signal.SIGINT))
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(0.05)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(xr.Dataset, "load", interrupted_load)
    with pytest.raises(KeyboardInterrupt):
        open_result(path)
    assert handlers and handlers[0] is not signal.default_int_handler
    monkeypatch.setattr(xr.Dataset, "load", original)
    np.testing.assert_array_equal(open_result(path)["msd"].values, np.arange(5.0))


@pytest.mark.slow
def test_sweep_interrupted_at_random_moments_resumes_to_the_same_result(tmp_path):
    """``eddyhop sweep`` (console script, threads) is sent SIGINT at random moments (fixed
    seed, 4 trials over the span of a whole sweep, point read-backs and the merge included):
    each time it exits 130 within 5 s with "interrupted" and no traceback (or 0 if it had
    finished), and the resumed sweep's merged numbers equal an uninterrupted sweep's."""
    from .test_sweep_run import assert_same_numbers, study_text, write_study

    path = write_study(tmp_path, study_text(particles=400, t_end=4.0))
    door = console_command()
    statuses = (130,) if len(door) == 1 else CTRL_C_STATUSES

    def command(out):
        return [*door, "sweep", str(path), "--out", str(out), "--no-progress"]

    reference = tmp_path / "reference"
    subprocess.run(command(reference), check=True, capture_output=True, timeout=600)
    started = time.monotonic()
    subprocess.run(command(tmp_path / "timed"), check=True, capture_output=True, timeout=600)
    span = time.monotonic() - started
    with xr.open_dataset(reference / "sweep.nc") as ds:
        expected = ds.load()

    rng = random.Random(41)
    for trial in range(4):
        out = tmp_path / f"trial{trial}"
        code, waited, stderr = signal_after(command(out), rng.uniform(0.1, span))
        if code != 0:  # 0: the sweep had already finished
            assert code in statuses, stderr[-2000:]
            assert "interrupted" in stderr and "Traceback" not in stderr, stderr[-2000:]
            assert waited < 5.0, f"trial {trial}: exit {waited:.2f} s after SIGINT"
        subprocess.run(command(out), check=True, capture_output=True, timeout=600)
        with xr.open_dataset(out / "sweep.nc") as ds:
            assert_same_numbers(ds.load(), expected)
