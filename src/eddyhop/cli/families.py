"""``eddyhop families``: what the package can simulate."""

from __future__ import annotations

import click


@click.command("families")
def command():
    """List flow families with their parameters, the integrators and start regions."""
    from ..engine.integrators import SCHEME_CONDITIONS, SCHEME_ORDERS
    from ..flows import FAMILIES
    from ..starts import KINDS

    click.echo("Flow families ([flow] family = ...):")
    for family in FAMILIES.values():
        click.echo("  " + family.describe().replace("\n", "\n  "))
    click.echo("\nIntegrators ([run] integrator = ...), strong / weak order:")
    for name, (strong, weak) in SCHEME_ORDERS.items():
        click.echo(f"  {name:<16} {strong:g} / {weak:g}   ({SCHEME_CONDITIONS[name]})")
    click.echo("\nStart regions ([[start]] kind = ...): " + ", ".join(KINDS))
