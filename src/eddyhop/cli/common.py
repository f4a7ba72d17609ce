"""Shared CLI plumbing: the command list, error reporting and warning display."""

from __future__ import annotations

import functools
import importlib
import os
import sys
import warnings

import click

# Modules under eddyhop.cli that each define `command` (a click.Command).  Add one line to
# add a command.
COMMANDS = ["run", "demo", "validate", "info", "families", "plot", "report", "sweep", "merge",
            "analyse", "reference", "tracks", "cite", "compare"]


# set to any value to let unexpected exceptions through with their traceback
DEBUG_ENV = "EDDYHOP_DEBUG"


def load_commands(group: click.Group) -> None:
    for name in COMMANDS:
        module = importlib.import_module(f"eddyhop.cli.{name}")
        group.add_command(module.command)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    click.secho(f"warning: {message}", fg="yellow", err=True)


def _is_failed_computation(exc) -> bool:
    """A computation that ran and failed (exit 1), as opposed to bad input (exit 2)."""
    from ..errors import BlowUpError
    from ..reference.cell_problem import ReferenceConvergenceError

    return isinstance(exc, (BlowUpError, ReferenceConvergenceError))


def friendly_errors(function):
    """Turn the package's own errors into one clear line: exit code 2 for bad input, 1 for a
    computation that failed (a blow-up, a reference solve that does not converge); Ctrl-C
    into 130."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        from ..atomic import ctrl_c_remembered
        from ..errors import EddyhopError

        previous = warnings.showwarning
        warnings.showwarning = _show_warning
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("once")
                warnings.showwarning = _show_warning
                try:
                    return function(*args, **kwargs)
                except Exception:
                    if ctrl_c_remembered():  # a consequence of the Ctrl-C, not a failure
                        raise KeyboardInterrupt from None
                    raise
        except EddyhopError as exc:
            click.secho(f"error: {exc}", fg="red", err=True)
            sys.exit(1 if _is_failed_computation(exc) else 2)
        except KeyboardInterrupt:
            click.secho("interrupted: nothing was written", fg="red", err=True)
            sys.exit(130)
        except OSError as exc:  # a file the system refuses: permissions, full disk, …
            if os.environ.get(DEBUG_ENV):
                raise
            name = str(exc.filename) if getattr(exc, "filename", None) else ""
            name = name if len(name) <= 80 else name[:60] + "…" + name[-15:]
            where = f": {name!r}" if name else ""
            click.secho(f"error: {exc.strerror or exc}{where}", fg="red", err=True)
            sys.exit(2)
        except MemoryError:
            if os.environ.get(DEBUG_ENV):
                raise
            click.secho("error: out of memory; reduce the run's size (particles, n_times, "
                        "tracked, modes)", fg="red", err=True)
            sys.exit(1)
        except Exception as exc:  # last resort: a bug must not print a traceback at a user
            if os.environ.get(DEBUG_ENV):
                raise
            text = " ".join(str(exc).split())[:300]
            click.secho(f"error: internal error ({type(exc).__name__}: {text}); this is a bug "
                        f"in eddyhop: please report it (set {DEBUG_ENV}=1 for the traceback)",
                        fg="red", err=True)
            sys.exit(1)
        finally:
            warnings.showwarning = previous

    return wrapper


MAX_THREADS = 256


def check_workers(ctx, param, value):
    """-1 (every core) or 1 … MAX_THREADS threads; anything else is one clear error line."""
    if value is None or value == -1 or 1 <= value <= MAX_THREADS:
        return value
    refuse(f"--workers (-w) = {value} is not allowed: give -1 for every core or 1 to "
           f"{MAX_THREADS} threads")


def refuse(message: str) -> None:
    """One error line and exit status 2 (for checks made while options are parsed)."""
    click.secho(f"error: {message}", fg="red", err=True)
    sys.exit(2)


def finite_option_check(low=None, high=None, low_open=False, high_open=False):
    """A click callback refusing NaN, infinities and values outside [low, high] (open ends
    as given) with one line naming the option, the value and the allowed range."""
    import math

    def check(ctx, param, value):
        if value is None:
            return value
        for item in (value if isinstance(value, tuple) else (value,)):
            bad = not math.isfinite(item)
            bad = bad or (low is not None and (item <= low if low_open else item < low))
            bad = bad or (high is not None and (item >= high if high_open else item > high))
            if bad:
                from ..errors import range_text

                allowed = range_text(-math.inf if low is None else low,
                                     math.inf if high is None else high, low_open, high_open)
                refuse(f"{param.opts[0]} = {item!r} is not allowed: give a finite number in "
                       f"{allowed}")
        return value

    return check


def workers_option(function):
    return click.option("--workers", "-w", type=int, default=None, callback=check_workers,
                        help="Parallel workers (threads); -1 uses every core. Never changes "
                             "the numbers, only the speed. [default: the study's run.workers]")(
        function)


def progress_option(function):
    return click.option("--progress/--no-progress", default=None,
                        help="Show a progress bar. [default: the study's run.progress]")(function)


def replace_option(function):
    return click.option("--replace", is_flag=True,
                        help="Allow replacing an existing file that is not an output of this "
                             "command's kind, or a default-named output that exists. Never "
                             "allows writing over an input or a sweep folder's own files.")(
        function)


def allow_long_option(function):
    return click.option("--allow-long", is_flag=True,
                        help="Run even if the estimated CPU time exceeds 24 h (the soft "
                             "limit). The memory limit (the machine's available memory) "
                             "is never lifted.")(function)
