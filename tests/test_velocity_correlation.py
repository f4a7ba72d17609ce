"""Lagrangian velocity correlation: streamed sums, Green–Kubo, spectrum, bad input.

Statistical checks use fixed seeds; tolerances are in jackknife standard errors over the
particle batches (4 se: a two-sided normal tail of 6e-5 per compared number, so a test
comparing a few dozen correlated numbers still fails by chance well below 1 in 100).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

import eddyhop
from eddyhop.analysis import AnalysisOptionError, velocity_statistics
from eddyhop.errors import InputDataError, StudyError
from tests.conftest import make_study

TOLERANCE = 4.0  # standard errors (see the module docstring)
GOLDEN = (1.0 + math.sqrt(5.0)) / 2.0


def _simulate(study):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # step-size and step-check advice is not under test
        return eddyhop.simulate(study, progress=False)


# ---- exact: Ornstein–Uhlenbeck velocity of the noisy shear flow -----------------------------
def test_shear_flow_velocity_covariance_is_the_exact_exponential():
    """u = U sin(ky), v = 0 with noise: C_xx(τ) = (U²/2) e^{−κk²τ}, C_yy = C_xy = 0.

    Derivation.  v = 0, so y is a Brownian motion: y(t_r + τ) = y(t_r) + √(2κ) W_τ with W_τ
    independent of y(t_r), and y(t_r) is uniform over a period (uniform starts; the uniform
    density is invariant).  Then
        ⟨u(t_r) u(t_r + τ)⟩ = U² E[sin(k y) sin(k y + k√(2κ) W_τ)]
                           = (U²/2) E[cos(k√(2κ) W_τ)] − (U²/2) E[cos(2ky + …)]
    and the second term averages to 0 over the uniform y; with W_τ ~ N(0, τ),
    E[cos(a W_τ)] = e^{−a²τ/2} = e^{−κk²τ}.  ⟨u⟩ = 0, so the covariance is the same.  (u is a
    function of an Ornstein–Uhlenbeck-like angle diffusion; the x-velocity is an exponentially
    correlated process.)  Its integral over [0, τ_max] is (U²/(2κk²))(1 − e^{−κk²τ_max}); as
    τ_max → ∞ the Green–Kubo D_xx = κ + U²/(2κk²), the Taylor dispersion of a sinusoidal
    shear (Majda & Kramer 1999, Phys. Rep. 314, 237 — from memory).
    """
    amplitude, k, kappa = 1.0, 1.0, 0.5
    study = make_study(flow={"family": "shear", "U": amplitude, "k": k, "_replace": True},
                       noise={"kappa": kappa, "_replace": True},
                       run={"particles": 2048, "dt": 0.05, "t_end": 6.0, "batches": 32,
                            "seed": 3},
                       velocity_correlation={"reference_times": [0.0, 2.0], "lag_max": 4.0,
                                             "lag_step": 0.1})
    ds = _simulate(study)
    stats = velocity_statistics(ds)
    lag = stats["correlation_lag"].values
    exact = 0.5 * amplitude**2 * np.exp(-kappa * k * k * lag)
    for r in range(2):
        cov = stats["velocity_covariance_xx"].isel(reference_time=r).values
        se = stats["velocity_covariance_xx_se"].isel(reference_time=r).values
        assert np.all(np.abs(cov - exact) <= TOLERANCE * se), np.max(np.abs(cov - exact) / se)
        for pair in ("yy", "xy", "yx"):  # v = 0 exactly
            assert np.all(stats[f"velocity_covariance_{pair}"].values == 0.0)
    truncated = kappa + amplitude**2 / (2 * kappa * k * k) * (1 - math.exp(-kappa * k * k
                                                                           * lag[-1]))
    value, se = float(stats["green_kubo_D_xx"]), float(stats["green_kubo_D_xx_se"])
    assert abs(value - truncated) <= TOLERANCE * se, (value, se, truncated)
    assert float(stats["green_kubo_D_yy"]) == kappa  # κ and a zero integral
    rho = stats["velocity_autocorrelation_x"].isel(reference_time=0).values
    assert rho[0] == 1.0 and rho[-1] < 0.3


# ---- Green–Kubo against the cell problem ----------------------------------------------------
def _green_kubo_case(flow, peclet, particles, dt, lag_max, references, spacing, seed):
    study = make_study(flow={**flow, "_replace": True}, noise={"peclet": peclet,
                                                              "_replace": True},
                       run={"particles": particles, "dt": dt, "t_end": spacing * (references - 1)
                            + lag_max, "batches": 32, "seed": seed, "step_check": False},
                       velocity_correlation={"reference_times": [spacing * i for i in
                                                                 range(references)],
                                             "lag_max": lag_max, "lag_step": 0.5})
    ds = _simulate(study)
    stats = velocity_statistics(ds)
    from eddyhop.reference import effective_diffusivity

    reference = effective_diffusivity(study, rtol=1e-6).tensor
    return stats, reference


def _assert_green_kubo(stats, reference, pairs=("xx", "yy", "xy")):
    # Green–Kubo (Taylor 1921; Kubo 1957) for the stationary uniform ensemble against the
    # homogenized tensor of the cell problem (Fourier–Galerkin, converged to 1e-6: its own
    # error is negligible).  Step-size bias: strang_rk2 at dt·U·k ≤ 0.1 is unbiased within 1 %
    # at Pe = 10 (docs/performance.md), below these errors (≈ 3-5 %).
    index = {"xx": (0, 0), "yy": (1, 1), "xy": (0, 1)}
    assert str(stats["green_kubo_converged"].values) != "0"
    for pair in pairs:
        value = float(stats[f"green_kubo_D_{pair}"])
        se = float(stats[f"green_kubo_D_{pair}_se"])
        expected = reference[index[pair]]
        assert 0 < se < 0.1 * abs(reference[0, 0]), (pair, se)
        assert abs(value - expected) <= TOLERANCE * se, (pair, value, se, expected)


def test_green_kubo_matches_the_cell_problem_cellular_pe10():
    stats, reference = _green_kubo_case({"family": "cellular", "U": 1.0, "k": 1.0}, 10.0,
                                         1024, 0.1, 30.0, 10, 10.0, seed=5)
    _assert_green_kubo(stats, reference)
    # exact one-point check: for uniform starts ⟨u²⟩ = U²⟨sin²x cos²y⟩ = U²/4
    c0 = float(stats["velocity_covariance_xx"].isel(reference_time=0, correlation_lag=0))
    c0_se = float(stats["velocity_covariance_xx_se"].isel(reference_time=0, correlation_lag=0))
    assert abs(c0 - 0.25) <= TOLERANCE * c0_se


def test_green_kubo_matches_the_cell_problem_cats_eye_with_off_diagonal():
    # ε = 0.5: diagonal jets make D_xy ≈ 0.79, comparable with D_xx ≈ 0.93 (cell problem)
    stats, reference = _green_kubo_case(
        {"family": "cats_eye", "U": 1.0, "k": 1.0, "epsilon": 0.5}, 10.0, 1024, 0.1, 30.0, 10,
        10.0, seed=6)
    assert reference[0, 1] > 0.5
    _assert_green_kubo(stats, reference)


@pytest.mark.slow
def test_green_kubo_matches_the_cell_problem_cellular_pe100():
    # Pe = 100: the covariance decays over the boundary-layer time ~ 1/(κk²Pe^½) = 10, with a
    # long tail; lags to 80, sixteen reference times 10 apart, dt·U·k = 0.05 (≈ 10 s)
    stats, reference = _green_kubo_case({"family": "cellular", "U": 1.0, "k": 1.0}, 100.0,
                                         16384, 0.05, 80.0, 16, 10.0, seed=8)
    _assert_green_kubo(stats, reference)
    value, se = float(stats["green_kubo_D_eff"]), float(stats["green_kubo_D_eff_se"])
    assert abs(value - reference[0, 0]) <= TOLERANCE * se


# ---- κ = 0 on the torus: quasi-periodic without vortices, not with them ---------------------
def _drift_spectrum(amplitude):
    drift = (1.0, 1.0 / GOLDEN)
    study = make_study(flow={"family": "drifting_cellular", "U": amplitude, "k": 1.0,
                             "drift_x": drift[0], "drift_y": drift[1], "_replace": True},
                       noise={"kappa": 0.0, "_replace": True},
                       run={"particles": 256, "dt": 0.05, "t_end": 800.0, "batches": 16,
                            "seed": 2},
                       velocity_correlation={"lag_max": 800.0, "lag_step": 0.2})
    stats = velocity_statistics(_simulate(study))
    omega = stats["angular_frequency"].values
    spectrum = (stats["velocity_spectrum_mean_x"] + stats["velocity_spectrum_mean_y"]).values
    n = np.arange(-10, 11)
    lines = np.abs(n[:, None] * drift[0] + n[None, :] * drift[1]).ravel()
    distance = np.min(np.abs(omega[:, None] - lines[None, :]), axis=1)
    resolution = 2 * math.pi / 800.0
    peaks = [i for i in range(1, omega.size - 1)
             if spectrum[i] > spectrum[i - 1] and spectrum[i] >= spectrum[i + 1]]
    strongest = sorted(peaks, key=lambda i: -spectrum[i])[:10]
    band = omega < 3.0
    near = distance < resolution
    power_near_lines = spectrum[band & near].sum() / spectrum[band].sum()
    return distance[strongest] / resolution, power_near_lines, near[band].mean()


def test_quasi_periodic_velocity_has_the_exact_discrete_frequencies_without_vortices():
    """κ = 0, ψ = (U/k) sin kx sin ky + V_x y − V_y x with V = (1, 1/φ)U, φ the golden mean.

    With |V_x + V_y| > U the flow has no stagnation points (``drifting_cellular``'s stagnation
    condition |V_x ± V_y| ≤ U fails), so it is a fixed-point-free area-preserving flow on the
    torus with a Diophantine rotation number: conjugate to the linear flow with frequencies
    k⟨u⟩ = k(V_x, V_y) (Kolmogorov 1953, Dokl. Akad. Nauk SSSR 93, 763 — from memory; every
    orbit's mean velocity is the space average V by unique ergodicity).  The Lagrangian
    velocity is then quasi-periodic: its spectrum has lines only at |n₁ k V_x + n₂ k V_y|.
    With U = 2 the same drift leaves closed eddies (|V_x ± V_y| < U): their orbit frequencies
    vary continuously with ψ and the open channels carry a mean speed that is not V, so the
    spectrum is no longer on those lines.

    Checks: without vortices each of the 10 strongest spectral peaks lies within 0.25 of the
    resolution 2π/τ_max of a line with |n₁|, |n₂| ≤ 10 (such lines cover a third of the
    frequency axis within one resolution, so ten chance hits have probability ≲ 0.2¹⁰), and
    ≥ 85 % of the power below ω = 3 lies within one resolution of a line (measured: 92 %);
    with vortices at most 60 % (measured: 43 %, near the 33 % of chance).
    """
    offsets, power, chance = _drift_spectrum(1.0)
    assert np.all(offsets < 0.25), offsets
    assert power > 0.85, power
    offsets, power_vortices, _ = _drift_spectrum(2.0)
    assert power_vortices < 0.6, power_vortices
    assert np.sum(offsets > 0.25) >= 3, offsets
    assert chance < 0.45


def test_an_unconverged_green_kubo_integral_is_not_printed_as_a_diffusivity():
    # κ = 0 without vortices: the velocity is quasi-periodic, its integral oscillates forever
    from eddyhop.presentation import analysis_lines

    study = make_study(flow={"family": "drifting_cellular", "U": 1.0, "k": 1.0,
                             "drift_x": 1.0, "drift_y": 1.0 / GOLDEN, "_replace": True},
                       noise={"kappa": 0.0, "_replace": True},
                       run={"particles": 128, "dt": 0.05, "t_end": 100.0, "batches": 8},
                       velocity_correlation={"lag_step": 0.2})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        analysed = eddyhop.analysis.analyse(_simulate(study))
    assert int(analysed["green_kubo_converged"]) == 0
    assert "NOT CONVERGED" in analysed["green_kubo_D_eff"].attrs["comment"]
    lines = [line for line in analysis_lines(analysed, reference=False) if "Green-Kubo" in line]
    assert len(lines) == 1 and "NOT CONVERGED" in lines[0] and "D_xx" not in lines[0]


# ---- bad input, options and figures ---------------------------------------------------------
@pytest.mark.parametrize("table, message", [
    ({"lag_max": 3.0}, r"velocity_correlation\.lag_max = 3 reaches beyond the run"),
    ({"reference_times": [1.0], "lag_max": 1.5},
     r"velocity_correlation\.lag_max = 1\.5 reaches beyond the run.*at most 1\b"),
    ({"lag_step": 0.1, "lag_max": 1.5, "reference_times": [0.5]}, None),
    ({"lag_step": 1.0}, r"velocity_correlation\.lag_step = 1 is too coarse for the spectrum"),
    ({"lag_step": 0.001}, r"velocity_correlation\.lag_step = 0\.001 is below run\.dt"),
    ({"reference_times": [2.5]}, r"reference_times contains 2\.5, which is not before"),
    ({"reference_times": [0.5, 0.5]}, r"must be strictly increasing"),
    ({"reference_times": []}, r"reference_times is empty"),
    ({"lag_max": 0.1}, r"lag_max = 0\.1 holds 5 lag steps"),
    ({"lags": 3}, r"velocity_correlation: unknown key"),
])
def test_bad_velocity_correlation_tables_are_refused_in_one_line(table, message):
    # run: dt = 0.02, t_end = 2; cellular U = k = 1: ω_max = 1, lag_step ≤ π/4
    if message is None:
        make_study(velocity_correlation=table)
        return
    with pytest.raises(StudyError, match=message) as caught:
        make_study(velocity_correlation=table)
    assert "\n" not in str(caught.value)


def test_cli_refuses_a_coarse_lag_grid_in_one_line(tmp_path):
    from click.testing import CliRunner

    from eddyhop.cli import main

    study = tmp_path / "s.toml"
    study.write_text("[flow]\nfamily = 'cellular'\nU = 2.0\nk = 1.0\n[noise]\npeclet = 10\n"
                     "[run]\nparticles = 64\ndt = 0.01\nt_end = 5.0\n"
                     "[velocity_correlation]\nlag_step = 0.5\n")
    answer = CliRunner().invoke(main, ["run", str(study), "--out", str(tmp_path / "o.nc")])
    assert answer.exit_code == 2
    lines = [line for line in answer.output.splitlines() if line.strip()]
    assert len(lines) == 1 and "velocity_correlation.lag_step = 0.5" in lines[0], answer.output


@pytest.fixture(scope="module")
def small_result():
    study = make_study(run={"particles": 256, "t_end": 4.0, "batches": 8},
                       velocity_correlation={"reference_times": [0.0, 1.0], "lag_max": 3.0,
                                             "lag_step": 0.1})
    return _simulate(study)


def test_analyse_runs_the_velocity_statistics_and_reports_green_kubo(small_result):
    from eddyhop.presentation import analysis_lines

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        analysed = eddyhop.analysis.analyse(small_result, spectrum_window="hann")
    for name in ("velocity_covariance_xx", "velocity_autocorrelation_y",
                 "velocity_correlation_integral_xy", "green_kubo_D_eff", "green_kubo_D_eff_se",
                 "green_kubo_converged", "velocity_spectrum_x", "velocity_spectrum_mean_y",
                 "lagrangian_integral_time_x", "green_kubo_running_D_xx"):
        assert name in analysed, name
        assert analysed[name].attrs.get("long_name"), name
        if analysed[name].dtype.kind == "f":
            assert "units" in analysed[name].attrs, name
    assert analysed["velocity_spectrum_x"].attrs["window"] == "hann"
    text = "\n".join(analysis_lines(analysed, reference=False))
    assert "Green-Kubo D (lags up to 3)" in text and "MSD D_eff − Green-Kubo D_eff" in text


def test_spectrum_at_zero_frequency_is_twice_the_windowed_integral(small_result):
    stats = velocity_statistics(small_result, spectrum_window="bartlett")
    lag = stats["correlation_lag"].values
    cov = stats["velocity_covariance_xx"].isel(reference_time=0).values
    window = 1 - lag / lag[-1]
    step = lag[1] - lag[0]
    expected = step * (2 * np.sum(window * cov) - cov[0])
    assert np.isclose(float(stats["velocity_spectrum_x"].isel(reference_time=0,
                                                              angular_frequency=0)), expected)


def test_bad_options_and_missing_inputs_are_refused(small_result):
    with pytest.raises(AnalysisOptionError, match="spectrum_window = 'boxcar'"):
        velocity_statistics(small_result, spectrum_window="boxcar")
    with pytest.raises(AnalysisOptionError, match="green_kubo_tolerance = 0"):
        velocity_statistics(small_result, green_kubo_tolerance=0.0)
    with pytest.raises(InputDataError, match=r"\[velocity_correlation\] table"):
        velocity_statistics(small_result.drop_vars("velocity_correlation_xx"))


def test_green_kubo_is_withheld_for_space_dependent_noise():
    study = make_study(noise={"kappa": 0.1, "model": "modulated", "modulation": 0.3,
                              "_replace": True}, run={"integrator": "milstein"},
                       velocity_correlation={"lag_max": 1.5, "lag_step": 0.1})
    stats = velocity_statistics(_simulate(study))
    assert np.isnan(float(stats["green_kubo_D_xx"]))
    assert "constant kappa" in stats["green_kubo_D_xx"].attrs["comment"]


def test_velocity_figures_draw(small_result, tmp_path):
    from eddyhop.presentation import plots

    names = plots.available_figures(small_result)
    assert "velocity" in names and "velocity_spectrum" in names
    for name, figure in plots.figures_for(small_result, ["velocity", "velocity_spectrum"]):
        assert plots.save_figure(figure, tmp_path / name)
    with pytest.raises(InputDataError, match=r"\[velocity_correlation\] table"):
        plots.velocity_correlation_figure(small_result.drop_vars("velocity_correlation_xx"))
