"""Pieces shared by the commands: quantity options and plain-text tables."""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence

import click

from chipflow.errors import UnitError
from chipflow.limits import check_value
from chipflow.physics.fluid import fluid_preset
from chipflow.report.console import format_table
from chipflow.units import KINDS, to_si

__all__ = [
    "QUANTITY",
    "WHOLE",
    "echo_table",
    "format_table",
    "fluid_options",
    "settings_option",
]


class QUANTITY(click.ParamType):
    """A click option type that reads a quantity with units into an SI float.

    ``QUANTITY("length")`` accepts ``200um``, ``0.2 mm``, ... and rejects ``200`` (no unit)
    or ``5uL/min`` (wrong kind) with one clear line. Values must be greater than zero unless
    ``positive=False``, and within the plausible range of the option (:mod:`chipflow.limits`,
    looked up by the option's name: ``--width`` is a channel width, ``--punch`` a punch).
    """

    def __init__(self, kind: str, positive: bool = True) -> None:
        self.kind = kind
        self.positive = positive
        self.name = KINDS[kind].label

    def convert(self, value, param, ctx):
        if isinstance(value, float):
            return value
        where = f"--{param.name}" if param else ""
        try:
            si = to_si(value, self.kind, where=where)
            if self.positive and not si > 0:
                self.fail(f"must be greater than zero, got {value!r}", param, ctx)
            check_value(si, self.kind, key=param.name if param else "", where=where, raw=value)
        except UnitError as exc:
            self.fail(str(exc), param, ctx)
        return si


class WHOLE(click.ParamType):
    """A whole-number option held to its range in :mod:`chipflow.limits` (``--seed``,
    ``--samples``, ``--workers``), refused in one line with the range."""

    name = "integer"

    def convert(self, value, param, ctx):
        if isinstance(value, int) and not isinstance(value, bool):
            number = value
        else:
            try:
                number = int(str(value).strip().replace("_", ""))
            except ValueError:
                self.fail(f"expected a whole number, got {value!r}", param, ctx)
        where = f"--{param.name}" if param else ""
        try:
            check_value(number, "whole", key=param.name if param else "", where=where)
        except UnitError as exc:
            self.fail(str(exc), param, ctx)
        return number


def echo_table(
    rows: Sequence[Sequence[str]], header: Sequence[str] | None = None, align: str | None = None
) -> None:
    """Print :func:`format_table` to stdout."""
    click.echo(format_table(rows, header, align))


def fluid_options(command: Callable) -> Callable:
    """Add ``--fluid``, ``--temperature`` and ``--viscosity``; pass the command a ``fluid``."""

    @click.option(
        "--fluid",
        "fluid_name",
        type=click.Choice(["medium", "water"]),
        default="medium",
        show_default=True,
    )
    @click.option(
        "--temperature", type=QUANTITY("temperature"), help="Default 37degC (20 for water)."
    )
    @click.option("--viscosity", type=QUANTITY("viscosity"), help="Override, e.g. 0.95mPa*s.")
    @functools.wraps(command)
    def with_fluid(*args, fluid_name, temperature, viscosity, **kwargs):
        return command(*args, fluid=fluid_preset(fluid_name, temperature, viscosity), **kwargs)

    return with_fluid


def settings_option(command: Callable) -> Callable:
    """Add ``--set KEY=VALUE`` (repeatable): pass the command ``settings``, a tuple of texts."""
    return click.option(
        "--set",
        "settings",
        multiple=True,
        metavar="KEY=VALUE",
        help="Change one design-file value for this run, exactly as editing the file would "
        "(dotted key as in `chipflow sweep --vary`, e.g. tree.flow=8uL/min); repeatable.",
    )(command)
