"""Outputs never destroy data: every writing command × every dangerous output path.

Each refusal must exit 2 with one error line, before any computation, and leave the file it
would have replaced byte-identical.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from eddyhop.cli import main

STUDY = """\
title = "output safety"
[flow]
family = "cellular"
U = 1.0
k = 1.0
[noise]
peclet = 10.0
[[start]]
kind = "uniform"
label = "whole"
[run]
particles = 32
dt = 0.05
t_end = 2.0
n_times = 12
seed = 3
progress = false
[output]
path = "result.nc"
"""
SWEEP = STUDY + """[sweep]
"noise.peclet" = [5.0, 50.0]
"""


def invoke(args, cwd=None):
    runner = CliRunner()
    if cwd is None:
        return runner.invoke(main, [str(a) for a in args])
    import os

    old = os.getcwd()
    os.chdir(cwd)
    try:
        return runner.invoke(main, [str(a) for a in args])
    finally:
        os.chdir(old)


def refused(result, *words):
    """Exit 2, exactly one `error:` line, no traceback, the line holds ``words``."""
    text = result.output
    errors = [line for line in text.splitlines() if line.startswith("error:")]
    assert result.exit_code == 2, text
    assert len(errors) == 1, text
    assert ("Traceback" not in text and not isinstance(result.exception, Exception)) or \
        isinstance(result.exception, SystemExit), text
    for word in words:
        assert word in errors[0], errors[0]
    return errors[0]


def digest(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """A study, its result, an analysed result, a report, a sweep folder with its merge, an
    unrelated text file; built once."""
    root = tmp_path_factory.mktemp("safety")
    study = root / "study.toml"
    study.write_text(STUDY)
    assert invoke(["run", study, "--out", root / "r.nc"]).exit_code == 0
    assert invoke(["analyse", root / "r.nc", "--out", root / "a.nc", "-q",
                   "--no-reference"]).exit_code == 0
    assert invoke(["report", root / "r.nc", "--out", root / "rep.html",
                   "--no-analyse"]).exit_code == 0
    (root / "sweep.toml").write_text(SWEEP)
    answer = invoke(["sweep", root / "sweep.toml", "--out", root / "sw", "--backend", "serial"])
    assert answer.exit_code == 0, answer.output
    (root / "notes.txt").write_text("my notes: not an eddyhop file\n")
    (root / "tracks.csv").write_text("id,t,x,y\n" + "".join(
        f"{i},{k},{(i * k) % 7 * 0.1},{k * 0.2}\n" for i in range(6) for k in range(12)))
    return root


@pytest.fixture
def work(files, tmp_path):
    """A fresh copy per test, so a failing refusal cannot spoil other tests."""
    target = tmp_path / "w"
    shutil.copytree(files, target)
    return target


def _cases(w):
    """(command args, path that must stay untouched, words of the message)."""
    sw = w / "sw"
    manifest = sw / "sweep-manifest.json"
    point = sorted((sw / "points").glob("*.nc"))[0]
    return {
        # output = an input
        "run-out-study": (["run", w / "study.toml", "--out", w / "study.toml"],
                          w / "study.toml", "same file as the input"),
        "analyse-out-input": (["analyse", w / "r.nc", "--out", w / "r.nc"], w / "r.nc",
                              "same file as the input"),
        "report-out-input": (["report", w / "r.nc", "--out", w / "r.nc"], w / "r.nc",
                             "same file as the input"),
        "reference-out-study": (["reference", w / "study.toml", "--out", w / "study.toml"],
                                w / "study.toml", "same file as the input"),
        "sweep-merged-study": (["sweep", w / "sweep.toml", "--out", sw, "--merged",
                                w / "sweep.toml"], w / "sweep.toml", "same file as the input"),
        # output = an unrelated existing file
        "run-out-notes": (["run", w / "study.toml", "--out", w / "notes.txt"], w / "notes.txt",
                          "is not an eddyhop result"),
        "demo-out-notes": (["demo", "--out", w / "notes.txt"], w / "notes.txt",
                           "is not an eddyhop result"),
        "analyse-out-notes": (["analyse", w / "r.nc", "--out", w / "notes.txt"],
                              w / "notes.txt", "is not an eddyhop result"),
        "report-out-result": (["report", w / "a.nc", "--out", w / "r.nc"], w / "r.nc",
                              "is not an eddyhop HTML report"),
        "merge-out-result": (["merge", sw, "--out", w / "r.nc"], w / "r.nc",
                             "is not a merged sweep"),
        "reference-out-notes": (["reference", w / "study.toml", "--out", w / "notes.txt"],
                                w / "notes.txt", "is not an eddyhop result"),
        "sweep-merged-notes": (["sweep", w / "sweep.toml", "--out", sw, "--merged",
                                w / "notes.txt"], w / "notes.txt", "is not a merged sweep"),
        # output inside a sweep folder's own files
        "merge-out-manifest": (["merge", sw, "--out", manifest], manifest,
                               "inside the sweep folder"),
        "merge-out-point": (["merge", sw, "--out", point], point, "inside the sweep folder"),
        "run-out-point": (["run", w / "study.toml", "--out", point], point,
                          "inside the sweep folder"),
        "analyse-out-point": (["analyse", w / "r.nc", "--out", point], point,
                              "inside the sweep folder"),
        "report-out-manifest": (["report", w / "r.nc", "--out", manifest], manifest,
                                "inside the sweep folder"),
        "demo-out-point": (["demo", "--out", point], point, "inside the sweep folder"),
        "sweep-merged-point": (["sweep", w / "sweep.toml", "--out", sw, "--merged", point],
                               point, "inside the sweep folder"),
        "plot-out-points": (["plot", w / "r.nc", "--out", sw / "points" / "figs"], point,
                            "inside the sweep folder"),
        # measured tracks in, CF trajectories out
        "tracks-out-input": (["tracks", w / "tracks.csv", "--out", w / "tracks.csv"],
                             w / "tracks.csv", "same file as the input"),
        "tracks-out-notes": (["tracks", w / "tracks.csv", "--out", w / "notes.txt"],
                             w / "notes.txt", "is not an eddyhop result"),
        "tracks-out-point": (["tracks", w / "tracks.csv", "--out", point], point,
                             "inside the sweep folder"),
        "run-trajectories-out-result": (["run", w / "study.toml", "--out", w / "new.nc",
                                         "--trajectories-out", w / "r.nc"], w / "r.nc",
                                        "is not a CF trajectory file"),
        "run-trajectories-out-study": (["run", w / "study.toml", "--out", w / "new.nc",
                                        "--trajectories-out", w / "study.toml"],
                                       w / "study.toml", "same file as the input"),
        "compare-out-points": (["compare", w / "r.nc", w / "a.nc", "--out",
                                sw / "points" / "cmp"], point, "inside the sweep folder"),
        "report-tables-points": (["report", w / "r.nc", "--out", w / "rep3.html", "--tables",
                                  sw / "points" / "tab"], point, "inside the sweep folder"),
    }


CASE_NAMES = [
    "run-out-study", "analyse-out-input", "report-out-input", "reference-out-study",
    "sweep-merged-study", "run-out-notes", "demo-out-notes", "analyse-out-notes",
    "report-out-result", "merge-out-result", "reference-out-notes", "sweep-merged-notes",
    "merge-out-manifest", "merge-out-point", "run-out-point", "analyse-out-point",
    "report-out-manifest", "demo-out-point", "sweep-merged-point", "plot-out-points",
    "tracks-out-input", "tracks-out-notes", "tracks-out-point", "run-trajectories-out-result",
    "run-trajectories-out-study",
    "compare-out-points", "report-tables-points"]


@pytest.mark.parametrize("case", CASE_NAMES)
def test_dangerous_output_is_refused_and_the_file_is_kept(work, case):
    args, kept, words = _cases(work)[case]
    before = digest(kept)
    listing = sorted(p.name for p in work.rglob("*"))
    refused(invoke(args), words)
    assert digest(kept) == before
    assert sorted(p.name for p in work.rglob("*")) == listing  # nothing new, nothing gone


@pytest.mark.parametrize("command", ["run", "demo", "analyse", "report", "reference", "plot"])
def test_default_output_name_never_replaces_an_existing_file(work, command):
    """No --out: the default name exists (even as a result of the same kind) → refused."""
    if command == "run":
        existing, args = work / "result.nc", ["run", "study.toml"]
        shutil.copy(work / "r.nc", existing)
    elif command == "demo":
        existing, args = work / "demo.nc", ["demo"]
        shutil.copy(work / "r.nc", existing)
    elif command == "analyse":
        existing, args = work / "r.analysed.nc", ["analyse", "r.nc", "-q"]
        shutil.copy(work / "a.nc", existing)
    elif command == "report":
        existing, args = work / "report.html", ["report", "r.nc", "--no-analyse"]
        shutil.copy(work / "rep.html", existing)
    elif command == "reference":
        existing, args = work / "result_reference.nc", ["reference", "study.toml"]
        shutil.copy(work / "r.nc", existing)
    else:
        existing, args = work / "r_msd.png", ["plot", "r.nc", "--figure", "msd",
                                              "--format", "png"]
        existing.write_bytes(b"\x89PNG\r\n\x1a\n old figure")
    before = digest(existing)
    refused(invoke(args, cwd=work), "default output name", "--replace")
    assert digest(existing) == before


def test_replace_flag_allows_replacing_an_unrelated_file_but_never_an_input(work):
    answer = invoke(["run", work / "study.toml", "--out", work / "notes.txt", "--replace"])
    assert answer.exit_code == 0, answer.output
    before = digest(work / "study.toml")
    refused(invoke(["run", work / "study.toml", "--out", work / "study.toml", "--replace"]),
            "same file as the input")
    assert digest(work / "study.toml") == before


def test_explicit_out_replaces_a_result_of_the_same_kind(work):
    answer = invoke(["run", work / "study.toml", "--out", work / "a.nc"])
    assert answer.exit_code == 0, answer.output


def test_hard_link_to_the_input_is_the_same_file(work):
    link = work / "link.nc"
    link.hardlink_to(work / "r.nc")
    before = digest(work / "r.nc")
    refused(invoke(["analyse", work / "r.nc", "--out", link]), "same file as the input")
    assert digest(work / "r.nc") == before


@pytest.mark.parametrize("name, words", [
    ("back\\slash.nc", "backslash"),
    ("x" * 5000 + ".nc", "longer than"),
    ("nodir/out.nc", "does not exist"),
])
@pytest.mark.parametrize("command", ["run", "analyse", "merge", "report", "demo"])
def test_unwritable_output_name_is_refused_before_work(work, command, name, words):
    out = str(work / name)
    args = {"run": ["run", work / "study.toml"], "analyse": ["analyse", work / "r.nc"],
            "merge": ["merge", work / "sw"], "report": ["report", work / "r.nc"],
            "demo": ["demo"]}[command]
    refused(invoke([*args, "--out", out]), words)


def test_sweep_merged_in_missing_folder_is_refused_before_any_point(work):
    (work / "fresh.toml").write_text(SWEEP)
    refused(invoke(["sweep", work / "fresh.toml", "--out", work / "fresh", "--merged",
                    work / "nodir" / "m.nc"]), "does not exist")
    assert not (work / "fresh" / "points").exists()
