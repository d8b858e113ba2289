"""Pieces shared by the commands: quantity options and plain-text tables."""

from __future__ import annotations

from collections.abc import Sequence

import click

from chipflow.errors import UnitError
from chipflow.units import KINDS, to_si

__all__ = ["QUANTITY", "echo_table", "format_table"]


class QUANTITY(click.ParamType):
    """A click option type that reads a quantity with units into an SI float.

    ``QUANTITY("length")`` accepts ``200um``, ``0.2 mm``, ... and rejects ``200`` (no unit)
    or ``5uL/min`` (wrong kind) with one clear line. Values must be greater than zero unless
    ``positive=False``.
    """

    def __init__(self, kind: str, positive: bool = True) -> None:
        self.kind = kind
        self.positive = positive
        self.name = KINDS[kind].label

    def convert(self, value, param, ctx):
        if isinstance(value, float):
            return value
        try:
            si = to_si(value, self.kind, where=f"--{param.name}" if param else "")
        except UnitError as exc:
            self.fail(str(exc), param, ctx)
        if self.positive and not si > 0:
            self.fail(f"must be greater than zero, got {value!r}", param, ctx)
        return si


def format_table(rows: Sequence[Sequence[str]], header: Sequence[str] | None = None) -> str:
    """Left-align the first column, right-align the others.

    >>> print(format_table([("flow", "5", "uL/min")], ("quantity", "value", "unit")))
    quantity  value  unit
    flow          5  uL/min
    """
    table = [tuple(header)] + [tuple(r) for r in rows] if header else [tuple(r) for r in rows]
    widths = [max(len(row[i]) for row in table) for i in range(len(table[0]))]
    lines = []
    for row in table:
        cells = [row[0].ljust(widths[0])] + [
            cell.rjust(widths[i]) if i < len(row) - 1 else cell.ljust(widths[i])
            for i, cell in enumerate(row) if i > 0
        ]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines)


def echo_table(rows: Sequence[Sequence[str]], header: Sequence[str] | None = None) -> None:
    """Print :func:`format_table` to stdout."""
    click.echo(format_table(rows, header))
