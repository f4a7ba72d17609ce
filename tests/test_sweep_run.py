"""Running sweeps: checksums, foreign folders, failures, backends, merge, progress, CLI.

(Resuming after SIGKILL is tested in test_sweep_kill.py.)

Every comparison of numbers here is exact (bit-identical): a sweep point is a plain study with a
fixed seed, and the engine's results do not depend on workers, chunks or backend.
"""

from __future__ import annotations

import json
import os
import re
import socket
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from eddyhop.errors import EddyhopError, StudyError
from eddyhop.study.spec import parse_study_text
from eddyhop.sweeps import Manifest, merge_sweep, run_sweep

SMALL = """
title = "sweep run test"
[flow]
family = "cellular"
U = 1.0
k = 1.0
[noise]
peclet = 10.0
[[start]]
kind = "uniform"
label = "whole"
[[start]]
kind = "box"
label = "corner"
x_min = 0.0
x_max = 0.4
y_min = 0.0
y_max = 0.4
[run]
particles = {particles}
dt = 0.02
t_end = {t_end}
n_times = 12
seed = 11
progress = false
[output]
length_unit = "m"
time_unit = "s"
[sweep]
"noise.peclet" = {{ first = 1.0, last = 100.0, per_decade = {per_decade}, scale = "log" }}
start = ["whole", "corner"]
"""


def study_text(particles=300, t_end=2.0, per_decade=1):
    return SMALL.format(particles=particles, t_end=t_end, per_decade=per_decade)


def write_study(folder: Path, text: str, name="study.toml") -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def assert_same_numbers(a: xr.Dataset, b: xr.Dataset):
    """Every variable and coordinate identical (values, dims, dtype kind); attrs may differ."""
    assert set(a.variables) == set(b.variables)
    for name in a.variables:
        x, y = a[name], b[name]
        assert x.dims == y.dims, name
        if x.dtype.kind in "fc":
            assert np.array_equal(x.values, y.values, equal_nan=True), name
        else:
            assert np.array_equal(x.values.astype(str), y.values.astype(str)), name


@pytest.fixture(scope="module")
def study_file(tmp_path_factory):
    return write_study(tmp_path_factory.mktemp("study"), study_text())


@pytest.fixture(scope="module")
def reference(tmp_path_factory, study_file):
    """An uninterrupted serial sweep of the small study (6 points) and its merged Dataset."""
    folder = tmp_path_factory.mktemp("reference")
    path = study_file
    report = run_sweep(path, folder / "out", backend="serial", progress=False)
    assert report.complete and len(report.computed) == 6
    return {"path": path, "report": report,
            "merged": merge_sweep(folder / "out", analyse=False)}


def test_serial_sweep_layout_and_manifest(reference):
    out = reference["report"].directory
    manifest = json.loads((out / "sweep-manifest.json").read_text())
    assert manifest["dims"] == ["peclet", "start"] and manifest["shape"] == [3, 2]
    for entry in manifest["points"]:
        assert entry["status"] == "done" and entry["attempts"] == 1
        assert entry["file"] == f"points/{entry['id']}.nc"
        assert len(entry["sha256"]) == 64
    # each point file is the plain study of that point (same numbers as running it alone)
    import eddyhop

    study = eddyhop.load_study(reference["path"])
    point = study.sweep.points()[3]  # Pe = 10, corner
    alone = eddyhop.simulate(study.sweep.point_study(point), progress=False)
    stored = xr.open_dataset(out / "points" / f"{point.id}.nc").load()
    assert np.array_equal(alone["msd"].values, stored["msd"].values)
    assert json.loads(stored.attrs["sweep_parameters"]) == {"noise.peclet": 10.0,
                                                           "start": "corner"}
    merged = reference["merged"]
    assert np.array_equal(merged["msd"].sel(peclet=10.0, start="corner").values,
                          stored["msd"].values)


def test_merged_file_opens_with_netcdf4_and_xarray_with_units(reference, tmp_path):
    import netCDF4

    from eddyhop.results.io import write_netcdf

    target = write_netcdf(reference["merged"], tmp_path / "merged.nc")
    with netCDF4.Dataset(target) as nc:
        assert nc.variables["peclet"].units == "1"
        assert nc.variables["time"].units == "s"
        assert nc.variables["kappa"].units == "m2 s-1"
        assert nc.variables["msd"].dimensions == ("peclet", "start", "time")
        assert list(nc.variables["peclet"][:]) == [1.0, 10.0, 100.0]
        assert nc.getncattr("eddyhop_kind") == "sweep"
    with xr.open_dataset(target) as ds:
        for name in ("peclet", "time", "batch", "order"):
            assert "units" in ds[name].attrs, name
        assert ds["peclet"].attrs["definition"] == "Pe = U/(kappa k)"
        assert list(ds["start"].values) == ["whole", "corner"]
        assert (ds["point_status"].values == 0).all()
        # kappa per point follows Pe = U/(kappa k) with U = k = 1; it varies with Pe only
        assert ds["kappa"].dims == ("peclet",)
        assert np.allclose(ds["kappa"].values, [1.0, 0.1, 0.01], rtol=1e-15)
        assert ds["velocity_scale"].dims == () and float(ds["velocity_scale"]) == 1.0


def test_merged_file_with_analysis_opens_with_netcdf4_and_xarray(reference, tmp_path):
    """Merged *with* the per-point analysis (effective diffusivities, regime table, crossover
    times, scaling fits): the file is plain netCDF-4 that both libraries read in full, every
    numeric coordinate has units, and the regime table and crossover times are there."""
    pytest.importorskip("eddyhop.analysis")
    import netCDF4

    from eddyhop.results.io import write_netcdf

    merged = merge_sweep(reference["report"].directory)
    for name in ("D_eff", "D_eff_se", "regime_label", "regime_start", "regime_end",
                 "regime_alpha", "crossover_time", "crossover_from", "crossover_to",
                 "crossover_time_advective", "crossover_time_boundary_layer",
                 "crossover_time_diffusive", "D_eff_exponent"):
        assert name in merged.data_vars, name
    assert merged["regime_label"].dims[:2] == ("peclet", "start")
    assert merged["crossover_time"].dims[:2] == ("peclet", "start")
    target = write_netcdf(merged, tmp_path / "analysed.nc")
    with netCDF4.Dataset(target) as nc:
        values = {name: variable[:] for name, variable in nc.variables.items()}
        for dim in nc.dimensions:
            if dim in nc.variables and nc.variables[dim].dtype != str:
                assert "units" in nc.variables[dim].ncattrs(), dim
        assert nc.variables["crossover_time"].units == "s"
        labels = values["regime_label"]
        regimes = nc.variables["regime_count"][:]
    # the regime table: a label for each regime a point has, blank padding after
    for index in np.ndindex(regimes.shape):
        row = [str(x) for x in labels[index]]
        assert all(row[: regimes[index]]) and not any(row[regimes[index]:]), row
    with xr.open_dataset(target) as ds:
        ds.load()
        numeric = [c for c in ds.coords if ds[c].dtype.kind in "iuf"]
        assert {"peclet", "time", "regime", "crossover"} <= set(numeric)
        for name in numeric:
            assert "units" in ds[name].attrs, name
        assert "long_name" in ds["start"].attrs
        assert np.isfinite(ds["crossover_time"].values).any()
        assert np.isfinite(ds["regime_alpha"].values).any()
        assert_same_numbers(ds[["msd"]], merged[["msd"]])


def test_rerun_skips_every_complete_point(reference):
    out = reference["report"].directory
    before = {p.name: p.stat().st_mtime_ns for p in (out / "points").iterdir()}
    report = run_sweep(reference["path"], out, backend="serial", progress=False,
                       merge_to=None)
    assert report.computed == [] and len(report.skipped) == 6
    assert before == {p.name: p.stat().st_mtime_ns for p in (out / "points").iterdir()}


def test_corrupted_point_file_is_detected_and_recomputed(tmp_path, reference):
    path = write_study(tmp_path, study_text())
    out = tmp_path / "out"
    run_sweep(path, out, backend="serial", progress=False, merge_to=None)
    victim = out / "points" / "pt0002.nc"
    data = bytearray(victim.read_bytes())
    data[len(data) // 2] ^= 0xFF  # one flipped byte inside the file
    victim.write_bytes(bytes(data))
    with pytest.raises(EddyhopError, match=r"pt0002.*checksum"):
        merge_sweep(out)
    report = run_sweep(path, out, backend="serial", progress=False)
    assert report.computed == ["pt0002"]
    assert "checksum" in report.redo_reasons["pt0002"]
    assert_same_numbers(merge_sweep(out, analyse=False), reference["merged"])


def test_folder_of_another_study_is_refused_and_left_alone(tmp_path, reference):
    out = reference["report"].directory
    snapshot = {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    other_axes = write_study(tmp_path, study_text(per_decade=2), "other.toml")
    with pytest.raises(EddyhopError) as info:
        run_sweep(other_axes, out, backend="serial", progress=False)
    message = str(info.value)
    assert "different study" in message and "swept parameters differ" in message
    assert "noise.peclet" in message and "Refusing to overwrite" in message
    other_fixed = write_study(tmp_path, study_text(particles=301), "fixed.toml")
    with pytest.raises(EddyhopError, match=r"fixed .un-swept. parameters"):
        run_sweep(other_fixed, out, backend="serial", progress=False)
    assert snapshot == {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}

    foreign = tmp_path / "someone_else"
    foreign.mkdir()
    (foreign / "results.nc").write_bytes(b"precious")
    with pytest.raises(EddyhopError, match=r"not empty.*results\.nc.*no sweep manifest"):
        run_sweep(reference["path"], foreign, backend="serial", progress=False)
    assert (foreign / "results.nc").read_bytes() == b"precious"

    (tmp_path / "bad").mkdir()
    (tmp_path / "bad" / "sweep-manifest.json").write_text("{not json")
    with pytest.raises(EddyhopError, match="not a readable sweep manifest"):
        run_sweep(reference["path"], tmp_path / "bad", backend="serial", progress=False)


FAILING = """
title = "one point blows up"
[flow]
family = "drifting_cellular"
[noise]
kappa = 0.1
[run]
particles = 200
dt = 0.01
t_end = 50.0
n_times = 5
progress = false
[sweep]
# a drift of 1e8 passes validation (k·|u|·dt = 1e6 ≤ 2**20) but carries the particles past
# 2**32/k by t ≈ 43: a runaway displacement (an amplitude of 1e300 is refused at validation)
"flow.drift_x" = [0.0, 1e8, 0.5]
"""


def test_failing_point_is_recorded_and_others_complete(tmp_path):
    path = write_study(tmp_path, FAILING)
    report = run_sweep(path, tmp_path / "out", backend="serial", progress=False)
    assert report.computed == ["pt0000", "pt0002"]
    assert list(report.failed) == ["pt0001"]
    assert report.failed["pt0001"].startswith("BlowUpError")
    entry = Manifest.read(tmp_path / "out").entry("pt0001")
    assert entry["status"] == "failed" and "BlowUpError" in entry["error"]
    merged = xr.open_dataset(report.merged)
    assert list(merged["point_status"].values) == [0, 1, 0]
    assert np.isnan(merged["msd"].values[1]).all()
    assert np.isfinite(merged["msd"].values[[0, 2]]).all()
    assert "1 failed" in merged.attrs["sweep_warnings"]
    # failed points are retried by default, kept with --keep-failed
    kept = run_sweep(path, tmp_path / "out", backend="serial", progress=False,
                     retry_failed=False)
    assert kept.computed == [] and list(kept.failed) == ["pt0001"]


def test_zip_sweep_merges_on_a_point_dimension(tmp_path):
    text = study_text().split("[sweep]")[0] + """[sweep]
combine = "zip"
"noise.peclet" = [2.0, 20.0]
"run.seed" = [1, 2]
"""
    report = run_sweep(write_study(tmp_path, text), tmp_path / "zip", backend="serial",
                       progress=False)
    merged = xr.open_dataset(report.merged)
    assert merged["msd"].dims == ("point", "start", "time")
    assert list(merged["peclet"].values) == [2.0, 20.0] and merged["peclet"].dims == ("point",)
    assert list(merged["seed"].values) == [1, 2]
    assert merged["peclet"].attrs["units"] == "1"


@pytest.fixture
def free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_unreachable_scheduler_fails_fast(study_file, tmp_path, free_port):
    started = time.monotonic()
    with pytest.raises(EddyhopError, match="cannot reach the Dask scheduler"):
        run_sweep(study_file, tmp_path / "a", backend="dask",
                  scheduler=f"tcp://127.0.0.1:{free_port}", progress=False, timeout=2)
    assert time.monotonic() - started < 5
    with pytest.raises(EddyhopError, match="not of the form tcp://host:port"):
        run_sweep(study_file, tmp_path / "b", backend="dask", scheduler="localhost",
                  progress=False)


@pytest.fixture
def silent_peer():
    """A loopback port that accepts connections and never sends a byte.  The accepting
    thread stops when the test ends, and by itself after 60 s at the latest."""
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(8)
    server.settimeout(0.2)
    accepted = []
    stop = threading.Event()
    give_up = time.monotonic() + 60

    def accept():
        while not stop.is_set() and time.monotonic() < give_up:
            try:
                accepted.append(server.accept()[0])
            except OSError:
                continue

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    try:
        yield f"tcp://127.0.0.1:{server.getsockname()[1]}"
    finally:
        stop.set()
        thread.join(timeout=5)
        for connection in accepted:
            connection.close()
        server.close()
    assert accepted, "the probe never connected"


@pytest.mark.parametrize("timeout", [None, 2.0])
def test_silent_scheduler_is_reported_within_the_timeout(study_file, tmp_path, silent_peer,
                                                        timeout):
    """A peer that accepts connections but never speaks the Dask protocol: the connection
    handshake and the identity reply share one deadline, so the error comes after `timeout`
    seconds (the default, 10 s, when not given), not after a multiple of it."""
    options = {} if timeout is None else {"timeout": timeout}
    limit = 10.0 if timeout is None else timeout
    started = time.monotonic()
    with pytest.raises(EddyhopError, match=rf"accepts connections but did not answer as a Dask "
                                           rf"scheduler within {limit:g} s"):
        run_sweep(study_file, tmp_path / "c", backend="dask", scheduler=silent_peer,
                  progress=False, **options)
    elapsed = time.monotonic() - started
    assert limit - 0.5 <= elapsed <= limit + 1.5, elapsed


def test_scheduler_without_workers_is_reported_within_the_timeout(study_file, tmp_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=0, processes=False, host="127.0.0.1",
                                  dashboard_address=None, protocol="tcp") as cluster:
        started = time.monotonic()
        with pytest.raises(EddyhopError, match=r"has no workers \(waited 2 s\)"):
            run_sweep(study_file, tmp_path / "d", backend="dask",
                      scheduler=cluster.scheduler_address, progress=False, timeout=2)
        assert time.monotonic() - started <= 2 + 1.5


def test_zero_jobs_or_threads_are_refused(study_file, tmp_path):
    """-j/--jobs and -w/--workers follow run.workers: -1 means every core, 0 is refused."""
    from click.testing import CliRunner

    from eddyhop.cli import main
    from eddyhop.sweeps.backends import make_pool

    for jobs in (0, -2):
        with pytest.raises(EddyhopError, match=rf"--jobs \(-j\) = {jobs} is not allowed: give "
                                               r"-1 for every core or a number of processes "
                                               r">= 1"):
            run_sweep(study_file, tmp_path / "j", backend="processes", jobs=jobs,
                      progress=False)
    with pytest.raises(EddyhopError, match=r"--workers \(-w\) = 0 is not allowed: give -1 for "
                                           r"every core or a number of threads per point"):
        run_sweep(study_file, tmp_path / "w", backend="serial", workers=0, progress=False)
    assert not (tmp_path / "j").exists() and not (tmp_path / "w").exists()  # refused first
    result = CliRunner().invoke(main, ["sweep", str(study_file), "--out", str(tmp_path / "c"),
                                       "-j", "0"])
    assert result.exit_code != 0 and "--jobs (-j) = 0 is not allowed" in result.output
    assert make_pool("processes", jobs=-1, scheduler=None, n_todo=1000).slots == (
        os.cpu_count() or 1)
    assert make_pool("auto", jobs=1, scheduler=None, n_todo=6).name == "serial"
    with pytest.raises(StudyError, match=r"run.workers = 0 is not allowed"):  # the same rule
        parse_study_text(study_text().replace("seed = 11", "seed = 11\nworkers = 0"), "w.toml")


def test_scheduler_from_environment_or_option(reference, tmp_path, monkeypatch, free_port):
    """$DASK_SCHEDULER_ADDRESS selects the Dask backend when no --scheduler is given;
    --scheduler wins over it.  (A threads-only LocalCluster keeps this cheap; the
    process-based cluster is tested in test_dask_local_cluster_equals_serial.)"""
    distributed = pytest.importorskip("distributed")
    from click.testing import CliRunner

    from eddyhop.cli import main

    closed = f"tcp://127.0.0.1:{free_port}"  # nothing listens there
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                  host="127.0.0.1", dashboard_address=None,
                                  protocol="tcp") as cluster:
        address = cluster.scheduler_address
        monkeypatch.setenv("DASK_SCHEDULER_ADDRESS", address)
        report = run_sweep(reference["path"], tmp_path / "env", progress=False, timeout=30)
        assert report.backend == "dask" and report.slots == 1 and report.complete
        assert_same_numbers(merge_sweep(tmp_path / "env", analyse=False), reference["merged"])

        runner = CliRunner()
        result = runner.invoke(main, ["sweep", str(reference["path"]), "--out",
                                      str(tmp_path / "cli"), "--scheduler", address,
                                      "--no-progress", "--no-merge", "--timeout", "30"],
                               env={"DASK_SCHEDULER_ADDRESS": closed})
        assert result.exit_code == 0, result.output
        assert "computed 6" in result.output and "(dask, 1 at a time" in result.output
        result = runner.invoke(main, ["sweep", str(reference["path"]), "--out",
                                      str(tmp_path / "cli2"), "--no-progress", "--no-merge"],
                               env={"DASK_SCHEDULER_ADDRESS": closed})
        assert result.exit_code != 0 and f"cannot reach the Dask scheduler at {closed}" in (
            result.output)
    assert_same_numbers(merge_sweep(tmp_path / "cli", analyse=False), reference["merged"])


def test_progress_bar_reports_done_running_failed_and_eta(tmp_path, capsys):
    text = FAILING.replace("progress = false", "progress = true")
    report = run_sweep(write_study(tmp_path, text), tmp_path / "out", backend="serial",
                       merge_to=None)
    assert list(report.failed) == ["pt0001"]
    shown = [s.strip() for s in capsys.readouterr().err.replace("\r", "\n").splitlines()]
    states = [s for s in shown if s.startswith("sweep: ")]
    pattern = (r"sweep: (\d)/3 points, done (\d), running (\d), failed (\d) \|.*\| "
               r"\[(\d\d:\d\d) elapsed, ETA (\d\d:\d\d|\?)\]")
    parsed = [re.fullmatch(pattern, s) for s in states]
    assert all(parsed), states
    values = [m.groups() for m in parsed]
    assert values[0][:4] == ("0", "0", "0", "0") and values[1][:4] == ("0", "0", "1", "0")
    assert values[-1][:4] == ("3", "2", "0", "1")  # two done, one failed, nothing running
    assert ("1", "1", "0", "0") in [v[:4] for v in values]
    # once a point has finished the ETA is a time (remaining points over the recent rate)
    assert all(v[5] != "?" for v in values if v[0] != "0"), values
    assert any(line.startswith("point pt0001 (drift_x=1e+08) failed: BlowUpError")
               for line in shown), shown
    resumed = run_sweep(write_study(tmp_path, text), tmp_path / "out", backend="serial",
                        merge_to=None, retry_failed=True)
    again = [s.strip() for s in capsys.readouterr().err.replace("\r", "\n").splitlines()
             if s.startswith("sweep: ")]
    assert list(resumed.failed) == ["pt0001"]
    # resumed: the two complete points count from the start; the retried one is running
    assert again[0].startswith("sweep: 2/3 points, done 2, running 0, failed 0 |"), again
    assert again[1].startswith("sweep: 2/3 points, done 2, running 1, failed 0 |"), again


def test_local_processes_equal_serial(reference, tmp_path):
    report = run_sweep(reference["path"], tmp_path / "loky", backend="processes", jobs=2,
                       progress=False)
    assert report.backend == "processes" and report.slots == 2 and report.complete
    assert_same_numbers(merge_sweep(tmp_path / "loky", analyse=False), reference["merged"])


def test_dask_local_cluster_equals_serial(reference, tmp_path):
    """processes=True: workers are separate interpreters as on a real cluster, so tasks and
    results are serialised and kernels load from the on-disk cache; threads inside this
    process would share its compiled kernels and skip pickling, hiding what could break."""
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  protocol="tcp") as cluster:
        report = run_sweep(reference["path"], tmp_path / "dask", backend="auto",
                           scheduler=cluster.scheduler_address, progress=False, timeout=30)
    assert report.backend == "dask" and report.slots == 2 and report.complete
    assert_same_numbers(merge_sweep(tmp_path / "dask", analyse=False), reference["merged"])


def test_cli_sweep_and_merge(reference, tmp_path):
    from click.testing import CliRunner

    from eddyhop.cli import main

    runner = CliRunner()
    result = runner.invoke(main, ["sweep", str(reference["path"]), "--out",
                                  str(tmp_path / "x"), "--dry-run"])
    assert result.exit_code == 0, result.output
    assert "6 points" in result.output and "pt0005  peclet=100, start=corner" in result.output
    target = tmp_path / "m.nc"
    result = runner.invoke(main, ["merge", str(reference["report"].directory), "--out",
                                  str(target), "--no-analysis"])
    assert result.exit_code == 0, result.output
    assert "6 of 6 points" in result.output and target.exists()
    result = runner.invoke(main, ["merge", str(tmp_path / "nowhere"), "--out", str(target)])
    assert result.exit_code == 2 and "does not exist" in result.output
    study = parse_study_text(study_text().split("[sweep]")[0], "plain.toml")
    with pytest.raises(EddyhopError, match="no \\[sweep\\] table"):
        run_sweep(study, tmp_path / "y")


def test_cli_merge_prints_convergence_counts_and_fit_verdicts(reference, tmp_path):
    """With the per-point analysis, `eddyhop merge` says how many results are diffusive,
    undetermined or too short (the counts of the merged deff_converged flags), and every
    scaling line carries a verdict or says why there is no fit."""
    pytest.importorskip("eddyhop.analysis")
    from click.testing import CliRunner

    from eddyhop.cli import main
    from eddyhop.sweeps.scaling import convergence_counts

    target = tmp_path / "analysed.nc"
    result = CliRunner().invoke(main, ["merge", str(reference["report"].directory), "--out",
                                       str(target)])
    assert result.exit_code == 0, result.output
    merged = xr.open_dataset(target)
    try:
        counts = convergence_counts(merged)
        assert sum(counts.values()) == 6
        assert merged.attrs["sweep_undetermined_points"] == counts.get("undetermined", 0)
        for meaning, count in counts.items():
            if count:
                assert f"{count} {meaning.replace('_', ' ')}" in result.output
        lines = [line for line in result.output.splitlines() if "/kappa" in line]
        assert lines and all(("fit " in line) or ("no fit" in line) for line in lines), lines
    finally:
        merged.close()
