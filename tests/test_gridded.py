"""Gridded periodic flows: file checks, interpolation accuracy, divergence, Monte Carlo agreement.

Sources named beside each check.  Statistical tolerances are 4 standard errors of the stated
estimate (fixed seeds).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import xarray as xr

from eddyhop.errors import EddyhopError, InputDataError, StudyError
from eddyhop.flows import get_family
from eddyhop.flows.compiled import evaluate_gradient, evaluate_psi, evaluate_velocity
from eddyhop.flows.grid_file import grid_dataset, unit_powers
from eddyhop.flows.gridded import GriddedFieldWarning, field_report
from eddyhop.results.io import write_netcdf
from tests.conftest import make_study

CELLULAR = get_family("cellular")
GRIDDED = get_family("gridded")


def _write(tmp_path, name, family, params, n, kind="velocity", **kwargs):
    path = tmp_path / name
    write_netcdf(grid_dataset(get_family(family), params, n, kind=kind, **kwargs), path)
    return str(path)


def _points(n=2000, seed=1, span=10.0):
    rng = np.random.default_rng(seed)
    return rng.uniform(-span, span, n), rng.uniform(-span, span, n)


def _gridded(path, **extra):
    return GRIDDED.validate({"file": path, **extra})


# ---- interpolation accuracy ---------------------------------------------------------------------
def test_bicubic_convergence_orders(tmp_path):
    """Cubic-spline interpolation of a smooth periodic ψ converges as O(h⁴) in ψ and O(h³) in
    its derivative, the velocity (de Boor 1978, *A Practical Guide to Splines*, ch. V).  Measured
    orders from grids of 16, 32, 64 intervals must exceed 3.5 and 2.7."""
    params = {"U": 1.0, "k": 1.0}
    x, y = _points()
    psi0 = evaluate_psi(CELLULAR, params, x, y)
    u0, v0 = evaluate_velocity(CELLULAR, params, x, y)
    errors = []
    for n in (16, 32, 64):
        g = _gridded(_write(tmp_path, f"c{n}.nc", "cellular", params, n, "stream_function"))
        u, v = evaluate_velocity(GRIDDED, g, x, y)
        errors.append((np.max(np.abs(evaluate_psi(GRIDDED, g, x, y) - psi0)),
                       np.max(np.hypot(u - u0, v - v0))))
    errors = np.array(errors)
    orders = np.log2(errors[:-1] / errors[1:])
    assert np.all(orders[:, 0] > 3.5), orders
    assert np.all(orders[:, 1] > 2.7), orders
    assert errors[-1, 1] < 2e-5  # 64 intervals per period: velocity good to 2e-5 U


@pytest.mark.parametrize("kind", ["velocity", "stream_function"])
def test_spectral_interpolation_is_exact_for_a_band_limited_field(tmp_path, kind):
    """The cellular flow has the single Fourier mode (±1, ±1): trigonometric interpolation on any
    grid with more than 2 intervals per period reproduces it to round-off."""
    params = {"U": 1.3, "k": 2.0}
    g = _gridded(_write(tmp_path, "c.nc", "cellular", params, 12, kind),
                 interpolation="spectral")
    x, y = _points(500)
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    u0, v0 = evaluate_velocity(CELLULAR, params, x, y)
    assert np.max(np.hypot(u - u0, v - v0)) < 1e-12
    grads = evaluate_gradient(GRIDDED, g, x, y)
    grads0 = evaluate_gradient(CELLULAR, params, x, y)
    assert max(np.max(np.abs(a - b)) for a, b in zip(grads, grads0)) < 1e-11
    assert GRIDDED.velocity_scale(g) == pytest.approx(1.3)
    assert GRIDDED.wavenumber(g) == pytest.approx(2.0)


@pytest.mark.parametrize("interpolation", ["bicubic", "spectral"])
def test_interpolated_field_is_divergence_free_and_the_curl_of_psi(tmp_path, interpolation):
    """u = ∂ψ/∂y, v = −∂ψ/∂x of one interpolated scalar: ∇·u = 0 exactly (trace of the gradient
    is zero identically) and by central differences (h = 1e-5; truncation ~1e-10)."""
    params = {"U": 1.0, "k": 1.0, "epsilon": 0.4}
    g = _gridded(_write(tmp_path, "e.nc", "cats_eye", params, 24), interpolation=interpolation)
    x, y = _points(300)
    dudx, _, _, dvdy = evaluate_gradient(GRIDDED, g, x, y)
    assert np.array_equal(dudx, -dvdy)
    h = 1e-5
    up, _ = evaluate_velocity(GRIDDED, g, x + h, y)
    um, _ = evaluate_velocity(GRIDDED, g, x - h, y)
    _, vp = evaluate_velocity(GRIDDED, g, x, y + h)
    _, vm = evaluate_velocity(GRIDDED, g, x, y - h)
    assert np.max(np.abs(up - um + vp - vm)) / (2 * h) < 1e-6
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    dpy = (evaluate_psi(GRIDDED, g, x, y + h) - evaluate_psi(GRIDDED, g, x, y - h)) / (2 * h)
    dpx = (evaluate_psi(GRIDDED, g, x + h, y) - evaluate_psi(GRIDDED, g, x - h, y)) / (2 * h)
    assert np.max(np.abs(u - dpy)) < 1e-7
    assert np.max(np.abs(v + dpx)) < 1e-7


def test_velocity_file_keeps_a_mean_flow(tmp_path):
    """A drifting cellular flow (mean drift along an irrational direction) read from velocity
    samples: the drift is the grid mean, ψ gains the linear part ū y − v̄ x."""
    params = {"U": 1.0, "k": 1.0, "drift_x": 0.3, "drift_y": 0.3 * math.sqrt(2)}
    g = _gridded(_write(tmp_path, "d.nc", "drifting_cellular", params, 64))
    family = get_family("drifting_cellular")
    x, y = _points(500)
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    u0, v0 = evaluate_velocity(family, params, x, y)
    assert np.max(np.hypot(u - u0, v - v0)) < 2e-5
    report = field_report(g)
    assert report["mean_velocity"] == pytest.approx((0.3, 0.3 * math.sqrt(2)), abs=1e-12)
    shift = evaluate_psi(GRIDDED, g, 2 * np.pi, 0.0) - evaluate_psi(GRIDDED, g, 0.0, 0.0)
    assert shift == pytest.approx(-0.3 * math.sqrt(2) * 2 * np.pi, rel=1e-9)


def test_scale_multiplies_the_field(tmp_path):
    params = {"U": 1.0, "k": 1.0}
    path = _write(tmp_path, "c.nc", "cellular", params, 32)
    one = _gridded(path)
    three = _gridded(path, scale=3.0)
    x, y = _points(50)
    assert np.allclose(evaluate_velocity(GRIDDED, three, x, y)[0],
                       3 * evaluate_velocity(GRIDDED, one, x, y)[0], rtol=1e-12, atol=1e-14)
    assert GRIDDED.velocity_scale(three) == pytest.approx(3.0)


# ---- the report ---------------------------------------------------------------------------------
def test_report_measures_the_divergent_part(tmp_path):
    """Helmholtz decomposition (common practice): u = ∇⊥ψ + ∇φ with ψ = sin x sin y and
    φ = (B/2) cos 2x has fluctuating energy ⟨|u|²⟩ = 1/2 (solenoidal) + 2B² (gradient), so the
    divergent share is 2B²/(1/2 + 2B²) = 0.2 for B = 1/4.  The simulated field is the
    solenoidal part (to the bicubic error, < 1e-4 on 48 intervals)."""
    b = 0.25
    ds = grid_dataset(CELLULAR, {"U": 1.0, "k": 1.0}, 48)
    ds["u"] = ds["u"] - 2 * b * np.sin(2 * ds["x"])
    ds["u"].attrs["units"] = "m s-1"
    write_netcdf(ds, tmp_path / "div.nc")
    with pytest.warns(GriddedFieldWarning, match="divergent"):
        g = _gridded(str(tmp_path / "div.nc"))
    report = field_report(g)
    assert report["divergent_energy_fraction"] == pytest.approx(0.2, rel=1e-10)
    # ‖∇·u‖/‖∇u‖: div = -4B cos 2x; ‖div‖² = 8B², ‖∇u‖² = 1 + 8B² (mean squares)
    assert report["divergence_ratio"] == pytest.approx(math.sqrt(8 * b * b / (1 + 8 * b * b)),
                                                       rel=1e-10)
    # the removed part shows as node error: |2B sin 2x| at most 2B = 0.5 of... max data speed
    assert report["node_error_max"] == pytest.approx(2 * b / report["max_speed"], rel=1e-3)
    x, y = _points(300)
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    u0, v0 = evaluate_velocity(CELLULAR, {"U": 1.0, "k": 1.0}, x, y)
    assert np.max(np.hypot(u - u0, v - v0)) < 1e-4


def test_report_estimates_the_interpolation_error(tmp_path):
    """``bicubic_vs_spectral_max`` (bicubic against trigonometric interpolant, 4x finer grid)
    tracks the true bicubic velocity error of a band-limited field within a factor 1.5, and
    the node error is at most that."""
    params = {"U": 1.0, "k": 1.0}
    g = _gridded(_write(tmp_path, "c.nc", "cellular", params, 32))
    report = field_report(g)
    x, y = _points(20000, seed=9, span=2 * np.pi)
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    u0, v0 = evaluate_velocity(CELLULAR, params, x, y)
    true = np.max(np.hypot(u - u0, v - v0))
    assert true / 1.5 < report["bicubic_vs_spectral_max"] < 1.5 * true
    assert report["node_error_max"] <= report["bicubic_vs_spectral_max"]
    assert report["divergence_ratio"] < 1e-13
    assert report["length_unit"] == "m" and report["time_unit"] == "s"
    assert report["shape"] == (32, 32)


# ---- file conventions and bad input -------------------------------------------------------------
def test_units_parser():
    assert unit_powers("m s-1") == {"m": 1, "s": -1}
    assert unit_powers("mm/s") == {"mm": 1, "s": -1}
    assert unit_powers("m^2 s^-1") == {"m": 2, "s": -1}
    assert unit_powers("m2.s-1") == {"m": 2, "s": -1}
    assert unit_powers("1") == {}
    assert unit_powers("") is None


def test_decreasing_and_transposed_coordinates_are_read(tmp_path):
    """Image-style data: y counted downwards, dims stored (x, y), coordinates named by axis."""
    params = {"U": 1.0, "k": 1.0}
    ds = grid_dataset(CELLULAR, params, 32).isel(y=slice(None, None, -1))
    ds = ds.transpose("x", "y").rename({"x": "col", "y": "row"})
    write_netcdf(ds, tmp_path / "piv.nc")
    g = _gridded(str(tmp_path / "piv.nc"))
    x, y = _points(200)
    u, v = evaluate_velocity(GRIDDED, g, x, y)
    u0, v0 = evaluate_velocity(CELLULAR, params, x, y)
    assert np.max(np.hypot(u - u0, v - v0)) < 1e-4


def _broken(tmp_path, change):
    ds = grid_dataset(CELLULAR, {"U": 1.0, "k": 1.0}, 16)
    ds = change(ds)
    path = tmp_path / "broken.nc"
    write_netcdf(ds, path)
    return str(path)


def _set_units(name, units):
    def change(ds):
        if units is None:
            del ds[name].attrs["units"]
        else:
            ds[name].attrs["units"] = units
        return ds
    return change


def _uneven(ds):
    x = ds["x"].values.copy()
    x[3] += 0.05
    return ds.assign_coords(x=("x", x, ds["x"].attrs))


def _nan(ds):
    ds["u"][4, 5] = np.nan
    return ds


def _time_dependent(ds):
    return xr.concat([ds, ds], dim="time")


BAD_FILES = {
    "open grid (no closing sample)": (lambda ds: ds.isel(x=slice(0, -1)), "not periodic along x"),
    "first and last samples disagree": (
        lambda ds: ds.assign(u=(ds["u"] + 0.01 * ds["x"]).assign_attrs(ds["u"].attrs)),
        "not periodic along x"),
    "uneven spacing": (_uneven, "unevenly spaced"),
    "coordinate without units": (_set_units("x", None), "no 'units'"),
    "field without units": (_set_units("v", None), "no 'units'"),
    "field units in another length unit": (_set_units("u", "cm s-1"), "same length unit"),
    "field units not a velocity": (_set_units("u", "m"), "expected length per time"),
    "NaN in the field": (_nan, "NaN"),
    "time-dependent field": (_time_dependent, "steady 2-D field"),
    "no recognisable variables": (
        lambda ds: ds.rename({"u": "a", "v": "b"}), "cannot tell which variables"),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_bad_files_are_clear_errors(tmp_path, case):
    change, message = BAD_FILES[case]
    path = _broken(tmp_path, change)
    with pytest.raises(InputDataError, match=message):
        _gridded(path)


def test_stream_function_with_a_mean_flow_is_not_periodic(tmp_path):
    path = _write(tmp_path, "d.nc", "drifting_cellular",
                  {"U": 1.0, "k": 1.0, "drift_x": 0.2, "drift_y": 0.0}, 16, "stream_function")
    with pytest.raises(InputDataError, match=r"give the\s+velocity components"):
        _gridded(path)


def test_bad_study_parameters(tmp_path):
    path = _write(tmp_path, "c.nc", "cellular", {"U": 1.0, "k": 1.0}, 16)
    with pytest.raises(StudyError, match=r"flow\.file is required"):
        GRIDDED.validate({})
    with pytest.raises(StudyError, match="does not exist"):
        GRIDDED.validate({"file": str(tmp_path / "missing.nc")})
    with pytest.raises(StudyError, match="interpolation"):
        GRIDDED.validate({"file": path, "interpolation": "linear"})
    with pytest.raises(StudyError, match=r"unknown parameter.*allowed: closure_tolerance, file"):
        GRIDDED.validate({"file": path, "U": 2.0})
    with pytest.raises(StudyError, match="not both"):
        GRIDDED.validate({"file": path, "velocity": ["u", "v"], "stream_function": "psi"})
    with pytest.raises(InputDataError, match="no variable"):
        GRIDDED.validate({"file": path, "velocity": ["u", "w"]})
    not_netcdf = tmp_path / "notes.nc"
    not_netcdf.write_text("not a netCDF file")
    with pytest.raises(EddyhopError, match="not a readable netCDF"):
        GRIDDED.validate({"file": str(not_netcdf)})


def test_the_file_digest_is_recorded_and_checked(tmp_path):
    """Provenance names the exact data: validation records the file's SHA-256, and parameters
    recorded earlier refuse a file that has changed since."""
    import hashlib

    path = _write(tmp_path, "c.nc", "cellular", {"U": 1.0, "k": 1.0}, 16)
    params = _gridded(path)
    with open(path, "rb") as stream:
        assert params["file_sha256"] == hashlib.sha256(stream.read()).hexdigest()
    assert GRIDDED.validate(params) == params  # resolved parameters validate again
    _write(tmp_path, "c.nc", "cellular", {"U": 2.0, "k": 1.0}, 16)
    with pytest.raises(StudyError, match="changed since"):
        GRIDDED.validate(params)


# ---- Monte Carlo: the gridded field reproduces the analytic family ------------------------------
def _late_slope(ds, component, t1):
    """D from the batch means of msd_component between t1 and the last time, with its SE."""
    times = ds.time.values
    i1 = int(np.searchsorted(times, t1))
    batches = ds[f"batch_msd_{component}"].values
    slopes = (batches[:, -1] - batches[:, i1]) / (2 * (times[-1] - times[i1]))
    return slopes.mean(), slopes.std(ddof=1) / math.sqrt(slopes.size)


def test_gridded_cellular_flow_reproduces_the_analytic_msd(tmp_path):
    """The same study on the analytic cellular flow and on its 64² bicubic grid.  Same seed:
    the runs share their noise, so the MSDs may differ only by the interpolation error (here
    well below 1e-3 relative).  Different seeds: they agree within 4 combined standard errors."""
    path = _write(tmp_path, "cell.nc", "cellular", {"U": 1.0, "k": 1.0}, 64, "stream_function")
    run = {"particles": 2000, "dt": 0.01, "t_end": 30.0, "n_times": 12, "seed": 11}
    analytic = make_study(flow={"family": "cellular", "U": 1.0, "k": 1.0, "_replace": True},
                          noise={"peclet": 10.0}, run=run)
    gridded = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                         noise={"peclet": 10.0}, run=run)
    other = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                       noise={"peclet": 10.0}, run={**run, "seed": 12})
    assert gridded.noise.kappa == pytest.approx(analytic.noise.kappa)
    import eddyhop

    a = eddyhop.simulate(analytic)
    g = eddyhop.simulate(gridded)
    o = eddyhop.simulate(other)
    assert np.max(np.abs(g.msd.values / a.msd.values - 1)) < 1e-3
    combined = np.sqrt(a.msd_se.values**2 + o.msd_se.values**2)
    assert np.all(np.abs(o.msd.values - a.msd.values) < 4 * combined)


def test_gridded_diagonal_jets_reproduce_the_homogenized_diffusivity(tmp_path):
    """Cat's-eye flow at ε = 1 is the diagonal shear ψ = (U/k) cos k(x − y), whose homogenized
    diffusivity is exact: D_xx = D_yy = κ(1 + Pe²/4), D_xy = κ Pe²/4 (Taylor dispersion in a
    sinusoidal shear, D_∥ = κ + W²/(2κK²); Majda & Kramer 1999, Phys. Rep. 314, 237–574, §2).
    Written to a 32² velocity grid and loaded back; D from the late MSD slope (t ≥ 10, i.e. 10
    relaxation times 1/(κ K²)), tolerance 4 standard errors of the batch means."""
    path = _write(tmp_path, "jets.nc", "cats_eye", {"U": 1.0, "k": 1.0, "epsilon": 1.0}, 32)
    study = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                       noise={"_replace": True, "kappa": 0.5},
                       run={"particles": 4000, "dt": 0.01, "t_end": 40.0, "n_times": 20,
                            "spacing": "linear", "seed": 5, "batches": 40})
    import eddyhop

    ds = eddyhop.simulate(study)
    # The formula's Pe = U/(κk) uses the cat's-eye amplitude U = 1; the gridded family's own
    # velocity scale is the largest speed on the grid, here √2 U (|u| = |v| on the jets).
    peclet = 1.0 / (0.5 * 1.0)
    assert study.noise.peclet == pytest.approx(math.sqrt(2) * peclet)
    expected = 0.5 * (1 + peclet**2 / 4)
    for component in ("x", "y"):
        value, se = _late_slope(ds, component, 10.0)
        assert abs(value - expected) < 4 * se, (component, value, se, expected)
    times = ds.time.values
    i1 = int(np.searchsorted(times, 10.0))
    cross = ds["batch_msd_xy"].values
    slopes = (cross[:, -1] - cross[:, i1]) / (2 * (times[-1] - times[i1]))
    se = slopes.std(ddof=1) / math.sqrt(slopes.size)
    assert abs(slopes.mean() - 0.5 * peclet**2 / 4) < 4 * se


def test_start_regions_work_on_a_gridded_flow(tmp_path):
    """Stream-function start regions (eddy centres found numerically) work on gridded data."""
    path = _write(tmp_path, "cell.nc", "cellular", {"U": 1.0, "k": 1.0}, 32)
    with warnings.catch_warnings():
        warnings.simplefilter("error", GriddedFieldWarning)
        study = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                           start=[{"kind": "centre", "radius": 0.2, "label": "c"},
                                  {"kind": "separatrix", "delta": 0.05, "label": "s"}])
    from eddyhop.starts import sample_starts

    x, y = sample_starts(study.starts[0], study.flow.model, study.flow.params, 500, 1)
    centre = np.pi / 2
    dx = np.mod(x, np.pi) - centre
    dy = np.mod(y, np.pi) - centre
    assert np.all(np.hypot(dx, dy) < 0.2 + 1e-6)


# ---- the field report in the run's attributes, the CLI and the HTML report ---------------------
def _divergent_file(tmp_path, b=0.25):
    """The cellular velocity plus the gradient of φ = (B/2) cos 2x (see the report test above)."""
    ds = grid_dataset(CELLULAR, {"U": 1.0, "k": 1.0}, 48)
    ds["u"] = ds["u"] - 2 * b * np.sin(2 * ds["x"])
    ds["u"].attrs["units"] = "m s-1"
    path = tmp_path / "div.nc"
    write_netcdf(ds, path)
    return path


def test_field_report_is_stored_in_the_run_attributes(tmp_path):
    """Every key of ``field_report`` becomes a flat ``field_*`` global attribute (numbers or
    strings only), equal to the report, and survives the netCDF round trip."""
    import eddyhop
    from eddyhop.flows.gridded import field_attributes
    from eddyhop.results.io import open_result

    path = _divergent_file(tmp_path)
    with pytest.warns(GriddedFieldWarning):
        study = make_study(flow={"family": "gridded", "file": str(path), "_replace": True},
                           run={"particles": 64, "t_end": 0.2, "n_times": 4})
    ds = eddyhop.simulate(study, progress=False)
    report = field_report(study.flow.params)
    attrs = {k: v for k, v in ds.attrs.items() if k.startswith("field_")}
    assert attrs == field_attributes(study.flow.params)
    for key, value in report.items():
        if isinstance(value, tuple):
            assert (attrs[f"field_{key}_x"], attrs[f"field_{key}_y"]) == pytest.approx(value)
        elif isinstance(value, str):
            assert attrs[f"field_{key}"] == value
        else:
            assert attrs[f"field_{key}"] == pytest.approx(value)
    assert all(isinstance(v, (int, float, str)) and not isinstance(v, bool)
               for v in attrs.values())
    assert attrs["field_divergent_energy_fraction"] == pytest.approx(0.2, rel=1e-10)
    write_netcdf(ds, tmp_path / "run.nc")
    back = open_result(tmp_path / "run.nc")
    for key, value in attrs.items():
        assert back.attrs[key] == (value if isinstance(value, str) else pytest.approx(value))
    back.close()
    # closed-form families carry no field report
    plain = eddyhop.simulate(make_study(run={"particles": 64, "t_end": 0.2, "n_times": 4}),
                             progress=False)
    assert not any(k.startswith("field_") for k in plain.attrs)


def test_validate_prints_the_field_report(tmp_path):
    from click.testing import CliRunner

    from eddyhop.cli import main

    path = _divergent_file(tmp_path)
    study = tmp_path / "s.toml"
    study.write_text(f'title = "t"\n[flow]\nfamily = "gridded"\nfile = "{path.name}"\n'
                     "[noise]\nkappa = 0.1\n[run]\nparticles = 10\ndt = 0.01\nt_end = 1.0\n")
    with pytest.warns(GriddedFieldWarning, match="divergent"):
        result = CliRunner().invoke(main, ["validate", str(study)])
    assert result.exit_code == 0, result.output
    with pytest.warns(GriddedFieldWarning):
        report = field_report(GRIDDED.validate({"file": str(path)}))
    assert "gridded field" in result.output
    assert f"field_divergent_energy_fraction = {report['divergent_energy_fraction']:.6g}" in \
        result.output
    assert f"field_node_error_max = {report['node_error_max']:.6g}" in result.output
    assert f"field_shape_x = {report['shape'][0]}" in result.output
    assert "field_length_unit = m" in result.output


def test_html_report_lists_the_field_report(tmp_path):
    import eddyhop
    from eddyhop.presentation.report import build_report

    path = _write(tmp_path, "c.nc", "cellular", {"U": 1.0, "k": 1.0}, 32)
    study = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                       run={"particles": 64, "t_end": 0.2, "n_times": 4})
    ds = eddyhop.simulate(study, progress=False)
    html = build_report(ds)
    section = html[html.index("id='parameters'"):html.index("id='results'")]
    report = field_report(study.flow.params)
    for key in ("divergence_ratio", "divergent_energy_fraction", "node_error_max",
                "node_error_rms", "bicubic_vs_spectral_max"):
        assert f"gridded field {key}" in section
        assert f"{report[key]:.4g}" in section
    assert "gridded field shape_x</th><td>32<" in section


# ---- Monte Carlo against the cell problem on a gridded cellular flow ----------------------------
def test_gridded_cellular_flow_matches_the_cell_problem(tmp_path):
    """The cellular flow at Pe = 10 written to a 64² stream-function grid: its long-time
    diffusivity must match the homogenized value of the analytic flow from
    ``eddyhop.reference.effective_diffusivity`` (cell problem, converged to 1e-6; homogenization
    theory, Bensoussan, Lions & Papanicolaou 1978, ch. 3) within 4 standard errors of the
    batch-means estimate (measured: 0.3386 ± 0.0022 against 0.34166).  The bicubic field
    differs from the analytic one by < 2e-5 U (convergence test above), and the strang_rk2
    step bias is below what this ensemble resolves (on the analytic flow, 20 000 particles:
    0.3341, 0.3377, 0.3435, each ± 0.004, at dt = 0.1, 0.05, 0.025), so neither is added.
    D from (msd_x + msd_y)/4 per batch between t = 20 and 60 (several cell-diffusion times
    1/(κk²) = 10)."""
    import eddyhop
    from eddyhop.reference import effective_diffusivity

    exact = effective_diffusivity("cellular", {"U": 1.0, "k": 1.0}, peclet=10.0)
    path = _write(tmp_path, "cell.nc", "cellular", {"U": 1.0, "k": 1.0}, 64, "stream_function")
    study = make_study(flow={"family": "gridded", "file": path, "_replace": True},
                       noise={"peclet": 10.0},
                       run={"particles": 40_000, "dt": 0.05, "t_end": 60.0, "n_times": 13,
                            "spacing": "linear", "seed": 17, "batches": 40,
                            "integrator": "strang_rk2"})
    ds = eddyhop.simulate(study, progress=False)
    times = ds.time.values
    i1 = int(np.searchsorted(times, 20.0))
    batches = (ds.batch_msd_x + ds.batch_msd_y).values
    slopes = (batches[:, -1] - batches[:, i1]) / (4 * (times[-1] - times[i1]))
    value = slopes.mean()
    se = slopes.std(ddof=1) / math.sqrt(slopes.size)
    assert abs(value - exact.d_xx) < 4 * se, (value, se, exact.d_xx)
    assert se < 0.01 * exact.d_xx  # the check is sharp enough to mean something
