"""Time-varying operation in design files: pulsatile supplies, soft walls, reservoirs, rockers.

Tree designs say it in ``[supply]`` (see :mod:`chipflow.spec.supply` for the steady keys):

.. code-block:: toml

    [supply]
    inlet = "peristaltic"          # a roller pump: a pulse per roller passage
    flow = "12 uL/min"             # mean flow (default [tree].flow)
    rpm = 10                       # head speed [1/min]
    rollers = 3
    pulsation = 0.3                # amplitude of the pulse / mean flow, or:
    # waveform = "pump.csv"        # one measured period: 'time [s],flow [uL/min]'

    # inlet = "pulsatile-pressure": pressure (mean), pressure_amplitude, frequency
    # inlet = "reservoir" with reservoir_area: the reservoir drains (outlet_area for an
    #   outlet reservoir that fills; refill_interval, default 1 day)
    # inlet = "rocker": tilt_angle ("15 deg"), period, reservoir_spacing, reservoir_area, head

    tubing_outer_diameter = "1.6 mm"   # elastic tubing: outer diameter and modulus
    tubing_modulus = "2 MPa"

    [supply.damper]                # a pulsation damper at the chip's inlet port, one of:
    air_volume = "100 uL"          # trapped air at the mean pressure (isothermal)
    # compliance = "1e-12 m^3/Pa"  # a lumped compliance
    # target_pulsation = "5 %"     # chipflow sizes the smallest air volume that brings the
                                   # seeded levels' floor-shear pulsation down to it

Explicit networks give ``amplitude`` and ``frequency`` on a ``[[ports]]`` entry (a
sinusoidal pulsation of its flow or pressure), ``area`` on a ``head`` port (a draining
reservoir), and ``[[compliances]]`` with ``node`` and ``air_volume`` (trapped air,
isothermal), ``compliance`` (m^3/Pa) or ``target_pulsation`` (one entry at most: chipflow
sizes the trapped air there). ``[walls]`` (:mod:`chipflow.spec.walls`) serves both.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

from chipflow.network.model import Network, unknown_name_message
from chipflow.operation.model import DAY, Damper, OperationSpec, Pulsatile, Rocker, TubingWall
from chipflow.operation.waveform import Waveform, peristaltic_frequency
from chipflow.spec.reader import Table
from chipflow.spec.walls import read_walls
from chipflow.spec.waveform import read_waveform

__all__ = [
    "read_tree_operation",
    "read_network_operation",
    "OPERATION_SUPPLY_KEYS",
    "OPERATION_INLETS",
    "DAMPER_KEYS",
]

#: Keys of [supply] for each time-varying inlet kind.
_KIND_KEYS = {
    "peristaltic": ("rpm", "rollers", "pulsation", "waveform"),
    "pulsatile-pressure": ("pressure_amplitude", "frequency"),
    "reservoir": ("reservoir_area", "outlet_area", "refill_interval"),
    "rocker": ("tilt_angle", "period", "reservoir_spacing", "reservoir_area"),
}
#: Inlet kinds added by time-varying operation.
OPERATION_INLETS = ("peristaltic", "pulsatile-pressure", "rocker")
#: Every [supply] key that time-varying operation adds.
OPERATION_SUPPLY_KEYS = tuple(
    dict.fromkeys(
        [k for keys in _KIND_KEYS.values() for k in keys]
        + ["tubing_outer_diameter", "tubing_modulus", "damper"]
    )
)
#: Keys of [supply.damper] (exactly one of them).
DAMPER_KEYS = ("air_volume", "compliance", "target_pulsation")
COMPLIANCE_KEYS = ("node", *DAMPER_KEYS)
#: Largest trapped air [m^3] and lumped compliance [m^3/Pa] a design may give.
LARGEST_DAMPER = 1e-3
#: Largest target pulsation (as the pump's own pulsation) [1].
LARGEST_TARGET = 10.0


def _damper(table: Table, node: str, where: str) -> Damper:
    """Exactly one of air_volume, compliance and target_pulsation."""
    given = [k for k in DAMPER_KEYS if k in table]
    if len(given) != 1:
        raise table.error(
            None,
            "give exactly one of air_volume (trapped air), compliance (m^3/Pa) or "
            'target_pulsation (e.g. "5 %": chipflow sizes the air)',
        )
    key = given[0]
    if key == "air_volume":
        return Damper(node, air_volume=table.quantity(key, "volume", maximum=LARGEST_DAMPER),
                      where=where)  # fmt: skip
    if key == "compliance":
        value = table.quantity(key, "compliance", maximum=LARGEST_DAMPER)
        return Damper(node, compliance=value, where=where)
    target = table.quantity(key, "dimensionless", maximum=LARGEST_TARGET)
    return Damper(node, target_pulsation=target, where=where)


def _tubing(table: Table) -> TubingWall | None:
    given = [k for k in ("tubing_outer_diameter", "tubing_modulus") if k in table]
    if not given or (given == ["tubing_outer_diameter"] and "tubing_o2_permeability" in table):
        return None  # no elastic tubing (the outer diameter serves the gas permeation alone)
    if len(given) == 1:
        missing = ({"tubing_outer_diameter", "tubing_modulus"} - set(given)).pop()
        raise table.error(
            missing, "elastic tubing needs both tubing_outer_diameter and tubing_modulus"
        )
    return TubingWall(
        table.quantity("tubing_outer_diameter", "length", maximum=0.1),
        table.quantity("tubing_modulus", "pressure", maximum=1e12),
    )


def read_tree_operation(top: Table, design_flow: float) -> OperationSpec:
    """Time-varying operation of a tree design (ports keyed "inlet" and "outlet")."""
    walls = read_walls(top)
    table = top.table("supply", None)
    if table is None:
        return OperationSpec(walls=walls)
    from chipflow.spec.supply import INLETS, SUPPLY_KEYS  # here: spec.supply imports this module

    table.only(SUPPLY_KEYS)  # a typo gets its "did you mean" before anything else
    # the inlet first: a misspelt inlet is blamed on itself, not on the keys of its kind
    kind = table.choice("inlet", INLETS, "syringe")
    for keys in _KIND_KEYS.values():
        for key in keys:
            if key in table and key not in _KIND_KEYS.get(kind, ()):
                users = [k for k, ks in _KIND_KEYS.items() if key in ks]
                raise table.error(key, f"only used with inlet = {' or '.join(map(repr, users))}")
    tubing = _tubing(table)
    spec = _tree_supply(table, kind, walls, tubing, design_flow)
    damper = table.table("damper", None)
    if damper is None:
        return spec
    damper.only(DAMPER_KEYS)
    return replace(spec, damper=_damper(damper, "inlet", damper.where()))


def _tree_supply(table: Table, kind: str, walls, tubing, design_flow: float) -> OperationSpec:
    if kind == "peristaltic":
        return OperationSpec(walls, tubing, {"inlet": _peristaltic(table, design_flow)})
    if kind == "pulsatile-pressure":
        mean = table.quantity("pressure", "pressure")
        frequency = table.quantity("frequency", "frequency", maximum=1e4)
        amplitude = table.quantity("pressure_amplitude", "pressure")
        wave = Waveform.sinusoid(mean, amplitude, frequency)
        return OperationSpec(
            walls, tubing, {"inlet": Pulsatile("pressure", wave, "pulsatile pressure controller")}
        )
    if kind == "rocker":
        tilt = table.quantity(
            "tilt_angle", "angle", positive=False, minimum=0.0, maximum=math.pi / 4
        )
        if not tilt > 0:
            raise table.error(
                "tilt_angle", "must be greater than 0 deg: a level platform drives no flow"
            )
        rocker = Rocker(
            tilt_angle=tilt,
            period=table.quantity("period", "time", maximum=1e6),
            spacing=table.quantity("reservoir_spacing", "length", maximum=1.0),
            area=table.quantity("reservoir_area", "area", maximum=1.0),
            head=table.quantity("head", "length", maximum=10.0),
        )
        return OperationSpec(walls, tubing, rocker=rocker)
    areas = {}
    if kind == "reservoir" and "reservoir_area" in table:
        areas["inlet"] = table.quantity("reservoir_area", "area", maximum=1.0)
    if "outlet_area" in table:
        if table.string("outlet", "open") != "reservoir":
            raise table.error("outlet_area", 'only used with outlet = "reservoir"')
        if not areas:
            raise table.error("outlet_area", "only used with a draining inlet (reservoir_area)")
        areas["outlet"] = table.quantity("outlet_area", "area", maximum=1.0)
    interval = DAY
    if "refill_interval" in table:
        if not areas:
            raise table.error("refill_interval", "only used with a draining inlet (reservoir_area)")
        interval = table.quantity("refill_interval", "time", maximum=1e7)
    return OperationSpec(walls, tubing, drain_areas=areas, refill_interval=interval)


def _peristaltic(table: Table, design_flow: float) -> Pulsatile:
    if ("pulsation" in table) == ("waveform" in table):
        raise table.error(
            "pulsation", "a peristaltic pump needs either pulsation (a fraction of the mean) or "
            "waveform (a CSV file of one measured period), not both",
        )  # fmt: skip
    if "waveform" in table:
        for key in ("flow", "rpm", "rollers"):
            if key in table:
                raise table.error(
                    key, "not used with a waveform: the file gives the flow and the period"
                )
        path = Path(table.string("waveform"))
        if not path.is_absolute():
            path = Path(table.source).parent / path
        wave = read_waveform(path, table.where("waveform"))
        return Pulsatile("flow", wave, "peristaltic pump (measured waveform)")
    flow = table.quantity("flow", "flow", design_flow)
    rpm = table.number("rpm", minimum=0.0, maximum=1e4)
    if not rpm > 0:
        raise table.error("rpm", f"must be greater than zero, got {rpm!r}")
    rollers = int(table.number("rollers", integer=True, minimum=1, maximum=100))
    pulsation = float(table.number("pulsation", minimum=0.0, maximum=10.0))
    wave = Waveform.sinusoid(flow, pulsation * flow, peristaltic_frequency(rpm, rollers))
    return Pulsatile("flow", wave, f"peristaltic pump, {rpm:g} rpm, {rollers} rollers")


def read_network_operation(top: Table, network: Network, ports: list[Table]) -> OperationSpec:
    """Time-varying operation of an explicit network from ``[walls]``, ``[[compliances]]``
    and the ``amplitude``/``frequency``/``area`` keys of its ``[[ports]]``."""
    walls = read_walls(top)
    pulsatile, areas = {}, {}
    for item in ports:
        node = item.string("node")
        kind = next(k for k in ("flow", "pressure", "head") if k in item)
        if ("amplitude" in item) != ("frequency" in item):
            raise item.error("frequency", "a pulsating port needs both amplitude and frequency")
        if "amplitude" in item:
            if kind == "head":
                raise item.error(
                    "amplitude", "a reservoir port cannot pulsate; use a pressure port"
                )
            unit = "flow" if kind == "flow" else "pressure"
            mean = item.quantity(kind, unit, positive=False)
            amplitude = item.quantity("amplitude", unit)
            frequency = item.quantity("frequency", "frequency", maximum=1e4)
            label = "pulsatile pump" if kind == "flow" else "pulsatile pressure controller"
            pulsatile[node] = Pulsatile(kind, Waveform.sinusoid(mean, amplitude, frequency), label)
        if "area" in item:
            if kind != "head":
                raise item.error("area", "only a reservoir port (head) has an area")
            areas[node] = item.quantity("area", "area", maximum=1.0)
    compliances, air = {}, {}
    sized = None
    for item in top.tables("compliances", []):
        item.only(COMPLIANCE_KEYS)
        node = item.string("node")
        if node not in network.node_names:
            raise item.error("node", unknown_name_message(node, network.node_names, "node"))
        entry = _damper(item, node, item.where())
        if entry.target_pulsation is not None:
            if sized is not None:
                raise item.error("target_pulsation", "only one [[compliances]] entry may be sized")
            sized = entry
        elif entry.air_volume is not None:
            air[node] = air.get(node, 0.0) + entry.air_volume
        else:
            compliances[node] = compliances.get(node, 0.0) + entry.compliance
    if pulsatile and areas:
        raise top.error("ports", "pulsating ports and draining reservoirs cannot be combined")
    return OperationSpec(walls, None, pulsatile, compliances, air, areas, damper=sized)
