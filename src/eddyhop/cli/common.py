"""Shared CLI plumbing: the command list, error reporting and warning display."""

from __future__ import annotations

import functools
import importlib
import sys
import warnings

import click

# Modules under eddyhop.cli that each define `command` (a click.Command).  Add one line to
# add a command.
COMMANDS = ["run", "demo", "validate", "info", "families", "plot", "report", "sweep", "merge",
            "analyse", "reference"]


def load_commands(group: click.Group) -> None:
    for name in COMMANDS:
        module = importlib.import_module(f"eddyhop.cli.{name}")
        group.add_command(module.command)


def _show_warning(message, category, filename, lineno, file=None, line=None):
    click.secho(f"warning: {message}", fg="yellow", err=True)


def friendly_errors(function):
    """Turn the package's own errors into one clear line and exit code 2; Ctrl-C into 130."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        from ..errors import EddyhopError

        previous = warnings.showwarning
        warnings.showwarning = _show_warning
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("once")
                warnings.showwarning = _show_warning
                return function(*args, **kwargs)
        except EddyhopError as exc:
            click.secho(f"error: {exc}", fg="red", err=True)
            sys.exit(2)
        except KeyboardInterrupt:
            click.secho("interrupted: nothing was written", fg="red", err=True)
            sys.exit(130)
        finally:
            warnings.showwarning = previous

    return wrapper


def workers_option(function):
    return click.option("--workers", "-w", type=int, default=None,
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
