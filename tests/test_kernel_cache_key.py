"""The numba cache directory is keyed by the kernel sources only (``_kernel_sources``)."""

from __future__ import annotations

import shutil
from pathlib import Path

import eddyhop
from eddyhop._kernel_sources import kernel_source_files, kernel_sources_digest

PACKAGE = Path(eddyhop.__file__).resolve().parent


def _names(root):
    return {p.relative_to(root).as_posix() for p in kernel_source_files(root)}


def test_kernel_modules_are_sources_and_front_end_modules_are_not():
    names = _names(PACKAGE)
    for module in ("kernel", "integrators", "rng", "stepcheck", "noise", "_jit",
                   "flows/compiled", "flows/cellular", "flows/_trig"):
        assert any(n.endswith(f"{module}.py") for n in names), module
    for prefix in ("plots/", "cli/", "analysis/", "report", "presentation", "sweeps/"):
        assert not any(n.startswith(prefix) or f"/{prefix}" in n for n in names), prefix


def test_editing_a_plot_module_keeps_the_key_and_editing_a_flow_changes_it(tmp_path):
    copy = tmp_path / "eddyhop"
    shutil.copytree(PACKAGE, copy, ignore=shutil.ignore_patterns("__pycache__"))
    before = kernel_sources_digest(copy)
    for front_end in sorted(copy.glob("plots/*.py"))[:1] + sorted(copy.glob("cli/*.py"))[:1] \
            + sorted(copy.glob("analysis/*.py"))[:1]:
        front_end.write_text(front_end.read_text() + "\n# edited\n")
    assert kernel_sources_digest(copy) == before
    flow = next(copy.rglob("cellular.py"))
    flow.write_text(flow.read_text() + "\n# edited\n")
    assert kernel_sources_digest(copy) != before


def test_a_module_a_kernel_imports_constants_from_is_a_source(tmp_path):
    root = tmp_path / "eddyhop"
    root.mkdir()
    (root / "__init__.py").write_text("")
    (root / "_jit.py").write_text("import numba\n")
    (root / "constants.py").write_text("LIMIT = 1.0\n")
    (root / "sub").mkdir()
    (root / "sub" / "__init__.py").write_text("")
    (root / "sub" / "deep.py").write_text("SCALE = 2\n")
    (root / "kern.py").write_text("from ._jit import jit\nfrom .constants import LIMIT\n"
                                  "from .sub import (\n    deep,\n)\n")
    (root / "plot.py").write_text("from .kern import LIMIT\n")
    assert _names(root) == {"_jit.py", "constants.py", "kern.py", "sub/__init__.py",
                            "sub/deep.py"}
