"""Paper figures and the figures that had none: column sizes, print style, natural units,
the exported data behind a figure, displacement PDFs, kurtosis, the moment spectrum and the
sweep collapse — checked from the matplotlib objects."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from click.testing import CliRunner

import eddyhop
from eddyhop.cli import main
from eddyhop.presentation import plots
from eddyhop.presentation.plots.distributions import (
    displacement_pdf_figure,
    kurtosis_figure,
    moment_spectrum_figure,
)
from eddyhop.presentation.plots.paper import PAPER_SIZES, figure_data, natural_units, resize
from tests.conftest import make_study


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    from eddyhop.analysis import analyse

    study = make_study(title="paper test run", flow={"U": 2.0, "k": 1.5},
                       run={"particles": 128, "dt": 0.01, "t_end": 5.0, "n_times": 12,
                            "tracked": 32, "track_samples": 30, "seed": 5})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = analyse(eddyhop.simulate(study))
    path = tmp_path_factory.mktemp("paper") / "run.nc"
    eddyhop.write_netcdf(ds, path)
    return path, ds


def test_natural_units_scale_time_by_uk_and_msd_by_k_squared(analysed):
    _, ds = analysed
    scaled = natural_units(ds)
    np.testing.assert_allclose(scaled["time"].values, ds["time"].values * 2.0 * 1.5)
    np.testing.assert_allclose(scaled["msd"].values, ds["msd"].values * 1.5 ** 2)
    np.testing.assert_allclose(scaled["regime_start"].values,
                               ds["regime_start"].values * 3.0)
    (ax,) = plots.msd_figure(scaled).axes
    assert "Uk" in ax.get_xlabel() and "model" not in ax.get_xlabel()
    assert "k^2" in ax.get_ylabel()


def test_single_column_figure_with_its_legend_below(analysed):
    _, ds = analysed
    figure = resize(plots.exponent_figure(ds), "single")
    assert figure.get_size_inches()[0] == pytest.approx(PAPER_SIZES["single"][0])
    (legend,) = figure.legends
    # below the axes: its top lies under the axes' bottom edge
    figure.draw_without_rendering()
    box = legend.get_window_extent()
    assert box.y1 <= figure.axes[0].get_window_extent().y0 + 1
    sizes = [t.get_fontsize() for t in figure.findobj(lambda a: hasattr(a, "get_fontsize"))]
    assert min(sizes) >= 5.5


def test_figure_data_holds_the_plotted_curves(analysed):
    _, ds = analysed
    figure = plots.msd_figure(ds)
    data = figure_data(figure)
    name = [v for v in data.data_vars if v.endswith("data_uniform_y")]
    assert name, list(data.data_vars)
    np.testing.assert_allclose(data[name[0]].values, ds["msd"].values)


def test_new_figures_show_the_analysis_values(analysed):
    _, ds = analysed
    figure = kurtosis_figure(ds)
    (ax,) = figure.axes
    (line,) = [x for x in ax.get_lines() if str(x.get_gid()).endswith("_x")]
    np.testing.assert_allclose(line.get_ydata(), ds["kurtosis_x"].values[
        np.isfinite(ds["kurtosis_x"].values)])
    assert any(np.allclose(x.get_ydata(), 3.0) for x in ax.get_lines())
    figure = moment_spectrum_figure(ds)
    (container,) = figure.axes[0].containers
    np.testing.assert_allclose(container.lines[0].get_ydata(),
                               ds["moment_exponent_over_order"].values)
    figure = displacement_pdf_figure(ds)
    gaussian = [x for x in figure.axes[0].get_lines() if x.get_gid() == "gaussian"]
    (curve,) = gaussian
    z = curve.get_xdata()
    assert np.trapezoid(curve.get_ydata(), z) == pytest.approx(1.0, abs=0.01)
    drawn = [x for x in figure.axes[0].get_lines() if str(x.get_gid()).startswith("pdf_")]
    assert len(drawn) == ds.sizes["pdf_time"]
    assert {"displacement_pdf", "kurtosis", "moment_spectrum"} <= set(
        plots.available_figures(ds))


def test_plot_command_options(analysed, tmp_path):
    path, _ = analysed
    result = CliRunner().invoke(main, ["plot", str(path), "--out", str(tmp_path / "figs"),
                                       "-f", "msd", "--format", "png", "--size", "double",
                                       "--style", "print", "--units", "natural", "--data"])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "figs" / "run_msd.png").exists()
    import xarray as xr

    data = xr.open_dataset(tmp_path / "figs" / "run_msd_data.nc")
    assert data.attrs["eddyhop_kind"] == "figure_data" and data.data_vars
    data.close()
    bad = CliRunner().invoke(main, ["plot", str(path), "--size", "poster"])
    assert bad.exit_code == 2 and "poster" in bad.output and "Traceback" not in bad.output


def test_report_tables_command(analysed, tmp_path):
    path, _ = analysed
    result = CliRunner().invoke(main, ["report", str(path), "--out", str(tmp_path / "r.html"),
                                       "--no-reference", "--tables", str(tmp_path / "tab"),
                                       "-f", "msd"])
    assert result.exit_code == 0, result.output
    latex = (tmp_path / "tab.tex").read_text()
    assert r"\toprule" in latex and r"\pm" in latex
    assert (tmp_path / "tab.csv").read_text().startswith("# eddyhop summary table")


def test_plot_refuses_before_writing_any_figure(analysed, tmp_path):
    """A figure whose variables are missing: one line naming the file and the variable, and
    no half-written figure set (the msd figure asked first is not written either)."""
    path, _ = analysed
    out = tmp_path / "none"
    result = CliRunner().invoke(main, ["plot", str(path), "--out", str(out), "-f", "msd",
                                       "-f", "residence", "--format", "png"])
    assert result.exit_code == 2, result.output
    assert "run.nc" in result.output and "residence_count" in result.output
    assert "Traceback" not in result.output
    assert not out.exists() or not list(out.iterdir())
