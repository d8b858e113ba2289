"""Pieces shared by the commands: quantity options and plain-text tables."""

from __future__ import annotations

from collections.abc import Sequence

import click

from chipflow.errors import UnitError
from chipflow.report.console import format_table
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


def echo_table(rows: Sequence[Sequence[str]], header: Sequence[str] | None = None) -> None:
    """Print :func:`format_table` to stdout."""
    click.echo(format_table(rows, header))
