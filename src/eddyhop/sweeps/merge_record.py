"""Whether a sweep folder's merged file is still the merge of its points (resume in < 1 s).

Merging reads every point file, analyses each point and fits the scaling laws: seconds of work
that a resumed sweep with nothing left to compute would only repeat to write the same bytes.
After each merge the manifest records (``merged``) the target's path and sha256 together with a
key of what was merged: the study fingerprint, the package version and every point's id, status
and checksum.  A later run that computes nothing reuses the file only if the key and the
file's checksum both still match; any recomputed, failed, damaged or edited point or an edited
merged file gives a fresh merge.  Never a change of numbers: a reused file is byte-identical to
what the merge would write again (merging is deterministic).
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from .manifest import sha256_file

RECORD = "merged"


def merge_key(manifest) -> str:
    """sha256 over what a merge of the folder reads (fingerprint, version, points' states)."""
    from .. import __version__

    state = {"fingerprint": manifest.data.get("fingerprint"), "version": __version__,
             "points": sorted((e["id"], e["status"], e.get("sha256") or "")
                              for e in manifest.points)}
    return hashlib.sha256(json.dumps(state, sort_keys=True).encode()).hexdigest()


def _where(target) -> str:
    return os.path.realpath(Path(target))


def merged_is_current(manifest, target, need_summary: bool = False) -> bool:
    """True when ``target`` is the recorded merge of the points as they are now (and, with
    ``need_summary``, the record keeps the summary lines of that merge)."""
    record = manifest.data.get(RECORD)
    if not isinstance(record, dict) or record.get("path") != _where(target):
        return False
    summary = record.get("summary")
    if need_summary and not (isinstance(summary, list)
                             and all(isinstance(line, str) for line in summary)):
        return False
    if record.get("key") != merge_key(manifest) or not Path(target).is_file():
        return False
    return sha256_file(target) == record.get("sha256")


def record_merge(manifest, target, summary: list | None = None) -> None:
    """Remember that ``target`` was just merged from the points as they are now, with the
    ``summary`` lines printed for it (the caller saves the manifest)."""
    manifest.data[RECORD] = {"path": _where(target), "sha256": sha256_file(target),
                             "key": merge_key(manifest), "summary": summary}
