"""Which source files the compiled kernels depend on (the key of the numba cache directory).

Numba's own cache index checks only the file that defines a cached function, not the modules
whose functions and constants it compiled in, so the package keys its cache directory by a hash
of every file a kernel may depend on.  Hashing *every* ``.py`` file was safe but made an edit of
a plot, CLI or analysis module recompile all kernels (20–40 s).  The kernel sources are:

* every module that defines compiled code: it imports ``_jit`` (the package's ``jit``) or
  ``numba.extending`` (intrinsics, overloads);
* and, transitively, every package module those import at module level (``from .x import y``,
  ``from . import x``, ``import eddyhop.x``): a jitted function can only see globals that its
  module imported at import time, so names reached through a function-level import never enter
  compiled code.

The top-level ``eddyhop/__init__.py`` only re-exports lazily and is never a dependency.  The scan
uses regular expressions over the text (no AST, no import), a few milliseconds for the package,
because it runs in every process that decorates a kernel.  It finds files by content, not by a
list of names, so moving modules around keeps it correct.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

PACKAGE = "eddyhop"
# The patterns match at column 0 by starting with a newline (the texts are searched with
# one prepended): a literal start lets the regular-expression engine skip ahead to it,
# 3-4x faster than ``^`` in multi-line mode over the package's 1.3 MB of source.
# A module defines compiled code when it imports the package's jit helper or numba's
# extension API at module level (column 0).
_DEFINES_KERNELS = re.compile(
    r"\nfrom\s+(?:(?:\.+|eddyhop\.)_jit|numba\.extending)\s+import")
# Module-level imports only (column 0); parenthesised name lists may span lines.
_FROM_IMPORT = re.compile(r"\nfrom\s+(\.*)([\w.]*)\s+import\s+(\([^)]*\)|[^\n]*)")
_PLAIN_IMPORT = re.compile(r"\nimport\s+([^\n]+)")


def _module_name(path: Path, root: Path) -> str:
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join([PACKAGE, *parts])


def _imported_modules(text: str, module: str, is_package: bool) -> set[str]:
    """Fully qualified package modules that ``text`` (the source of ``module``) imports at
    module level; ``from X import n`` adds ``X.n`` too, in case ``n`` is a submodule."""
    found = set()
    package = module if is_package else module.rpartition(".")[0]
    for dots, name, names in _FROM_IMPORT.findall(text):
        if dots:
            base = package.split(".")
            base = base[: len(base) - (len(dots) - 1)]
            target = ".".join([*base, name] if name else base)
        else:
            target = name
        if not (target == PACKAGE or target.startswith(PACKAGE + ".")):
            continue
        found.add(target)
        for item in re.split(r"[,\s()]+", names):
            item = item.split(" as ")[0].strip()
            if item and item.isidentifier():
                found.add(f"{target}.{item}")
    for names in _PLAIN_IMPORT.findall(text):
        for item in names.split(","):
            target = item.split(" as ")[0].strip()
            if target.startswith(PACKAGE + "."):
                found.add(target)
    return found


def kernel_source_files(root: Path) -> list[Path]:
    """Sorted files under the package directory ``root`` that compiled kernels depend on."""
    files = {}
    for path in root.rglob("*.py"):
        files[_module_name(path, root)] = path
    texts = {name: "\n" + path.read_text(encoding="utf-8", errors="replace")
             for name, path in files.items()}  # a newline first: see _DEFINES_KERNELS
    todo = [name for name, text in texts.items() if _DEFINES_KERNELS.search(text)]
    seen = set()
    while todo:
        name = todo.pop()
        if name in seen or name == PACKAGE:
            continue
        seen.add(name)
        is_package = files[name].name == "__init__.py"
        for target in _imported_modules(texts[name], name, is_package):
            # importing a.b.c runs a/__init__ and a/b/__init__, but a kernel sees only the
            # names it imported; package __init__ files count when named directly
            if target in files and target not in seen:
                todo.append(target)
    return sorted((files[name] for name in seen), key=lambda p: p.relative_to(root).as_posix())


def kernel_sources_digest(root: Path) -> str:
    """sha256 over the relative paths and bytes of ``kernel_source_files(root)``."""
    digest = hashlib.sha256()
    for path in kernel_source_files(root):
        digest.update(path.relative_to(root).as_posix().encode())
        digest.update(path.read_bytes())
    return digest.hexdigest()
