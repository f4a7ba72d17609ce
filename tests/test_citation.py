"""Citable: CITATION.cff valid against the CFF 1.2.0 schema and generated from the package's
one method table, LICENSE matching pyproject, `eddyhop cite` for the installed version and
for a result file, the version in one place, mpmath in the test extras, a CHANGELOG entry."""

from __future__ import annotations

import importlib.util
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from eddyhop import __version__
from eddyhop.results.citation import (
    METHODS,
    REFERENCES,
    citation_cff,
    cite_text,
    methods_markdown,
    methods_used,
)

ROOT = Path(__file__).resolve().parents[1]
# The CFF 1.2.0 JSON schema, as shipped with the CFF reference tooling (CC-BY-4.0).
SCHEMA = Path(__file__).parent / "data" / "citation-file-format-1.2.0.schema.json"

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib


def _gen_docs():
    spec = importlib.util.spec_from_file_location("gen_docs", ROOT / "tools" / "gen_docs.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _validator():
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads(SCHEMA.read_text())
    cls = jsonschema.validators.validator_for(schema)
    return cls(schema, format_checker=jsonschema.FormatChecker())


def _cff(text):
    yaml = pytest.importorskip("yaml")
    return yaml.safe_load(text)


def test_citation_cff_is_valid_against_its_schema():
    document = _cff((ROOT / "CITATION.cff").read_text())
    errors = [f"{list(e.path)}: {e.message}" for e in _validator().iter_errors(document)]
    assert not errors
    assert document["version"] == __version__
    assert document["license"] == "MIT"
    assert len(document["references"]) == len({k for m in METHODS for k in m.references})


def test_the_schema_check_catches_a_broken_citation_file():
    document = _cff(citation_cff())
    del document["authors"]
    document["date-released"] = "4 December"
    document["references"][0]["doi"] = "doi.org/nowhere"
    messages = " ".join(e.message for e in _validator().iter_errors(document))
    assert "'authors' is a required property" in messages
    assert "4 December" in messages and "doi.org/nowhere" in messages


def test_generated_files_are_current():
    """CITATION.cff, docs/methods.md and docs/api.md are what `python tools/gen_docs.py`
    writes (the method table and the docstrings are the one source)."""
    stale = _gen_docs().stale()
    assert not stale, f"{', '.join(stale)} out of date: run `python tools/gen_docs.py`"
    assert (ROOT / "CITATION.cff").read_text() == citation_cff()
    assert (ROOT / "docs" / "methods.md").read_text() == methods_markdown()


def test_license_and_version_have_one_source():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    assert project["license"] == "MIT" and project["license-files"] == ["LICENSE"]
    assert (ROOT / "LICENSE").read_text().startswith("MIT License")
    assert "version" not in project and "version" in project["dynamic"]
    tool = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    assert tool["dynamic"]["version"] == {"attr": "eddyhop.__version__"}
    assert any(r.startswith("mpmath") for r in project["optional-dependencies"]["test"])


def test_changelog_records_this_release():
    text = (ROOT / "CHANGELOG.md").read_text()
    heading = re.search(r"^## \[?([0-9][^\]\s]*)\]? [-–] (\d{4}-\d{2}-\d{2})", text, re.M)
    assert heading and heading.group(1) == __version__
    from eddyhop.results.citation import RELEASE_DATE

    assert heading.group(2) == RELEASE_DATE


def test_every_reference_is_complete_and_used():
    used = {k for m in METHODS for k in m.references}
    assert used == set(REFERENCES)
    for ref in REFERENCES.values():
        assert ref.authors and ref.title and 1800 < ref.year < 2030, ref.key
        assert ref.journal or ref.publisher, ref.key
        assert all("," in a for a in ref.authors), ref.key  # "Family, Given"
        assert not ref.doi or re.fullmatch(r"10\.\d{4,5}/\S+", ref.doi), ref.key


def test_methods_follow_from_the_file_attributes():
    run = {"eddyhop_kind": "monte_carlo", "integrator": "strang_rk2", "flow_family": "cellular"}
    names = [m.name for m in methods_used(run)]
    assert any("Strang" in n for n in names) and any("Philox" in n for n in names)
    assert not any("Bayesian" in n for n in names)  # not analysed yet
    analysed = {**run, "analysis_steps": "local_exponent regimes effective_diffusivity "
                                         "step_check"}
    keys = {k for m in methods_used(analysed) for k in m.references}
    assert {"strang1968", "salmon2011", "schwarz1978", "majda1999", "shraiman1987",
            "giles2008"} <= keys
    reference = {"eddyhop_kind": "reference", "flow_family": "cats_eye"}
    keys = {k for m in methods_used(reference) for k in m.references}
    assert {"majda1999", "aris1956"} <= keys and "salmon2011" not in keys
    milstein = {**run, "integrator": "milstein"}
    assert "milstein1975" in {k for m in methods_used(milstein) for k in m.references}


def test_cite_text_formats():
    bibtex = cite_text()
    assert bibtex.startswith("@software{eddyhop_" + __version__.replace(".", "_"))
    assert f"version = {{{__version__}}}" in bibtex
    old = cite_text({"eddyhop_version": "0.0.9", "eddyhop_kind": "monte_carlo",
                     "integrator": "euler_maruyama"})
    assert "version = {0.0.9}" in old and "@article{maruyama1955" in old
    assert "@book{kloeden1992" in old
    assert _cff(cite_text(fmt="cff"))["version"] == __version__
    text = cite_text({"eddyhop_kind": "reference", "flow_family": "cellular"}, fmt="text")
    assert "Aris, Rutherford (1956)" in text


def test_cite_command_for_the_installed_version_and_a_result(tmp_path):
    import xarray as xr

    path = tmp_path / "r.nc"
    xr.Dataset(attrs={"eddyhop_version": "0.0.9", "eddyhop_kind": "monte_carlo",
                      "integrator": "rk4", "analysis_steps": "regimes"}).to_netcdf(path)

    def cite(*args):
        return subprocess.run([sys.executable, "-m", "eddyhop", "cite", *args],
                              capture_output=True, text=True, timeout=120)

    plain = cite()
    assert plain.returncode == 0 and f"version = {{{__version__}}}" in plain.stdout
    done = cite(str(path), "--format", "text")
    assert done.returncode == 0, done.stderr
    assert "Version 0.0.9" in done.stdout and "Kutta, Wilhelm (1901)" in done.stdout
    assert "Schwarz, Gideon (1978)" in done.stdout
    cff = cite("--format", "cff")
    assert cff.returncode == 0 and _cff(cff.stdout)["cff-version"] == "1.2.0"
    missing = cite(str(tmp_path / "nothere.nc"))
    assert missing.returncode == 2 and missing.stderr.count("\n") == 1
    assert "nothere.nc" in missing.stderr and "Traceback" not in missing.stderr
