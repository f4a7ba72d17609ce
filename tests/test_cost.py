"""Cost known before work: the issue's oversized studies are refused at once, with one line,
by validate and run; the memory estimate is realistic on a small run."""

from __future__ import annotations

import time
import tracemalloc

import pytest

from eddyhop.study import cost as cost_module
from eddyhop.study.cost import TIME_LIMIT_SECONDS, estimate
from eddyhop.study.spec import parse_study_text

from .test_output_safety import STUDY, invoke, refused

# A fixed "available memory" so that the refusals do not depend on the machine running the tests
FAKE_AVAILABLE = 4 * 2**30


@pytest.fixture
def fixed_memory(monkeypatch):
    monkeypatch.setattr(cost_module, "available_memory", lambda: FAKE_AVAILABLE)


def _study(run_extra: str = "", tail: str = "", **run) -> str:
    text = STUDY
    for key, value in run.items():
        text = text.replace(f"\n{key} = ", f"\n{key} = {value}\n#")
    return text.replace("[run]\n", "[run]\n" + run_extra) + tail


ORDERS = "[moments]\norders = [" + ", ".join(f"{1 + i * 1e-6:.7f}" for i in range(300_000)) + "]\n"
AGING = ("[aging]\ntimes = [" + ", ".join(f"{i * 2.0:g}" for i in range(2000)) + "]\n"
         "lags = 100000\n")

# issue 13, item 4: each oversized study and the words its one-line refusal must hold
CASES = {
    "particles_1e9": (_study(particles=1_000_000_000), ["peak memory", "available"]),
    "n_times_1e6_4096_batches": (_study("batches = 4096\n", particles=100_000, n_times=1_000_000,
                                        dt=0.001, t_end=10000.0), ["peak memory"]),
    "tracked_1e5_x_1e6": (_study("tracked = 100000\ntrack_samples = 1000000\n",
                                 particles=100_000, dt=0.001, t_end=1000.0), ["peak memory"]),
    "orders_3e5": (_study(tail=ORDERS), ["peak memory"]),
    "aging_2000_x_lags_1e5": (_study(dt=0.05, t_end=10000.0, tail=AGING), ["peak memory"]),
    "steps_2_47": (_study(dt=1.0, t_end=float(2**47)), ["CPU time", "--allow-long"]),
}


@pytest.mark.parametrize("name", list(CASES))
def test_oversized_study_refused_by_run_before_work(name, tmp_path, fixed_memory):
    text, words = CASES[name]
    (tmp_path / "s.toml").write_text(text)
    started = time.perf_counter()
    refused(invoke(["run", tmp_path / "s.toml", "--out", tmp_path / "x.nc"]), *words)
    assert time.perf_counter() - started < 10  # refused before any allocation or integration
    assert not (tmp_path / "x.nc").exists()


@pytest.mark.parametrize("name", list(CASES))
def test_oversized_study_refused_by_validate(name, tmp_path, fixed_memory):
    text, words = CASES[name]
    (tmp_path / "s.toml").write_text(text)
    result = invoke(["validate", tmp_path / "s.toml"])
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if "invalid" in line]
    assert len(lines) == 1 and all(w in lines[0] for w in words), result.output
    assert "Traceback" not in result.output


def test_long_study_accepted_by_validate_with_allow_long(tmp_path, fixed_memory):
    (tmp_path / "s.toml").write_text(CASES["steps_2_47"][0])
    result = invoke(["validate", "--allow-long", tmp_path / "s.toml"])
    assert result.exit_code == 0, result.output
    assert "particle-steps" in result.output and "CPU time" in result.output


def test_validate_of_a_sweep_with_count_1e8_answers_quickly(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY + '[sweep]\n"noise.peclet" = {first = 1.0, '
                                     'last = 100.0, count = 100000000, scale = "log"}\n')
    started = time.perf_counter()
    result = invoke(["validate", tmp_path / "s.toml"])
    assert time.perf_counter() - started < 5, "validate enumerated the points"
    assert result.exit_code == 2 and "count = 100000000 exceeds" in result.output, result.output


def test_validate_prints_work_and_estimates(tmp_path):
    (tmp_path / "s.toml").write_text(STUDY)
    result = invoke(["validate", tmp_path / "s.toml"])
    assert result.exit_code == 0, result.output
    # 32 particles × 40 steps + the step check: 16 particles × 20 coarse steps
    assert "work: 1.6e+03 particle-steps (step check 320)" in result.output
    assert "estimate: peak memory" in result.output


def test_work_counts_the_step_check_coarse_path():
    study = parse_study_text(_study("step_check = true\nstep_check_particles = 64\n",
                                    particles=256))
    work = estimate(study)
    assert work.check_particle_steps == 64 * 20  # 64 particles × 40/2 coarse steps
    assert work.particle_steps == 256 * 40 + 64 * 20


def test_time_limit_is_a_day():
    assert TIME_LIMIT_SECONDS == 24 * 3600


def test_layout_constants_agree_with_the_runner():
    from eddyhop.engine import kernel, runner, stepcheck

    assert cost_module._MAX_BLOCK == runner.MAX_BLOCK
    assert cost_module._MOMENT_BASE_COLUMNS == kernel.N_BASE
    assert cost_module._AGED_COLUMNS == len(kernel.AGED_COLUMNS)
    assert cost_module._CHECK_COLUMNS == len(stepcheck.CHECK_COLUMNS)
    assert cost_module._CHUNK_OUTPUT_BUDGET == runner.CHUNK_OUTPUT_BUDGET


def test_memory_estimate_is_within_a_factor_of_three_of_the_measured_peak():
    """A small run dominated by its output arrays (2000 output times, 64 batches, tracks,
    aged sums): the estimate must be within [1/3, 3] of tracemalloc's peak.  The tolerance is
    the design goal of the estimate (it refuses studies orders of magnitude too large; it is not
    an allocator model): copies made by xarray/NumPy temporaries are counted as one extra copy
    of the sums, not individually."""
    from eddyhop.api import simulate

    study = parse_study_text(_study(
        "batches = 64\ntracked = 200\ntrack_samples = 2000\n",
        particles=4096, dt=0.01, t_end=40.0, n_times=2000,
        tail="[aging]\ntimes = [1.0, 5.0, 10.0]\nlags = 300\n"))
    simulate(study, progress=False)  # compile and warm caches outside the measurement
    tracemalloc.start()
    try:
        started = time.process_time()
        simulate(study, progress=False)
        cpu = time.process_time() - started
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    work = estimate(study)
    # measured at the commit: estimate 1.7× the peak; CPU estimate 1.06× the measured time
    assert peak / 3 <= work.memory_bytes <= 3 * peak, (work.memory_bytes, peak)
    # CPU time: the stored figures come from a quiet machine; a factor 4 either way allows
    # for a loaded CI machine and tracemalloc's overhead
    assert cpu / 4 <= work.cpu_seconds <= 4 * cpu, (work.cpu_seconds, cpu)


# ---- eddyhop reference: the noise-free solvers' cost is printed and checked first (issue 13) --

def _reference_study(peclet: float) -> str:
    return STUDY.replace("peclet = 10.0", f"peclet = {peclet}")


def test_reference_prints_work_and_estimate_before_solving(tmp_path):
    (tmp_path / "s.toml").write_text(_reference_study(10.0))
    result = invoke(["reference", tmp_path / "s.toml", "--diffusivity-only"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert lines[0].startswith("work: the cell problem with") and "unknowns" in lines[0]
    assert lines[1].startswith("estimate: peak memory") and "CPU time" in lines[1]


def test_reference_beyond_the_mode_limit_is_refused_at_once(tmp_path):
    (tmp_path / "s.toml").write_text(_reference_study(1e5))
    started = time.perf_counter()
    line = refused(invoke(["reference", tmp_path / "s.toml", "--out", tmp_path / "r.nc"]),
                   "needs about", "Fourier modes per direction", "limit of 512")
    assert time.perf_counter() - started < 10, line
    assert not (tmp_path / "r.nc").exists()


def test_reference_over_the_memory_limit_is_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(cost_module, "available_memory", lambda: 2**20)
    (tmp_path / "s.toml").write_text(_reference_study(10.0))
    refused(invoke(["reference", tmp_path / "s.toml", "--out", tmp_path / "r.nc"]),
            "peak memory", "available", "--modes")
    assert not (tmp_path / "r.nc").exists()


def test_reference_estimate_grows_with_the_peclet_number():
    from eddyhop.reference.budget import reference_cost
    from eddyhop.reference.fields import study_fields

    costs = [reference_cost(study_fields(parse_study_text(_reference_study(pe))), 1)
             for pe in (10.0, 1000.0, 10000.0)]
    assert costs[0].cpu_seconds < costs[1].cpu_seconds < costs[2].cpu_seconds
    assert costs[0].memory_bytes < costs[1].memory_bytes < costs[2].memory_bytes
    # at Pe = 10^4 one moment evolution (342 modes, 235 000 unknowns) is fitted at hours and
    # gigabytes (the cell problem alone now takes seconds): the estimate must reach both
    assert costs[2].memory_bytes > 1e9 and costs[2].cpu_seconds > 60
