"""Provenance and conventions of every file eddyhop writes (issue: provenance a referee can follow).

Files made once per module through the real console entry point: a run (with a
``[metadata]`` table), its analysis, the noise-free reference, a merged sweep, a figure and a
report.  Each netCDF file is checked rule by rule (software versions, command line, input
checksums, CF ``history``, ACDD discovery attributes, numeric scales, no ``_FillValue`` on
coordinates, no attribute standing for nothing) and with the IOOS compliance checker (CF 1.10
and ACDD 1.3) when it is installed (it is in the test extras; CI must have it).
"""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import netCDF4
import pytest

import eddyhop
from eddyhop.errors import StudyError

STUDY = """
title = "provenance check"
description = "A small cellular-flow run whose files are checked for provenance."
[metadata]
creator_name = "A. Referee"
creator_email = "a.referee@example.org"
institution = "Example Institute"
license = "CC-BY-4.0"
keywords = ["paddle tank", "dye release"]
[flow]
family = "cellular"
[noise]
peclet = 10
[run]
particles = 128
dt = 0.05
t_end = 20.0
n_times = 12
seed = 5
progress = false
[aging]
times = [2.0]
lags = 4
[output]
length_unit = "m"
time_unit = "s"
"""

SWEEP = STUDY.replace('[output]', '[sweep]\n"noise.peclet" = [5.0, 20.0]\n[output]')

EMPTY = ("none", "None", "[]", "{}", "")


def command(*args, cwd):
    done = subprocess.run([sys.executable, "-m", "eddyhop", *args], capture_output=True,
                          text=True, cwd=cwd, timeout=600)
    assert done.returncode == 0, done.stderr
    return done


def sha256(path) -> str:
    return "sha256:" + hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("provenance")
    (folder / "s.toml").write_text(STUDY)
    (folder / "sw.toml").write_text(SWEEP)
    command("run", "s.toml", "--out", "r.nc", cwd=folder)
    command("analyse", "r.nc", "--out", "a.nc", "--no-reference", "-q", cwd=folder)
    command("reference", "s.toml", "--out", "ref.nc", cwd=folder)
    command("sweep", "sw.toml", "--out", "sw", "--backend", "serial", "--no-merge", cwd=folder)
    command("merge", "sw", "--out", "m.nc", "--no-analysis", cwd=folder)
    command("plot", "a.nc", "--out", "figs", "--figure", "msd", "--format", "png", cwd=folder)
    command("report", "a.nc", "--out", "rep.html", cwd=folder)
    return folder


NETCDF = ("r.nc", "a.nc", "ref.nc", "m.nc")


def global_attrs(path) -> dict:
    with netCDF4.Dataset(path) as nc:
        return {name: nc.getncattr(name) for name in nc.ncattrs()}


@pytest.mark.parametrize("name", NETCDF)
def test_software_command_and_history_are_recorded(files, name):
    attrs = global_attrs(files / name)
    assert attrs["eddyhop_version"] == eddyhop.__version__
    assert attrs["python_version"] == platform.python_version()
    for attribute, distribution in (("numpy_version", "numpy"), ("numba_version", "numba"),
                                    ("scipy_version", "scipy"), ("xarray_version", "xarray"),
                                    ("netcdf4_version", "netCDF4")):
        assert attrs[attribute] == importlib.metadata.version(distribution), attribute
    assert attrs["netcdf_c_version"] and attrs["hdf5_version"] and attrs["platform"]
    assert attrs["command_line"].startswith("eddyhop ")
    for line in attrs["history"].splitlines():  # CF: one line per step, each dated
        assert line[:4].isdigit() and "eddyhop" in line and "numpy" in line, line


def test_run_records_the_study_file_and_its_checksum(files):
    attrs = global_attrs(files / "r.nc")
    assert attrs["input_files"] == f"{sha256(files / 's.toml')}  s.toml"
    assert attrs["command_line"] == "eddyhop run s.toml --out r.nc"
    assert len(attrs["history"].splitlines()) == 1


def test_analyse_appends_one_history_line_and_keeps_the_parent(files):
    run, analysed = global_attrs(files / "r.nc"), global_attrs(files / "a.nc")
    lines = analysed["history"].splitlines()
    assert lines[:-1] == run["history"].splitlines()  # the parent's provenance, unchanged
    assert len(lines) == len(run["history"].splitlines()) + 1
    assert "analyse" in lines[-1] and sha256(files / "r.nc") in lines[-1]
    assert analysed["input_files"] == f"{sha256(files / 'r.nc')}  r.nc"
    assert analysed["study_toml"] == run["study_toml"] and analysed["seed"] == run["seed"]


def test_merge_records_the_manifest_checksum_and_a_point_history(files):
    attrs = global_attrs(files / "m.nc")
    manifest = files / "sw" / "sweep-manifest.json"
    assert attrs["input_files"] == f"{sha256(manifest)}  {Path('sw') / manifest.name}"
    lines = attrs["history"].splitlines()
    assert len(lines) == 2 and "created" in lines[0] and "merge of 2 point files" in lines[1]


@pytest.mark.parametrize("name", NETCDF)
def test_acdd_discovery_attributes_and_numeric_scales(files, name):
    attrs = global_attrs(files / name)
    assert attrs["Conventions"] == "CF-1.10, ACDD-1.3"
    for key in ("title", "summary", "keywords", "date_created", "history", "source"):
        assert attrs.get(key), key
    if name != "m.nc":  # a merged sweep keeps what all points share; metadata is shared
        assert attrs["creator_name"] == "A. Referee"
        assert attrs["license"] == "CC-BY-4.0"
        assert "paddle tank" in attrs["keywords"]
        assert float(attrs["length_scale"]) == 1.0  # 1/k with k = 1
        assert attrs["length_scale_units"] == "m"
        assert float(attrs["advective_time_scale"]) == 1.0  # 1/(U k)
        assert attrs["advective_time_scale_units"] == "s"
        assert float(attrs["diffusive_time_scale"]) == pytest.approx(10.0)  # 1/(κk²), κ = 0.1


@pytest.mark.parametrize("name", NETCDF)
def test_no_fill_value_on_coordinates_and_no_empty_attributes(files, name):
    with netCDF4.Dataset(files / name) as nc:
        for attribute in nc.ncattrs():
            value = nc.getncattr(attribute)
            assert not (isinstance(value, str) and value.strip() in EMPTY), attribute
        for variable_name, variable in nc.variables.items():
            if variable_name in nc.dimensions:  # a coordinate variable (CF 1.10 §2.5.1)
                assert "_FillValue" not in variable.ncattrs(), variable_name
            for attribute in variable.ncattrs():
                value = variable.getncattr(attribute)
                assert not (isinstance(value, str) and value.strip() in EMPTY), \
                    (variable_name, attribute)
            assert variable.getncattr("coverage_content_type") in (
                "coordinate", "modelResult", "qualityInformation"), variable_name


@pytest.fixture(scope="module")
def compliance(files, tmp_path_factory):
    """``{(file, suite): [(check, message), …]}``: the high and medium findings of the IOOS
    compliance checker (CF 1.10, ACDD 1.3) on every netCDF file, run once per file."""
    if os.environ.get("CI"):
        import compliance_checker.runner as checker  # in the test extras: CI must have it
    else:
        checker = pytest.importorskip("compliance_checker.runner")
    suites = checker.CheckSuite()
    suites.load_all_available_checkers()
    folder = tmp_path_factory.mktemp("compliance")
    found = {}
    for name in NETCDF:
        out = folder / f"{name}.json"
        checker.ComplianceChecker.run_checker(str(files / name), ["cf:1.10", "acdd:1.3"], 0,
                                              "normal", output_filename=str(out),
                                              output_format="json")
        for suite, report in json.loads(out.read_text()).items():
            found[(name, suite)] = [
                (item["name"], message) for priority in ("high_priorities", "medium_priorities")
                for item in report[priority] for message in item["msgs"]]
    return found


@pytest.mark.slow
@pytest.mark.parametrize("name", NETCDF)
def test_cf_compliance_checker_finds_nothing_but_model_time(compliance, name):
    """CF 1.10: the only finding allowed is §5.1 asking a coordinate named ``time`` for
    ``standard_name = "time"``.  eddyhop's ``time`` is elapsed model time since release (units
    "1" or the study's time unit, no reference date), which that standard name does not
    describe (CF §4.4 wants "<unit> since <date>"), so it is left without one."""
    unexpected = [f for f in compliance[(name, "cf:1.10")]
                  if f[1] != "Coordinate variable 'time' should have standard_name='time', "
                             "found: 'None'"]
    assert not unexpected


# ACDD "recommended" global attributes that an idealised model flow cannot have (geospatial
# and calendar-time coverage; no standard names are used), that name an archive (id,
# naming_authority, publisher_*), or that only the user can give and this test's study leaves
# out (project, creator_url, acknowledgement: [metadata] accepts them).
NOT_APPLICABLE = ("geospatial_", "time_coverage_", "standard_name_vocabulary", "id ",
                  "naming_authority", "publisher_", "project", "creator_url",
                  "acknowledgment/acknowledgement")


@pytest.mark.slow
@pytest.mark.parametrize("name", NETCDF)
def test_acdd_compliance_checker_global_attributes(files, compliance, name):
    """ACDD 1.3: every highly recommended global attribute is present; per variable only
    ``standard_name`` may be missing (no CF standard name exists for an MSD, a local exponent
    or a batch mean), and ``units`` only where the unit depends on the moment order (said in
    ``units_description``); the recommended ones we cannot know (geospatial extents of a model
    flow, an archive's id, a publisher) are not required (``NOT_APPLICABLE``)."""
    with netCDF4.Dataset(files / name) as nc:
        described = {n for n, v in nc.variables.items() if "units_description" in v.ncattrs()}
    for check, message in compliance[(name, "acdd:1.3")]:
        if check.startswith("variable "):
            variable = check.split('"')[1]
            assert message == "standard_name" or (message == "units" and variable in described),\
                (check, message)
        elif check == "Global Attributes":
            assert message.startswith(NOT_APPLICABLE), message
        else:
            assert check.startswith("geospatial_"), (check, message)


def test_figure_and_report_carry_software_command_and_input(files):
    from PIL import Image

    png = next((files / "figs").glob("*.png"))
    info = Image.open(png).info
    assert info["Software"].startswith("eddyhop ") and "numpy" in info["Comment"]
    assert info["Source"].startswith("eddyhop plot a.nc")
    head = (files / "rep.html").read_text().split("</head>")[0]
    assert f"content='{sha256(files / 'a.nc')}  a.nc'" in head
    assert "name='eddyhop-command' content='eddyhop report a.nc --out rep.html'" in head


def test_python_api_call_is_named_with_its_caller(tmp_path):
    from eddyhop.results.provenance import invocation
    from tests.conftest import make_study

    ds = eddyhop.simulate(make_study(run={"particles": 64, "t_end": 0.5, "step_check": False}),
                          progress=False)
    eddyhop.write_netcdf(ds, tmp_path / "api.nc")
    attrs = global_attrs(tmp_path / "api.nc")
    assert attrs["command_line"].startswith("Python API: eddyhop.io.write_netcdf called from ")
    assert "test_provenance.py" in attrs["command_line"]
    assert "(study_toml attribute)" in attrs["input_files"]  # a study built in code
    assert invocation().startswith("Python API: ")


# ---- the [metadata] table -----------------------------------------------------------------
def test_metadata_table_is_validated_naming_the_field():
    from tests.conftest import make_study

    study = make_study(metadata={"creator_name": "X", "keywords": "a, b"})
    assert study.metadata.keywords == ("a", "b")
    assert study.metadata.attrs() == {"creator_name": "X", "keywords": "a, b"}
    cases = [({"creator_email": "nobody"}, "metadata.creator_email = 'nobody'"),
             ({"creator_name": ""}, "metadata.creator_name"),
             ({"creator_name": 3}, "give a string"),
             ({"keywords": [1]}, "metadata.keywords"),
             ({"creator_url": "ftp://x"}, "metadata.creator_url"),
             ({"licence": "MIT"}, "metadata: unknown key(s) 'licence'"),
             ({"title": "a\nb"}, "unknown key")]
    for table, expected in cases:
        with pytest.raises(StudyError, match=None) as caught:
            make_study(metadata=table)
        assert expected in str(caught.value), (table, str(caught.value))
        assert "\n" not in str(caught.value)


def test_a_study_without_metadata_resolves_as_before():
    from tests.conftest import make_study

    assert "metadata" not in make_study().as_dict()  # sweep fingerprints unchanged
