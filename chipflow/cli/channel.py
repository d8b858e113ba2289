"""``chipflow channel``: the flow in one straight channel or tube."""

from __future__ import annotations

import json

import click

from chipflow import display
from chipflow.checks.conditions import channel_warnings
from chipflow.cli.common import QUANTITY, echo_table, fluid_options
from chipflow.errors import SpecError
from chipflow.physics.duct import DuctFlow, flow_state, resistance
from chipflow.physics.fluid import Fluid
from chipflow.units import units_of

__all__ = ["command", "channel_report", "SI_UNITS"]

#: Keys of ``chipflow channel --json`` and their SI units.
SI_UNITS = units_of(
    "hydraulic_resistance",
    "flow",
    "pressure_drop",
    "mean_velocity",
    "max_velocity",
    "wall_shear_floor",
    "wall_shear_mean",
    "wall_shear_max",
    "reynolds",
    "hydraulic_diameter",
    "residence_time",
    "entrance_length",
    "viscosity",
    "density",
)


def channel_report(
    width: float,
    depth: float,
    length: float,
    fluid: Fluid,
    flow: float | None = None,
    pressure: float | None = None,
    round: bool = False,
) -> dict[str, float]:
    """SI values for one channel driven by a flow [m^3/s] or a pressure drop [Pa].

    Parameters
    ----------
    width, depth, length : float
        Channel geometry [m] (a round tube: ``width == depth ==`` inner diameter).
    fluid : Fluid
        The liquid.
    flow : float, optional
        Imposed flow rate [m^3/s].
    pressure : float, optional
        Imposed pressure drop [Pa]; exactly one of ``flow`` and ``pressure`` is given.

    Returns
    -------
    dict
        The keys of :data:`SI_UNITS` plus ``wall_shear_floor`` [Pa], in SI units.
    """
    if (flow is None) == (pressure is None):
        raise SpecError("give exactly one of --flow and --pressure")
    if flow is None:
        flow = pressure / resistance(width, depth, length, fluid.viscosity, round)
    state: DuctFlow = flow_state(width, depth, length, flow, fluid.viscosity, fluid.density, round)
    values = {key: float(getattr(state, key)) for key in SI_UNITS if hasattr(state, key)}
    values["hydraulic_resistance"] = float(state.resistance)
    values["viscosity"] = fluid.viscosity
    values["density"] = fluid.density
    values["wall_shear_floor"] = float(state.wall_shear_floor)
    return values


#: The table's rows: key, label, and the kind of quantity (its unit chosen by its magnitude,
#: :func:`chipflow.display.quantity`) or a fixed unit with its scale.
_LAB_ROWS = (
    ("hydraulic_resistance", "hydraulic resistance", ("Pa*s/uL", 1e-9)),
    ("flow", "flow rate", "flow"),
    ("pressure_drop", "pressure drop", "pressure"),
    ("mean_velocity", "mean velocity", "velocity"),
    ("max_velocity", "peak velocity", "velocity"),
    ("wall_shear_floor", "wall shear, floor centre", "shear"),
    ("wall_shear_mean", "wall shear, mean", "shear"),
    ("wall_shear_max", "wall shear, peak", "shear"),
    ("reynolds", "Reynolds number", ("", 1.0)),
    ("hydraulic_diameter", "hydraulic diameter", "width"),
    ("residence_time", "residence time", "time"),
    ("entrance_length", "entrance length", "length"),
    ("viscosity", "viscosity", ("mPa*s", 1e3)),
    ("density", "density", ("kg/m^3", 1.0)),
)


def _lab_row(label: str, value: float, how) -> tuple[str, str, str]:
    if isinstance(how, str):
        number, unit = display.quantity(value, how, 4).split(" ", 1)
        return label, number, unit
    unit, scale = how
    return label, display.number(value * scale), unit


@click.command("channel")
@click.option("--width", type=QUANTITY("length"), help="Channel width, e.g. 200um.")
@click.option("--depth", type=QUANTITY("length"), help="Channel depth, e.g. 50um.")
@click.option(
    "--diameter",
    type=QUANTITY("length"),
    help="Round tube: inner diameter, e.g. 0.5mm (instead of --width and --depth).",
)
@click.option("--length", type=QUANTITY("length"), required=True, help="Length, e.g. 10mm.")
@click.option("--flow", type=QUANTITY("flow"), help="Imposed flow rate, e.g. 5uL/min.")
@click.option("--pressure", type=QUANTITY("pressure"), help="Imposed pressure drop, e.g. 2kPa.")
@fluid_options
@click.option("--json", "as_json", is_flag=True, help="Print SI values as one JSON object.")
def command(width, depth, diameter, length, flow, pressure, fluid, as_json):
    """Flow, pressure, velocity and wall shear in one straight channel.

    \b
    Examples:
      chipflow channel --width 200um --depth 50um --length 10mm --flow 5uL/min
      chipflow channel --diameter 0.5mm --length 30cm --flow 5uL/min

    Warnings follow the table (in --json: a "warnings" list): a Reynolds number above 100 or
    above the laminar limit, an entrance length over 10 % of the channel or longer than it,
    a fluid temperature outside 15-40 degC.
    """
    round_tube = diameter is not None
    if round_tube:
        if width is not None or depth is not None:
            raise SpecError("a tube is given by --diameter alone: leave out --width and --depth")
        width = depth = diameter
    elif width is None or depth is None:
        raise SpecError(
            "give --width and --depth for a rectangular channel, or --diameter for a tube"
        )
    values = channel_report(
        width,
        depth,
        length,
        fluid,
        flow,
        pressure,
        round_tube,
    )
    warnings = channel_warnings(
        values["reynolds"], values["entrance_length"], length, fluid.temperature
    )
    if as_json:
        out = {key: values[key] for key in SI_UNITS}
        click.echo(json.dumps({**out, "units": SI_UNITS, "warnings": warnings}, indent=2))
        return
    rows = [_lab_row(label, values[key], how) for key, label, how in _LAB_ROWS]
    rows.insert(6, ("", display.number(values["wall_shear_floor"] * 10), "dyn/cm^2"))
    echo_table(rows)
    for line in warnings:
        click.echo(f"warning: {line}")
