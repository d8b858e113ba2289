"""Explicit-network design files: nodes, channels, tubes and ports listed by hand.

.. code-block:: toml

    name = "bench loop"                 # optional, default: the file name
    description = "what this chip is"   # optional

    [fluid]                             # optional, see chipflow.spec.fluid
    kind = "medium"

    [[nodes]]                           # optional; when present, every node must be listed
    name = "pump"
    # at = ["12 mm", "5 mm"]            # position on the chip: when every node a channel
                                        # touches has one, the network is drawn

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
    # via = [["14 mm", "5 mm"], ["14 mm", "9 mm"]]   # corners of a drawn channel

    [[chambers]]                        # a culture chamber between two nodes (see
    name = "culture"                    # chipflow.spec.chamber for its keys)
    from = "a"
    to = "b"
    width = "2 mm"
    length = "8 mm"
    depth = "100 um"

    [[ports]]                           # one supply per port node
    node = "pump"
    flow = "5 uL/min"                   # syringe pump (negative withdraws), or
    # pressure = "2 kPa"                # pressure controller ("0 Pa": open to the air), or
    # head = "5 cm"                     # gravity reservoir: liquid height above the port

Positive flow in a channel runs from ``from`` to ``to``. Tubes, channels and chambers share
one set of names. A chamber's two nodes each join exactly one channel (its feed and its
drain), which meets it along its axis; its resistance and floor shear come from the 2D solve
of its shape (:mod:`chipflow.layout.chamber`). Nodes are created on first mention unless
``[[nodes]]`` lists them.

Drawn networks: when every node that a channel touches (the chip's nodes; a node only tubes
reach, such as a pump, is off the chip) has ``at``, the network is drawn
(:mod:`chipflow.layout.routes`): each channel runs from its ``from`` node through its ``via``
corners to its ``to`` node, with arc bends; its ``length`` comes from the drawing (a given
``length`` must agree with it within 1 %). The chip's nodes with a port or a tube are
punched holes. ``[chip]``, ``[fabrication]``, ``[export]`` and ``[tolerances]`` apply as for
trees.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

from chipflow.errors import NetworkError, SpecError
from chipflow.network.model import Network, NetworkBuilder, unknown_name_message
from chipflow.network.supply import Supply, boundary_conditions
from chipflow.operation.model import OperationSpec
from chipflow.physics.fluid import Fluid
from chipflow.spec.chamber import CHAMBER_KEYS, ChamberShape, read_chamber
from chipflow.spec.fluid import read_fluid
from chipflow.spec.reader import MAX_NAME_LENGTH, Table, read_design_file

__all__ = [
    "ChannelRoute",
    "ChamberRoute",
    "NetworkDrawing",
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
    "chambers",
    "ports",
    "culture",
    "limits",
    "walls",
    "compliances",
    "solutes",
    "fabrication",
    "chip",
    "export",
    "tolerances",
)
_CHANNEL_KEYS = ("name", "from", "to", "width", "depth", "length", "generation", "role", "via")
#: A given channel length may differ from the drawn one by this much [-].
LENGTH_TOLERANCE = 0.01
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
class ChannelRoute:
    """A channel of a drawn network, as the design file gives it.

    Attributes
    ----------
    name, a, b : str
        The channel and its ``from`` and ``to`` nodes.
    width, depth : float
        [m].
    role : str
    generation : int
    via : tuple of (float, float)
        Corner points [m], in order from ``a`` to ``b``.
    length : float or None
        The length given in the file [m], checked against the drawing.
    where : str
        The channel's place in the file, for messages.
    """

    name: str
    a: str
    b: str
    width: float
    depth: float
    role: str
    generation: int
    via: tuple[tuple[float, float], ...]
    length: float | None
    where: str


@dataclass(frozen=True)
class ChamberRoute:
    """A chamber of an explicit network, as the design file gives it.

    Attributes
    ----------
    name, a, b : str
        The chamber and its ``from`` and ``to`` nodes.
    shape : ChamberShape
    where : str
        Its place in the file, for messages.
    """

    name: str
    a: str
    b: str
    shape: ChamberShape
    where: str


@dataclass(frozen=True)
class NetworkDrawing:
    """What a network with coordinates needs to be drawn.

    Attributes
    ----------
    positions : dict
        Node name to ``(x, y)`` [m], for every node a channel touches.
    routes : tuple of ChannelRoute
        The channels, in file order.
    ports : tuple of str
        The chip's nodes that are punched holes: those with a port or a tube.
    chambers : tuple of ChamberRoute
        The chambers, in file order.
    """

    positions: Mapping[str, tuple[float, float]]
    routes: tuple[ChannelRoute, ...]
    ports: tuple[str, ...]
    chambers: tuple[ChamberRoute, ...] = ()


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
    operation : OperationSpec
    drawing : NetworkDrawing or None
        How to draw it, when every node of the chip has ``at``; None otherwise (solved only).
        When drawn, the channel lengths of ``network`` are the straight distances through
        the corners, until the build replaces them by the drawing's.
    undrawn : str
        Why the network is not drawn, in one line ("" when it is).
    chambers : tuple of ChamberRoute
        The chambers; ``network`` holds the channels and tubes only (the build adds each
        chamber's links from its 2D solve, :func:`chipflow.layout.extract.with_chambers`).
    """

    name: str
    description: str
    fluid: Fluid
    network: Network
    pressures: Mapping[str, float]
    flows: Mapping[str, float]
    supplies: Mapping[str, Supply] = field(default_factory=dict)
    operation: OperationSpec = field(default_factory=OperationSpec)
    drawing: NetworkDrawing | None = None
    undrawn: str = ""
    chambers: tuple[ChamberRoute, ...] = ()


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
    positions: dict[str, tuple[float, float]] = {}
    if node_tables:
        known = {}
        for item in node_tables:
            item.only(("name", "description", "at"))
            node = item.string("name")
            if node in known:
                raise item.error("name", f"duplicated node name {node!r}")
            known[node] = builder.node(node)
            if "at" in item:
                positions[node] = _point(item, "at", item._get("at", None), item.where("at"))

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
    ends = {
        n
        for item in channels
        for n in (item._get("from", ""), item._get("to", ""))
        if isinstance(n, str)
    }
    on_chip = [n for n in (known or {}) if n in ends] if known else sorted(ends)
    missing = [n for n in on_chip if n not in positions]
    for item in node_tables:  # a position only for a node on the chip
        if "at" in item and item.string("name") not in ends:
            raise item.error(
                "at",
                "no channel reaches this node (only tubes, or nothing): it is off the "
                "chip and has no position; leave 'at' out",
            )
    drawn = bool(channels) and not missing
    routes = []
    for item in channels:
        item.only(_CHANNEL_KEYS)
        label = claim(item)
        a, b = _endpoints(item, known)
        via = tuple(
            _point(item, "via", v, f"{item.where('via')}[{i}]")
            for i, v in enumerate(_list(item, "via"))
        )
        if via and not drawn:
            raise item.error(
                "via", "corners draw a channel, but the network is not drawn: " + _why(missing)
            )
        given = item.quantity("length", "length", None if drawn else REQUIRED_LENGTH)
        if given is REQUIRED_LENGTH:
            raise item.error(
                "length", "missing required key (or give every node 'at' to draw the network)"
            )
        width = item.quantity("width", "length")
        depth = item.quantity("depth", "length")
        generation = int(item.number("generation", -1, integer=True, minimum=0))
        role = item.string("role", "channel")
        length = given
        if drawn:  # until the drawing: the straight distance through the corners
            path = [positions[a], *via, positions[b]]
            length = sum(math.dist(p, q) for p, q in zip(path[:-1], path[1:], strict=True))
            if not length > 0:
                raise item.error("to", f"nodes {a!r} and {b!r} are at the same place")
            routes.append(
                ChannelRoute(label, a, b, width, depth, role, generation, via, given, item.where())
            )
        builder.channel(
            label, a, b, width=width, depth=depth, length=length, generation=generation, role=role
        )
    chambers = _read_chambers(top, known, claim, channels, tubes)
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
    drawing, undrawn = None, ""
    if drawn:
        tube_ends = {n for item in tubes for n in (item.string("from"), item.string("to"))}
        holes = tuple(n for n in on_chip if n in supplies or n in tube_ends)
        drawing = NetworkDrawing(
            {n: positions[n] for n in on_chip}, tuple(routes), holes, tuple(chambers)
        )
    elif channels:
        undrawn = "not drawn, solved only: " + (
            _why(missing)
            if positions
            else "no node has a position ('at' in [[nodes]]), so there is no mask to write"
        )
    for chamber in chambers:  # a chamber's node is fed by a channel, not a supply
        for end, node in (("from", chamber.a), ("to", chamber.b)):
            if node in supplies:
                raise SpecError(
                    f"{chamber.where}.{end}: node {node!r} has a port; a chamber is fed and "
                    "drained by channels: put a channel between the port and the chamber"
                )
    return NetworkDesign(
        name,
        description,
        fluid,
        network,
        pressures,
        flows,
        supplies,
        operation,
        drawing,
        undrawn,
        tuple(chambers),
    )


def _read_chambers(top: Table, known, claim, channels: list[Table], tubes: list[Table]) -> list:
    """The ``[[chambers]]`` entries: each between two nodes that join exactly one channel."""
    tables = top.tables("chambers", [])
    if not tables:
        return []
    from chipflow.spec.tree import read_fabrication

    min_feature = read_fabrication(top).min_feature
    count: dict[str, int] = {}
    for item in channels:
        for key in ("from", "to"):
            node = item._get(key, None)
            if isinstance(node, str):
                count[node] = count.get(node, 0) + 1
    tube_ends = {
        item._get(key, None) for item in tubes for key in ("from", "to")
    }  # fmt: skip
    out, taken = [], {}
    for item in tables:
        item.only(("name", "from", "to", *CHAMBER_KEYS))
        label = claim(item)
        a, b = _endpoints(item, known)
        for end, node in (("from", a), ("to", b)):
            if count.get(node, 0) != 1 or node in tube_ends:
                got = count.get(node, 0)
                raise item.error(
                    end,
                    f"node {node!r} joins {got} channel{'s' * (got != 1)}"
                    f"{' and a tube' if node in tube_ends else ''}; a chamber's node joins "
                    "exactly one channel (its feed or drain), so give it its own node",
                )
            if node in taken:
                raise item.error(end, f"node {node!r} is already an end of chamber {taken[node]!r}")
            taken[node] = label
        shape = read_chamber(item, min_feature)
        out.append(ChamberRoute(label, a, b, shape, item.where()))
    return out


#: Marks a channel length that is required because the network is not drawn.
REQUIRED_LENGTH = object()


def _why(missing: list[str]) -> str:
    """Why a network is not drawn, in words."""
    shown = ", ".join(repr(n) for n in missing[:6])
    more = f" and {len(missing) - 6} more" if len(missing) > 6 else ""
    return (
        f"node{'s' * (len(missing) > 1)} {shown}{more} "
        f"{'have' if len(missing) > 1 else 'has'} no 'at' (give every node a channel touches "
        "a position in [[nodes]] to draw it)"
    )


def _list(item: Table, key: str) -> list:
    value = item._get(key, [])
    if not isinstance(value, list):
        raise item.error(key, 'expected a list of points, e.g. [["14 mm", "5 mm"]]')
    return value


def _point(item: Table, key: str, value, where: str) -> tuple[float, float]:
    """A position ``["12 mm", "5 mm"]`` in metres."""
    from chipflow.units import to_si

    if not isinstance(value, list) or len(value) != 2:
        raise SpecError(f'{where}: expected a point [x, y] with units, e.g. ["12 mm", "5 mm"]')
    x, y = (to_si(v, "length", where=where) for v in value)
    if not (math.isfinite(x) and math.isfinite(y)):
        raise SpecError(f"{where}: the coordinates must be finite")
    return float(x), float(y)


def read_network_design(path: str | Path) -> NetworkDesign:
    """Read an explicit-network design file (see the module documentation for the format)."""
    return load_network_design(read_design_file(path))
