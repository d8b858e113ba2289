"""``chipflow new``: write a commented starter design file, or a copy of a bundled design."""

from __future__ import annotations

import click

from chipflow.spec.bundled import copy_bundled
from chipflow.spec.starter import write_starter

__all__ = ["command"]


@click.command("new")
@click.argument("name")
@click.option(
    "--from",
    "design",
    metavar="DESIGN",
    help="Copy this bundled design (see `chipflow designs`) instead of the starter.",
)
def command(name: str, design: str | None) -> None:
    """Write NAME.toml, a commented starter design that builds as it is (or a bundled one).

    \b
    Examples:
      chipflow new liver-bed && chipflow build liver-bed.toml
      chipflow new my-loop --from bench_loop_network && chipflow check my-loop.toml
    """
    path = write_starter(name) if design is None else copy_bundled(design, name)
    click.echo(f"wrote {path}; edit it, then run: chipflow build {path}")
