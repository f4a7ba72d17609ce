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

__all__ = ["COMMANDS", "main"]
