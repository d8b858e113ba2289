"""How the liquid is driven: the supply at a port and the boundary value it imposes.

Four supplies are met at the bench:

- a **syringe pump** imposes a flow rate [m^3/s] into the port (negative: it withdraws);
- a **pressure controller** imposes a gauge pressure [Pa] at the port;
- a **gravity reservoir** holds liquid standing ``head`` [m] above the port, which gives the
  hydrostatic gauge pressure ``rho g head`` (the flow is slow enough that the level is taken
  as constant);
- an **outlet open to the atmosphere** is at 0 Pa gauge.

All pressures in chipflow are gauge pressures (relative to the atmosphere). Tubing between
the supply and the chip is not a property of the supply: draw it as round channels (tubes)
in the network, and put the port at the tube's far end.

Examples
--------
A 5 cm column of water at 20 C:

>>> from chipflow.physics.fluid import water
>>> reservoir(0.05).boundary(water())  # doctest: +ELLIPSIS
('pressure', 489.4...)
>>> syringe_pump(5e-9 / 60).boundary(water())  # doctest: +ELLIPSIS
('flow', 8.33...e-11)
>>> atmosphere().boundary(water())
('pressure', 0.0)
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from chipflow.errors import NetworkError
from chipflow.network.model import Network
from chipflow.physics.fluid import Fluid

__all__ = [
    "STANDARD_GRAVITY",
    "SUPPLY_KINDS",
    "Supply",
    "syringe_pump",
    "pressure_controller",
    "reservoir",
    "atmosphere",
    "boundary_conditions",
    "with_tubing",
]

#: Standard acceleration of gravity [m/s^2] (CGPM 1901, exact by definition).
STANDARD_GRAVITY = 9.80665

#: Supply kinds and what their ``value`` holds.
SUPPLY_KINDS = {
    "flow": "imposed flow rate into the port [m^3/s] (syringe pump)",
    "pressure": "imposed gauge pressure [Pa] (pressure controller; 0 Pa = open outlet)",
    "reservoir": "liquid height above the port [m] (gravity reservoir)",
}


@dataclass(frozen=True)
class Supply:
    """The boundary condition a supply imposes at one port node.

    Attributes
    ----------
    kind : str
        One of :data:`SUPPLY_KINDS`: "flow", "pressure" or "reservoir".
    value : float
        Flow rate [m^3/s], gauge pressure [Pa] or liquid head [m], by ``kind``.
    label : str
        What the supply is, for reports ("syringe pump", "open outlet", ...).
    """

    kind: str
    value: float
    label: str = ""

    def __post_init__(self) -> None:
        if self.kind not in SUPPLY_KINDS:
            raise NetworkError(
                f"unknown supply kind {self.kind!r} (valid: {', '.join(SUPPLY_KINDS)})"
            )
        if not math.isfinite(self.value):
            raise NetworkError(f"{self.label or self.kind} supply: value must be finite")

    def boundary(self, fluid: Fluid, gravity: float = STANDARD_GRAVITY) -> tuple[str, float]:
        """The boundary value at the port.

        Parameters
        ----------
        fluid : Fluid
            The liquid (its density sets a reservoir's pressure).
        gravity : float
            Acceleration of gravity [m/s^2].

        Returns
        -------
        tuple
            ``("pressure", Pa)`` or ``("flow", m^3/s)``.
        """
        if self.kind == "flow":
            return "flow", float(self.value)
        if self.kind == "pressure":
            return "pressure", float(self.value)
        return "pressure", float(fluid.density * gravity * self.value)


def syringe_pump(flow: float) -> Supply:
    """A syringe (or other positive-displacement) pump pushing ``flow`` [m^3/s] in."""
    return Supply("flow", float(flow), "syringe pump")


def pressure_controller(pressure: float) -> Supply:
    """A pressure controller holding the port at ``pressure`` [Pa] gauge."""
    return Supply("pressure", float(pressure), "pressure controller")


def reservoir(head: float) -> Supply:
    """A reservoir whose liquid surface stands ``head`` [m] above the port."""
    return Supply("reservoir", float(head), "gravity reservoir")


def atmosphere() -> Supply:
    """An outlet open to the atmosphere: 0 Pa gauge."""
    return Supply("pressure", 0.0, "open to atmosphere")


def boundary_conditions(
    supplies: Mapping[object, Supply], fluid: Fluid, gravity: float = STANDARD_GRAVITY
) -> tuple[dict, dict]:
    """Split supplies by node into the ``pressures`` and ``flows`` that :func:`solve` takes.

    Parameters
    ----------
    supplies : mapping
        Node (index or name) to :class:`Supply`.
    fluid : Fluid
        The liquid.

    Returns
    -------
    pressures : dict
        Node to gauge pressure [Pa].
    flows : dict
        Node to injected flow rate [m^3/s].

    Examples
    --------
    >>> from chipflow.physics.fluid import water
    >>> p, q = boundary_conditions({"in": syringe_pump(1e-10), "out": atmosphere()}, water())
    >>> p, q
    ({'out': 0.0}, {'in': 1e-10})
    """
    pressures: dict = {}
    flows: dict = {}
    for node, supply in supplies.items():
        kind, value = supply.boundary(fluid, gravity)
        (pressures if kind == "pressure" else flows)[node] = value
    return pressures, flows


def with_tubing(
    chip: Network, diameter: float, inlet_length: float, outlet_length: float
) -> tuple[Network, str, str]:
    """The chip network with supply tubing, and the names of the two nodes to drive.

    Tubing of inner ``diameter`` [m] runs ``inlet_length`` [m] from a new node "pump" to the
    chip's "inlet" node and ``outlet_length`` [m] from its "outlet" node to a new node "drain".
    A side of zero length has no tubing and is driven at its port directly.

    Returns
    -------
    network : Network
    feed, drain : str
        The node names to put the inlet and outlet supplies on.
    """
    names = list(chip.node_names)
    inlet, outlet = chip.node_index("inlet"), chip.node_index("outlet")
    a, b, length, tags = [], [], [], []
    feed, drain = "inlet", "outlet"
    if inlet_length > 0:
        feed = "pump"
        names.append(feed)
        a.append(len(names) - 1), b.append(inlet), length.append(inlet_length)
        tags.append("inlet tubing")
    if outlet_length > 0:
        drain = "drain"
        names.append(drain)
        a.append(outlet), b.append(len(names) - 1), length.append(outlet_length)
        tags.append("outlet tubing")
    if not a:
        return chip, feed, drain
    d = diameter
    n = len(a)
    network = Network.from_arrays(
        np.concatenate([chip.node_a, np.asarray(a, dtype=chip.node_a.dtype)]),
        np.concatenate([chip.node_b, np.asarray(b, dtype=chip.node_b.dtype)]),
        np.concatenate([chip.width, np.full(n, d)]),
        np.concatenate([chip.depth, np.full(n, d)]),
        np.concatenate([chip.length, np.asarray(length, dtype=float)]),
        round=np.concatenate([chip.round, np.ones(n, dtype=bool)]),
        names=None if chip.names is None else (*chip.names, *tags),
        generation=np.concatenate([chip.generation, np.full(n, -1)]),
        role=np.concatenate([chip.role, np.full(n, "tubing")]),
        node_names=names,
        region=None if chip.region is None else np.concatenate([chip.region, np.full(n, "")]),
    )
    return network, feed, drain
