"""``chipflow size``: the width of a channel that gives a target wall shear."""

from __future__ import annotations

import json

import click

from chipflow.cli.common import QUANTITY, echo_table, fluid_options
from chipflow.design.sizing import size_channel
from chipflow.units import units_of

__all__ = ["command", "SI_UNITS"]

#: Keys of ``chipflow size --json`` and their SI units.
SI_UNITS = units_of(
    "width",
    "depth",
    "flow",
    "target_shear",
    "wall_shear_floor",
    "wall_shear_mean",
    "wall_shear_max",
    "mean_velocity",
    "max_velocity",
    "reynolds",
    "aspect_ratio",
    "viscosity",
    "density",
)

_ROWS = (
    ("width", "width", "um", 1e6),
    ("depth", "depth", "um", 1e6),
    ("aspect_ratio", "width / depth", "", 1.0),
    ("flow", "flow rate", "uL/min", 6e10),
    ("wall_shear_floor", "wall shear, floor centre", "Pa", 1.0),
    ("wall_shear_mean", "wall shear, mean", "Pa", 1.0),
    ("wall_shear_max", "wall shear, peak", "Pa", 1.0),
    ("mean_velocity", "mean velocity", "mm/s", 1e3),
    ("max_velocity", "peak velocity", "mm/s", 1e3),
    ("reynolds", "Reynolds number", "", 1.0),
    ("viscosity", "viscosity", "mPa*s", 1e3),
)


@click.command("size")
@click.option(
    "--flow", type=QUANTITY("flow"), required=True, help="Flow per channel, e.g. 2uL/min."
)
@click.option("--depth", type=QUANTITY("length"), required=True, help="Channel depth, e.g. 50um.")
@click.option("--shear", type=QUANTITY("pressure"), required=True, help="Target, e.g. 0.75Pa.")
@click.option(
    "--kind",
    type=click.Choice(["floor", "mean", "max"]),
    default="floor",
    show_default=True,
    help="Which wall shear the target means (floor: centre of the floor).",
)
@fluid_options
@click.option("--grid", type=QUANTITY("length"), help="Snap the width to this mask grid, e.g. 1um.")
@click.option("--json", "as_json", is_flag=True, help="Print SI values as one JSON object.")
def command(flow, depth, shear, kind, fluid, grid, as_json):
    """Width of a rectangular channel whose wall shear meets a target.

    Solves the exact duct series for the width, then prints the shear (floor centre, mean,
    peak) and velocities of that channel.

    \b
    Example:
      chipflow size --flow 2uL/min --depth 50um --shear 0.75Pa
    """
    values = size_channel(flow, depth, shear, fluid, kind, grid)
    if as_json:
        click.echo(json.dumps({**{k: values[k] for k in SI_UNITS}, "units": SI_UNITS}, indent=2))
        return
    echo_table([(label, f"{values[key] * scale:.4g}", unit) for key, label, unit, scale in _ROWS])
