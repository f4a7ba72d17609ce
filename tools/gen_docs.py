"""Write the generated documentation files from the package itself.

    python tools/gen_docs.py           # rewrite CITATION.cff, docs/methods.md, docs/api.md
    python tools/gen_docs.py --check   # exit 1 naming any file that is out of date

CITATION.cff and docs/methods.md come from the one table in ``eddyhop.results.citation``;
docs/api.md from the docstrings of the public API (``eddyhop.__all__`` and the modules in
``MODULES``).  ``tests/test_citation.py`` and ``tests/test_api_docs.py`` run the check.
"""

from __future__ import annotations

import argparse
import importlib
import inspect
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "src"))

#: modules documented in full (every public function and class), after the top-level API
MODULES = ("eddyhop.analysis", "eddyhop.results.provenance", "eddyhop.results.citation",
           "eddyhop.study.metadata")


def _signature(obj) -> str:
    try:
        return str(inspect.signature(obj))
    except (TypeError, ValueError):
        return "(...)"


def _doc(obj) -> str:
    text = inspect.getdoc(obj) or "(no docstring)"
    return text.strip()


def _entry(name: str, obj, level: str = "###") -> list[str]:
    kind = "class" if inspect.isclass(obj) else "function"
    lines = [f"{level} `{name}`", "", "```python", f"{kind} {name.split('.')[-1]}"
             f"{_signature(obj)}", "```", "", _doc(obj), ""]
    if inspect.isclass(obj):
        for attribute, member in sorted(vars(obj).items()):
            if attribute.startswith("_") or not (inspect.isfunction(member)
                                                 or isinstance(member, property)):
                continue
            target = member.fget if isinstance(member, property) else member
            lines += [f"- `{attribute}{'' if isinstance(member, property) else _signature(target)}`"
                      f": {_doc(target).splitlines()[0]}"]
        lines.append("")
    return lines


def _public(module) -> list[tuple[str, object]]:
    names = getattr(module, "__all__", None) or [n for n in vars(module) if not n.startswith("_")]
    out = []
    for name in names:
        obj = getattr(module, name)
        if (inspect.isfunction(obj) or inspect.isclass(obj)) and getattr(
                obj, "__module__", "").startswith(module.__name__):
            out.append((name, obj))
    return out


def api_markdown() -> str:
    import eddyhop

    lines = ["# API reference", "",
             "<!-- Generated from the docstrings by `python tools/gen_docs.py`; do not edit. -->",
             "", f"eddyhop {eddyhop.__version__}.  The functions and classes below are the "
             "public Python API; the topic pages (analysis.md, sweeps.md, reference.md, "
             "figures_and_reports.md, obstacles_and_grids.md, performance.md, methods.md) "
             "explain what they compute.", "", "## `eddyhop`", ""]
    for name in eddyhop.__all__:
        if name == "__version__":
            continue
        obj = getattr(eddyhop, name)
        if inspect.isfunction(obj) or inspect.isclass(obj):
            lines += _entry(f"eddyhop.{name}", obj)
    for module_name in MODULES:
        module = importlib.import_module(module_name)
        lines += [f"## `{module_name}`", "", _doc(module).split("\n\n")[0], ""]
        for name, obj in _public(module):
            lines += _entry(f"{module_name}.{name}", obj)
    return "\n".join(lines).rstrip() + "\n"


def outputs() -> dict:
    """{path relative to the repository: text} of every generated file."""
    from eddyhop.results.citation import citation_cff, methods_markdown

    return {"CITATION.cff": citation_cff(), "docs/methods.md": methods_markdown(),
            "docs/api.md": api_markdown()}


def stale() -> list[str]:
    """The generated files whose text on disk differs from what this script writes."""
    out = []
    for relative, text in outputs().items():
        path = ROOT / relative
        if not path.exists() or path.read_text(encoding="utf-8") != text:
            out.append(relative)
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="only report stale files")
    args = parser.parse_args(argv)
    if args.check:
        found = stale()
        for relative in found:
            print(f"{relative} is out of date: run `python tools/gen_docs.py`")
        return 1 if found else 0
    for relative, text in outputs().items():
        (ROOT / relative).write_text(text, encoding="utf-8")
        print(f"wrote {relative}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
