"""The installed console script, end to end: exit codes, messages, files left behind."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import netCDF4
import pytest
import xarray as xr

from .test_interrupts import CTRL_C_STATUSES

SMALL = """
title = "cli check"
[flow]
family = "cats_eye"
epsilon = 0.2
[noise]
peclet = 20
[run]
particles = 200
dt = 0.02
t_end = 4.0
n_times = 12
seed = 3
progress = false
"""


def eddyhop(*args, cwd=None, timeout=300):
    return subprocess.run([sys.executable, "-m", "eddyhop", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=timeout)


def test_help_is_fast_and_teaches():
    start = time.perf_counter()
    result = eddyhop("--help")
    assert result.returncode == 0
    assert "eddyhop run" in result.stdout and "validate" in result.stdout
    assert time.perf_counter() - start < 10


def test_run_writes_a_readable_netcdf(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(SMALL)
    out = tmp_path / "r.nc"
    result = eddyhop("run", str(study), "--out", str(out))
    assert result.returncode == 0, result.stderr
    assert "wrote" in result.stdout
    with netCDF4.Dataset(out) as nc:  # plain netCDF4, no xarray
        assert nc.variables["msd"].units == "1"
        assert "time" in nc.dimensions
        assert nc.getncattr("flow_family") == "cats_eye"
        assert "epsilon = 0.2" in nc.getncattr("study_toml")
    ds = xr.open_dataset(out)
    assert ds["msd"].sizes["time"] >= 10
    ds.close()
    info = eddyhop("info", str(out))
    assert info.returncode == 0 and "msd" in info.stdout
    assert not list(tmp_path.glob("*.part"))


def test_validate_reports_each_file(tmp_path):
    good = tmp_path / "good.toml"
    good.write_text(SMALL)
    bad = tmp_path / "bad.toml"
    bad.write_text(SMALL.replace("epsilon = 0.2", "epsilon = 2.0"))
    result = eddyhop("validate", str(good), str(bad))
    assert result.returncode == 2
    assert "good.toml: valid" in result.stdout
    assert "flow.epsilon = 2" in result.stderr and "[0, 1]" in result.stderr


@pytest.mark.parametrize("content, message", [
    ("not = = toml", "not valid TOML"),
    (SMALL.replace("particles = 200", "particles = 0"), "run.particles"),
    (SMALL.replace("dt = 0.02", "dt = -1"), "run.dt"),
])
def test_bad_study_exits_nonzero_with_one_line(tmp_path, content, message):
    study = tmp_path / "s.toml"
    study.write_text(content)
    result = eddyhop("run", str(study), "--out", str(tmp_path / "r.nc"))
    assert result.returncode == 2
    assert message in result.stderr
    assert "Traceback" not in result.stderr
    assert not (tmp_path / "r.nc").exists()


def test_missing_output_directory_is_refused_before_running(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(SMALL)
    result = eddyhop("run", str(study), "--out", str(tmp_path / "nowhere" / "r.nc"))
    assert result.returncode == 2
    assert "does not exist" in result.stderr


def test_blow_up_amplitude_is_refused_with_its_step_and_dt(tmp_path):
    """U = 1e300 once blew up at run time; it is refused at validation, naming the field, the
    step's phase and dt (runtime blow-ups: tests/test_overflow.py, tests/test_kernel_tiles.py)."""
    study = tmp_path / "s.toml"
    study.write_text(SMALL.replace("[flow]", "[flow]\nU = 1e300").replace("peclet = 20",
                                                                           "kappa = 0.1"))
    result = eddyhop("run", str(study), "--out", str(tmp_path / "r.nc"))
    assert result.returncode == 2
    assert "flow.U = 1e+300" in result.stderr
    assert "step" in result.stderr and "dt = 0.02" in result.stderr
    assert not (tmp_path / "r.nc").exists()


def test_overflowing_amplitude_is_refused_before_the_run(tmp_path):
    """U = 1e80 once reached positions ~1e80 whose fourth powers overflowed; such an
    amplitude is now refused at validation (tests/test_overflow.py), naming the field."""
    study = tmp_path / "s.toml"
    study.write_text(SMALL.replace("[flow]", "[flow]\nU = 1e80").replace("peclet = 20",
                                                                        "kappa = 0.1"))
    result = eddyhop("run", str(study), "--out", str(tmp_path / "r.nc"))
    assert result.returncode == 2, result.stderr
    assert "flow.U = 1e+80" in result.stderr and "2**20" in result.stderr
    assert not (tmp_path / "r.nc").exists()


def test_ctrl_c_leaves_no_file(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(SMALL.replace("particles = 200", "particles = 200000")
                     .replace("t_end = 4.0", "t_end = 400.0")
                     .replace("progress = false", "progress = true"))
    out = tmp_path / "r.nc"
    out.write_bytes(b"an earlier result that must survive")
    process = subprocess.Popen([sys.executable, "-m", "eddyhop", "run", str(study), "--out",
                                str(out), "--replace"], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    # interrupt only once integration is under way (the progress bar has started)
    seen = ""
    deadline = time.monotonic() + 180
    while "integrating" not in seen and time.monotonic() < deadline:
        seen += process.stderr.read(1)
    assert "integrating" in seen, seen
    process.send_signal(signal.SIGINT)
    _, stderr = process.communicate(timeout=240)
    assert process.returncode in CTRL_C_STATUSES, stderr  # 130, or SIGINT under python -m
    assert "interrupted" in stderr and "Traceback" not in stderr
    assert out.read_bytes() == b"an earlier result that must survive"
    assert not list(tmp_path.glob(".*part")) and not list(tmp_path.glob("*.part"))


def test_ctrl_c_while_the_command_line_is_imported_exits_130(monkeypatch, capsys):
    """A Ctrl-C that lands while ``entry`` imports its helpers, or while the console script
    imports the command line, is an interrupted command: the line "interrupted" and status
    130, no traceback."""
    import builtins

    import eddyhop.__main__ as doors
    import eddyhop.cli as cli

    real_import = builtins.__import__

    def interrupted_import(victim):
        def fake(name, *args, **kwargs):
            if name == victim:
                raise KeyboardInterrupt
            return real_import(name, *args, **kwargs)
        return fake

    # entry ends by ignoring SIGINT and freezing the heap at exit: not in the test process
    monkeypatch.setattr(cli, "_skip_final_collection", lambda: None)
    monkeypatch.setattr(builtins, "__import__", interrupted_import("_jit"))
    handler = signal.getsignal(signal.SIGINT)
    try:
        with pytest.raises(SystemExit) as stop:
            cli.entry(["families"])
    finally:
        signal.signal(signal.SIGINT, handler)
    assert stop.value.code == 130
    monkeypatch.setattr(builtins, "__import__", interrupted_import("eddyhop.cli"))
    with pytest.raises(SystemExit) as stop:
        doors.console()
    assert stop.value.code == 130
    monkeypatch.setattr(builtins, "__import__", real_import)
    assert capsys.readouterr().err == "interrupted\ninterrupted\n"


def test_demo_study_is_valid():
    from eddyhop.cli.demo import demo_text
    from eddyhop.study.spec import parse_study_text

    study = parse_study_text(demo_text())
    assert len(study.starts) >= 2


@pytest.mark.parametrize("path", sorted(Path(__file__).resolve().parent.parent.glob(
    "studies/*.toml")), ids=lambda p: p.name)
def test_shipped_studies_validate(path):
    result = eddyhop("validate", str(path))
    assert result.returncode == 0, result.stderr
    assert os.path.exists(path)
