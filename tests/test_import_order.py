"""Imports flow one way: the package's stages in order, and no import cycle anywhere.

The allowed order is written once, in ``STAGES`` below (DEVELOPERS.md shows the same picture).
A module may import modules of its own stage or of a stage listed before it, never after.
Every import counts — at module level, inside a function or under ``TYPE_CHECKING`` — because
a deferred import is still a dependency.  An import between a package and its own submodules
(``flows/__init__`` ↔ ``flows.cellular``) is not an edge, as in the project's before-stop check.
"""

from __future__ import annotations

import ast
import importlib
import warnings
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "eddyhop"

# Lowest first.  A stage is a module or package path under ``eddyhop``; "" is the package root.
STAGES = (
    ("core", ("", "errors", "_jit", "_kernel_loading", "_kernel_sources", "atomic", "demo",
              "_blas")),
    ("flows", ("flows",)),
    ("starts", ("starts",)),
    ("engine", ("engine",)),
    ("study", ("study",)),
    ("results", ("results",)),
    ("analysis", ("analysis",)),
    ("reference", ("reference",)),
    ("tracks", ("tracks",)),
    ("api", ("api",)),
    ("sweeps", ("sweeps",)),
    ("presentation", ("presentation",)),
    ("cli", ("cli", "__main__")),
)
# Old module paths kept for one release (``eddyhop._compat``): outside the order by design.
OUTSIDE_ORDER = ("_compat",)


def _modules() -> dict[str, Path]:
    modules = {}
    for path in PACKAGE.rglob("*.py"):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        modules[".".join(parts[:-1] if parts[-1] == "__init__" else parts)] = path
    return modules


def _stage(module: str) -> int | None:
    inner = module.removeprefix("eddyhop").removeprefix(".")
    best, depth = None, -1
    for rank, (_, prefixes) in enumerate(STAGES):
        for prefix in prefixes:
            hit = inner == prefix or (prefix and inner.startswith(prefix + "."))
            if hit and len(prefix) > depth:
                best, depth = rank, len(prefix)
    return best


def import_graph() -> dict[str, set[str]]:
    """module → package modules it imports (anywhere in its body)."""
    modules = _modules()
    graph = {name: set() for name in modules}
    for name, path in modules.items():
        base = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            targets = []
            if isinstance(node, ast.ImportFrom):
                root = base[:len(base) - node.level + 1] if node.level else []
                target = ".".join(root + ([node.module] if node.module else []))
                targets = [target] + [f"{target}.{alias.name}" for alias in node.names]
            elif isinstance(node, ast.Import):
                targets = [alias.name for alias in node.names]
            for target in targets:
                if target in modules and target != name and not target.startswith(name + ".") \
                        and not name.startswith(target + "."):
                    graph[name].add(target)
    return graph


def find_cycles(graph: dict[str, set[str]]) -> list[str]:
    state, cycles = {}, []

    def visit(node, path):
        state[node] = "open"
        for other in sorted(graph[node]):
            if state.get(other) == "open":
                cycles.append(" -> ".join([*path[path.index(other):], other]))
            elif other not in state:
                visit(other, [*path, other])
        state[node] = "done"

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    return cycles


def test_every_module_has_a_stage():
    unplaced = [m for m in _modules() if _stage(m) is None
                and m.removeprefix("eddyhop.") not in OUTSIDE_ORDER]
    assert not unplaced, f"add these modules to a stage in STAGES: {unplaced}"


def test_no_lower_stage_imports_a_higher_one():
    names = [name for name, _ in STAGES]
    wrong = []
    for module, targets in import_graph().items():
        if module.removeprefix("eddyhop.") in OUTSIDE_ORDER:
            continue
        for target in targets:
            if _stage(target) is not None and _stage(module) is not None \
                    and _stage(target) > _stage(module):
                wrong.append(f"{module} ({names[_stage(module)]}) imports {target} "
                             f"({names[_stage(target)]})")
    assert not wrong, "imports against the stage order:\n" + "\n".join(sorted(wrong))


def test_no_import_cycle():
    cycles = find_cycles(import_graph())
    assert not cycles, "import cycles:\n" + "\n".join(cycles)


def test_the_checks_catch_what_they_should():
    # the checks themselves: a cycle and an upward edge are found in a made-up graph
    assert find_cycles({"a": {"b"}, "b": {"a"}}) == ["a -> b -> a"]
    assert _stage("eddyhop.engine.kernel") < _stage("eddyhop.results.io")
    assert _stage("eddyhop.flows.cellular") == _stage("eddyhop.flows")


OLD_PATHS = ("spec", "cost", "sweep", "sweeps.axes", "rng", "noise", "schedule", "integrators",
             "kernel", "stepcheck", "runner", "start_geometry", "obstacle_starts", "dataset",
             "io", "outputs", "report", "plots", "plots.msd")


@pytest.mark.parametrize("old", OLD_PATHS)
def test_old_module_paths_import_and_warn(old):
    import eddyhop
    from eddyhop._compat import new_path

    name = f"eddyhop.{old}"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        import sys

        sys.modules.pop(name, None)  # a fresh import of the old name, so it warns again
        module = importlib.import_module(name)
    assert module is importlib.import_module(new_path(name)), name
    assert any(issubclass(w.category, DeprecationWarning) and new_path(name) in str(w.message)
               for w in caught), name
    assert eddyhop.__name__ == "eddyhop"


def test_old_presentation_names_warn():
    import eddyhop.presentation
    from eddyhop.presentation.text import analysis_lines

    with pytest.warns(DeprecationWarning, match="presentation.text.analysis_lines"):
        assert eddyhop.presentation.analysis_lines is analysis_lines
