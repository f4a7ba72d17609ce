"""Atomic writes: a write that fails part-way leaves the previous file intact and no temporary."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from eddyhop.io import atomic_write_text, write_netcdf


def _dataset():
    return xr.Dataset({"msd": ("time", np.arange(4.0))}, coords={"time": np.arange(1.0, 5.0)})


def test_failed_netcdf_write_keeps_the_old_file_and_leaves_no_temporary(tmp_path, monkeypatch):
    target = tmp_path / "result.nc"
    write_netcdf(_dataset(), target)
    before = target.read_bytes()

    def half_written(self, path, *args, **kwargs):
        with open(path, "wb") as stream:
            stream.write(b"CDF\x01 truncated")  # some bytes reach the temporary file first
        raise OSError("disk full")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", half_written)
    with pytest.raises(OSError, match="disk full"):
        write_netcdf(_dataset() * 2, target)
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["result.nc"]


def test_interrupted_text_write_leaves_nothing(tmp_path, monkeypatch):
    target = tmp_path / "report.html"

    def interrupted(*_args, **_kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr("os.fsync", interrupted)
    with pytest.raises(KeyboardInterrupt):
        atomic_write_text(target, "<html></html>")
    assert list(tmp_path.iterdir()) == []


def test_written_file_is_complete_and_readable(tmp_path):
    target = tmp_path / "ok.nc"
    write_netcdf(_dataset(), target)
    with xr.open_dataset(target) as ds:
        np.testing.assert_array_equal(ds["msd"].values, np.arange(4.0))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ok.nc"]
