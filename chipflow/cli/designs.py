"""``chipflow designs``: list the design files installed with chipflow."""

from __future__ import annotations

import click

from chipflow.cli.common import echo_table
from chipflow.spec.bundled import bundled_designs

__all__ = ["command"]


@click.command("designs")
def command() -> None:
    """List the bundled designs, one line each.

    Any command that takes a design file also takes a bundled design's name; copy one to edit
    with `chipflow new NAME --from DESIGN`.

    \b
    Example:
      chipflow designs && chipflow check bench_loop_network
    """
    echo_table([(d.name, d.summary) for d in bundled_designs()], align="ll")
