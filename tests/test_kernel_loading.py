"""Cached kernels load without numba's full target start-up, and run the same machine code.

``eddyhop._kernel_loading.KernelCache`` skips the refresh numba does before loading a cached
function (the imports of everything numba needs to *compile*: linear algebra with
``scipy.linalg``, CFFI with ``pycparser``, typed containers, …).  Checked in fresh processes:
a light load imports none of those, and its numbers are bit-identical to a process that did
the full refresh first.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

STUDY = """schema_version = 1
title = "loading"
[flow]
family = "cellular"
[noise]
peclet = 10
[[start]]
kind = "uniform"
[run]
particles = 256
dt = 0.05
t_end = 2.0
n_times = 6
seed = 7
workers = 1
progress = false
"""

PROBE = textwrap.dedent("""
    import hashlib, json, sys
    if sys.argv[1] == "full":
        from numba.core.registry import cpu_target
        cpu_target.target_context.refresh()  # what numba itself does before a cache load
    from eddyhop.api import simulate
    from eddyhop.study.spec import parse_study_text
    ds = simulate(parse_study_text(sys.argv[2]), workers=1, progress=False)
    digest = hashlib.sha256()
    for name in sorted(ds.data_vars):
        digest.update(name.encode() + ds[name].values.tobytes())
    print(json.dumps({"digest": digest.hexdigest(),
                      "loaded": [m for m in ("numba.np.linalg", "scipy.linalg", "cffi",
                                             "numba.typed.typeddict") if m in sys.modules]}))
""")


def _probe(mode: str) -> dict:
    out = subprocess.run([sys.executable, "-c", PROBE, mode, STUDY], capture_output=True,
                         text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_light_kernel_load_matches_full_refresh():
    _probe("light")  # fills the kernel cache if this test runs first
    light, full = _probe("light"), _probe("full")
    assert light["loaded"] == [], f"a cached kernel load imported {light['loaded']}"
    assert "numba.np.linalg" in full["loaded"]  # the probe sees what a full refresh imports
    assert light["digest"] == full["digest"]
