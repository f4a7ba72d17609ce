"""``eddyhop cite``: how to cite eddyhop and the published methods a result used."""

from __future__ import annotations

import click

from .common import friendly_errors


@click.command("cite")
@click.argument("result", required=False, type=click.Path(dir_okay=False))
@click.option("--format", "fmt", type=click.Choice(["bibtex", "cff", "text"]),
              default="bibtex", show_default=True,
              help="BibTeX entries, the CITATION.cff text, or plain text.")
@friendly_errors
def command(result, fmt):
    """Print the citation of the installed eddyhop; given a RESULT file, the citation
    of the eddyhop version that wrote it and of the published methods it used
    (integrator, random numbers, cell problem, regime criterion, ...).

    \b
    Examples:  eddyhop cite
               eddyhop cite lattice.analysed.nc --format text
    """
    from ..results.citation import cite_text

    attrs = None
    if result is not None:
        from ..results.io import open_result, require_kind

        attrs = require_kind(open_result(result), result, ("monte_carlo", "reference", "sweep"),
                             "cite").attrs
    click.echo(cite_text(attrs, fmt=fmt), nl=False)
