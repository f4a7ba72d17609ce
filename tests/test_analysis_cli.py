"""``eddyhop analyse`` end to end: a real run with every optional output, analysed to netCDF."""

from __future__ import annotations

import numpy as np
import xarray as xr
from click.testing import CliRunner

import eddyhop
from eddyhop.cli import main
from tests.conftest import make_study


def test_analyse_command_writes_labelled_variables(tmp_path):
    study = make_study(noise={"peclet": 50.0},
                       start=[{"kind": "separatrix", "label": "edge", "delta": 0.05},
                              {"kind": "centre", "label": "core", "radius": 0.3}],
                       run={"particles": 256, "dt": 0.05, "t_end": 60.0, "n_times": 40,
                            "integrator": "strang_rk2", "tracked": 40, "track_samples": 200,
                            "batches": 16},
                       aging={"times": [5.0, 20.0], "lags": 12}, hopping={"enabled": True})
    result = tmp_path / "run.nc"
    ds = eddyhop.run_study(study, out=result, progress=False)
    out = tmp_path / "analysed.nc"
    answer = CliRunner().invoke(main, ["analyse", str(result), "--out", str(out),
                                       "--window", "0.5", "--pdf-time", "30"])
    assert answer.exit_code == 0, answer.output
    assert "start 'edge' (256 particles):" in answer.output and "crossovers" in answer.output
    analysed = xr.open_dataset(out)
    try:
        for name in ("alpha", "regime_label", "crossover_time", "D_xx", "D_xx_lower",
                     "aging_exponent", "ergodicity_breaking", "moment_exponent",
                     "displacement_pdf_x", "residence_exp_rate", "residence_pow_exponent"):
            assert name in analysed, name
        derived = [n for n in analysed.data_vars if n not in ds.data_vars]
        for name in derived:
            assert analysed[name].attrs.get("long_name"), name
            if analysed[name].dtype.kind not in "USO":
                assert "units" in analysed[name].attrs, name
        assert analysed["regime_label"].dims == ("start", "regime")
        assert np.allclose(analysed["pdf_time"].values, [30.0])
        assert "window" in analysed.attrs["analysis_options"]
    finally:
        analysed.close()


def test_analyse_command_reports_bad_input_clearly(tmp_path):
    runner = CliRunner()
    answer = runner.invoke(main, ["analyse", str(tmp_path / "absent.nc")])
    assert answer.exit_code == 2 and "does not exist" in answer.output
    bare = tmp_path / "bare.nc"
    xr.Dataset({"x": (("time",), np.ones(3))}, coords={"time": [1.0, 2.0, 3.0]}).to_netcdf(bare)
    answer = runner.invoke(main, ["analyse", str(bare), "--out", str(tmp_path / "o.nc")])
    assert answer.exit_code == 2
    assert "needs variable(s) msd" in answer.output
    assert not (tmp_path / "o.nc").exists()
    plain = tmp_path / "plain.nc"
    t = np.geomspace(0.1, 10.0, 20)
    xr.Dataset({"msd": (("time",), 4 * t)}, coords={"time": t}).to_netcdf(plain)
    answer = runner.invoke(main, ["analyse", str(plain), "--window", "0"])
    assert answer.exit_code == 2 and "option window = 0 is outside" in answer.output
    answer = runner.invoke(main, ["analyse", str(plain), "-q"])
    assert answer.exit_code == 0, answer.output
    assert (tmp_path / "plain.analysed.nc").exists()
