"""The command line's two doors: ``python -m eddyhop`` and the ``eddyhop`` console script.

Both go through :func:`console`, which guards the import of the command line itself, so a
Ctrl-C at any moment after the interpreter has started ends the command with the line
"interrupted" and status 130, never a traceback.  Only ``eddyhop/__init__.py`` (a few
milliseconds, nothing heavy) is imported before the guard.

One difference between the doors, CPython's own: under ``python -m``, once a Ctrl-C has
passed through code compiled from a string (``exec``, as ``collections.namedtuple`` and
numba's templates use), the interpreter ends the process by SIGINT after the exit handlers
have run, instead of with status 130.  Shells report both as status 130; a caller that reads
the raw status sees ``-2`` (Python's ``subprocess``) or "killed by SIGINT".  The console
script always exits 130.
"""

import sys


def console():
    """Run the command line (``eddyhop.cli.entry``); Ctrl-C while it is imported exits 130."""
    try:
        from eddyhop.cli import entry
    except KeyboardInterrupt:
        sys.stderr.write("interrupted\n")
        sys.exit(130)
    entry()


if __name__ == "__main__":
    console()
