"""The one output-path rule every writing command follows, checked before any computation.

An output path is refused (one line, :class:`~eddyhop.errors.OutputPathError`) when

* its name cannot be written as given: a NUL or a backslash in it (on POSIX a backslash is part
  of the name, not a folder separator, so ``a\\b.nc`` would not be where the user thinks), a
  component longer than the file system allows, a missing parent folder, or a folder where a
  file is expected;
* it is the same file as one of the command's inputs (same resolved path, or a hard link);
* it lies inside a sweep folder's own bookkeeping: the manifest, the lock, anything under
  ``points/`` (or any other sub-folder of a sweep folder) — never replaceable, whatever flag;
* it exists and is not a file of the kind the command writes (an eddyhop result netCDF, a
  merged sweep netCDF, an eddyhop HTML report, a figure of the same format), unless the user
  passes ``--replace``;
* it is a default name (the user gave no ``--out``) and the file exists, unless ``--replace``:
  a default never silently replaces a file.

An existing file of the same kind named explicitly with ``--out`` is replaced (atomically).
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import OutputPathError

# A sweep folder's own files (the sweeps package imports these names from here, so that this
# low-level module need not import the sweeps).
MANIFEST_NAME = "sweep-manifest.json"
POINTS_DIR = "points"
LOCK_NAME = ".sweep-lock"

# what each kind of output is, for messages
KIND_TEXT = {
    "result": "an eddyhop result netCDF file (run, demo, analyse or reference)",
    "sweep": "a merged sweep netCDF file (merge or sweep)",
    "report": "an eddyhop HTML report",
    "figure": "a figure file of the same format",
    "trajectories": "a CF trajectory file written by eddyhop run",
    "table": "an eddyhop table (CSV or LaTeX)",
    "comparison": "an eddyhop comparison netCDF file",
    "figure_data": "an eddyhop figure-data netCDF file",
}
RESULT_KINDS = ("monte_carlo", "reference", "measured")
REPLACE_HINT = "choose another name or pass --replace to replace it"
NAME_MAX_FALLBACK = 255
PATH_MAX_FALLBACK = 4096


def _limits(directory: Path) -> tuple[int, int]:
    try:
        return (os.pathconf(directory, "PC_NAME_MAX"), os.pathconf(directory, "PC_PATH_MAX"))
    except (OSError, ValueError, AttributeError):
        return NAME_MAX_FALLBACK, PATH_MAX_FALLBACK


def _shown(path) -> str:
    text = str(path)
    return repr(text if len(text) <= 80 else text[:60] + "…" + text[-15:])


def check_name(path, option: str = "--out", want_dir: bool = False) -> Path:
    """Refuse a path that cannot be written as given (see the module text); returns it."""
    text = os.fspath(path)
    if not text:
        raise OutputPathError(f"{option} is empty; give a file name")
    if "\x00" in text:
        raise OutputPathError(f"{option} {_shown(text)} contains a NUL character")
    path = Path(text)
    if "\\" in path.name:
        raise OutputPathError(f"{option} {_shown(text)}: a backslash is not allowed in a file "
                              "name (folders are separated by '/'); rename it")
    parent = path.parent if str(path.parent) else Path(".")
    name_max, path_max = _limits(parent if parent.is_dir() else Path("."))
    for part in path.parts:
        if len(os.fsencode(part)) > name_max:
            raise OutputPathError(f"{option} {_shown(text)}: a name of "
                                  f"{len(os.fsencode(part))} bytes is longer than this file "
                                  f"system allows ({name_max}); choose a shorter one")
    if len(os.fsencode(os.path.abspath(text))) >= path_max:
        raise OutputPathError(f"{option} {_shown(text)}: the path is longer than this system "
                              f"allows ({path_max} bytes)")
    if not parent.is_dir():
        raise OutputPathError(f"{option} {_shown(text)}: folder {_shown(parent)} does not exist; "
                              "create it first or choose another place")
    if not want_dir and path.is_dir():
        raise OutputPathError(f"{option} {_shown(text)} is a folder; give a file name")
    if want_dir and path.exists() and not path.is_dir():
        raise OutputPathError(f"{option} {_shown(text)} is a file; give a folder")
    return path


def _same_file(a: Path, b: Path) -> bool:
    if os.path.realpath(a) == os.path.realpath(b):
        return True
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def sweep_folder_of(path) -> Path | None:
    """The nearest folder at or above ``path``'s folder that holds a sweep manifest, if any."""
    for folder in Path(os.path.realpath(path)).parents:
        if (folder / MANIFEST_NAME).is_file():
            return folder
    return None


def _netcdf_kind(path: Path) -> str | None:
    """The ``eddyhop_kind`` attribute of a netCDF file; None for anything else."""
    try:
        with open(path, "rb") as stream:
            head = stream.read(8)
    except OSError:
        return None
    if not (head.startswith(b"CDF") or head.startswith(b"\x89HDF")):
        return None
    try:
        import netCDF4

        with netCDF4.Dataset(path, "r") as handle:
            kind = getattr(handle, "eddyhop_kind", None)
    except Exception:
        return None
    return str(kind) if kind is not None else None


FIGURE_MAGIC = {".png": (b"\x89PNG",), ".pdf": (b"%PDF",)}


def is_kind(path: Path, kind: str) -> bool:
    """Whether the existing file ``path`` is an output of ``kind`` (so replacing it loses
    nothing the command could not write again)."""
    if kind in ("result", "sweep", "trajectories", "comparison",
                "figure_data"):
        found = _netcdf_kind(path)
        return found in RESULT_KINDS if kind == "result" else found == kind
    try:
        with open(path, "rb") as stream:
            head = stream.read(4096)
    except OSError:
        return False
    if kind == "table":  # eddyhop writes a first comment line naming itself
        return head.lstrip().startswith((b"# eddyhop", b"% eddyhop"))
    if kind == "report":
        return head.lstrip().lower().startswith(b"<!doctype html") and \
            b"<meta name='generator' content='eddyhop" in head
    if kind == "figure":
        suffix = path.suffix.lower()
        if suffix == ".svg":
            return b"<svg" in head
        return any(head.startswith(magic) for magic in FIGURE_MAGIC.get(suffix, ()))
    raise ValueError(f"unknown output kind {kind!r}")


def check_not_in_sweep(path, option: str = "--out") -> None:
    """Refuse a path among a sweep folder's own files: its manifest, its lock, a temporary
    file, or anything in a sub-folder (``points/``).  The path need not exist yet."""
    folder = sweep_folder_of(path)
    if folder is None:
        return
    real = Path(os.path.realpath(path))
    if real.parent != folder or real.name in (MANIFEST_NAME, LOCK_NAME) or \
            real.name.endswith(".part"):
        raise OutputPathError(f"{option} {_shown(path)} is inside the sweep folder "
                              f"{_shown(folder)} (its manifest, lock or points); those files "
                              "belong to the sweep; write somewhere else")


def guard_output(path, *, kind: str, inputs=(), replace: bool = False, default: bool = False,
                 option: str = "--out") -> Path:
    """Apply the output rule (module text) to ``path``; return it as a Path or raise
    :class:`OutputPathError`.  ``inputs``: files the command reads; ``default``: the name was
    not given by the user.  A sweep folder's top-level files other than its manifest and lock
    (e.g. its merged ``sweep.nc``) follow the same-kind rule like any other file."""
    path = check_name(path, option)
    for source in inputs:
        if source is not None and _same_file(path, Path(source)):
            raise OutputPathError(f"{option} {_shown(path)} is the same file as the input "
                                  f"{_shown(source)}; writing would destroy it; choose another "
                                  "name")
    check_not_in_sweep(path, option)
    if path.exists() or path.is_symlink():
        if not path.is_file():
            raise OutputPathError(f"{option} {_shown(path)} exists and is not a regular file")
        if not replace:
            if not is_kind(path, kind):
                raise OutputPathError(f"{option} {_shown(path)} exists and is not "
                                      f"{KIND_TEXT[kind]}; {REPLACE_HINT}")
            if default:
                raise OutputPathError(f"{_shown(path)} (the default output name) exists; give "
                                      f"{option} or pass --replace to replace it")
    return path
