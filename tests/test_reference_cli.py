"""``eddyhop reference`` through the real console entry point: files, messages, exit codes."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import xarray as xr

STUDY = """
title = "reference cli check"
[flow]
family = "cats_eye"
epsilon = 0.3
[noise]
peclet = 20
[[start]]
kind = "uniform"
[[start]]
kind = "separatrix"
[run]
particles = 100
dt = 0.01
t_end = 50.0
n_times = 15
[output]
path = "mc.nc"
"""


def eddyhop(*args, cwd):
    return subprocess.run([sys.executable, "-m", "eddyhop", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=300)


def test_reference_writes_monte_carlo_layout(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY)
    done = eddyhop("reference", "s.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "wrote mc_reference.nc" in done.stdout
    assert "homogenized D_xx" in done.stdout
    with xr.open_dataset(tmp_path / "mc_reference.nc") as ds:
        assert ds.attrs["eddyhop_kind"] == "reference"
        assert list(ds["start"].values) == ["uniform", "separatrix"]
        assert ds["msd"].dims == ("start", "time")
        assert ds.sizes["time"] == 15
        assert np.all(np.diff(ds["msd"].values, axis=1) > 0)
    assert not list(tmp_path.glob("*.part"))


def test_diffusivity_only_prints_the_tensor(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY)
    done = eddyhop("reference", "s.toml", "--diffusivity-only", "--rtol", "1e-8",
                   cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "D_xx = " in done.stdout and "estimated relative error" in done.stdout
    assert not (tmp_path / "mc_reference.nc").exists()


def test_bad_input_is_one_clear_line(tmp_path):
    (tmp_path / "t.toml").write_text(STUDY.replace('family = "cats_eye"\nepsilon = 0.3',
                                                   'family = "oscillating_cellular"\nB = 0.2'))
    done = eddyhop("reference", "t.toml", cwd=tmp_path)
    assert done.returncode == 2
    assert "error:" in done.stderr and "Monte Carlo" in done.stderr
    assert "Traceback" not in done.stderr
    assert not list(tmp_path.glob("*.nc"))


def test_coarse_modes_warn_with_the_estimate(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY)
    done = eddyhop("reference", "s.toml", "--modes", "5", "--out", "coarse.nc", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "warning:" in done.stderr and "too coarse" in done.stderr
    assert (tmp_path / "coarse.nc").exists()
