"""Running sweeps: checksums, foreign folders, failures, backends, merge, progress, CLI.

(Resuming after SIGKILL is tested in test_sweep_kill.py.)

Every comparison of numbers here is exact (bit-identical): a sweep point is a plain study with a
fixed seed, and the engine's results do not depend on workers, chunks or backend.
"""

from __future__ import annotations

import json
import socket
import threading
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from eddyhop.errors import EddyhopError
from eddyhop.spec import parse_study_text
from eddyhop.sweep import Manifest, merge_sweep, run_sweep

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

    from eddyhop.io import write_netcdf

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


def test_failing_point_is_recorded_and_others_complete(tmp_path):
    text = """
title = "one point blows up"
[flow]
family = "cellular"
[noise]
kappa = 0.1
[run]
particles = 200
dt = 0.01
t_end = 1.0
n_times = 5
progress = false
[sweep]
"flow.U" = [1.0, 1e300, 2.0]
"""
    path = write_study(tmp_path, text)
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


def test_silent_scheduler_times_out(study_file, tmp_path):
    """A port that accepts connections but never speaks the Dask protocol: error, no hang."""
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(8)
    port = server.getsockname()[1]
    accepted = []
    stop = threading.Event()

    def accept():
        server.settimeout(0.2)
        while not stop.is_set():
            try:
                accepted.append(server.accept()[0])
            except OSError:
                continue

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    started = time.monotonic()
    try:
        with pytest.raises(EddyhopError, match="Dask scheduler"):
            run_sweep(study_file, tmp_path / "c", backend="dask",
                      scheduler=f"tcp://127.0.0.1:{port}", progress=False, timeout=2)
    finally:
        stop.set()
        thread.join()
        for connection in accepted:
            connection.close()
        server.close()
    assert time.monotonic() - started < 15


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
