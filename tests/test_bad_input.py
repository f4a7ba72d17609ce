"""Bad input gets one line (exit 2) naming the field or option, the value and what is allowed;
shared files (results, manifests, field files) are untrusted input."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest
import xarray as xr

from .test_output_safety import STUDY, digest, files, invoke, refused  # noqa: F401

PAYLOAD = "<img src=x onerror=alert(1)>'\"><script>evil()</script>"


@pytest.fixture
def work(files, tmp_path):  # noqa: F811
    target = tmp_path / "w"
    shutil.copytree(files, target)
    return target


# ---- no tracebacks ---------------------------------------------------------------------------
def test_merged_sweep_given_to_analyse(work):
    refused(invoke(["analyse", work / "sw" / "sweep.nc", "--out", work / "x.nc"]),
            "merged sweep", "points/")


def test_foreign_netcdf_given_to_analyse_plot_report(work):
    """A report needs an eddyhop result; analyse and plot take any netCDF holding the
    variables they need (own data with time and msd) and name what is missing."""
    foreign = work / "foreign.nc"
    xr.Dataset({"a": ("x", np.arange(3.0))}).to_netcdf(foreign)
    refused(invoke(["report", foreign, "--out", work / "x.html"]), "not an eddyhop result")
    refused(invoke(["analyse", foreign, "--out", work / "x.nc"]), "needs variable(s)")
    answer = invoke(["plot", foreign, "--out", work / "figs"])
    assert answer.exit_code == 0 and "no figure applies" in answer.output
    assert not (work / "x.html").exists() and not (work / "x.nc").exists()
    assert not (work / "figs").exists()


@pytest.mark.parametrize("old, new, words", [
    ('family = "cellular"', 'family = ["cellular"]', ["flow.family", "['cellular']"]),
    ("k = 1.0", "k = 1e-308", ["flow.k", "1e-308", "[1e-150, 1e+150]"]),
    ("k = 1.0", "k = 1e300", ["flow.k", "1e+300"]),  # found by the fuzzer: cell area 0
])
def test_bad_study_values(work, old, new, words):
    (work / "bad.toml").write_text(STUDY.replace(old, new))
    refused(invoke(["run", work / "bad.toml", "--out", work / "x.nc"]), *words)


def test_unexpected_exception_is_one_line_with_exit_1(work, monkeypatch):
    """The last resort: a bug surfaces as one 'internal error' line (exit 1), no traceback;
    EDDYHOP_DEBUG=1 lets it through for a developer."""
    import eddyhop.results.io

    def broken(path):
        raise RuntimeError("simulated bug\nsecond line")

    monkeypatch.setattr(eddyhop.results.io, "open_result", broken)
    answer = invoke(["info", work / "r.nc"])
    assert answer.exit_code == 1
    lines = answer.output.strip().splitlines()
    assert len(lines) == 1 and "internal error (RuntimeError: simulated bug second line)" in \
        lines[0] and "Traceback" not in answer.output
    monkeypatch.setenv("EDDYHOP_DEBUG", "1")
    assert isinstance(invoke(["info", work / "r.nc"]).exception, RuntimeError)


def test_over_long_input_name(work):
    refused(invoke(["info", work / ("x" * 5000 + ".nc")]), "cannot be read")
    refused(invoke(["run", work / ("s" * 5000 + ".toml")]), "cannot be read")
    answer = invoke(["validate", work / ("s" * 5000 + ".toml")])
    assert answer.exit_code == 2 and "cannot be read" in answer.output
    assert len(answer.output) < 400  # the name is shortened, not echoed 5000 characters long


@pytest.mark.parametrize("damage, words", [
    (lambda m: m.pop("points"), "points"),
    (lambda m: m["points"][0].pop("id"), "points[0].id"),
    (lambda m: m["points"][0].update(status="finished"), "points[0].status"),
    (lambda m: m["points"][0].update(file="../../x.nc"), "points[0].file"),
    (lambda m: m["points"][0].update(file="/etc/passwd"), "points[0].file"),
    (lambda m: m.update(axes="peclet"), "axes"),
])
@pytest.mark.parametrize("command", ["merge", "sweep"])
def test_damaged_or_escaping_manifest(work, damage, words, command):
    """A damaged manifest, or one whose point file leaves the folder, is refused at merge and
    at resume; nothing is read from outside the folder and nothing is written."""
    manifest = work / "sw" / "sweep-manifest.json"
    data = json.loads(manifest.read_text())
    damage(data)
    manifest.write_text(json.dumps(data))
    before = digest(manifest)
    args = (["merge", work / "sw", "--out", work / "m.nc"] if command == "merge" else
            ["sweep", work / "sweep.toml", "--out", work / "sw", "--backend", "serial"])
    refused(invoke(args), "damaged", words)
    assert digest(manifest) == before and not (work / "m.nc").exists()


def test_mathtext_in_labels_and_units(work):
    """`$…$` that is not valid math in a start label or a unit is drawn literally."""
    text = (STUDY.replace('label = "whole"', "label = 'a $\\frac{$ b'")
            + "length_unit = 'm$^{$'\ntime_unit = 's$\\alpha$'\n")
    (work / "math.toml").write_text(text)
    assert invoke(["run", work / "math.toml", "--out", work / "m.nc"]).exit_code == 0
    answer = invoke(["plot", work / "m.nc", "--figure", "msd", "--format", "png"])
    assert answer.exit_code == 0, answer.output
    answer = invoke(["report", work / "m.nc", "--out", work / "m.html"])
    assert answer.exit_code == 0, answer.output


@pytest.mark.parametrize("args, words", [
    (["plot", "r.nc", "--dpi", "0"], ["--dpi 0", "[10, 2400]"]),
    (["plot", "r.nc", "--format", ","], ["--format ','", "png"]),
    (["plot", "r.nc", "--format", "gif"], ["'gif'", "png, pdf, svg"]),
    (["reference", "study.toml", "--rtol", "nan"], ["--rtol = nan", "(0, 1)"]),
    (["reference", "study.toml", "--modes", "100000"], ["--modes = 100000", "2 to 512"]),
    (["run", "study.toml", "-w", "100000", "--out", "x.nc"], ["--workers", "100000"]),
    (["run", "study.toml", "-w", "0", "--out", "x.nc"], ["--workers", "= 0"]),
    (["run", "study.toml", "-w", "-2", "--out", "x.nc"], ["--workers", "-2"]),
    (["sweep", "sweep.toml", "--out", "s2", "--scheduler", "http://localhost:8787"],
     ["--scheduler", "http://localhost:8787", "tcp://"]),
    (["sweep", "sweep.toml", "--out", "s2", "--timeout", "nan"], ["--timeout", "nan"]),
    (["merge", "sw", "--out", "m.nc", "--fit-peclet", "100", "10"], ["--fit-peclet 100 10"]),
    (["merge", "sw", "--out", "m.nc", "--fit-peclet", "nan", "nan"], ["--fit-peclet", "nan"]),
    (["analyse", "r.nc", "--out", "x.nc", "--pdf-time", "-1"], ["pdf_times", "no effect"]),
    (["analyse", "r.nc", "--out", "x.nc", "--tail-start", "-1"], ["tail_start"]),
    (["analyse", "r.nc", "--out", "x.nc", "--aging-time", "3"], ["aging_times"]),
    (["run", "study.toml", "--out", "back\\slash.nc"], ["backslash"]),
])
def test_bad_option_is_one_line(work, args, words):
    refused(invoke(args, cwd=work), *words)
    assert not (work / "x.nc").exists() and not (work / "s2" / "points").exists()


def test_timed_out_scheduler_is_refused_within_the_timeout(work):
    import time

    started = time.monotonic()
    refused(invoke(["sweep", "sweep.toml", "--out", "s2", "--backend", "dask", "--scheduler",
                    "tcp://127.0.0.1:1", "--timeout", "2"], cwd=work), "Dask scheduler")
    assert time.monotonic() - started < 20  # the 2 s timeout plus import time, not more


TRACKED = STUDY.replace("progress = false", "progress = false\ntracked = 16") + """
[aging]
times = [0.5]
[hopping]
enabled = true
"""


@pytest.fixture(scope="module")
def tracked_result(tmp_path_factory):
    root = tmp_path_factory.mktemp("tracked")
    (root / "t.toml").write_text(TRACKED)
    answer = invoke(["run", root / "t.toml", "--out", root / "t.nc"])
    assert answer.exit_code == 0, answer.output
    return root / "t.nc"


@pytest.mark.parametrize("args, words", [
    (["--pdf-time", "-1"], ["time -1", "outside the tracked run"]),
    (["--pdf-time", "nan"], ["time nan"]),
    (["--pdf-time", "1e9"], ["time 1e+09"]),
    (["--tail-start", "-1"], ["tail_start = -1"]),
    (["--aging-time", "3"], ["aging time 3"]),
    (["--aging-time", "0.7"], ["aging time 0.7", "not recorded"]),
    (["--significance", "nan"], ["significance = nan"]),
])
def test_analysis_options_checked_on_a_file_that_uses_them(tracked_result, tmp_path, args,
                                                           words):
    refused(invoke(["analyse", tracked_result, "--out", tmp_path / "x.nc", "-q",
                    "--no-reference", *args]), *words)
    assert not (tmp_path / "x.nc").exists()


# ---- shared files are untrusted input --------------------------------------------------------
def _craft(source, target):
    """A copy of result ``source`` whose every text carries an HTML payload, including a
    start-region key of the stored study."""
    ds = xr.open_dataset(source).load()
    study = json.loads(ds.attrs["study_resolved"])
    regions = study.get("starts") or study.get("start")
    regions = regions if isinstance(regions, list) else [regions]
    regions[0][PAYLOAD] = 1.0
    regions[0]["label"] = PAYLOAD
    ds.attrs["study_resolved"] = json.dumps(study)
    keep = ("study_resolved", "eddyhop_kind", "peclet_convention", "integrator",
            "noise_model", "flow_family")
    for key, value in list(ds.attrs.items()):
        if isinstance(value, str) and key not in keep:
            ds.attrs[key] = value + PAYLOAD
    for name in ds.variables:
        for key, value in list(ds[name].attrs.items()):
            if isinstance(value, str):
                ds[name].attrs[key] = value + PAYLOAD
    ds.to_netcdf(target)


@pytest.mark.parametrize("source", ["r.nc", "a.nc"])
def test_report_escapes_every_string_of_a_crafted_file(work, source):
    _craft(work / source, work / "evil.nc")
    answer = invoke(["report", work / "evil.nc", "--out", work / "evil.html"])
    assert answer.exit_code == 0, answer.output
    text = (work / "evil.html").read_text()
    assert "<img src=x" not in text and "<script>evil" not in text
    assert "&lt;img src=x onerror=alert(1)&gt;" in text  # shown, escaped


@pytest.mark.parametrize("resolved", ["[1, 2]", "not json", '{"flow": 3, "run": [1], '
                                      '"start": "x", "hopping": {"enabled": true}}'])
def test_report_survives_a_garbled_study_attribute(work, resolved):
    ds = xr.open_dataset(work / "r.nc").load()
    ds.attrs["study_resolved"] = resolved
    ds.to_netcdf(work / "garbled.nc")
    answer = invoke(["report", work / "garbled.nc", "--out", work / "g.html"])
    assert answer.exit_code == 0, answer.output


GRIDDED = """\
[flow]
family = "gridded"
file = "{file}"
stream_function = "psi"
[noise]
kappa = 0.1
[run]
particles = 16
dt = 0.05
t_end = 0.5
n_times = 4
"""


@pytest.mark.parametrize("file, words", [
    ("notes.txt", ["notes.txt", "not a readable netCDF file"]),
    ("/etc/passwd", ["/etc/passwd", "not a readable netCDF file"]),
    ("/dev/zero", ["/dev/zero", "not a regular file"]),
    ("sw", ["not a regular file"]),
    ("absent.nc", ["absent.nc", "does not exist", "beside the study file"]),
    ("r.nc", ["no variable 'psi'"]),
])
def test_gridded_file_must_be_a_readable_netcdf_field(work, file, words):
    """The rule: flow.file is a regular, readable netCDF file holding the named field; a
    relative path is looked up beside the study file first (then the working directory)."""
    (work / "g.toml").write_text(GRIDDED.format(file=file))
    refused(invoke(["run", work / "g.toml", "--out", work / "x.nc"]), *words)


def test_sweep_into_a_foreign_folder_leaves_it_untouched(work):
    """Refused, and no lock file or points folder is left behind."""
    foreign = work / "mine"
    foreign.mkdir()
    (foreign / "thesis.tex").write_text("keep")
    refused(invoke(["sweep", work / "sweep.toml", "--out", foreign, "--backend", "serial"]),
            "is not empty", "thesis.tex")
    assert sorted(p.name for p in foreign.iterdir()) == ["thesis.tex"]
