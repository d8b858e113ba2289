"""The ``[supply]`` section of a tree design: what drives the medium and the tubing to the chip.

.. code-block:: toml

    [supply]
    inlet = "syringe"          # "syringe" (flow), "pressure" (controller) or "reservoir"
    flow = "10 uL/min"         # syringe: default is [tree].flow
    pressure = "2 kPa"         # pressure controller: gauge pressure at the pump end, or
                               # "auto": the pressure that gives the design flow ([tree].flow)
    head = "10 cm"             # reservoir: liquid height above the inlet
    outlet = "open"            # "open" (0 Pa gauge) or "reservoir"
    outlet_head = "1 cm"       # outlet reservoir: liquid height above the outlet
    tubing_diameter = "0.5 mm" # inner diameter of the tubing on both sides
    inlet_tubing = "30 cm"     # tubing length from the pump to the inlet port (0 or absent: none)
    outlet_tubing = "10 cm"    # tubing length from the outlet port to the outlet
    tubing_o2_permeability = "800 barrer"  # gas-permeable tubing (needs
                               # tubing_outer_diameter; chipflow.spec.transport)

Without a ``[supply]`` section the tree is fed by a syringe pump at its design flow straight
into the inlet port, and the outlet is open to the atmosphere.
"""

from __future__ import annotations

from dataclasses import dataclass

from chipflow.network.supply import (
    Supply,
    atmosphere,
    pressure_controller,
    reservoir,
    syringe_pump,
)
from chipflow.spec.operation import OPERATION_INLETS, OPERATION_SUPPLY_KEYS
from chipflow.spec.reader import Table

__all__ = ["SupplySpec", "read_supply", "SUPPLY_KEYS", "INLETS", "AUTO_PRESSURE_LABEL"]

SUPPLY_KEYS = (
    "inlet",
    "flow",
    "pressure",
    "head",
    "outlet",
    "outlet_head",
    "tubing_diameter",
    "inlet_tubing",
    "outlet_tubing",
    *OPERATION_SUPPLY_KEYS,
    "tubing_o2_permeability",
)
#: The kinds of inlet supply of a tree design.
INLETS = ("syringe", "pressure", "reservoir", *OPERATION_INLETS)
_INLET_KEY = {
    "syringe": "flow",
    "pressure": "pressure",
    "reservoir": "head",
    "peristaltic": "flow",
    "pulsatile-pressure": "pressure",
    "rocker": "head",
}


@dataclass(frozen=True)
class SupplySpec:
    """How a tree design is driven.

    Attributes
    ----------
    inlet, outlet : Supply
        Boundary conditions at the far ends of the inlet and outlet tubing (or at the ports).
    tubing_diameter : float
        Inner diameter of the tubing [m].
    inlet_tubing, outlet_tubing : float
        Tubing lengths [m]; 0 means no tubing on that side.
    pressure_for_flow : float or None
        With ``pressure = "auto"``: the flow [m^3/s] the pressure controller is set to give
        (the build solves for that pressure); ``inlet`` then holds a syringe pump at that
        flow until the pressure is known.
    """

    inlet: Supply
    outlet: Supply
    tubing_diameter: float = 0.5e-3
    inlet_tubing: float = 0.0
    outlet_tubing: float = 0.0
    pressure_for_flow: float | None = None


#: Label of a pressure controller whose pressure was solved for the design flow.
AUTO_PRESSURE_LABEL = "pressure controller set for the design flow"


def read_supply(top: Table, design_flow: float) -> SupplySpec:
    """Read ``[supply]``; ``design_flow`` [m^3/s] is the syringe default."""
    table = top.table("supply", None)
    if table is None:
        return SupplySpec(syringe_pump(design_flow), atmosphere())
    table.only(SUPPLY_KEYS)
    kind = table.choice("inlet", INLETS, "syringe")
    needed = _INLET_KEY[kind]
    for key in set(_INLET_KEY.values()) - {needed}:
        if key in table:
            raise table.error(key, f"not used with inlet = {kind!r} (it needs '{needed}')")
    if kind in ("syringe", "peristaltic"):
        inlet = syringe_pump(table.quantity("flow", "flow", design_flow))
        if kind == "peristaltic":
            inlet = Supply("flow", inlet.value, "peristaltic pump (mean)")
    elif kind == "pressure" and table.data.get("pressure") == "auto":
        inlet = syringe_pump(design_flow)  # until the build knows the pressure
    elif kind in ("pressure", "pulsatile-pressure"):
        inlet = pressure_controller(table.quantity("pressure", "pressure"))
    else:
        inlet = reservoir(table.quantity("head", "length"))
    if kind == "rocker":
        # both reservoirs of the platform; the build drives them with the rocking head
        for key in ("outlet", "outlet_head"):
            if key in table:
                raise table.error(
                    key, "not used with inlet = 'rocker' (its two reservoirs are the supply)"
                )
        return SupplySpec(
            inlet=Supply(
                "reservoir",
                inlet.value,
                "rocking platform, inlet reservoir (time-averaged magnitude)",
            ),
            outlet=Supply("reservoir", inlet.value, "rocking platform, outlet reservoir"),
            tubing_diameter=table.quantity("tubing_diameter", "length", 0.5e-3),
            inlet_tubing=table.quantity("inlet_tubing", "length", 0.0, positive=False, minimum=0.0),
            outlet_tubing=table.quantity(
                "outlet_tubing", "length", 0.0, positive=False, minimum=0.0
            ),
        )
    outlet_kind = table.choice("outlet", ("open", "reservoir"), "open")
    if outlet_kind == "open":
        if "outlet_head" in table:
            raise table.error("outlet_head", 'only used with outlet = "reservoir"')
        outlet = atmosphere()
    else:
        outlet = reservoir(table.quantity("outlet_head", "length", positive=False, minimum=0.0))
    return SupplySpec(
        inlet=inlet,
        outlet=outlet,
        tubing_diameter=table.quantity("tubing_diameter", "length", 0.5e-3),
        inlet_tubing=table.quantity("inlet_tubing", "length", 0.0, positive=False, minimum=0.0),
        outlet_tubing=table.quantity("outlet_tubing", "length", 0.0, positive=False, minimum=0.0),
        pressure_for_flow=(
            design_flow if kind == "pressure" and table.data.get("pressure") == "auto" else None
        ),
    )
