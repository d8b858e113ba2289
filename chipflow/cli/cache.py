"""``chipflow cache``: where the field cache is, what it holds; empty it."""

from __future__ import annotations

import click

from chipflow.field.cache import cache_info, clear_cache

__all__ = ["command"]


@click.group("cache")
def command() -> None:
    """Show or empty the cache of solved junction and piece fields.

    Each distinct junction is solved in 2D once and kept in the cache folder, so a second
    build of a design solves none. The environment variable CHIPFLOW_FIELD_CACHE names
    another folder, or `off` to solve every time.

    \b
    Example:
      chipflow cache info && chipflow cache clear
    """


def _folder(doing: str):
    """The cache folder, or None after saying that the cache is off."""
    found = cache_info()
    if found.folder is None:
        click.echo(f"field cache: off (CHIPFLOW_FIELD_CACHE=off){doing}")
    return found


@command.command("info")
def info() -> None:
    """Print the cache folder, its entries and their size.

    \b
    Example:
      chipflow cache info
    """
    found = _folder("")
    if found.folder is not None:
        click.echo(f"field cache: {found.folder}")
        click.echo(f"entries: {found.entries}, {found.size / 1024:.1f} kB")


@command.command("clear")
def clear() -> None:
    """Remove every entry of the field cache.

    \b
    Example:
      chipflow cache clear
    """
    found = _folder(", nothing to clear")
    if found.folder is not None:
        click.echo(f"removed {clear_cache()} entries from {found.folder}")
