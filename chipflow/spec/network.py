"""Explicit-network design files: nodes, channels, tubes and ports listed by hand.

.. code-block:: toml

    name = "bench loop"                 # optional, default: the file name
    description = "what this chip is"   # optional

    [fluid]                             # optional, see chipflow.spec.fluid
    kind = "medium"

    [[nodes]]                           # optional; when present, every node must be listed
    name = "pump"

    [[tubes]]                           # round tubing: inner diameter and length
    name = "feed"
    from = "pump"
    to = "inlet"
    diameter = "0.5 mm"
    length = "30 cm"

    [[channels]]                        # rectangular channels on the chip
    name = "c1"
    from = "inlet"
    to = "outlet"
    width = "200 um"
    depth = "50 um"
    length = "10 mm"
    generation = 0                      # optional, whole number
    role = "distribution"               # optional, default "channel"

    [[ports]]                           # one supply per port node
    node = "pump"
    flow = "5 uL/min"                   # syringe pump (negative withdraws), or
    # pressure = "2 kPa"                # pressure controller ("0 Pa": open to the air), or
    # head = "5 cm"                     # gravity reservoir: liquid height above the port

Positive flow in a channel runs from ``from`` to ``to``. Tubes and channels share one set of
names. Nodes are created on first mention unless ``[[nodes]]`` lists them.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

from chipflow.errors import NetworkError
from chipflow.network.model import Network, NetworkBuilder, unknown_name_message
from chipflow.network.supply import Supply, boundary_conditions
from chipflow.operation.model import OperationSpec
from chipflow.physics.fluid import Fluid
from chipflow.spec.fluid import read_fluid
from chipflow.spec.reader import MAX_NAME_LENGTH, Table, read_design_file

__all__ = [
    "NetworkDesign",
    "load_network_design",
    "read_network_design",
    "is_network_design",
    "TOP_KEYS",
]

#: Top-level keys of an explicit-network design file.
#: Top-level keys of an explicit-network design file ([culture] and [limits] feed the checks).
TOP_KEYS = (
    "name",
    "description",
    "fluid",
    "nodes",
    "channels",
    "tubes",
    "ports",
    "culture",
    "limits",
    "walls",
    "compliances",
    "solutes",
)
_CHANNEL_KEYS = ("name", "from", "to", "width", "depth", "length", "generation", "role")
_TUBE_KEYS = (
    "name",
    "from",
    "to",
    "diameter",
    "length",
    "role",
    "o2_permeability",
    "outer_diameter",
)
_PORT_KEYS = ("node", "flow", "pressure", "head", "label", "amplitude", "frequency", "area")
_SUPPLY_LABELS = {
    "flow": "syringe pump",
    "pressure": "pressure controller",
    "head": "gravity reservoir",
}


@dataclass(frozen=True)
class NetworkDesign:
    """An explicit network read from a design file, ready for :func:`chipflow.network.solve`.

    Attributes
    ----------
    name : str
        Design name.
    description : str
        Free text from the file.
    fluid : Fluid
        The liquid.
    network : Network
        Channels and tubes.
    pressures : dict
        Node name to imposed gauge pressure [Pa] (pressure controllers, reservoirs, open
        outlets).
    flows : dict
        Node name to imposed inflow [m^3/s] (syringe pumps).
    supplies : dict
        Node name to the :class:`~chipflow.network.supply.Supply` given in the file.
    """

    name: str
    description: str
    fluid: Fluid
    network: Network
    pressures: Mapping[str, float]
    flows: Mapping[str, float]
    supplies: Mapping[str, Supply] = field(default_factory=dict)
    operation: OperationSpec = field(default_factory=OperationSpec)


def is_network_design(top: Table) -> bool:
    """True when the file lists channels or tubes explicitly."""
    return "channels" in top or "tubes" in top


def _endpoints(item: Table, known: Mapping[str, int] | None) -> tuple[str, str]:
    ends = []
    for key in ("from", "to"):
        node = item.string(key)
        if known is not None and node not in known:
            message = unknown_name_message(node, list(known), "node")
            raise item.error(key, f"{message} (list it in [[nodes]])")
        ends.append(node)
    if ends[0] == ends[1]:
        raise item.error(
            "to",
            f"the channel starts and ends at the same node {ends[0]!r}; "
            "a channel must join two different nodes",
        )
    return ends[0], ends[1]


def load_network_design(top: Table) -> NetworkDesign:
    """Read an explicit-network design from its top-level table.

    Raises
    ------
    SpecError
        Unknown keys (with a suggestion), missing units, non-positive sizes, a channel whose
        ends are the same node, unknown or duplicated node, channel or port names, a port
        with none or several of ``flow``/``pressure``/``head``.
    NetworkError
        A network that cannot be solved as given is reported later by ``solve``.

    Examples
    --------
    >>> from chipflow.spec.reader import parse_design_text
    >>> text = '''
    ... [[channels]]
    ... name = "c1"
    ... from = "in"
    ... to = "out"
    ... width = "200 um"
    ... depth = "50 um"
    ... length = "10 mm"
    ... [[ports]]
    ... node = "in"
    ... flow = "5 uL/min"
    ... [[ports]]
    ... node = "out"
    ... pressure = "0 Pa"
    ... '''
    >>> design = load_network_design(parse_design_text(text, "demo.toml"))
    >>> design.name, design.network.node_names, design.pressures
    ('demo', ('in', 'out'), {'out': 0.0})
    """
    top.only(TOP_KEYS)
    name = top.label("name", Path(top.source).stem[:MAX_NAME_LENGTH] or "network")
    description = top.text("description", "")
    fluid = read_fluid(top)

    builder = NetworkBuilder()
    known: dict[str, int] | None = None
    node_tables = top.tables("nodes", [])
    if node_tables:
        known = {}
        for item in node_tables:
            item.only(("name", "description"))
            node = item.string("name")
            if node in known:
                raise item.error("name", f"duplicated node name {node!r}")
            known[node] = builder.node(node)

    seen: dict[str, str] = {}

    def claim(item: Table) -> str:
        label = item.string("name")
        if label in seen:
            raise item.error(
                "name",
                f"duplicated name {label!r} (already used at {seen[label]}); "
                "every channel and tube needs its own name",
            )
        seen[label] = item.where("name")
        return label

    tubes, channels = top.tables("tubes", []), top.tables("channels", [])
    if not tubes and not channels:
        raise top.error(None, "no [[channels]] or [[tubes]]: the network is empty")
    for item in tubes:
        item.only(_TUBE_KEYS)
        label = claim(item)
        a, b = _endpoints(item, known)
        builder.tube(
            label,
            a,
            b,
            diameter=item.quantity("diameter", "length"),
            length=item.quantity("length", "length"),
            role=item.string("role", "tubing"),
        )
    for item in channels:
        item.only(_CHANNEL_KEYS)
        label = claim(item)
        a, b = _endpoints(item, known)
        builder.channel(
            label,
            a,
            b,
            width=item.quantity("width", "length"),
            depth=item.quantity("depth", "length"),
            length=item.quantity("length", "length"),
            generation=int(item.number("generation", -1, integer=True, minimum=0)),
            role=item.string("role", "channel"),
        )
    try:
        network = builder.build()
    except NetworkError as exc:
        raise NetworkError(f"{top.source}: {exc}") from None

    supplies: dict[str, Supply] = {}
    for item in top.tables("ports", []):
        item.only(_PORT_KEYS)
        node = item.string("node")
        if node not in network.node_names:
            raise item.error("node", unknown_name_message(node, network.node_names, "node"))
        if node in supplies:
            raise item.error("node", f"node {node!r} already has a port; give each node one")
        given = [key for key in ("flow", "pressure", "head") if key in item]
        if len(given) != 1:
            raise item.error(
                None,
                "a port needs exactly one of 'flow' (syringe pump), 'pressure' (pressure "
                "controller, '0 Pa' for an open outlet) or 'head' (gravity reservoir)"
                + (f"; got {', '.join(given)}" if given else ""),
            )
        key = given[0]
        kind = {"flow": ("flow", "flow"), "pressure": ("pressure", "pressure")}.get(
            key, ("reservoir", "length")
        )
        value = item.quantity(key, kind[1], positive=False)
        supplies[node] = Supply(kind[0], value, item.string("label", _SUPPLY_LABELS[key]))
    pressures, flows = boundary_conditions(supplies, fluid)
    from chipflow.spec.operation import read_network_operation

    operation = read_network_operation(top, network, top.tables("ports", []))
    return NetworkDesign(name, description, fluid, network, pressures, flows, supplies, operation)


def read_network_design(path: str | Path) -> NetworkDesign:
    """Read an explicit-network design file (see the module documentation for the format)."""
    return load_network_design(read_design_file(path))
