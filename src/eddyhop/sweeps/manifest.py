"""The sweep folder and its manifest: point → parameters, status, file, checksum.

Layout of a sweep folder ``DIR``::

    DIR/sweep-manifest.json   the manifest (JSON, rewritten atomically after every change)
    DIR/points/pt0000.nc      one netCDF file per completed point (written atomically)
    DIR/sweep.nc              the merged Dataset (written at the end of a sweep by default)
    DIR/.sweep-lock           held (flock) by the one process allowed to write the folder

The manifest records the study's *fingerprint* (``SweepSpec.fingerprint``): a folder whose
manifest carries another fingerprint belongs to another study and is refused, never overwritten.
A point counts as complete only when its file exists and its sha256 matches the manifest; a
file that was changed or damaged afterwards is recomputed.

Writing a point is two renames with a manifest save in between: the result goes (atomically) to
a *staged* file ``points/.<id>.nc.staged.part``, its sha256 (with the point's run time and
warnings) is recorded in the entry's ``staged`` field and the manifest saved, and only then is
the staged file renamed to ``points/<id>.nc`` and the entry marked done.  A run killed after
that rename but before the final manifest save leaves a complete file for a point still marked
"running"; on resume, :meth:`Manifest.adopt_written` accepts it as done because its checksum
equals the recorded one, so it is not computed again.  A file under a point's name without
such a record, or with any other content (torn, replaced, from another point), is never
adopted: the point is recomputed.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
from pathlib import Path

from ..errors import EddyhopError
from ..results.io import atomic_write_text
from ..results.outputs import LOCK_NAME, MANIFEST_NAME, POINTS_DIR

FORMAT = "eddyhop sweep manifest"
FORMAT_VERSION = 2  # 2: entries carry ``staged`` (checksum recorded before the final rename)
READABLE_VERSIONS = (1, 2)  # version 1 is version 2 without ``staged``
STATUSES = ("pending", "running", "done", "failed")


def now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def sha256_file(path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


@contextlib.contextmanager
def folder_lock(directory: Path):
    """Exclusive lock on a sweep folder; released by the kernel even after SIGKILL."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX: no locking
        yield
        return
    stream = open(directory / LOCK_NAME, "a+")
    try:
        try:
            fcntl.flock(stream.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise EddyhopError(f"another eddyhop sweep is writing to {str(directory)!r} "
                               "(its lock is held); wait for it to finish or stop it") from None
        yield
    finally:
        stream.close()


def _refuse_foreign(directory: Path) -> None:
    ours = {LOCK_NAME, MANIFEST_NAME}
    others = sorted(p.name for p in directory.iterdir() if p.name not in ours)
    if others:
        shown = ", ".join(others[:5]) + (" …" if len(others) > 5 else "")
        raise EddyhopError(f"{str(directory)!r} is not empty ({shown}) and holds no sweep "
                           "manifest: refusing to write there so as not to overwrite results "
                           "that may belong to someone else; choose a new or empty folder")


_TOP_FIELDS = {"fingerprint": str, "combine": str, "dims": list, "shape": list, "axes": list,
               "points": list}
_ENTRY_FIELDS = {"id": str, "index": int, "parameters": dict, "status": str}
_ENTRY_OPTIONAL = {"file": str, "sha256": str, "error": str, "warnings": list,
                   "attempts": int, "seconds": (int, float), "finished": str, "staged": dict}


def _check_layout(data: dict, path: Path) -> None:
    """Refuse (one line) a manifest whose fields are missing or of the wrong type, whose
    statuses are unknown, or whose point file is anything but ``points/<id>.nc`` inside the
    folder (a shared manifest is untrusted input: ``../../x.nc`` must not be read)."""
    where = repr(str(path))

    def bad(field: str, value, allowed: str):
        shown = repr(value)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise EddyhopError(f"{where} is damaged: {field} = {shown}; allowed: {allowed}; "
                           "refusing to touch the folder")

    for name, kind in _TOP_FIELDS.items():
        if not isinstance(data.get(name), kind):
            bad(name, data.get(name, "<missing>"), f"a {kind.__name__}")
    seen = set()
    folder = os.path.realpath(path.parent)
    for number, entry in enumerate(data["points"]):
        if not isinstance(entry, dict):
            bad(f"points[{number}]", entry, "a table of the point's fields")
        for name, kind in _ENTRY_FIELDS.items():
            if name not in entry:
                bad(f"points[{number}].{name}", "<missing>", f"a {kind.__name__}")
            if not isinstance(entry[name], kind) or isinstance(entry[name], bool):
                bad(f"points[{number}].{name}", entry[name], f"a {kind.__name__}")
        point_id = entry["id"]
        if point_id in seen or not point_id.replace("_", "").replace("-", "").isalnum():
            bad(f"points[{number}].id", point_id, "a unique name of letters, digits, - and _")
        seen.add(point_id)
        if entry["status"] not in STATUSES:
            bad(f"points[{number}].status", entry["status"], ", ".join(STATUSES))
        for name, kind in _ENTRY_OPTIONAL.items():
            value = entry.get(name)
            if value is not None and not isinstance(value, kind):
                bad(f"points[{number}].{name}", value, "empty or the recorded kind")
        file = entry.get("file")
        if file is not None:
            inside = os.path.realpath(os.path.join(folder, file))
            if file != f"{POINTS_DIR}/{point_id}.nc" or \
                    os.path.dirname(inside) != os.path.join(folder, POINTS_DIR):
                bad(f"points[{number}].file", file, f"{POINTS_DIR}/{point_id}.nc inside the "
                    "sweep folder")
        if entry["status"] == "done" and (file is None or entry.get("sha256") is None):
            bad(f"points[{number}]", "done without file and sha256",
                "a done point records its file and checksum")


class Manifest:
    """In-memory manifest of a sweep folder; ``save`` writes it atomically."""

    def __init__(self, directory: Path, data: dict):
        self.directory = Path(directory)
        self.data = data
        self._by_id = {e["id"]: e for e in data["points"]}

    # ---- reading and creating ----------------------------------------------------------------
    @property
    def path(self) -> Path:
        return self.directory / MANIFEST_NAME

    @classmethod
    def read(cls, directory) -> Manifest:
        """Read the manifest of an existing sweep folder (for merging and inspection)."""
        directory = Path(directory)
        path = directory / MANIFEST_NAME
        if not directory.is_dir():
            raise EddyhopError(f"sweep folder {str(directory)!r} does not exist")
        if not path.exists():
            raise EddyhopError(f"{str(directory)!r} holds no {MANIFEST_NAME}; it is not a sweep "
                               "folder (make one with `eddyhop sweep STUDY --out DIR`)")
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise EddyhopError(f"{str(path)!r} is not a readable sweep manifest ({exc}); "
                               "refusing to touch the folder") from None
        if not isinstance(data, dict) or data.get("format") != FORMAT:
            raise EddyhopError(f"{str(path)!r} is not an eddyhop sweep manifest; refusing to "
                               "touch the folder")
        if data.get("format_version") not in READABLE_VERSIONS:
            raise EddyhopError(f"{str(path)!r} has manifest format version "
                               f"{data.get('format_version')!r}; this eddyhop reads "
                               "versions " + ", ".join(map(str, READABLE_VERSIONS)))
        _check_layout(data, path)
        for entry in data["points"]:
            entry.setdefault("staged", None)
        data["format_version"] = FORMAT_VERSION  # written back in this version's layout
        return cls(directory, data)

    @classmethod
    def open_for_sweep(cls, directory, spec, fingerprint: str, study) -> Manifest:
        """The manifest of ``directory`` for this sweep: created if the folder is new or
        empty, checked against the fingerprint if it exists.  Call with the folder lock held."""
        directory = Path(directory)
        if (directory / MANIFEST_NAME).exists():
            manifest = cls.read(directory)
            manifest._check_same_study(spec, fingerprint, study)
            return manifest
        _refuse_foreign(directory)
        points = [{"id": p.id, "index": p.index, "parameters": p.values, "status": "pending",
                   "file": None, "sha256": None, "attempts": 0, "seconds": None,
                   "finished": None, "error": None, "warnings": [], "staged": None}
                  for p in spec.points()]
        from .. import __version__

        data = {
            "format": FORMAT,
            "format_version": FORMAT_VERSION,
            "fingerprint": fingerprint,
            "eddyhop_version": __version__,
            "created": now(),
            "updated": now(),
            "title": study.title,
            "description": study.description,
            "study_file": study.source_path or "",
            "study_toml": study.source_text or "",
            "base_document": spec.base_document(),
            "combine": spec.combine,
            "dims": list(spec.dims),
            "shape": list(spec.shape),
            "axes": [a.as_dict() for a in spec.axes],
            "peclet_convention": study.noise.peclet_convention,
            "length_unit": study.output.length_unit,
            "time_unit": study.output.time_unit,
            "points": points,
        }
        (directory / POINTS_DIR).mkdir(exist_ok=True)
        manifest = cls(directory, data)
        manifest.save()
        return manifest

    def _check_same_study(self, spec, fingerprint: str, study) -> None:
        if self.data.get("fingerprint") == fingerprint:
            return
        mine = [a.as_dict() for a in spec.axes]
        theirs = self.data.get("axes")
        if theirs != mine or self.data.get("combine") != spec.combine:
            reason = ("its swept parameters differ: "
                      + "; ".join(f"{a['address']} = {_brief(a['values'])}" for a in theirs or [])
                      + f" ({self.data.get('combine')}) there, versus "
                      + "; ".join(f"{a['address']} = {_brief(a['values'])}" for a in mine)
                      + f" ({spec.combine}) here")
        else:
            from .. import __version__

            reason = ("the swept parameters match but the fixed (un-swept) parameters of the "
                      "study differ")
            if self.data.get("eddyhop_version") != __version__:
                reason += (f", or the eddyhop version ({self.data.get('eddyhop_version')} there, "
                           f"{__version__} here)")
        raise EddyhopError(
            f"{str(self.directory)!r} holds the results of a different study "
            f"('{self.data.get('title', '?')}' from {self.data.get('study_file') or '?'}, "
            f"started {self.data.get('created', '?')}): {reason}. Refusing to overwrite them; "
            "choose another --out folder")

    # ---- points ------------------------------------------------------------------------------
    @property
    def points(self) -> list[dict]:
        return self.data["points"]

    def entry(self, point_id: str) -> dict:
        return self._by_id[point_id]

    def point_path(self, point_id: str) -> Path:
        return self.directory / POINTS_DIR / f"{point_id}.nc"

    def staged_path(self, point_id: str) -> Path:
        """Where a point's file waits (complete) while its checksum is recorded; the name
        matches the '.*.part' pattern of :meth:`remove_stale_temporaries`."""
        return self.directory / POINTS_DIR / f".{point_id}.nc.staged.part"

    def counts(self) -> dict:
        out = dict.fromkeys(STATUSES, 0)
        for e in self.points:
            out[e["status"]] += 1
        return out

    def remove_stale_temporaries(self) -> int:
        """Delete half-written temporary files left by a killed run (ours only: '.*.part')."""
        removed = 0
        for folder in (self.directory, self.directory / POINTS_DIR):
            if not folder.is_dir():
                continue
            for path in folder.glob(".*.part"):
                with contextlib.suppress(FileNotFoundError):
                    path.unlink()
                    removed += 1
        return removed

    def adopt_written(self) -> list[str]:
        """Mark done every 'running' point whose file was renamed into place but not yet
        recorded (the run stopped between the rename and the manifest save): the file must
        exist and match the checksum recorded, before the rename, in the entry's ``staged``
        field.  Returns the ids adopted; any other 'running' point is left to
        :meth:`reconcile`, which recomputes it."""
        adopted = []
        for e in self.points:
            staged = e.get("staged")
            if e["status"] != "running" or not staged:
                continue
            path = self.point_path(e["id"])
            if path.is_file() and sha256_file(path) == staged["sha256"]:
                e.update(status="done", file=path.relative_to(self.directory).as_posix(),
                         sha256=staged["sha256"], seconds=staged["seconds"],
                         finished=staged["written"], error=None,
                         warnings=list(staged["warnings"]), staged=None)
                adopted.append(e["id"])
        return adopted

    def reconcile(self, retry_failed: bool = True) -> dict[str, str]:
        """Decide what to (re)compute: ``{point id: reason}``.  A 'done' point stays done only
        if its file exists with the recorded checksum; 'running' points were interrupted."""
        todo = {}
        for e in self.points:
            status = e["status"]
            if status == "done":
                path = self.directory / e["file"] if e.get("file") else None
                if path is None or not path.exists():
                    todo[e["id"]] = "its file is missing"
                elif sha256_file(path) != e["sha256"]:
                    todo[e["id"]] = "its file fails the checksum (changed or damaged)"
            elif status == "running":
                todo[e["id"]] = "it was interrupted"
            elif status == "failed":
                if retry_failed:
                    todo[e["id"]] = "it failed before"
            else:
                todo[e["id"]] = "not yet computed"
        for point_id, reason in todo.items():
            e = self.entry(point_id)
            if e["status"] == "done":
                e["error"] = f"recomputed: {reason}"
                e["status"] = "pending"
            elif e["status"] == "running":
                e["status"] = "pending"
            e["staged"] = None
        return todo

    def mark_running(self, point_id: str) -> None:
        """One more attempt at the point (``attempts`` counts every computation started)."""
        e = self.entry(point_id)
        e.update(status="running", staged=None)
        e["attempts"] += 1

    def mark_staged(self, point_id: str, checksum: str, seconds: float,
                    warnings: list) -> None:
        """Record the checksum of the point's complete staged file before it is renamed
        into place (see the module docstring)."""
        self.entry(point_id)["staged"] = {"sha256": checksum, "seconds": seconds,
                                          "warnings": list(warnings), "written": now()}

    def mark_done(self, point_id: str, path: Path) -> None:
        """The staged file is now ``path``: the point is complete."""
        e = self.entry(point_id)
        staged = e["staged"]
        e.update(status="done", file=path.relative_to(self.directory).as_posix(),
                 sha256=staged["sha256"], seconds=staged["seconds"],
                 finished=staged["written"], error=None, warnings=list(staged["warnings"]),
                 staged=None)

    def mark_failed(self, point_id: str, error: str, seconds: float | None) -> None:
        e = self.entry(point_id)
        e.update(status="failed", file=None, sha256=None, seconds=seconds, finished=now(),
                 error=error, staged=None)

    def mark_pending(self, point_id: str) -> None:
        self.entry(point_id).update(status="pending", staged=None)

    def save(self) -> None:
        self.data["updated"] = now()
        atomic_write_text(self.path, json.dumps(self.data, indent=1, allow_nan=False) + "\n")


def _brief(values) -> str:
    values = list(values)
    text = ", ".join(f"{v:.4g}" if isinstance(v, float) else str(v) for v in values[:4])
    return f"[{text}{', …' if len(values) > 4 else ''}] ({len(values)} values)"
