"""Every shipped example study is valid, and runs: each non-sweep study is run on a scaled-down
ensemble (same flow, noise, time grid and seed, far fewer particles), and the example studies
of the analytic flow families are drawn."""

from __future__ import annotations

import dataclasses
import re
import warnings
from pathlib import Path

import numpy as np
import pytest

import eddyhop
from eddyhop.presentation import plots

STUDIES = Path(__file__).resolve().parent.parent / "studies"
ALL = sorted(STUDIES.glob("*.toml"))
# The examples of this part of the project: one or more per analytic flow family.
EXAMPLES = {
    "heated_pan_rolls.toml": "cellular",
    "leaky_eddy_pond.toml": "cats_eye",
    "striped_slip_channel.toml": "shear",
    "river_pier_wakes.toml": "drifting_cellular",
    "sloshing_tank_rolls.toml": "oscillating_cellular",
    "two_scale_eddies.toml": "fourier",
}
PARTICLES = 64
BUDGET = 3e7  # particle-steps per start for a scaled-down run in the test


def test_there_are_studies():
    assert len(ALL) >= len(EXAMPLES)
    assert set(EXAMPLES) <= {p.name for p in ALL}


@pytest.mark.parametrize("path", ALL, ids=lambda p: p.name)
def test_study_is_valid(path):
    study = eddyhop.load_study(path)
    assert study.title and study.title != "untitled study"
    assert study.source_text.startswith("#"), "a study opens with a comment saying what it is"


@pytest.mark.parametrize("path", ALL, ids=lambda p: p.name)
def test_every_study_says_what_it_demonstrates_and_how_long(path):
    text = path.read_text(encoding="utf-8")
    header = "\n".join(line for line in text.splitlines() if line.startswith("#"))
    assert "Demonstrates:" in header
    assert re.search(r"Takes about [\d–-]+ (s|minutes?) (with .+ )?on two cores", header), header
    if path.name in EXAMPLES:
        assert eddyhop.load_study(path).flow.family == EXAMPLES[path.name]


def test_every_analytic_family_has_an_example():
    families = {eddyhop.load_study(p).flow.family for p in ALL}
    assert set(EXAMPLES.values()) <= families


def scaled(study):
    steps = study.run.t_end / study.run.dt
    particles = int(max(16, min(PARTICLES, BUDGET / steps)))
    run = dataclasses.replace(study.run, particles=particles, workers=1, progress=False,
                              tracked=min(study.run.tracked, 2), batches=8)
    return dataclasses.replace(study, run=run)


RUNNABLE = [p for p in ALL if eddyhop.load_study(p).sweep is None]


@pytest.mark.parametrize("path", RUNNABLE, ids=lambda p: p.name)
def test_study_runs_scaled_down(path):
    study = scaled(eddyhop.load_study(path))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = eddyhop.simulate(study)
    msd = ds["msd"].values
    assert np.isfinite(msd).all() and (msd > 0).all()
    assert ds["time"].values[-1] == pytest.approx(study.run.t_end)
    if path.name in EXAMPLES:
        # the family-specific figure: tracks over this flow's ψ contours
        figure = plots.trajectories_figure(ds)
        tracks = [line for ax in figure.axes for line in ax.get_lines()
                  if str(line.get_gid()).startswith("track_")]
        assert len(tracks) == len(study.starts) * study.run.tracked
        for line in tracks:
            assert np.isfinite(np.asarray(line.get_xydata())).all()
        assert all(ax.get_xlabel() for ax in figure.axes)
