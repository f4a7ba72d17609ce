"""Reliability suite: property-based fuzzing of study files and of CLI options.

Properties (every later change must keep them):

* a study file, however mangled (wrong types, out-of-range, huge, NaN or infinite numbers,
  unknown or missing keys, whole sections of the wrong kind), is either accepted or refused
  with the package's own one-line error (:class:`eddyhop.errors.EddyhopError`) — never any
  other exception;
* `eddyhop analyse` and `eddyhop plot` with random option values end with exit status 0 or 2
  and never print a traceback or an internal error.
* `eddyhop analyse` with any of 16 awkward output names (its input, a link to it, another
  result, a text file, a sweep's manifest, lock or point, a folder, a missing folder, a
  backslash, an over-long name, …), with or without ``--replace``, either refuses and changes
  nothing or writes only the named output where the output rule allows it.

The cases are derandomised (the same cases on every run).  ``EDDYHOP_FUZZ_EXAMPLES=N`` runs N
study cases (and N/5 CLI cases per command) instead of the CI defaults of 200 and 30.  A summary
line "reliability: <suite>: tried N, held M" per suite is printed at the end of the session.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from eddyhop.errors import EddyhopError

from .conftest import RELIABILITY

EXAMPLES = int(os.environ.get("EDDYHOP_FUZZ_EXAMPLES", "200"))
CLI_EXAMPLES = max(10, EXAMPLES // 5) if "EDDYHOP_FUZZ_EXAMPLES" in os.environ else 30
FUZZ = settings(max_examples=EXAMPLES, deadline=None, derandomize=True, database=None,
                suppress_health_check=list(HealthCheck))
CLI_FUZZ = settings(FUZZ, max_examples=CLI_EXAMPLES)

BASE = {
    "schema_version": 1,
    "title": "fuzz base",
    "flow": {"family": "cellular", "U": 1.0, "k": 1.0},
    "noise": {"peclet": 10.0},
    "start": [{"kind": "uniform", "label": "whole"},
              {"kind": "box", "label": "corner", "x_min": 0.0, "x_max": 0.4, "y_min": 0.0,
               "y_max": 0.4},
              {"kind": "separatrix", "label": "edges", "delta": 0.05}],
    "run": {"particles": 64, "dt": 0.02, "t_end": 2.0, "n_times": 10, "spacing": "log",
            "seed": 7, "tracked": 8, "workers": 1, "progress": False},
    "aging": {"times": [0.5], "lags": 5},
    "hopping": {"enabled": True},
    "velocity_correlation": {"reference_times": [0.0, 0.5], "lag_max": 1.0, "lag_step": 0.1},
    "output": {"path": "x.nc", "length_unit": "m", "time_unit": "s"},
}

ODD_VALUES = st.sampled_from([
    -1, 0, 1, 2, 3, -2**31, 2**31, 2**62, 10**9, 10**12, 0.0, -0.0, 0.5, -0.5, 1e-300, 1e-308,
    5e-324, 1e30, 1e150, 1e300, 1.7976931348623157e308, -1e308, math.nan, math.inf, -math.inf,
    True, False, "", "x", "cellular", "log", "linear", "nan", "1e9", "<img src=x>", "$\\frac{$",
    "shear", "cats_eye", "fourier", "obstacles", "gridded", "drifting_cellular",
    "oscillating_cellular", "centre", "separatrix", "box", "disk", "point", "strang_rk2", "rk4",
    "milstein", "modulated", "cell_side",
    "a" * 300, [], [1, 2], [0.5, 0.5], [-1.0], ["a"], [math.nan], {}, {"a": 1}, {"kind": "box"},
])


def _addresses(document, prefix=()):
    out = []
    for key, value in document.items():
        out.append((*prefix, key))
        if isinstance(value, dict):
            out += _addresses(value, (*prefix, key))
        elif isinstance(value, list) and value and isinstance(value[0], dict):
            for index, item in enumerate(value):
                out += _addresses(item, (*prefix, key, index))
    return out


ADDRESSES = [*_addresses(BASE), ("run", "chunk"), ("run", "batches"), ("run", "integrator"),
             ("run", "times"), ("run", "t_first"), ("noise", "kappa"), ("noise", "model"),
             ("moments", "orders"), ("flow", "scale"), ("sweep",), ("unknown_section",),
             ("flow", "unknown_key"), ("start", 0, "radius"), ("hopping", "margin")]


@st.composite
def mangled_documents(draw):
    document = json.loads(json.dumps(BASE))
    for _ in range(draw(st.integers(1, 3))):
        address = draw(st.sampled_from(ADDRESSES))
        holder = document
        try:
            for step in address[:-1]:
                holder = holder[step]
        except (KeyError, IndexError, TypeError):
            continue
        if not isinstance(holder, (dict, list)):
            continue
        action = draw(st.sampled_from(["set", "set", "set", "delete"]))
        last = address[-1]
        if action == "delete":
            if isinstance(holder, dict):
                holder.pop(last, None)
            elif isinstance(last, int) and last < len(holder):
                holder.pop(last)
        elif isinstance(holder, dict) or (isinstance(last, int) and last < len(holder)):
            holder[last] = draw(ODD_VALUES)
    return document


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value == math.inf else
                                               "-inf" if value == -math.inf else repr(value))
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(str(k))} = {_toml_value(v)}"
                               for k, v in value.items()) + "}"
    raise TypeError(type(value))


def to_toml(document: dict) -> str:
    """TOML text of ``document`` (top-level keys; sections as inline tables)."""
    return "\n".join(f"{json.dumps(str(k))} = {_toml_value(v)}" for k, v in document.items())


def _count(suite: str, outcome: str) -> None:
    counts = RELIABILITY.setdefault(suite, {"tried": 0, "held": 0, "accepted": 0})
    counts["tried"] += 1
    if outcome != "broken":
        counts["held"] += 1
    if outcome == "accepted":
        counts["accepted"] += 1


def test_base_study_is_valid():
    from eddyhop.study.spec import parse_study_text

    parse_study_text(to_toml(BASE), "base.toml")


@FUZZ
@given(document=mangled_documents())
def test_mangled_study_is_accepted_or_refused_in_one_line(document):
    from eddyhop.engine.schedule import build_schedule
    from eddyhop.study.spec import parse_study_text

    outcome = "broken"
    try:
        study = parse_study_text(to_toml(document), "fuzz.toml")
        build_schedule(study.run, study.aging, study.run.track_samples,
                       study.velocity_correlation)
        outcome = "accepted"
    except EddyhopError as exc:
        message = str(exc)
        assert message and "\n" not in message.strip(), message
        assert "Traceback" not in message
        outcome = "refused"
    finally:
        _count("study files", outcome)


# ---- CLI options -----------------------------------------------------------------------------
NUMBERS = st.one_of(  # plausible values half of the time, odd ones otherwise
    st.sampled_from(["0.5", "1", "0.2", "0.3", "3", "0.95", "0.05", "1.5"]),
    st.sampled_from(["0", "-1", "2", "10", "1e9", "1e-300", "nan", "inf", "-inf", "abc", "",
                     "100000"]))
ANALYSE_OPTIONS = ["--window", "--ballistic-tolerance", "--diffusive-tolerance", "--min-points",
                   "--fit-decades", "--fit-start", "--confidence", "--aging-time", "--pdf-time",
                   "--tail-start", "--significance"]


@pytest.fixture(scope="module")
def tracked_result(tmp_path_factory):
    from click.testing import CliRunner

    from eddyhop.cli import main

    from .test_bad_input import TRACKED

    root = tmp_path_factory.mktemp("fuzz")
    (root / "t.toml").write_text(TRACKED)
    answer = CliRunner().invoke(main, ["run", str(root / "t.toml"), "--out",
                                       str(root / "t.nc")])
    assert answer.exit_code == 0, answer.output
    return root / "t.nc"


def _invoke_checked(suite, args):
    from click.testing import CliRunner

    from eddyhop.cli import main

    answer = CliRunner().invoke(main, args)
    ok = (answer.exit_code in (0, 2) and "Traceback" not in answer.output
          and "internal error" not in answer.output
          and (answer.exception is None or isinstance(answer.exception, SystemExit)))
    _count(suite, "broken" if not ok else "accepted" if answer.exit_code == 0 else "refused")
    assert ok, (args, answer.exit_code, answer.output, answer.exception)


@CLI_FUZZ
@given(chosen=st.lists(st.tuples(st.sampled_from(ANALYSE_OPTIONS), NUMBERS), max_size=4))
def test_analyse_options_never_traceback(tracked_result, chosen):
    out = Path(tempfile.mkdtemp()) / "o.nc"
    args = ["analyse", str(tracked_result), "--out", str(out), "-q", "--no-reference"]
    for option, value in chosen:
        args += [option, value]
    _invoke_checked("analyse options", args)


FIGURES = st.sampled_from(["msd", "starts", "exponent", "aging", "trajectories", "residence",
                           "msd", "deff_peclet", "exponent_map", "nope", ""])
FORMATS = st.sampled_from(["png", "png", "png", ",", "", "gif", "png,png", "PNG", "svg",
                          " png , "])
DPIS = st.sampled_from(["40", "40", "40", "0", "-5", "9", "10", "100000", "nan", "x"])


@CLI_FUZZ
@given(figures=st.lists(FIGURES, min_size=1, max_size=2), fmt=FORMATS, dpi=DPIS,
       listing=st.booleans())
def test_plot_options_never_traceback(tracked_result, figures, fmt, dpi, listing):
    out = Path(tempfile.mkdtemp()) / "figs"
    args = ["plot", str(tracked_result), "--out", str(out), "--format", fmt, "--dpi", dpi]
    for name in figures:
        args += ["--figure", name]
    if listing:
        args.append("--list")
    _invoke_checked("plot options", args)


# ---- output paths ----------------------------------------------------------------------------
TARGETS = st.sampled_from(["t.nc", "other.nc", "notes.txt", "new.nc", "sub/new.nc", "nodir/x.nc",
                           "back\\slash.nc", "x" * 300 + ".nc", "sw/sweep-manifest.json",
                           "sw/points/p.nc", "sw/new.nc", "sub", "link.nc", "sw/.sweep-lock",
                           "", "."])


@pytest.fixture(scope="module")
def output_world(tracked_result):
    """A folder with the input, another result, a text file, a sub-folder, a symbolic link to
    the input and a fake sweep folder (manifest, lock, a point)."""
    root = tracked_result.parent
    (root / "notes.txt").write_text("not ours\n")
    (root / "sub").mkdir(exist_ok=True)
    import shutil

    shutil.copy(tracked_result, root / "other.nc")
    if not (root / "link.nc").exists():
        (root / "link.nc").symlink_to(tracked_result)
    (root / "sw" / "points").mkdir(parents=True, exist_ok=True)
    (root / "sw" / "sweep-manifest.json").write_text("{}")
    (root / "sw" / ".sweep-lock").write_text("")
    shutil.copy(tracked_result, root / "sw" / "points" / "p.nc")
    return root


def _snapshot(root: Path) -> dict:
    return {p: p.read_bytes() for p in root.rglob("*") if p.is_file() and not p.is_symlink()}


@settings(FUZZ, max_examples=64)  # 16 names × 2: hypothesis stops once all 32 are tried
@given(target=TARGETS, replace=st.booleans())
def test_output_paths_never_destroy_data(output_world, target, replace):
    """`analyse` with any output name: exit 0 or 2, and a file changes only if it is the named
    output and was new, an eddyhop result, or --replace was given (never an input or a sweep
    folder's own file)."""
    from click.testing import CliRunner

    from eddyhop.cli import main

    before = _snapshot(output_world)
    old = os.getcwd()
    os.chdir(output_world)
    try:
        args = ["analyse", "t.nc", "--out", target, "-q", "--no-reference"]
        answer = CliRunner().invoke(main, [*args, "--replace"] if replace else args)
    finally:
        os.chdir(old)
    after = _snapshot(output_world)
    changed = {p for p in before if before[p] != after.get(p)}
    ok = answer.exit_code in (0, 2) and "Traceback" not in answer.output and \
        "internal error" not in answer.output
    if answer.exit_code != 0:  # refused: nothing changed, nothing new
        ok = ok and not changed and set(after) == set(before)
    else:  # written: only the named output may differ, and only if it may be replaced
        written = (output_world / target).resolve()
        replaceable = {"other.nc", "new.nc"} | ({"notes.txt"} if replace else set())
        ok = ok and changed <= {written} and (not changed or written.name in replaceable)
        ok = ok and written.parent != (output_world / "sw" / "points").resolve() and \
            written.name not in ("sweep-manifest.json", ".sweep-lock", "t.nc", "link.nc")
    for path in set(after) - set(before):  # new files are cleaned up for the next case
        path.unlink()
    for path, data in before.items():
        path.write_bytes(data)
    _count("output paths", "broken" if not ok else "accepted" if answer.exit_code == 0
           else "refused")
    assert ok, (target, replace, answer.exit_code, answer.output, changed)
