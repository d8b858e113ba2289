"""``chipflow new``: write a commented starter design file that builds as it is."""

from __future__ import annotations

import click

from chipflow.spec.starter import write_starter

__all__ = ["command"]


@click.command("new")
@click.argument("name")
def command(name: str) -> None:
    """Write NAME.toml, a commented starter design that builds as it is.

    \b
    Example:
      chipflow new liver-bed && chipflow build liver-bed.toml
    """
    path = write_starter(name)
    click.echo(f"wrote {path}; edit it, then run: chipflow build {path}")
