"""Start-up: commands import only what they use (checked in fresh processes, no timings).

``eddyhop validate`` reads the study, the flow families' descriptions and the cost model: no
numba, xarray, netCDF4, scipy, matplotlib or dask.  A tiny ``eddyhop run`` needs numba and
xarray but no plotting, none of the optional dask stack (``results/optional_dask.py``), no SciPy
submodule and none of numba's compile-time registries (``_kernel_loading.py``).
"""

from __future__ import annotations

import json
import pickle
import subprocess
import sys
import textwrap

import pytest

TINY = """schema_version = 1
title = "tiny"
[flow]
family = "cellular"
[noise]
peclet = 10
[[start]]
kind = "uniform"
[run]
particles = 200
dt = 0.05
t_end = 5.0
n_times = 10
seed = 1
workers = 1
progress = false
"""

HEAVY = ("numba", "llvmlite", "xarray", "pandas", "netCDF4", "scipy", "matplotlib", "dask",
         "dask.array", "distributed", "scipy.linalg", "scipy.special", "scipy.stats", "cffi",
         "pycparser", "numba.np.linalg")
# what a tiny run must not import: plotting; dask (no dask object exists: results/optional_dask
# answers xarray's dask questions); SciPy beyond the bare package numba imports (the step
# check's Student-t quantile is computed in analysis/_stats.py); numba's compile-time
# registries (cached kernels load without them: _kernel_loading.py)
TINY_RUN_NEEDS_NOT = ("matplotlib", "dask", "dask.array", "distributed", "scipy.linalg",
                      "scipy.special", "scipy.stats", "cffi", "pycparser", "numba.np.linalg")

# runs the command line in this process, then reports which heavy modules it loaded
PROBE = textwrap.dedent("""
    import json, sys
    from eddyhop.cli import main
    try:
        main.main(args=sys.argv[1:], prog_name="eddyhop", standalone_mode=False)
        code = 0
    except SystemExit as exc:
        code = exc.code
    print(json.dumps({"code": code, "loaded": [m for m in HEAVY if m in sys.modules]}))
""").replace("HEAVY if m", repr(HEAVY) + " if m")


def _loaded_by(*args, cwd) -> list[str]:
    out = subprocess.run([sys.executable, "-c", PROBE, *args], capture_output=True, text=True,
                         cwd=cwd, timeout=600)
    report = json.loads(out.stdout.strip().splitlines()[-1])
    assert report["code"] in (0, None), out.stderr
    return report["loaded"]


def test_validate_imports_no_numba_xarray_or_plotting(tmp_path):
    study = tmp_path / "tiny.toml"
    study.write_text(TINY)
    loaded = _loaded_by("validate", str(study), cwd=tmp_path)
    assert loaded == [], f"eddyhop validate imported {loaded}"


def test_tiny_run_imports_no_plotting_and_no_dask(tmp_path):
    study = tmp_path / "tiny.toml"
    study.write_text(TINY)
    # a first run compiles the kernels when the cache is cold (compiling needs numba's whole
    # pipeline, SciPy's BLAS lookup included); the claim is about a run that loads them
    _loaded_by("run", str(study), "--out", str(tmp_path / "warm.nc"), cwd=tmp_path)
    loaded = _loaded_by("run", str(study), "--out", str(tmp_path / "tiny.nc"), cwd=tmp_path)
    assert (tmp_path / "tiny.nc").exists()
    assert "numba" in loaded and "xarray" in loaded  # the probe sees what a run does load
    unwanted = set(TINY_RUN_NEEDS_NOT) & set(loaded)
    assert not unwanted, f"a tiny eddyhop run imported {sorted(unwanted)}"


def test_kernel_modules_import_without_numba():
    # the modules a study's validation reaches (the kernels proper, engine.kernel and
    # engine.rng, use numba intrinsics at module level and are imported only to run)
    code = ("import sys, eddyhop.flows, eddyhop.starts, eddyhop.study.spec; "
            "print('numba' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=120)
    assert out.stdout.strip() == "False", out.stderr


def test_lazy_jit_function_behaves_like_its_dispatcher():
    from eddyhop.flows import cellular

    velocity = cellular.velocity
    assert pickle.loads(pickle.dumps(velocity)) is velocity  # by reference, as a function
    p = cellular.FAMILY.pack({"U": 1.0, "k": 1.0})
    assert velocity(0.3, 0.2, 0.0, p) == velocity.py_func(0.3, 0.2, 0.0, p)
    assert velocity.get_dispatcher().py_func is velocity.py_func
    assert velocity.overloads  # dispatcher attributes are forwarded


def test_dask_stand_in_hands_over_once_dask_array_is_imported(tmp_path):
    """The Dataset build and a netCDF write import no dask, yet dask arrays made later in the
    same process are still recognised by xarray, and written."""
    pytest.importorskip("dask")
    code = textwrap.dedent("""
        import sys
        import numpy as np
        import xarray as xr
        from eddyhop.results.optional_dask import no_distributed_probe, spare_unused_dask
        spare_unused_dask()
        ds = xr.Dataset({"a": ("t", np.arange(3.0))})
        before = "dask.array" in sys.modules or "dask" in sys.modules
        with no_distributed_probe():
            ds.to_netcdf("x.nc", engine="netcdf4")
        blocked = "distributed" in sys.modules or "dask" in sys.modules
        import dask.array as da
        from xarray.namedarray import utils
        lazy = xr.DataArray(da.zeros(4, chunks=2), dims="t")
        assert utils.is_dask_collection(lazy.data) and not utils.is_dask_collection(ds["a"].data)
        xr.Dataset({"lazy": lazy}).to_netcdf("y.nc", engine="netcdf4")  # dask computes it
        assert xr.open_dataset("y.nc")["lazy"].values.tolist() == [0.0] * 4
        print(before, blocked, lazy.chunks is not None, float(lazy.sum()))
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=120, cwd=tmp_path)
    assert out.stdout.split() == ["False", "False", "True", "0.0"], out.stderr
