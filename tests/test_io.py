"""Atomic writes: a write that fails part-way leaves the previous file intact and no temporary."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from eddyhop.results.io import atomic_write_text, write_netcdf


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


# ---- reading: anything that is not a netCDF result is one clear line, exit status 2 ----------
def _bad_inputs(tmp_path):
    """A study's TOML text, an empty file, a truncated netCDF file and a missing file."""
    study = tmp_path / "study.toml"
    study.write_text('title = "not a result"\n[flow]\nfamily = "cellular"\n')
    empty = tmp_path / "empty.nc"
    empty.write_bytes(b"")
    whole = tmp_path / "whole.nc"
    write_netcdf(xr.Dataset({"msd": ("time", np.arange(200.0))},
                            coords={"time": np.arange(1.0, 201.0)}), whole)
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(whole.read_bytes()[: whole.stat().st_size // 2])
    return {"toml": study, "empty": empty, "truncated": truncated,
            "missing": tmp_path / "missing.nc"}


def test_open_result_names_the_file_for_every_kind_of_bad_input(tmp_path):
    from eddyhop.errors import InputDataError
    from eddyhop.results.io import open_result

    for kind, path in _bad_inputs(tmp_path).items():
        with pytest.raises(InputDataError) as caught:
            open_result(path)
        message = str(caught.value)
        assert path.name in message and "\n" not in message, (kind, message)


@pytest.mark.parametrize("command", ["analyse", "report", "plot", "info"])
def test_commands_refuse_a_file_that_is_not_netcdf_in_one_line(tmp_path, command):
    from click.testing import CliRunner

    from eddyhop.cli import main

    runner = CliRunner()
    for kind, path in _bad_inputs(tmp_path).items():
        extra = ["--out", str(tmp_path / "out.html")] if command == "report" else []
        answer = runner.invoke(main, [command, str(path), *extra])
        assert answer.exit_code == 2, (kind, answer.output)
        lines = [line for line in answer.output.splitlines() if line.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: "), (kind, answer.output)
        assert path.name in lines[0] and "Traceback" not in answer.output, (kind, lines)
