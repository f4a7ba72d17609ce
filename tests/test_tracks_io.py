"""Measured trajectories: readers (CSV, CF trajectory netCDF layouts), bad input, the CF
trajectory output of `eddyhop run` and its round trip, and the `eddyhop tracks` command."""

from __future__ import annotations

import warnings

import netCDF4
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from eddyhop.analysis import analyse
from eddyhop.cli import main
from eddyhop.tracks import (
    TrackFileError,
    open_tracks,
    track_statistics,
    tracks_from_arrays,
)

STUDY = """
schema_version = 1
title = "round trip"
[flow]
family = "cellular"
[noise]
peclet = 10
[[start]]
kind = "uniform"
[run]
particles = 64
dt = 0.05
t_end = 20.0
n_times = 20
seed = 3
integrator = "strang_rk2"
tracked = 40
track_samples = 100
step_check = false
"""


def brownian_rows(seed=0, tracks=60, gaps=0.05, drift=0.0):
    """Rows (id, t, x, y) of 2-D Brownian tracks (D = 1, interval 0.1) of unequal lengths and
    start times, with missing samples."""
    rng = np.random.default_rng(seed)
    ids, t, x, y = [], [], [], []
    for i in range(tracks):
        n = int(rng.integers(60, 200))
        start = int(rng.integers(0, 100))
        times = (start + np.arange(n)) * 0.1
        keep = rng.random(n) > gaps
        keep[0] = True
        steps = rng.normal(0.0, np.sqrt(2 * 0.1), (2, n))
        ids += [f"b{i}"] * int(keep.sum())
        t += list(times[keep])
        x += list(np.cumsum(steps[0])[keep] + drift * times[keep])
        y += list(np.cumsum(steps[1])[keep])
    return ids, np.array(t), np.array(x), np.array(y)


def write_csv(path, ids, t, x, y, header="id,t,x,y"):
    with open(path, "w") as stream:
        stream.write(header + "\n")
        for row in zip(ids, t, x, y):
            stream.write(f"{row[0]},{float(row[1])!r},{float(row[2])!r},{float(row[3])!r}\n")


def write_cf(path, ids, t, x, y, layout):
    """A CF trajectory file of the rows in ``layout``: contiguous, indexed, multidimensional."""
    unique = list(dict.fromkeys(ids))
    ids = np.asarray(ids)
    with netCDF4.Dataset(path, "w") as nc:
        nc.featureType = "trajectory"
        nc.Conventions = "CF-1.8"
        nc.createDimension("trajectory", len(unique))
        name = nc.createVariable("trajectory", str, ("trajectory",))
        name.cf_role = "trajectory_id"
        for i, u in enumerate(unique):
            name[i] = u
        if layout == "multidimensional":
            rows = [np.flatnonzero(ids == u) for u in unique]
            width = max(r.size for r in rows)
            nc.createDimension("obs", width)
            fields = {}
            for key, data in (("time", t), ("x", x), ("y", y)):
                var = nc.createVariable(key, "f8", ("trajectory", "obs"), fill_value=np.nan)
                block = np.full((len(unique), width), np.nan)
                for i, r in enumerate(rows):
                    block[i, :r.size] = data[r]
                var[:] = block
                fields[key] = var
        else:
            if layout == "contiguous":
                order = np.concatenate([np.flatnonzero(ids == u) for u in unique])
            else:  # indexed: keep the row order (interleaved tracks)
                order = np.arange(ids.size)
            nc.createDimension("obs", ids.size)
            if layout == "contiguous":
                size = nc.createVariable("row_size", "i4", ("trajectory",))
                size.sample_dimension = "obs"
                size[:] = [int((ids == u).sum()) for u in unique]
            else:
                index = nc.createVariable("traj_index", "i4", ("obs",))
                index.instance_dimension = "trajectory"
                index[:] = [unique.index(v) for v in ids[order]]
            fields = {}
            for key, data in (("time", t), ("x", x), ("y", y)):
                var = nc.createVariable(key, "f8", ("obs",))
                var[:] = data[order]
                fields[key] = var
        fields["time"].standard_name = "time"
        fields["time"].units = "s since 2020-01-01"
        fields["x"].standard_name = "projection_x_coordinate"
        fields["y"].standard_name = "projection_y_coordinate"
        fields["x"].units = fields["y"].units = "m"


@pytest.fixture(scope="module")
def rows():
    return brownian_rows()


@pytest.fixture(scope="module")
def reference(rows):
    return track_statistics(tracks_from_arrays(*rows))


COMPARED = ("msd", "mean_dx", "msd_xy", "batch_msd_x", "aged_msd", "batch_aged_msd",
            "abs_moment", "tamsd", "ergodicity_breaking", "displacement_pdf_x",
            "track_velocity_autocorrelation")


@pytest.mark.parametrize("layout", ["csv", "contiguous", "indexed", "multidimensional"])
def test_every_layout_gives_the_same_statistics(tmp_path, rows, reference, layout):
    path = tmp_path / ("t.csv" if layout == "csv" else "t.nc")
    if layout == "csv":
        write_csv(path, *rows)
    else:
        write_cf(path, *rows, layout)
    source = open_tracks(path)
    ds = track_statistics(source)
    for name in COMPARED:
        np.testing.assert_allclose(ds[name].values, reference[name].values, rtol=1e-12,
                                   atol=1e-12, equal_nan=True, err_msg=name)
    if layout != "csv":
        assert ds["msd"].attrs["units"] == "m2" and ds["time"].attrs["units"] == "s"


def test_gaps_unequal_lengths_and_counts(rows, reference):
    ds = reference
    assert int(ds.n_particles) == 60
    assert ds.attrs["sampling_interval"] == pytest.approx(0.1)
    # fewer tracks reach the long lags (gaps thin them further); every error group has a
    # track at each kept lag
    counts = ds["track_count"].values
    assert counts[0] > counts[-1] >= ds.sizes["batch"]
    assert np.all(np.isfinite(ds["batch_msd_x"].values))


def test_periodic_positions_are_unwrapped(rows, reference):
    ids, t, x, y = rows
    folded = tracks_from_arrays(ids, t, np.mod(x, 10.0), np.mod(y, 8.0))
    ds = track_statistics(folded, period=[10.0, 8.0])  # steps stay below half a period
    np.testing.assert_allclose(ds["msd"].values, reference["msd"].values, rtol=1e-9)
    wrapped = track_statistics(folded)
    assert wrapped["msd"].values[-1] < 0.75 * reference["msd"].values[-1]  # folded: bounded


def test_clock_origin_uses_tracks_present_at_the_origin(rows):
    ds = track_statistics(tracks_from_arrays(*rows), time_origin="clock", clock_origin=5.0)
    assert ds.attrs["time_origin"] == "clock"
    assert 2 <= int(ds.n_particles) < 60


BAD = [
    ("id,t,x,y\na,0,0,0\na,0.2,1,1\na,0.1,2,2\n", "track a, row 4: t = 0.1 goes back"),
    ("id,t,x,y\na,0,0,0\na,0.1,1,1\na,0.1,2,2\nb,0,0,0\nb,0.1,0,0\n",
     "track a, row 4: t = 0.1 repeats the time"),
    ("id,t,x,y\na,0,0,0\na,0.1,nan,1\nb,0,0,0\nb,0.1,0,0\n", "track a, row 3: x = nan"),
    ("id,t,x,y\na,0,0,0\na,0.1,abc,1\n", "row 3 (track a): x = 'abc' is not a number"),
    ("id,time,x,y\na,0,0,0\n", "lacks column(s) t"),
    ("id,t,x [m],y [km]\na,0,0,0\na,0.1,1,1\n", "mixed length units"),
    ("id,t,x,y\na,0,0,0\na,0.1,0,0\na,0.25,1,1\nb,0,0,0\nb,0.1,1,1\n",
     "track a, row 4: t = 0.25 is not on the sampling grid"),
    ("id,t [s],x [mm],y [mm],u [m/s],v [m/s]\na,0,0,0,0,0\n", "mixed units: velocity in "
     "'m/s', positions in 'mm' and times in 's'"),
    ("id,t,x,y\na,0,0,0\nb,0,0,0\n", "every track has one sample"),
]


@pytest.mark.parametrize("text,message", BAD)
def test_bad_csv_is_one_line_naming_track_and_row(tmp_path, text, message):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(TrackFileError, match=None) as info:
        track_statistics(open_tracks(path))
    assert message in str(info.value)
    assert "\n" not in str(info.value)


def test_not_a_trajectory_file_and_too_short_tracks(tmp_path, rows):
    path = tmp_path / "grid.nc"
    xr.Dataset({"u": (("y", "x"), np.zeros((2, 2)))}).to_netcdf(path)
    with pytest.raises(TrackFileError, match="is not a trajectory file: its global attribute "
                                             "featureType"):
        open_tracks(path)
    with pytest.raises(TrackFileError, match=r"tracks too short for the requested lags: "
                                             r"max_lag = 1000 .* the longest \(track b"):
        track_statistics(tracks_from_arrays(*rows), max_lag=1000.0)
    with pytest.raises(TrackFileError, match="mixed units: the file gives length in 'm'"):
        cf = tmp_path / "t.nc"
        write_cf(cf, *rows, "contiguous")
        track_statistics(open_tracks(cf), length_unit="mm")


def test_longitude_latitude_positions_are_refused(tmp_path):
    path = tmp_path / "ll.nc"
    xr.Dataset({"lon": ("obs", [0.0, 1.0], {"standard_name": "longitude"}),
                "lat": ("obs", [0.0, 1.0], {"standard_name": "latitude"}),
                "time": ("obs", [0.0, 1.0], {"standard_name": "time"})},
               attrs={"featureType": "trajectory"}).to_netcdf(path)
    with pytest.raises(TrackFileError, match="longitude/latitude; project them"):
        open_tracks(path)


def test_cli_refuses_bad_input_without_writing(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text(BAD[0][0])
    out = tmp_path / "out.nc"
    result = CliRunner().invoke(main, ["tracks", str(path), "--out", str(out)])
    assert result.exit_code == 2
    assert "error: track file" in result.output and "Traceback" not in result.output
    assert not out.exists() and not list(tmp_path.glob("*.part"))


def test_cli_tracks_then_plot_and_report(tmp_path, rows):
    path = tmp_path / "m.csv"
    write_csv(path, *rows)
    out = tmp_path / "m.nc"
    runner = CliRunner()
    result = runner.invoke(main, ["tracks", str(path), "--out", str(out), "--length-unit",
                                  "um", "--time-unit", "s"])
    assert result.exit_code == 0, result.output
    assert "regimes:" in result.output and "jackknife over groups of whole tracks" in \
        result.output
    ds = xr.open_dataset(out)
    assert ds.attrs["eddyhop_kind"] == "measured" and ds["msd"].attrs["units"] == "um2"
    assert "D_eff" in ds and "alpha" in ds and "regime_label" in ds
    ds.close()
    result = runner.invoke(main, ["report", str(out), "--out", str(tmp_path / "m.html")])
    assert result.exit_code == 0, result.output
    result = runner.invoke(main, ["plot", str(out), "--out", str(tmp_path / "fig"),
                                  "--format", "png", "--figure", "msd"])
    assert result.exit_code == 0, result.output


@pytest.fixture(scope="module")
def run_with_tracks(tmp_path_factory):
    folder = tmp_path_factory.mktemp("run")
    study = folder / "s.toml"
    study.write_text(STUDY)
    result = CliRunner().invoke(main, ["run", str(study), "--out", str(folder / "r.nc"),
                                       "--trajectories-out", str(folder / "r.traj.nc")])
    assert result.exit_code == 0, result.output
    return folder


def test_run_writes_a_cf_trajectory_file(run_with_tracks):
    path = run_with_tracks / "r.traj.nc"
    with netCDF4.Dataset(path) as nc:
        assert nc.featureType == "trajectory"
        assert nc.variables["row_size"].sample_dimension == "obs"
        assert nc.variables["trajectory_id"].cf_role == "trajectory_id"
        assert nc.variables["x"].standard_name == "projection_x_coordinate"
    with xr.open_dataset(path) as ds:  # plain xarray opens it
        assert ds.sizes["trajectory"] == 40 and ds.sizes["obs"] == 40 * 101


def test_round_trip_reproduces_the_run_tracked_statistics(run_with_tracks):
    """write → read → analyse gives the run's own TAMSD, EB and displacement PDFs."""
    with xr.open_dataset(run_with_tracks / "r.nc") as run:
        run = run.load()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        own = analyse(run)
    ds = track_statistics(open_tracks(run_with_tracks / "r.traj.nc"))
    for name in ("tamsd", "tamsd_mean", "tamsd_mean_se", "ergodicity_breaking",
                 "ergodicity_breaking_se", "displacement_pdf_x", "displacement_pdf_y",
                 "pdf_outside_fraction_x"):
        np.testing.assert_allclose(ds[name].values, own[name].values, rtol=1e-10,
                                   atol=1e-13, err_msg=name)
    for coord in ("tamsd_lag", "pdf_time"):
        np.testing.assert_allclose(ds[coord].values, own[coord].values, rtol=1e-10)
    assert float(ds["tamsd_duration"]) == pytest.approx(float(own["tamsd_duration"]),
                                                        rel=1e-12)


def test_trajectories_out_needs_tracked_particles(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(STUDY.replace("tracked = 40", "tracked = 0"))
    result = CliRunner().invoke(main, ["run", str(study), "--out", str(tmp_path / "r.nc"),
                                       "--trajectories-out", str(tmp_path / "t.nc")])
    assert result.exit_code == 2
    assert "--trajectories-out needs tracked particles" in result.output
    assert not (tmp_path / "r.nc").exists()


def test_shipped_demo_set_reads_the_same_from_csv_and_netcdf():
    """The invented demo set in studies/tracks (made by its script) in both formats."""
    from pathlib import Path

    folder = Path(__file__).resolve().parent.parent / "studies" / "tracks"
    csv = track_statistics(open_tracks(folder / "vortex_tank_tracks.csv"), length_unit="mm",
                           time_unit="s")
    cf = track_statistics(open_tracks(folder / "vortex_tank_tracks.nc"))
    assert int(csv.n_particles) == int(cf.n_particles) == 60
    for name in ("msd", "tamsd", "ergodicity_breaking", "track_velocity_autocorrelation"):
        np.testing.assert_allclose(csv[name].values, cf[name].values, rtol=1e-12,
                                   equal_nan=True, err_msg=name)
    assert cf["msd"].attrs["units"] == "mm2" and cf["time"].attrs["units"] == "s"


def test_frame_major_csv_rows_give_the_same_statistics(tmp_path, rows, reference):
    """Rows ordered by time across tracks (as tracking software writes frames)."""
    ids, t, x, y = rows
    order = np.argsort(t, kind="stable")
    path = tmp_path / "frames.csv"
    write_csv(path, np.asarray(ids)[order], t[order], x[order], y[order])
    ds = track_statistics(open_tracks(path))
    # tracks come in order of first appearance, so the error groups differ: compare the
    # pooled curves at the common times and each track's own time average by its id
    common = np.intersect1d(ds["time"].values, reference["time"].values)
    np.testing.assert_allclose(ds["msd"].sel(time=common).values,
                               reference["msd"].sel(time=common).values, rtol=1e-12)
    mine = ds["tamsd"].assign_coords(particle=ds["track_id"].values)
    theirs = reference["tamsd"].assign_coords(particle=reference["track_id"].values)
    np.testing.assert_allclose(mine.sel(particle=theirs.particle.values).values,
                               theirs.values, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(ds["ergodicity_breaking"].values,
                               reference["ergodicity_breaking"].values, rtol=1e-9)


def test_given_velocities_are_used_for_the_autocorrelation():
    """Tracks moving at constant, given velocities: <u(t)·u(t+m)> = |u|² at every lag."""
    ids, t, x, y, u, v = [], [], [], [], [], []
    for i in range(10):
        speed = 0.5 + 0.1 * i
        times = np.arange(50) * 0.2
        ids += [str(i)] * 50
        t += list(times)
        x += list(speed * times)
        y += list(np.zeros(50))
        u += [speed] * 50
        v += [0.0] * 50
    ds = track_statistics(tracks_from_arrays(ids, t, x, y, u, v), batches=5)
    c = ds["track_velocity_autocorrelation"]
    assert c.attrs["velocity_source"] == "given (file u, v)"
    expected = np.mean([(0.5 + 0.1 * i) ** 2 for i in range(10)])
    np.testing.assert_allclose(c.values, expected, rtol=1e-12)
    np.testing.assert_allclose(ds["track_velocity_autocorrelation_normalised"].values, 1.0)


def test_common_release_gives_the_same_clock_and_track_start_curves():
    ids, t, x, y = brownian_rows(seed=4, tracks=50, gaps=0.0)
    shift = {}
    for i, ident in enumerate(ids):  # move every track to start at t = 0
        shift.setdefault(ident, t[i])
    t = t - np.array([shift[i] for i in ids])
    source = tracks_from_arrays(ids, t, x, y)
    start = track_statistics(source)
    clock = track_statistics(source, time_origin="clock")
    for name in ("msd", "mean_dx", "batch_msd_y"):
        np.testing.assert_allclose(clock[name].values, start[name].values, rtol=1e-12)
    assert "aged_msd" in clock  # every track is present at the release (t_a = 0)


@pytest.mark.slow  # about 10 s
def test_memory_does_not_grow_with_tracks_times_samples(monkeypatch):
    """Peak traced memory for 4× the tracks stays far below 4× (and below one dense
    (tracks × samples) copy of the positions): the statistics stream over the tracks."""
    import tracemalloc

    from eddyhop.tracks import Track, TrackSource
    from eddyhop.tracks import statistics as module

    monkeypatch.setattr(module, "_DENSE_LIMIT", 50_000)
    samples = 400

    def source(tracks):
        def chunks(size):
            for start in range(0, tracks, size):
                rng = np.random.default_rng(start)
                yield [Track(str(i), np.arange(samples, dtype=float),
                             np.cumsum(rng.standard_normal(samples)),
                             np.cumsum(rng.standard_normal(samples)), np.arange(samples))
                       for i in range(start, min(start + size, tracks))]
        return TrackSource("<gen>", "arrays", None, None, False, chunks)

    peaks = []
    for tracks in (1000, 4000):
        tracemalloc.start()
        track_statistics(source(tracks), chunk=200, velocity_lags=4)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    dense = 4000 * samples * 2 * 8
    assert peaks[1] < 0.5 * dense, (peaks, dense)
    assert peaks[1] < 1.6 * peaks[0], peaks


def test_units_in_the_csv_header_and_ragged_counts_that_do_not_add_up(tmp_path, rows):
    path = tmp_path / "u.csv"
    write_csv(path, *rows, header="id,t [s],x [um],y [um]")
    ds = track_statistics(open_tracks(path))
    assert ds["msd"].attrs["units"] == "um2" and ds["time"].attrs["units"] == "s"
    cf = tmp_path / "c.nc"
    write_cf(cf, *rows, "contiguous")
    with netCDF4.Dataset(cf, "a") as nc:
        nc.variables["row_size"][0] += 5
    with pytest.raises(TrackFileError, match="the counts in row_size sum to"):
        track_statistics(open_tracks(cf))


def test_trajectories_of_several_start_regions():
    """Each start region's tracked particles become trajectories named label:index."""
    from eddyhop.tracks import trajectories_dataset

    times = np.arange(5) * 0.5
    rng = np.random.default_rng(0)
    run = xr.Dataset(
        {"track_x": (("start", "particle", "track_time"), rng.normal(size=(2, 3, 5)),
                     {"units": "1"}),
         "track_y": (("start", "particle", "track_time"), rng.normal(size=(2, 3, 5)),
                     {"units": "1"})},
        coords={"start": ["edges", "cores"], "particle": np.arange(3),
                "track_time": ("track_time", times, {"units": "1"})},
        attrs={"eddyhop_kind": "monte_carlo", "title": "two starts"})
    out = trajectories_dataset(run)
    assert list(out["trajectory_id"].values[:4]) == ["edges:0", "edges:1", "edges:2", "cores:0"]
    assert out.sizes["obs"] == 30 and out.attrs["featureType"] == "trajectory"
    np.testing.assert_array_equal(out["x"].values[15:20], run["track_x"].values[1, 0])


def test_trajectories_out_needs_one_sampling_interval(tmp_path):
    study = tmp_path / "s.toml"
    study.write_text(STUDY.replace("track_samples = 100", "track_samples = 150"))
    result = CliRunner().invoke(main, ["run", str(study), "--out", str(tmp_path / "r.nc"),
                                       "--trajectories-out", str(tmp_path / "t.nc")])
    assert result.exit_code == 2
    assert "track_samples = 150 does not divide the run's 400 steps" in result.output
    assert not (tmp_path / "r.nc").exists()
