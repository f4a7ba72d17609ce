"""``eddyhop analyse`` end to end: a real run with every optional output, analysed to netCDF;
the printed summary (per start: regimes, crossovers, D_eff and its verdicts, the cell-problem
reference); one late log-log slope in every command."""

from __future__ import annotations

import os
import re
import subprocess
import sys

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

import eddyhop
import eddyhop.analysis
import eddyhop.results.io
from eddyhop.cli import main
from eddyhop.presentation.text import LATE_SLOPE_NAME, analysis_lines
from tests.conftest import make_study


def test_analyse_command_writes_labelled_variables(tmp_path):
    study = make_study(noise={"peclet": 50.0},
                       start=[{"kind": "separatrix", "label": "edge", "delta": 0.05},
                              {"kind": "centre", "label": "core", "radius": 0.3}],
                       run={"particles": 256, "dt": 0.05, "t_end": 60.0, "n_times": 40,
                            "integrator": "strang_rk2", "tracked": 40, "track_samples": 200,
                            "batches": 16},
                       aging={"times": [5.0, 20.0], "lags": 12}, hopping={"enabled": True})
    result = tmp_path / "run.nc"
    ds = eddyhop.run_study(study, out=result, progress=False)
    out = tmp_path / "analysed.nc"
    answer = CliRunner().invoke(main, ["analyse", str(result), "--out", str(out),
                                       "--window", "0.5", "--pdf-time", "30"])
    assert answer.exit_code == 0, answer.output
    assert "start 'edge' (256 particles):" in answer.output and "crossovers" in answer.output
    analysed = xr.open_dataset(out)
    try:
        for name in ("alpha", "regime_label", "crossover_time", "D_xx", "D_xx_lower",
                     "aging_exponent", "ergodicity_breaking", "moment_exponent",
                     "displacement_pdf_x", "residence_exp_rate", "residence_pow_exponent"):
            assert name in analysed, name
        derived = [n for n in analysed.data_vars if n not in ds.data_vars]
        for name in derived:
            assert analysed[name].attrs.get("long_name"), name
            if analysed[name].dtype.kind not in "USO":
                assert "units" in analysed[name].attrs, name
        assert analysed["regime_label"].dims == ("start", "regime")
        assert np.allclose(analysed["pdf_time"].values, [30.0])
        assert "window" in analysed.attrs["analysis_options"]
    finally:
        analysed.close()


def test_analyse_command_reports_bad_input_clearly(tmp_path):
    runner = CliRunner()
    answer = runner.invoke(main, ["analyse", str(tmp_path / "absent.nc")])
    assert answer.exit_code == 2 and "does not exist" in answer.output
    bare = tmp_path / "bare.nc"
    xr.Dataset({"x": (("time",), np.ones(3))}, coords={"time": [1.0, 2.0, 3.0]}).to_netcdf(bare)
    answer = runner.invoke(main, ["analyse", str(bare), "--out", str(tmp_path / "o.nc")])
    assert answer.exit_code == 2
    assert "needs variable(s) msd" in answer.output
    assert not (tmp_path / "o.nc").exists()
    plain = tmp_path / "plain.nc"
    t = np.geomspace(0.1, 10.0, 20)
    xr.Dataset({"msd": (("time",), 4 * t)}, coords={"time": t}).to_netcdf(plain)
    answer = runner.invoke(main, ["analyse", str(plain), "--window", "0"])
    assert answer.exit_code == 2 and "option window = 0 is outside" in answer.output
    answer = runner.invoke(main, ["analyse", str(plain), "-q"])
    assert answer.exit_code == 0, answer.output
    assert (tmp_path / "plain.analysed.nc").exists()


# ---- the summary answers the question -----------------------------------------------------------
@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """A two-start cellular run at Pe = 50 (256 particles, t ≤ 60) and its analysis."""
    folder = tmp_path_factory.mktemp("summary")
    study = make_study(noise={"peclet": 50.0},
                       start=[{"kind": "separatrix", "label": "edge", "delta": 0.05},
                              {"kind": "centre", "label": "core", "radius": 0.3}],
                       run={"particles": 256, "dt": 0.05, "t_end": 60.0, "n_times": 40,
                            "integrator": "strang_rk2", "batches": 16})
    path = folder / "run.nc"
    ds = eddyhop.run_study(study, out=path, progress=False)
    with pytest.warns(eddyhop.analysis.ShortRunWarning):
        analysed = eddyhop.analysis.analyse(ds)
    return path, ds, analysed


def test_console_script_prints_the_answer_per_start(small_run, tmp_path):
    """The real `eddyhop` console script: per start, the regime sequence on one line, each
    regime's alpha, crossover times in model time and in the three natural units, D_eff with
    its verdict in words, D/kappa, D/(kappa Pe^1/2), the cell-problem value and the distance
    in standard errors; --no-reference leaves the cell problem out."""
    path, _, analysed = small_run
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in sys.path if p)
    command = [sys.executable, "-c", "from eddyhop.cli import main; main()"]
    done = subprocess.run([*command, "analyse", str(path), "--out", str(tmp_path / "a.nc")],
                          capture_output=True, text=True, env=env, timeout=600)
    assert done.returncode == 0, done.stderr
    text = done.stdout
    for label in ("edge", "core"):
        assert f"start '{label}' (256 particles):" in text
    sequences = re.findall(r"^  regimes: (.+)$", text, flags=re.M)
    assert len(sequences) == 2
    for sequence, label in zip(sequences, ("edge", "core")):
        expected = [str(v) for v in analysed["regime_label"].sel(start=label).values if str(v)]
        # labels exactly as the analysis wrote them; the last one may be marked final
        shown = [part.removesuffix(" (final)") for part in sequence.split(" → ")]
        assert shown == expected
    assert text.count("crossovers (t | t·Uk | t·κk² | t·κk²Pe^½):") == 2
    assert text.count("D_eff/κ = ") == 2 and text.count("D_eff/(κ Pe^½) = ") == 2
    assert text.count("cell problem (homogenization, noise-free): D_eff = ") == 2
    assert len(re.findall(r"Monte Carlo − cell problem = [+-][\d.]+% = [+-][\d.]+ standard "
                          r"errors", text)) == 2
    # the convergence verdict in words, and undetermined numbers flagged as such
    for label in ("edge", "core"):
        meaning = analysed["deff_converged"].sel(start=label)
        words = {0: "RUN TOO SHORT", 1: "diffusive regime reached", 2: "UNDETERMINED"}
        assert words[int(meaning)] in text
    if (analysed["deff_converged"] == 2).any():
        assert "[undetermined]" in text
    quick = subprocess.run([*command, "analyse", str(path), "--out", str(tmp_path / "b.nc"),
                            "--no-reference"], capture_output=True, text=True, env=env,
                           timeout=600)
    assert quick.returncode == 0 and "cell problem" not in quick.stdout


def test_summary_never_prints_a_diffusivity_that_is_not_claimed(small_run):
    """Too short or bounded: the verdict in capitals and no D number; undetermined: the
    numbers carry the word; the step check, mean velocity and final-regime marks appear
    when those variables exist (written by other analyses: here set by hand)."""
    _, _, analysed = small_run
    ds = analysed.copy(deep=True)
    flags = ds["deff_converged"]
    flags.attrs.update(flag_values=np.array([0, 1, 2, 3], np.int8),
                       flag_meanings="too_short diffusive undetermined bounded")
    ds["deff_converged"][:] = [0, 3]
    text = "\n".join(analysis_lines(ds, reference=False))
    edge, core = text.split("start 'core'")
    assert "RUN TOO SHORT" in edge and "D_xx =" not in edge and "D_eff =" not in edge
    assert "BOUNDED" in core and "D_xx =" not in core and "no diffusivity is claimed" in core
    ds["deff_converged"][:] = [2, 1]
    text = "\n".join(analysis_lines(ds, reference=False))
    edge, core = text.split("start 'core'")
    assert "[undetermined]" in edge and "[undetermined]" not in core
    assert "diffusive regime reached" in core
    # variables of the step check and of the drift removal (names agreed with those analyses)
    ds["step_check"] = (("start",), np.array([1, 0], np.int8),
                        {"flag_values": np.array([0, 1, 2], np.int8),
                         "flag_meanings": "passed biased inconclusive"})
    ds["D_eff_step_bias"] = (("start",), [0.02, 0.0])
    ds["D_eff_step_bias_se"] = (("start",), [0.004, 0.004])
    ds["step_check_suggested_dt"] = (("start",), [0.0125, np.nan])
    ds["mean_velocity_x"] = (("start",), [0.1, 0.1])
    ds["mean_velocity_x_se"] = (("start",), [0.001, 0.001])
    ds["mean_velocity_y"] = (("start",), [0.0, 0.0])
    ds["mean_velocity_y_se"] = (("start",), [0.001, 0.001])
    ds["transport_moment"] = (("start",), np.array(["variance", "variance"]))
    final = np.zeros(ds.sizes["regime"], dtype=bool)
    ds["regime_final"] = (("start", "regime"), np.tile(final, (2, 1)))
    last = int(ds["regime_count"].sel(start="edge")) - 1
    ds["regime_final"][0, last] = True
    text = "\n".join(analysis_lines(ds, reference=False))
    edge, core = text.split("start 'core'")
    assert "step check: BIASED" in edge and "dt ≤ 0.0125" in edge
    assert "step check: passed" in core
    assert "mean velocity: u = 0.1 ± 0.001" in edge and "from the variance" in edge
    assert re.search(r"regimes: .+ \(final\)$", edge.splitlines()[1])
    # a flow the cell-problem solver cannot be given: one line says why, nothing breaks
    ds.attrs.pop("study_resolved")
    lines = analysis_lines(ds, reference=True)
    assert lines[-1].startswith("  (no cell-problem reference: ")
    assert not any("Monte Carlo − cell problem" in line for line in lines)


def test_one_late_slope_in_every_command(small_run, tmp_path):
    """The late log-log slope has one definition (the analysis's deff_alpha): `run`/`info`
    print the same value as `analyse`, unanalysed or analysed, and the report shows it."""
    from eddyhop.presentation.report import build_report

    path, raw, analysed = small_run
    expected = {label: f"{float(analysed['deff_alpha'].sel(start=label)):.3f}"
                for label in ("edge", "core")}
    runner = CliRunner()
    for source in (path, tmp_path / "analysed.nc"):
        if source != path:
            eddyhop.results.io.write_netcdf(analysed, source)
        answer = runner.invoke(main, ["info", str(source)])
        assert answer.exit_code == 0, answer.output
        for label, value in expected.items():
            assert re.search(rf"start '{label}'.*{LATE_SLOPE_NAME} = {value}", answer.output)
    shown = "\n".join(analysis_lines(analysed, reference=False))
    for value in expected.values():
        assert f"{LATE_SLOPE_NAME} = {value}" in shown
    page = build_report(raw, analyse=False, figures=[])
    assert LATE_SLOPE_NAME in page
    for value in expected.values():
        assert value in page
