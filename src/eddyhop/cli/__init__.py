"""Command-line entry point: assembles the commands; each lives in its own module.

Nothing heavy is imported here, so ``eddyhop --help`` answers at once; commands import the
Python API when they run.

Stage 11, the last.  May import every stage; nothing imports it (but ``eddyhop.__main__``).
"""

from __future__ import annotations

import click

from .common import COMMANDS, load_commands

HELP = """Noisy tracer ensembles in cellular and jet flows.

\b
A study file (TOML) names a flow family, the noise (Péclet number or κ),
start regions and the run's numerics.  Typical session:
  eddyhop families                 what flows, integrators and starts exist
  eddyhop validate study.toml      check a study without running it
  eddyhop run study.toml --out r.nc
  eddyhop info r.nc                summary of a result file
  eddyhop demo --out demo.nc       run the built-in demo study
"""


@click.group(help=HELP, context_settings={"help_option_names": ["-h", "--help"],
                                          "max_content_width": 100})
@click.version_option(package_name="eddyhop", prog_name="eddyhop")
def main():
    pass


load_commands(main)


def entry(argv=None):
    """The console script: ``main`` with exit status 130 for Ctrl-C at any moment.

    Click alone turns a Ctrl-C outside a command's body (while parsing, or while a command
    module is imported) into "Aborted!" and status 1, and one that arrives after the command
    has finished (while the interpreter shuts down its thread pools) kills the process with
    the signal.  Here Ctrl-C before the end is status 130; after the command has ended it is
    ignored, so a finished command keeps its own status.
    """
    import sys

    try:  # the imports too: a Ctrl-C during them is an interrupted command like any other
        import signal

        from .._jit import rare_full_collections
        from ..atomic import remember_ctrl_c

        remember_ctrl_c()  # no Ctrl-C lost where Python drops exceptions (see there)

        # a command is one short process: its start-up imports (numba, xarray, pandas) build
        # ≈ 10⁵ long-lived objects, and every full collection meanwhile walks them all
        with rare_full_collections():
            result = main.main(args=argv, prog_name="eddyhop", standalone_mode=False)
        code = result if isinstance(result, int) else 0
    except (KeyboardInterrupt, click.exceptions.Abort):
        click.echo("interrupted", err=True)
        code = 130
    except click.ClickException as exc:
        exc.show()
        code = exc.exit_code
    except SystemExit as exc:
        code = exc.code
    import signal  # bound already unless the Ctrl-C came during its own import

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _skip_final_collection()
    sys.exit(code)


def _skip_final_collection() -> None:
    """At interpreter exit, leave the objects that exist now out of the final garbage
    collection (``gc.freeze``).

    Python's shutdown walks every object left in a reference cycle — after a run, the object
    graphs of numba's type system, xarray and pandas — only to free memory the operating
    system is about to take back: ≈ 0.15 s of CPU at the end of a tiny ``eddyhop run``.  The
    command has closed and renamed its files by now; exit handlers (``atexit``,
    ``weakref.finalize``: temporary folders) still run, and objects freed by reference count
    are freed as before.  Registered as an exit hook, so it acts only when the process ends."""
    import atexit
    import gc

    atexit.register(gc.freeze)


__all__ = ["COMMANDS", "entry", "main"]
