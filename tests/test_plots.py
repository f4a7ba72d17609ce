"""Figures drawn from small real runs, checked for content: axes labels with units, numbers of
lines and patches, the plotted values themselves, and no NaN; plus the clear errors a Dataset
lacking a variable gets.  (Matplotlib's Agg canvas; nothing is shown.)"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from matplotlib.collections import PolyCollection
from matplotlib.figure import Figure

import eddyhop
from eddyhop.errors import EddyhopError, InputDataError
from eddyhop.presentation import plots
from eddyhop.presentation.plots.asymptotes import CELLULAR_HIGH_PE
from tests.conftest import make_study

CENTRE = math.pi / 2


@pytest.fixture(scope="module")
def run_ds():
    """Cellular flow at Pe = 20, two start regions, aging, tracks and hopping; lengths in mm."""
    study = make_study(
        title="plot test run",
        start=[{"kind": "uniform", "label": "anywhere"},
               {"kind": "point", "label": "centre", "x": CENTRE, "y": CENTRE}],
        noise={"peclet": 20.0},
        run={"particles": 640, "dt": 0.02, "t_end": 60.0, "n_times": 30, "tracked": 3,
             "track_samples": 150},
        aging={"times": [1.0, 10.0], "lags": 10},
        hopping={"enabled": True},
        output={"length_unit": "mm", "time_unit": "s"},
    )
    return eddyhop.simulate(study)


@pytest.fixture(scope="module")
def analysed_ds(run_ds):
    from eddyhop.analysis import analyse

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # a short run: the D_eff window warning is expected
        return analyse(run_ds)


@pytest.fixture(scope="module")
def sweep_ds(tmp_path_factory):
    """A merged three-point Péclet sweep (serial backend), analysed per point by the merge."""
    from eddyhop.study.spec import parse_study
    from eddyhop.sweeps import merge_sweep, run_sweep

    study = parse_study({
        "title": "plot test sweep", "flow": {"family": "cellular"}, "noise": {"peclet": 10.0},
        "run": {"particles": 256, "dt": 0.02, "t_end": 40.0, "n_times": 20, "seed": 3,
                "progress": False},
        "sweep": {"noise.peclet": [1.0, 10.0, 100.0]},
    })
    folder = tmp_path_factory.mktemp("sweep")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_sweep(study, folder, backend="serial", progress=False, merge_to=None)
        return merge_sweep(folder)


def data_lines(ax):
    return [line for line in ax.get_lines() if str(line.get_gid()).startswith("data_")]


def assert_finite_lines(figure):
    for ax in figure.axes:
        for line in ax.get_lines():
            x, y = (np.asarray(v, dtype=float) for v in line.get_data())
            assert np.isfinite(x).all() and np.isfinite(y).all(), line.get_label()


# ---- MSD, starts, exponent --------------------------------------------------------------------
def test_msd_figure_content(analysed_ds):
    figure = plots.msd_figure(analysed_ds)
    assert isinstance(figure, Figure)
    (ax,) = figure.axes
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert "time since release" in ax.get_xlabel() and "[s]" in ax.get_xlabel()
    assert "mean-squared displacement" in ax.get_ylabel() and "[mm²]" in ax.get_ylabel()
    lines = data_lines(ax)
    assert [line.get_label() for line in lines] == ["anywhere", "centre"]
    # the plotted values are the Dataset's MSD (all positive here, so nothing is dropped)
    np.testing.assert_allclose(lines[1].get_ydata(), analysed_ds["msd"].sel(start="centre"))
    guides = {line.get_gid() for line in ax.get_lines()}
    assert {"guide_slope_2", "guide_slope_1"} <= guides
    bands = [c for c in ax.collections if isinstance(c, PolyCollection)]
    assert len(bands) == 2  # ±2 SE bands, one per start
    # every start's own regimes, one strip per start (not the first start's for all)
    for start in ("anywhere", "centre"):
        regimes = [p for p in ax.patches if str(p.get_gid()).startswith(f"regime_{start}_")]
        labels = [str(v) for v in analysed_ds["regime_label"].sel(start=start).values
                  if str(v)]
        assert len(regimes) == len(labels) >= 1
        assert [str(p.get_gid()).rsplit("_", 1)[-1] for p in regimes] == [
            label.rsplit("_", 1)[-1] for label in labels]
    counts = analysed_ds["regime_count"].values
    crossings = [line for line in ax.get_lines() if line.get_gid() == "crossover"]
    assert len(crossings) == sum(int(n) - 1 for n in counts)
    assert_finite_lines(figure)


def test_lines_use_the_colour_blind_safe_palette_in_order(analysed_ds):
    """Okabe & Ito (2008), "Color Universal Design" palette, one colour per start region."""
    from matplotlib.colors import to_hex

    from eddyhop.presentation.plots._style import PALETTE

    for figure in (plots.msd_figure(analysed_ds), plots.exponent_figure(analysed_ds),
                   plots.starts_figure(analysed_ds)):
        colours = [to_hex(line.get_color()).upper() for line in data_lines(figure.axes[0])]
        assert colours == [c.upper() for c in PALETTE[:len(colours)]], colours


def test_figures_name_the_missing_variable_and_the_command(run_ds):
    with pytest.raises(InputDataError, match=r"msd.*eddyhop run"):
        plots.msd_figure(run_ds.drop_vars("msd"))
    with pytest.raises(InputDataError, match=r"var_x.*eddyhop run"):
        plots.starts_figure(run_ds.drop_vars("var_x"))


def test_msd_figure_without_analysis_has_no_regimes(run_ds):
    (ax,) = plots.msd_figure(run_ds, start="centre").axes
    assert len(data_lines(ax)) == 1
    assert not [p for p in ax.patches if str(p.get_gid()).startswith("regime_")]


def test_starts_figure_shows_apparent_diffusivity(run_ds):
    figure = plots.starts_figure(run_ds)
    top, bottom = figure.axes[:2]
    assert len(top.get_lines()) == 2
    assert "apparent diffusivity" in bottom.get_ylabel()
    kappa = run_ds.attrs["kappa"]
    part = run_ds.sel(start="anywhere")
    expected = (part["var_x"] + part["var_y"]).values / (4 * kappa * run_ds["time"].values)
    np.testing.assert_allclose(bottom.get_lines()[0].get_ydata(), expected)
    # guide at 1 = molecular diffusion alone
    assert any(np.allclose(line.get_ydata(), 1.0) for line in bottom.get_lines())
    assert_finite_lines(figure)


def test_exponent_figure_content(analysed_ds):
    figure = plots.exponent_figure(analysed_ds)
    (ax,) = figure.axes
    lines = data_lines(ax)
    assert len(lines) == 2
    np.testing.assert_allclose(lines[0].get_ydata(), analysed_ds["alpha"].sel(start="anywhere"))
    assert "local exponent" in ax.get_ylabel()
    levels = sorted(float(line.get_ydata()[0]) for line in ax.get_lines()
                    if line.get_gid() is None and len(set(line.get_ydata())) == 1)
    assert levels[:3] == [0.5, 1.0, 2.0]
    # the axis holds every α and its ±2 SE band: nothing clipped, also below 0
    low, high = ax.get_ylim()
    alpha, se = analysed_ds["alpha"].values, analysed_ds["alpha_se"].values
    assert low <= min(-0.1, np.nanmin(alpha - 2 * se)) and high >= np.nanmax(alpha + 2 * se)
    # guide names sit in the right margin (axes x > 1), never on a curve
    guide_texts = [t for t in ax.texts if str(t.get_gid()).startswith("guide_label_")]
    assert len(guide_texts) == 3 and all(t.get_position()[0] > 1.0 for t in guide_texts)
    # one legend, outside the axes
    assert figure.legends and ax.get_legend() is None
    assert_finite_lines(figure)


def test_exponent_figure_needs_the_analysis(run_ds):
    with pytest.raises(InputDataError, match=r"alpha.*eddyhop analyse"):
        plots.exponent_figure(run_ds)


# ---- aging, trajectories, residence -----------------------------------------------------------
def test_aging_figure_content(run_ds):
    figure = plots.aging_figure(run_ds)
    axes = figure.axes
    assert len(axes) == 2  # one panel per start
    assert figure.legends and all(ax.get_legend() is None for ax in axes)  # off the data
    for ax, start in zip(axes, ["anywhere", "centre"]):
        labels = [line.get_label() for line in ax.get_lines()]
        assert labels == ["$t_a$ = 0 (unaged MSD)", "$t_a$ = 1", "$t_a$ = 10"]
        aged = run_ds["aged_msd"].sel(start=start, aging_time=10.0).values
        finite = np.isfinite(aged)
        np.testing.assert_allclose(ax.get_lines()[2].get_ydata(), aged[finite])
        assert "lag after the aging time" in ax.get_xlabel()
    assert "aged mean-squared displacement" in axes[0].get_ylabel()
    assert_finite_lines(figure)


def test_aging_figure_names_the_setting(run_ds):
    with pytest.raises(InputDataError, match=r"aged_msd.*\[aging\] times"):
        plots.aging_figure(run_ds.drop_vars(["aged_msd"]))


def test_trajectory_figure_content(run_ds):
    figure = plots.trajectories_figure(run_ds)
    assert len(figure.axes) == 2
    ax = figure.axes[1]  # the centre release
    tracks = [line for line in ax.get_lines() if str(line.get_gid()).startswith("track_")]
    assert len(tracks) == 3
    np.testing.assert_allclose(tracks[0].get_xdata(),
                               run_ds["track_x"].sel(start="centre").isel(particle=0))
    np.testing.assert_allclose(tracks[0].get_xdata()[0], CENTRE)
    gids = {line.get_gid() for line in ax.get_lines()}
    assert {"elliptic_points", "hyperbolic_points"} <= gids
    assert "x position" in ax.get_xlabel() and "[mm]" in ax.get_xlabel()
    assert "separatrices" in figure.get_suptitle()
    assert_finite_lines(figure)


def test_separatrix_lies_on_cell_edges():
    """Cellular flow: the separatrix ψ = 0 is the lines x = nπ/k, y = mπ/k (flows/cellular.py);
    every vertex of the drawn contour satisfies |sin kx sin ky| ≤ grid-spacing error."""
    from eddyhop.presentation.plots.trajectories import draw_flow

    family = eddyhop.get_family("cellular")
    params = family.validate({"U": 1.0, "k": 2.0})
    figure = Figure()
    ax = figure.subplots()
    contour = draw_flow(ax, family, params, (-1.0, 4.0, -1.0, 4.0))
    vertices = np.concatenate([p.vertices for p in contour.get_paths() if len(p.vertices)])
    distance = np.minimum(np.abs(np.sin(2 * vertices[:, 0])), np.abs(np.sin(2 * vertices[:, 1])))
    spacing = 5.0 / 60  # coarsest grid the figure uses over this extent (60 samples)
    assert vertices.shape[0] > 20
    assert distance.max() < 2 * spacing  # |sin| ≤ k·(half a grid step), with margin
    elliptic = next(line for line in ax.get_lines() if line.get_gid() == "elliptic_points")
    np.testing.assert_allclose(np.sin(2 * elliptic.get_xdata()) ** 2, 1.0, atol=1e-12)


def test_trajectory_figure_names_the_setting(run_ds):
    with pytest.raises(InputDataError, match=r"track_x.*run\.tracked"):
        plots.trajectories_figure(run_ds.drop_vars(["track_x", "track_y"]))


def test_residence_figure_content(run_ds):
    figure = plots.residence_figure(run_ds)
    left = figure.axes[0]
    assert left.get_xscale() == "log" and left.get_yscale() == "log"
    assert "residence time" in left.get_xlabel() and "[s]" in left.get_xlabel()
    lines = data_lines(left)
    assert [line.get_gid() for line in lines] == ["data_anywhere", "data_centre"]
    # the plotted density integrates to one over the non-empty bins
    edges = run_ds["residence_time_edges"].values
    counts = run_ds["residence_count"].sel(start="anywhere").values
    widths = np.diff(edges)[counts > 0]
    assert np.sum(lines[0].get_ydata() * widths) == pytest.approx(1.0, rel=1e-9)
    assert len(figure.axes) == 2 and len(data_lines(figure.axes[1])) == 2  # flight lengths
    assert_finite_lines(figure)


def test_residence_tail_fits_follow_the_analysis(analysed_ds):
    """The drawn tail fits are the analysis's truncated models on the density scale: each
    integrates over [t_min, t_max] to the tail fraction N_tail / N (quadrature error only)."""
    from scipy.integrate import trapezoid

    from eddyhop.presentation.plots.residence import tail_fit_densities

    part = analysed_ds.sel(start="anywhere")
    edges = analysed_ds["residence_time_edges"].values
    curves = tail_fit_densities(part, edges)
    assert set(curves) == {"exponential", "power_law"}
    fraction = float(part["residence_tail_count"]) / float(part["residence_count"].sum())
    for t, density, _text in curves.values():
        fine = np.geomspace(t[0], t[-1], 20001)
        values = np.interp(np.log(fine), np.log(t), np.log(density))
        assert trapezoid(np.exp(values), fine) == pytest.approx(fraction, rel=2e-3)
    figure = plots.residence_figure(analysed_ds)
    fits = [line for line in figure.axes[0].get_lines() if str(line.get_gid()).startswith("fit_")]
    assert len(fits) == 4  # two models × two start regions
    # a model rejected by its goodness-of-fit test says so in the legend
    from eddyhop.analysis.verdicts import flag_meaning

    for model, key in (("exponential", "exp"), ("power_law", "pow")):
        verdict = flag_meaning(part[f"residence_{key}_verdict"])
        assert (f"({verdict} by the χ² test)" in curves[model][2]) == (verdict != "accepted")


def test_residence_figure_names_the_setting(run_ds):
    with pytest.raises(InputDataError, match=r"residence_count.*\[hopping\] enabled"):
        plots.residence_figure(run_ds.drop_vars(["residence_count"]))


# ---- sweeps ----------------------------------------------------------------------------------
def test_deff_peclet_figure_content(sweep_ds):
    figure = plots.deff_peclet_figure(sweep_ds)
    (ax,) = figure.axes
    assert "Péclet number" in ax.get_xlabel() and r"$D/\kappa$" in ax.get_ylabel()
    from eddyhop.analysis.verdicts import flag_meaning

    confirmed = np.array([flag_meaning(sweep_ds["deff_converged"], v) == "diffusive"
                          for v in sweep_ds["deff_converged"].values])
    # D_xx and D_yy with error bars: confirmed points filled, the others open
    points = {str(c.lines[0].get_gid()): c.lines[0] for c in ax.containers}
    filled = points["points_None_xx"]
    # series at one Pe are spread sideways by under 5 %, never stacked
    np.testing.assert_allclose(filled.get_xdata(), np.array([1.0, 10.0, 100.0])[confirmed],
                               rtol=0.05)
    assert not np.allclose(filled.get_xdata(), points["points_None_yy"].get_xdata())
    np.testing.assert_allclose(filled.get_ydata(),
                               (sweep_ds["D_xx"].values / sweep_ds["kappa"].values)[confirmed])
    if (~confirmed).any():
        assert points["unconfirmed_None_xx"].get_markerfacecolor() == "white"
        assert any(line.get_gid() == "unconfirmed_key" for line in ax.get_lines())
    # the fitted law, when there is one, is drawn with its exponent in the label
    fits = [line for line in ax.get_lines() if str(line.get_gid()).startswith("fit_")]
    exponent = float(sweep_ds["D_xx_exponent"]) if "D_xx_exponent" in sweep_ds else np.nan
    if np.isfinite(exponent):
        (fit,) = [line for line in fits if line.get_gid() == "fit_None_xx"]
        x, y = fit.get_data()
        slope = np.polyfit(np.log(x), np.log(y), 1)[0]
        assert slope == pytest.approx(exponent, rel=1e-9)
        assert f"{exponent:.2f}" in fit.get_label()
    # the legend stands outside the axes (a figure legend)
    assert figure.legends and not ax.get_legend()
    labels = [line.get_label() for line in ax.get_lines()]
    assert any(text.startswith("low Pe: 1 + 0.125 Pe²") for text in labels)
    assert any(text.startswith(f"high Pe: {CELLULAR_HIGH_PE:.4f} Pe^½") for text in labels)
    assert_finite_lines(figure)


def test_exponent_map_content(sweep_ds):
    figure = plots.exponent_map_figure(sweep_ds)
    ax = figure.axes[0]
    (mesh,) = [c for c in ax.collections if c.__class__.__name__ == "QuadMesh"]
    values = mesh.get_array()
    assert values.shape == (3, sweep_ds.sizes["time"])
    np.testing.assert_allclose(np.ma.filled(values, np.nan), sweep_ds["alpha"].values)
    assert "local exponent" in figure.axes[-1].get_ylabel()  # colour bar
    assert ax.get_yscale() == "log" and "Péclet" in ax.get_ylabel()
    assert ax.get_xscale() == "log" and "time" in ax.get_xlabel()
    assert "(model time units)" in ax.get_xlabel() or "[" in ax.get_xlabel()  # units shown
    assert np.isfinite(np.ma.compressed(values)).all()
    from eddyhop.presentation.plots._style import EXPONENT_CMAP

    assert mesh.get_cmap().name == EXPONENT_CMAP  # diverging, colour-blind safe
    with pytest.raises(InputDataError, match=r"alpha.*eddyhop analyse"):
        plots.exponent_map_figure(sweep_ds.drop_vars("alpha"))


def test_sweep_figures_refuse_a_single_run(analysed_ds, sweep_ds):
    with pytest.raises(InputDataError, match="eddyhop merge"):
        plots.deff_peclet_figure(analysed_ds)
    with pytest.raises(InputDataError, match="eddyhop analyse"):
        plots.deff_peclet_figure(sweep_ds.drop_vars(["D_xx", "D_yy"]))


def test_catalogue_lists_what_applies(run_ds, analysed_ds, sweep_ds):
    assert plots.available_figures(run_ds) == ["msd", "starts", "aging", "trajectories",
                                               "residence", "kurtosis"]
    assert {"exponent", "displacement_pdf", "moment_spectrum"} <= set(
        plots.available_figures(analysed_ds))
    assert plots.available_figures(sweep_ds) == ["deff_peclet", "exponent_map", "collapse"]
    with pytest.raises(EddyhopError, match="unknown figure"):
        list(plots.figures_for(run_ds, ["nonsense"]))


def test_all_nan_variable_is_refused(run_ds):
    broken = run_ds.copy()
    broken["msd"] = broken["msd"] * np.nan
    with pytest.raises(InputDataError, match="no finite values"):
        plots.msd_figure(broken)


# ---- saving ----------------------------------------------------------------------------------
def test_save_png_and_pdf(run_ds, tmp_path):
    figure = plots.msd_figure(run_ds)
    written = plots.save_figure(figure, tmp_path / "run_msd", formats=("png", "pdf"))
    assert [p.name for p in written] == ["run_msd.png", "run_msd.pdf"]
    assert written[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert written[1].read_bytes()[:5] == b"%PDF-"
    assert not list(tmp_path.glob(".*part"))  # no temporary left behind
    # a dotted stem (e.g. from "run.analysed.nc") keeps every part: no figure overwrites another
    dotted = plots.save_figure(figure, tmp_path / "run.analysed_msd", formats=("png",))
    assert [p.name for p in dotted] == ["run.analysed_msd.png"]
    assert [p.name for p in plots.save_figure(figure, tmp_path / "f.pdf", formats=("pdf",))] \
        == ["f.pdf"]
    with pytest.raises(EddyhopError, match="format 'gif'"):
        plots.save_figure(figure, tmp_path / "x", formats=("gif",))
    with pytest.raises(EddyhopError, match="does not exist"):
        plots.save_figure(figure, tmp_path / "missing" / "x")


def test_saving_lays_out_once_and_draws_what_plain_savefig_draws(analysed_ds, tmp_path,
                                                                  monkeypatch):
    """save_figure lays a figure out once, without the dry draw savefig makes for its layout
    engine, and saves the later formats with no engine; the files are the same as those of
    plain savefig calls (PNG pixel for pixel, PDF byte for byte), aspect-locked axes included."""
    from PIL import Image

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "0")  # a fixed PDF creation date
    names = ["msd", "exponent", "trajectories", "residence"]
    fast = dict(plots.figures_for(analysed_ds, names))
    plain = dict(plots.figures_for(analysed_ds, names))
    for name in names:
        plots.save_figure(fast[name], tmp_path / f"fast_{name}", formats=("png", "pdf"))
        figure = plain[name]
        plots._style.make_text_safe(figure)
        figure.savefig(tmp_path / f"plain_{name}.png", format="png", dpi=150,
                       metadata=plots._style._metadata("png"))
        figure.set_layout_engine("none")  # the layout of the PNG, as before this change
        figure.savefig(tmp_path / f"plain_{name}.pdf", format="pdf", dpi=150,
                       metadata=plots._style._metadata("pdf"))
        ours = np.asarray(Image.open(tmp_path / f"fast_{name}.png"))
        theirs = np.asarray(Image.open(tmp_path / f"plain_{name}.png"))
        assert ours.shape == theirs.shape and np.array_equal(ours, theirs), name
        assert (tmp_path / f"fast_{name}.pdf").read_bytes() == \
            (tmp_path / f"plain_{name}.pdf").read_bytes(), name
        assert fast[name].get_layout_engine() is not None  # the engine is given back
