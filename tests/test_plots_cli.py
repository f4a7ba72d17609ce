"""``eddyhop plot`` and ``eddyhop report`` through the real console entry point."""

from __future__ import annotations

import subprocess
import sys

import pytest

import eddyhop
from tests.conftest import make_study


def run_cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "eddyhop", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


@pytest.fixture(scope="module")
def result_file(tmp_path_factory):
    study = make_study(title="cli plot run", noise={"peclet": 10.0},
                       run={"particles": 256, "dt": 0.02, "t_end": 10.0, "n_times": 15,
                            "tracked": 2, "track_samples": 50},
                       aging={"times": [1.0], "lags": 6})
    path = tmp_path_factory.mktemp("cli") / "small.nc"
    eddyhop.write_netcdf(eddyhop.simulate(study), path)
    return path


def test_plot_writes_every_available_figure(result_file, tmp_path):
    out = tmp_path / "figs"
    run = run_cli("plot", str(result_file), "--out", str(out), "--format", "png,pdf")
    assert run.returncode == 0, run.stderr
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(f"small_{figure}.{fmt}" for figure in ("aging", "kurtosis", "msd",
                                                                   "trajectories")
                           for fmt in ("png", "pdf"))
    assert (out / "small_msd.png").read_bytes()[:4] == b"\x89PNG"
    assert (out / "small_msd.pdf").read_bytes()[:5] == b"%PDF-"
    assert run.stdout.count("wrote") == 8


def test_plot_list(result_file):
    run = run_cli("plot", str(result_file), "--list")
    assert run.returncode == 0
    assert "[yes] trajectories" in run.stdout and "[no ] residence" in run.stdout


def test_plot_missing_variable_names_the_command(result_file, tmp_path):
    run = run_cli("plot", str(result_file), "--out", str(tmp_path), "--figure", "msd",
                  "--figure", "residence", "--format", "svg")
    assert run.returncode == 2
    assert "residence_count" in run.stderr and "[hopping] enabled = true" in run.stderr
    # every figure is drawn before any is written: no half-written figure set
    assert [p.name for p in tmp_path.iterdir()] == []


def test_report_command(result_file, tmp_path):
    out = tmp_path / "r.html"
    run = run_cli("report", str(result_file), "--out", str(out), "--figure", "msd")
    assert run.returncode == 0, run.stderr
    text = out.read_text(encoding="utf-8")
    assert "data-figure='msd'" in text and "<h3>Regimes</h3>" in text
    run = run_cli("report", str(tmp_path / "absent.nc"), "--out", str(out))
    assert run.returncode == 2 and "does not exist" in run.stderr
