"""Atomic files: a written file appears whole or not at all, and Ctrl-C never leaves half of one.

Core module (imports nothing of the package): results, sweeps, figures and the flows' on-disk
Stokes-solution cache all write through :func:`atomic_path` / :func:`atomic_write_text`.
``eddyhop.results.io`` re-exports these names.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


class _DeferredInterrupt:
    """State of one :func:`interrupts_deferred` section (see there)."""

    def __init__(self):
        self.pending = False

    def check(self) -> None:
        """Raise the held Ctrl-C now, at a point where unwinding is safe."""
        if self.pending:
            self.pending = False
            raise KeyboardInterrupt


_DEFERRED: list[_DeferredInterrupt] = []


@contextlib.contextmanager
def interrupts_deferred():
    """Hold Ctrl-C (SIGINT) during a short critical section such as a netCDF write.

    A KeyboardInterrupt raised asynchronously inside the netCDF/HDF5 close can leave the
    library's internal lock held, and the clean-up that follows then waits on it for ever (the
    process keeps the sweep folder's lock until killed).  Inside this section SIGINT only sets
    a flag; the section calls ``check()`` where unwinding is safe, and on leaving the previous
    handler is restored and a SIGINT still held is delivered to it (KeyboardInterrupt by
    default).  Only the main thread can own signal handlers: elsewhere this is a no-op, and a
    nested section shares the outer one's state."""
    import signal
    import threading

    if _DEFERRED or threading.current_thread() is not threading.main_thread():
        yield _DEFERRED[-1] if _DEFERRED else _DeferredInterrupt()
        return
    state = _DeferredInterrupt()

    def hold(signum, frame):
        state.pending = True

    try:
        previous = signal.signal(signal.SIGINT, hold)
    except (ValueError, OSError):  # no signal support here (embedded interpreter)
        yield state
        return
    _DEFERRED.append(state)
    try:
        yield state
    finally:
        _DEFERRED.pop()
        signal.signal(signal.SIGINT, previous)
    if state.pending:
        if callable(previous):
            previous(signal.SIGINT, None)
        elif previous == signal.SIG_DFL:
            raise KeyboardInterrupt


class _RememberedCtrlC:
    """Whether the command line's SIGINT handler has seen a Ctrl-C not yet re-raised."""

    seen = False


def remember_ctrl_c() -> None:
    """Install the command line's SIGINT handler (main thread; a command's first act).

    Like Python's own handler it raises KeyboardInterrupt, and it also remembers the Ctrl-C.
    Python drops a KeyboardInterrupt that is raised where exceptions cannot propagate — in a
    ``__del__`` or in a callback from C (llvmlite's finalisers and object-cache hooks while
    kernels load), after which the command ran on to the end.  A remembered Ctrl-C is raised
    again by :func:`raise_lost_ctrl_c` where the work goes on.  Only the command line
    installs it: in a notebook Ctrl-C keeps Python's handler, and nothing is remembered."""
    import signal
    import sys

    _RememberedCtrlC.seen = False

    def remembering_handler(signum, frame):
        _RememberedCtrlC.seen = True
        raise KeyboardInterrupt

    def quiet_about_dropped_ctrl_c(unraisable):
        # Python would print "Exception ignored in …" and a traceback; the Ctrl-C is
        # remembered and ends the command at the next check instead
        if not isinstance(unraisable.exc_value, KeyboardInterrupt):
            sys.__unraisablehook__(unraisable)

    signal.signal(signal.SIGINT, remembering_handler)
    sys.unraisablehook = quiet_about_dropped_ctrl_c


def ctrl_c_remembered() -> bool:
    """Whether :func:`remember_ctrl_c`'s handler has seen a Ctrl-C not yet re-raised: an
    error that follows one is reported as the interruption it is (a KeyboardInterrupt inside
    an import made by C code arrives as an ImportError)."""
    return _RememberedCtrlC.seen


def raise_lost_ctrl_c() -> None:
    """Raise KeyboardInterrupt (once) if :func:`remember_ctrl_c`'s handler saw a Ctrl-C whose
    KeyboardInterrupt was dropped.  Called where work goes on: before each chunk's output is
    folded, before a written file is renamed into place.

    Does nothing outside the main thread, and nothing while an exception is being handled: a
    KeyboardInterrupt that propagated normally is then on its way out, and the clean-up it
    runs (a sweep saving its manifest) must not be interrupted a second time."""
    import sys
    import threading

    if (_RememberedCtrlC.seen and sys.exc_info()[1] is None
            and threading.current_thread() is threading.main_thread()):
        _RememberedCtrlC.seen = False
        raise KeyboardInterrupt


def _pid_alive(pid: int) -> bool:
    """True unless no process ``pid`` exists (a process of another user counts as alive)."""
    if pid <= 0:
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # EPERM: it exists, owned by someone else
        return True
    return True


def stale_temporaries(path, suffix: str = ".part") -> list[Path]:
    """Temporary files of ``path`` (named by :func:`atomic_path`: ``.NAME.PID-XXXX.part``)
    whose writer process no longer exists: left by a run killed with SIGKILL/SIGTERM.  A file
    of a live process (including this one) is never listed, nor any file of another name."""
    import re

    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    pattern = re.compile(rf"\.{re.escape(path.name)}\.(\d+)-[A-Za-z0-9_]+{re.escape(suffix)}")
    found = []
    try:
        names = os.listdir(directory)
    except OSError:
        return found
    for name in names:
        match = pattern.fullmatch(name)
        if match and not _pid_alive(int(match.group(1))):
            found.append(directory / name)
    return sorted(found)


def remove_stale_temporaries(path, suffix: str = ".part") -> list[Path]:
    """Delete the :func:`stale_temporaries` of ``path``; returns those removed."""
    removed = []
    for stale in stale_temporaries(path, suffix):
        with contextlib.suppress(FileNotFoundError, IsADirectoryError, PermissionError):
            stale.unlink()
            removed.append(stale)
    return removed


@contextlib.contextmanager
def atomic_path(path, suffix: str = ".part"):
    """Yield a temporary path beside ``path``; on success it is flushed, given the permissions
    a plain ``open()`` would give (mkstemp makes 0600), and renamed onto ``path``.  On any
    error or interrupt the temporary file is removed, so no partial file is ever left.

    The temporary is named ``.NAME.PID-XXXX.part`` (PID: the writer's process id), so that the
    next write of the same ``path`` removes temporaries left by a killed writer
    (:func:`remove_stale_temporaries`) and never those of a live one.  Ctrl-C is held during
    the write (:func:`interrupts_deferred`): it abandons the write (temporary removed, target
    untouched) as soon as the writer returns, never inside the netCDF library."""
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    remove_stale_temporaries(path, suffix)
    with interrupts_deferred() as interrupt:
        handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}-",
                                             suffix=suffix, dir=directory)
        os.close(handle)
        try:
            yield temporary
            interrupt.check()  # Ctrl-C during the write: abandon it before the rename
            raise_lost_ctrl_c()  # and one Python dropped earlier (a command line's Ctrl-C)
            with open(temporary, "rb+") as stream:
                os.fsync(stream.fileno())
            mask = os.umask(0)
            os.umask(mask)
            os.chmod(temporary, 0o666 & ~mask)
            os.replace(temporary, path)
            _sync_directory(directory)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(temporary)
            raise


def _sync_directory(directory) -> None:
    """Make the rename itself durable (POSIX); a no-op where directories cannot be opened."""
    with contextlib.suppress(OSError):
        descriptor = os.open(directory, os.O_RDONLY)
        try:
            os.fsync(descriptor)
        finally:
            os.close(descriptor)


def atomic_write_text(path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    with atomic_path(path) as temporary, open(temporary, "w", encoding="utf-8") as stream:
        stream.write(text)
    return Path(path)
