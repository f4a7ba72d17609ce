"""Running a sweep: every point once, resumable, on any backend, with one progress bar.

The parent process is the only writer of the sweep folder: workers receive a point's study
document and return its Dataset; the parent writes the point file atomically, records its
sha256 and status in the manifest (itself rewritten atomically after every change) and, at the
end, merges the points.  The checksum is recorded before the point file gets its real name
(see ``manifest``), so a run killed at any moment — also between that rename and the manifest
update — leaves a folder from which a new run continues: complete points (file present,
checksum matching) are never run again, interrupted or damaged ones are recomputed, and
because every point is a plain study with a fixed seed, the merged result is bit-identical to
an uninterrupted run.
"""

from __future__ import annotations

import contextlib
import copy
import hashlib
import json
import os
import socket
import sys
import time
import traceback
import warnings
from dataclasses import dataclass, field
from pathlib import Path

from .._blas import one_blas_thread
from ..atomic import raise_lost_ctrl_c
from ..errors import EddyhopError
from .manifest import MANIFEST_NAME, Manifest, _refuse_foreign, folder_lock, sha256_file

MERGED_NAME = "sweep.nc"

# Test-only: "<stage> <point id>" makes the sweep process announce the stage on stderr and
# sleep (at most TEST_PAUSE_SECONDS) so that a test can SIGKILL it at exactly that moment.
# Stages: "running" (point marked running), "staged" (checksum recorded, file not yet
# renamed), "renamed" (file in place, manifest not yet updated).  Unset in normal use.
TEST_PAUSE_ENV = "EDDYHOP_SWEEP_TEST_PAUSE"
TEST_PAUSE_SECONDS = 60.0


def _test_pause(stage: str, point_id: str) -> None:
    if os.environ.get(TEST_PAUSE_ENV) == f"{stage} {point_id}":
        print(f"eddyhop-test-pause {stage} {point_id}", file=sys.stderr, flush=True)
        time.sleep(TEST_PAUSE_SECONDS)


def compute_point(payload: dict) -> dict:
    """Simulate one sweep point (in any process) and return an outcome dict.

    Errors of the point itself (a blow-up, an invalid value) are returned, not raised, so a
    worker never takes other points down with it.
    """
    started = time.perf_counter()
    try:
        from ..api import simulate
        from ..engine.runner import StepSizeWarning
        from ..study.spec import parse_study

        study = parse_study(payload["document"], source_text=payload["source_text"],
                            source_path=payload["source_path"])
        with warnings.catch_warnings():
            # recorded per point by the parent (step_size_warnings) instead of printed here
            warnings.simplefilter("ignore", StepSizeWarning)
            ds = simulate(study, workers=payload["workers"], progress=False,
                          allow_long=True)  # the sweep command checked the total time
        return {"ok": True, "dataset": ds, "seconds": time.perf_counter() - started,
                "host": socket.gethostname(), "pid": os.getpid()}
    except Exception as exc:
        return {"ok": False, "error": f"{type(exc).__name__}: {exc}",
                "traceback": traceback.format_exc(limit=6),
                "seconds": time.perf_counter() - started}


def warm_kernels(document: dict, *, once: bool = False) -> float:
    """Compile (or load) the numba kernels once in this process so that the on-disk cache is
    warm before worker processes start; returns the seconds spent.  Kernels are compiled per
    argument types, which do not depend on the flow, noise or scheme, so a tiny run of the
    first point suffices.

    ``once``: skip the run (return 0) if this exact tiny run has already completed with this
    version of the package sources, i.e. the cache already holds what it compiles; a marker
    file in the kernel cache directory records that.  Local worker processes share that
    cache, so a sweep started again (resumed, rerun) dispatches without the warm-up."""
    from .._jit import kernel_cache_dir
    from ..api import simulate
    from ..engine.runner import StepBiasWarning, StepSizeWarning
    from ..study.spec import parse_study

    started = time.perf_counter()
    tiny = copy.deepcopy(document)
    run = tiny.setdefault("run", {})
    dt = run.get("dt", 0.01)
    for key in ("t_first", "n_times", "spacing", "step_check_particles"):
        run.pop(key, None)
    # 16 particles: the fewest for which a noisy run's default step check runs (and compiles)
    run.update(particles=16, t_end=4 * dt, n_times=2, workers=1, progress=False)
    tiny.pop("aging", None)
    tiny.pop("velocity_correlation", None)  # its lags would not fit the 4-step warm-up run
    digest = hashlib.sha256(json.dumps(tiny, sort_keys=True, default=str).encode()).hexdigest()
    marker = Path(kernel_cache_dir()) / f"eddyhop-sweep-warm-{digest[:20]}"
    if once and marker.exists():
        return 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", StepSizeWarning)
        warnings.simplefilter("ignore", StepBiasWarning)  # a 4-step run says nothing of dt
        simulate(parse_study(tiny), workers=1, progress=False)
    with contextlib.suppress(OSError):  # only an optimisation; an unwritable cache is fine
        marker.touch()
    return time.perf_counter() - started


@dataclass
class SweepReport:
    """What a ``run_sweep`` call did (ids are point ids, see the manifest).

    ``skipped``: points already complete, not computed again; ``recovered`` (a subset of
    ``skipped``): points whose file an interrupted run had put in place without recording it,
    adopted by checksum."""

    directory: Path
    n_points: int
    backend: str = "serial"
    slots: int = 1
    computed: list = field(default_factory=list)
    skipped: list = field(default_factory=list)
    recovered: list = field(default_factory=list)
    failed: dict = field(default_factory=dict)
    redo_reasons: dict = field(default_factory=dict)
    merged: Path | None = None
    merge_reused: bool = False  # the merged file was already the merge of these points
    summary: list = field(default_factory=list)  # run_sweep(summarize=...) lines
    seconds: float = 0.0
    warm_seconds: float = 0.0
    point_seconds: list = field(default_factory=list)

    @property
    def complete(self) -> bool:
        return not self.failed and len(self.computed) + len(self.skipped) == self.n_points


def _prepare_folder(out) -> Path:
    directory = Path(out)
    if directory.exists() and not directory.is_dir():
        raise EddyhopError(f"--out {str(directory)!r} is a file; a sweep writes a folder")
    if not directory.exists():
        parent = directory.parent if str(directory.parent) else Path(".")
        if not parent.is_dir():
            raise EddyhopError(f"cannot create sweep folder {str(directory)!r}: "
                               f"{str(parent)!r} does not exist")
        directory.mkdir()
    return directory


def run_sweep(study, out, *, backend: str = "auto", jobs: int | None = None,
              scheduler: str | None = None, workers: int | None = None,
              progress: bool | None = None, retry_failed: bool = True,
              merge_to="default", timeout: float = 10.0, summarize=None) -> SweepReport:
    """Run (or resume) every point of ``study``'s sweep into folder ``out``.

    ``backend``: ``serial``, ``threads`` (one pool of ``jobs`` threads of this process for the
    whole sweep, fed with the chunks of every point in point order; ``None`` or -1: one per
    core), ``processes`` (local processes through joblib/loky, ``jobs`` of them), ``dask``
    (cluster at ``scheduler`` or ``$DASK_SCHEDULER_ADDRESS``) or ``auto``.  ``workers`` is
    the number of threads per point of the serial, processes and Dask backends (-1: every
    core; default: the study's ``run.workers`` for serial runs, 1 in worker processes or on
    Dask); the threads backend spreads every point over its ``jobs`` threads instead.
    Counts of 0 or below -1 are refused, as for ``run.workers``.
    ``merge_to``: path of the merged Dataset, ``"default"`` for ``out/sweep.nc``, ``None`` for
    no merge.  ``timeout`` (s) bounds the wait for a Dask scheduler and its first worker (one
    deadline for all of it).  None of these options changes any number.
    ``summarize``: optional function of the merged Dataset returning lines of text; its lines
    are kept with the merge record and returned as ``report.summary`` (also when a resumed
    sweep keeps an up-to-date merged file, which is then not read again).
    """
    from ..engine.runner import step_size_warnings
    from ..study.spec import Study, load_study
    from .backends import check_count, make_pool

    started = time.perf_counter()
    check_count(jobs, "--jobs (-j)", "processes")
    check_count(workers, "--workers (-w)", "threads per point")
    if not isinstance(study, Study):
        study = load_study(study)
    spec = study.sweep
    if spec is None:
        raise EddyhopError(f"study {study.source_path or study.title!r} has no [sweep] table; "
                           "run it with `eddyhop run`, or add a [sweep] table (see "
                           "docs/sweeps.md)")
    directory = _prepare_folder(out)
    points = spec.points()
    report = SweepReport(directory=directory, n_points=len(points))
    show = study.run.progress if progress is None else progress
    if not (directory / MANIFEST_NAME).exists():
        _refuse_foreign(directory)  # before the lock: a refused folder is left untouched
    with folder_lock(directory):
        manifest = Manifest.open_for_sweep(directory, spec, spec.fingerprint(), study)
        manifest.remove_stale_temporaries()
        report.recovered = manifest.adopt_written()
        todo = manifest.reconcile(retry_failed=retry_failed)
        manifest.save()
        report.redo_reasons = {k: v for k, v in todo.items() if v != "not yet computed"}
        report.skipped = [p.id for p in points if p.id not in todo
                          and manifest.entry(p.id)["status"] == "done"]
        report.failed = {p.id: manifest.entry(p.id)["error"] for p in points
                         if p.id not in todo and manifest.entry(p.id)["status"] == "failed"}
        queue = [p for p in points if p.id in todo]
        prepared = None
        if queue:
            from ..engine.runner import step_size_warnings

            pool = make_pool(backend, jobs=jobs, scheduler=scheduler, n_todo=len(queue),
                             timeout=timeout)
            report.backend, report.slots = pool.name, pool.slots
            try:
                if hasattr(pool, "start"):
                    pool.start()
                if pool.name not in ("serial", "threads"):
                    # local workers share this machine's kernel cache: warm it once per
                    # source version and first point; a cluster's machines may not share it
                    report.warm_seconds = warm_kernels(spec.point_document(queue[0]),
                                                       once=pool.name == "processes")
                threads = workers if workers is not None else (
                    study.run.workers if pool.name == "serial" else 1)
                # each point is analysed for the merge as soon as it is written, while the
                # other points compute (its file is read back, as merge_sweep would)
                prepared = {} if merge_to is not None else None
                with one_blas_thread():  # the analysis of written points runs beside kernels
                    _dispatch(pool, queue, spec, study, manifest, report, threads, show,
                              step_size_warnings, prepared)
            finally:
                pool.close()
        if merge_to is not None and manifest.counts()["done"]:
            from ..results.io import write_netcdf
            from .merge import merge_sweep
            from .merge_record import RECORD, merged_is_current, record_merge

            target = directory / MERGED_NAME if merge_to == "default" else Path(merge_to)
            # nothing computed and the file still is the merge of these points: keep it
            report.merge_reused = not queue and merged_is_current(manifest, target,
                                                                  summarize is not None)
            if report.merge_reused:
                report.summary = list(manifest.data[RECORD].get("summary") or [])
            else:
                from ..results.io import write_netcdf
                from .merge import merge_sweep

                merged = merge_sweep(directory, prepared=prepared)
                write_netcdf(merged, target)
                report.summary = list(summarize(merged)) if summarize is not None else []
                record_merge(manifest, target, report.summary if summarize else None)
                manifest.save()
            report.merged = target
    report.seconds = time.perf_counter() - started
    return report


BAR_FORMAT = ("{desc}: {n_fmt}/{total_fmt} points{postfix} |{bar}| "
              "[{elapsed} elapsed, ETA {remaining}]")


def progress_text(counts: dict) -> str:
    """The progress bar's postfix: ``done D, running R, failed F`` (manifest counts)."""
    return f"done {counts['done']}, running {counts['running']}, failed {counts['failed']}"


def _write_point(ds, point, manifest, seconds: float, messages: list) -> Path:
    """Write a point's file so that no kill can lose or double it: complete file under a
    temporary name → its checksum in the manifest → rename → marked done (see ``manifest``)."""
    from ..results.io import write_netcdf

    ds.attrs.update({
        "sweep_point": point.id,
        "sweep_parameters": json.dumps(point.values),
        "sweep_fingerprint": manifest.data["fingerprint"],
    })
    staged = write_netcdf(ds, manifest.staged_path(point.id))  # itself atomic
    path = manifest.point_path(point.id)
    try:
        manifest.mark_staged(point.id, sha256_file(staged), seconds, messages)
        manifest.save()
        _test_pause("staged", point.id)
        os.replace(staged, path)
    except BaseException:
        # Ctrl-C or an error before the rename: the point stays 'running' and is computed
        # again on resume (its recorded checksum matches no file), so the staged file goes
        with contextlib.suppress(FileNotFoundError):
            os.unlink(staged)
        raise
    _test_pause("renamed", point.id)
    manifest.mark_done(point.id, path)
    return path


def _dispatch(pool, queue, spec, study, manifest, report, threads, show, step_warnings,
              prepared=None):
    """Run the points of ``queue`` on ``pool``; record each outcome as it arrives.

    ``prepared``: a dict to fill with each written point's analysed Dataset for the merge
    (``merge.prepare_point``), or ``None``."""
    waiting = list(queue)
    running = {}

    def state() -> str:
        counts = manifest.counts()
        # failed in an earlier run and queued for a retry: not (yet) a failure of this run
        counts["failed"] -= sum(manifest.entry(p.id)["status"] == "failed" for p in waiting)
        return progress_text(counts)

    bar = None
    if show:
        from tqdm.auto import tqdm

        # n counts finished points (done or failed, also those finished by earlier runs); the
        # ETA is tqdm's, from the smoothed recent rate of points finished in this run
        bar = tqdm(total=report.n_points, initial=report.n_points - len(queue), unit="point",
                   desc="sweep", dynamic_ncols=True, smoothing=0.1, bar_format=BAR_FORMAT,
                   postfix=state())

    def show_state():
        if bar is not None:
            bar.set_postfix_str(state(), refresh=True)

    def started(point) -> None:
        waiting.remove(point)
        manifest.mark_running(point.id)
        manifest.save()
        _test_pause("running", point.id)
        running[point.id] = point
        show_state()

    def record(point, outcome) -> None:
        running.pop(point.id)
        if outcome["ok"]:
            messages = step_warnings(spec.point_study(point))
            _write_point(outcome["dataset"], point, manifest, outcome["seconds"], messages)
            report.computed.append(point.id)
            report.point_seconds.append(outcome["seconds"])
            report.failed.pop(point.id, None)
        else:
            manifest.mark_failed(point.id, outcome["error"], outcome["seconds"])
            report.failed[point.id] = outcome["error"]
            if bar is not None:
                bar.write(f"point {point.id} ({point.describe(spec.axes)}) failed: "
                          f"{outcome['error']}", file=sys.stderr)  # beside the bar
        manifest.save()
        if bar is not None:
            bar.update(1)
        show_state()
        if outcome["ok"] and prepared is not None:
            from .merge import prepare_point

            try:
                prepared[point.id] = prepare_point(manifest, point.id)
            except Exception:  # only a head start: merge_sweep reads it again and reports
                pass

    def payload(point) -> dict:
        return {"document": spec.point_document(point), "source_text": study.source_text,
                "source_path": study.source_path, "workers": threads}

    try:
        if getattr(pool, "chunked", False):
            _run_chunked(pool, queue, payload, started, record)
            return
        while waiting or running:
            while waiting and len(running) < pool.slots:
                point = waiting[0]
                started(point)
                pool.submit((point.index, point.id), compute_point, payload(point))
            (_, point_id), outcome = pool.next_done()
            record(running[point_id], outcome)
            raise_lost_ctrl_c()  # a Ctrl-C Python dropped ends the sweep here
    except BaseException:
        # interrupted (Ctrl-C, an I/O error): running points go back to pending
        pool.cancel()
        for point_id in running:
            manifest.mark_pending(point_id)
        with contextlib.suppress(Exception):
            manifest.save()
        raise
    finally:
        if bar is not None:
            bar.close()


def _run_chunked(pool, queue, payload, started, record) -> None:
    """The threads backend: every point's chunks on the pool's threads, in point order
    (``api.simulate_each``); outcomes are recorded here, in point order, while the threads
    already compute the following points."""
    from ..api import simulate_each
    from ..study.spec import parse_study

    clock = {}

    def studies():
        for point in queue:
            def make(point=point):
                started(point)
                clock[point.id] = time.perf_counter()
                data = payload(point)
                return parse_study(data["document"], source_text=data["source_text"],
                                   source_path=data["source_path"])
            yield point, make

    for point, result in simulate_each(studies(), pool=pool.chunks, allow_long=True):
        seconds = time.perf_counter() - clock.pop(point.id)
        if isinstance(result, Exception):
            outcome = {"ok": False, "error": f"{type(result).__name__}: {result}",
                       "seconds": seconds}
        else:
            outcome = {"ok": True, "dataset": result, "seconds": seconds}
        record(point, outcome)
