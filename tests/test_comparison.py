"""Comparison of results: curves on one grid, z(t), the table of differences, the figure from
its matplotlib objects, the `eddyhop compare` command, and the refusals."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from click.testing import CliRunner

import eddyhop
from eddyhop.cli import main
from eddyhop.errors import InputDataError
from eddyhop.presentation.comparison import compare, comparison_table, table_csv, verdict
from eddyhop.presentation.plots.comparison import comparison_figure
from tests.conftest import make_study

# Periodic shear at Pe = 2: Taylor dispersion D_xx = κ(1 + Pe²/2) exactly (homogenization;
# Majda & Kramer 1999, Phys. Rep. 314, 237) — the reference solve and the Monte Carlo run
# must agree within their errors.
SHEAR = {"flow": {"family": "shear", "_replace": True}, "noise": {"peclet": 2.0}}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("compare")
    run = {"particles": 512, "dt": 0.02, "t_end": 20.0, "n_times": 16, "seed": 12}
    study = make_study(title="shear A", run=run, **SHEAR)
    other = make_study(title="shear B", run={**run, "seed": 13, "n_times": 21, "t_end": 25.0},
                       **SHEAR)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = eddyhop.simulate(study)
        b = eddyhop.simulate(other)
        from eddyhop.reference.api import moment_evolution

        reference = moment_evolution(study)
    paths = {}
    for name, ds in (("a", a), ("b", b), ("ref", reference)):
        paths[name] = folder / f"{name}.nc"
        eddyhop.write_netcdf(ds, paths[name])
    return paths


def test_run_against_its_reference(files):
    comparison = compare([files["a"], files["ref"]], labels=["Monte Carlo", "reference"])
    assert list(comparison["series"].values) == ["Monte Carlo", "reference"]
    assert comparison.attrs["time_grid"] == "shared output times"
    assert list(comparison["kind"].values) == ["monte_carlo", "reference"]
    # the reference has no sampling error: z is the Monte Carlo error alone
    z = comparison["msd_z"].values[1]
    expected = (comparison["msd"].values[1] - comparison["msd"].values[0]) \
        / comparison["msd_se"].values[0]
    np.testing.assert_allclose(z, expected)
    # 4 standard errors: a two-sided 6e-5 false-alarm rate per time at this fixed seed
    assert np.nanmax(np.abs(z)) < 4.0
    rows = {(r["quantity"], r["series"]): r for r in comparison_table(comparison)}
    kappa = comparison["kappa"].values[0]
    assert rows[("D_xx", "reference")]["value"] == pytest.approx(kappa * (1 + 2.0 ** 2 / 2),
                                                                 rel=1e-6)
    d_xx = rows[("D_xx", "reference")]
    assert abs(d_xx["z"]) < 4.0 and d_xx["verdict"].startswith(("consistent", "tension"))


def test_different_time_grids_are_interpolated_on_the_common_range(files):
    comparison = compare([files["a"], files["b"]])
    assert "interpolated" in comparison.attrs["time_grid"]
    t = comparison["time"].values
    a = eddyhop.open_result(files["a"])
    assert t[0] >= a["time"].values[0] and t[-1] <= 20.0 + 1e-9
    assert np.isfinite(comparison["msd"].values).all()
    # a curve compared with itself differs by exactly 0 standard errors
    same = compare([files["a"], files["a"]], labels=["one", "two"])
    np.testing.assert_allclose(same["msd_z"].values[1], 0.0, atol=1e-12)


def test_comparison_figure_content(files):
    comparison = compare([files["a"], files["b"], files["ref"]])
    figure = comparison_figure(comparison)
    msd_ax, _spread_ax, alpha_ax, z_ax = figure.axes
    lines = [line for line in msd_ax.get_lines() if str(line.get_gid()).startswith("series_")]
    assert len(lines) == 3
    np.testing.assert_allclose(lines[0].get_ydata(), comparison["msd"].values[0])
    assert lines[2].get_color() == "#000000"  # the noise-free reference in black
    z_lines = [line for line in z_ax.get_lines() if str(line.get_gid()).startswith("z_")]
    assert len(z_lines) == 2  # every series but the baseline
    levels = {round(float(line.get_ydata()[0]), 6) for line in z_ax.get_lines()
              if line.get_gid() is None}
    assert {2.0, -2.0, 3.0, -3.0} <= levels
    assert r"\langle" in msd_ax.get_ylabel() and "model length units²" in msd_ax.get_ylabel()
    assert "model time units" in z_ax.get_xlabel()
    assert figure.legends and all(ax.get_legend() is None for ax in figure.axes)
    low, high = alpha_ax.get_ylim()
    alpha = comparison["alpha"].values
    assert low <= np.nanmin(alpha) and high >= np.nanmax(alpha)


def test_table_words_and_csv(files):
    comparison = compare([files["a"], files["ref"]])
    text = table_csv(comparison)
    assert text.startswith("# eddyhop comparison")
    assert "quantity,series,value,se,difference,z,verdict" in text
    assert verdict(0.5) == "consistent" and verdict(2.5).startswith("tension")
    assert verdict(-4.0).startswith("DIFFER") and verdict(float("nan")) == "no error estimate"


def test_refusals_name_the_file(files, tmp_path):
    with pytest.raises(InputDataError, match="two or more"):
        compare([files["a"]])
    sweep = eddyhop.open_result(files["a"])
    sweep.attrs["eddyhop_kind"] = "sweep"
    eddyhop.write_netcdf(sweep, tmp_path / "sweep.nc")
    with pytest.raises(InputDataError, match=r"sweep\.nc.*merged sweep.*point files"):
        compare([tmp_path / "sweep.nc", files["a"]])
    ds = eddyhop.open_result(files["a"]).drop_vars("msd")
    broken = tmp_path / "broken.nc"
    eddyhop.write_netcdf(ds, broken)
    with pytest.raises(InputDataError, match=r"broken\.nc.*lacks msd"):
        compare([files["a"], broken])
    other = eddyhop.open_result(files["a"])
    other.attrs["flow_family"] = "cellular"
    with pytest.raises(InputDataError, match="one flow family"):
        compare([files["a"], other])
    far = eddyhop.open_result(files["a"]).assign_coords(
        time=eddyhop.open_result(files["a"])["time"].values + 1e3)
    with pytest.raises(InputDataError, match="do not overlap"):
        compare([files["a"], far])


def test_compare_command_writes_figure_table_and_data(files, tmp_path):
    stem = tmp_path / "a_vs_ref"
    result = CliRunner().invoke(main, ["compare", str(files["a"]), str(files["ref"]),
                                       "--label", "run", "--label", "reference",
                                       "--out", str(stem), "--format", "png"])
    assert result.exit_code == 0, result.output
    assert "comparison against the baseline 'run'" in result.output
    assert "D_eff/κ" in result.output
    for suffix in (".png", ".csv", "_data.nc"):
        assert (tmp_path / f"a_vs_ref{suffix}").exists()
    again = CliRunner().invoke(main, ["compare", str(files["a"]), str(files["ref"]),
                                      "--out", str(stem), "--format", "png"])
    assert again.exit_code == 0, again.output  # same kinds: replaced when named with --out
    bad = CliRunner().invoke(main, ["compare", str(files["a"]), "--format", "png"])
    assert bad.exit_code == 2 and "two or more" in bad.output
    assert "Traceback" not in bad.output
    mismatch = CliRunner().invoke(main, ["compare", str(files["a"]), str(files["ref"]),
                                         "--label", "only one"])
    assert mismatch.exit_code == 2 and "--label" in mismatch.output


def test_report_summary_of_a_reference_names_its_homogenized_value(files):
    from eddyhop.presentation.report import maybe_analyse
    from eddyhop.presentation.report_summary import summary_lines

    ds, _ = maybe_analyse(eddyhop.open_result(files["ref"]))
    (line,) = [text for text in summary_lines(ds) if "homogenized diffusivity" in text]
    kappa = float(ds.attrs["kappa"])
    # Taylor dispersion, D_xx/κ = 1 + Pe²/2 = 3 at Pe = 2 (source at the top of this file)
    assert "D_eff/κ = " in line
    assert float(line.split("D_xx = ")[1].split(",")[0]) == pytest.approx(3 * kappa, rel=1e-5)


def test_measured_tracks_sit_beside_a_model_run(tmp_path):
    """A measured set (here: a run's own tracked particles, written as a CF trajectory file and
    read back by ``eddyhop tracks``) is compared with the run: no flow family needed, kind
    "measured", and — being a subset of the same tracers — its D_xx agrees with the run's
    within 4 combined standard errors (the bound used throughout this file)."""
    from eddyhop.tracks import analyse_tracks, write_trajectories

    run = {"particles": 400, "dt": 0.02, "t_end": 20.0, "n_times": 16, "seed": 21,
           "tracked": 400, "track_samples": 200}
    study = make_study(title="shear tracked", run=run, **SHEAR)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = eddyhop.simulate(study)
    write_trajectories(ds, tmp_path / "tracks.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        measured = analyse_tracks(tmp_path / "tracks.nc")
    eddyhop.write_netcdf(measured, tmp_path / "measured.nc")
    eddyhop.write_netcdf(ds, tmp_path / "run.nc")
    comparison = compare([tmp_path / "measured.nc", tmp_path / "run.nc"],
                         labels=["measured", "model"])
    assert list(comparison["kind"].values) == ["measured", "monte_carlo"]
    d, se = comparison["D_xx"].values, comparison["D_xx_se"].values
    assert np.all(np.isfinite(d)) and np.all(se > 0)
    assert abs(d[0] - d[1]) < 4.0 * np.hypot(se[0], se[1])
